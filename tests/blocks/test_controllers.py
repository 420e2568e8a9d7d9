"""PI / PID controllers: transfer functions, sampled update, limits, delay, filters."""

from __future__ import annotations

import control
import numpy as np
import pytest

from wirestate.blocks import PIDController, sensor_filter, state_feedback, static_gain
from wirestate.errors import WirestateError


def test_continuous_pi_is_kp_plus_ki_over_s():
    # C(s) = kp + ki / s on the error (Astrom and Murray, Feedback Systems, sec. 10.1)
    c = PIDController("c", kp=2.0, ki=30.0).state_space()
    s = 1j * 7.0
    assert c(s)[0, 0] == pytest.approx(2.0 + 30.0 / s, rel=1e-12)
    assert c(s)[0, 1] == pytest.approx(-(2.0 + 30.0 / s), rel=1e-12)


def test_continuous_pid_derivative_on_measurement():
    # u = kp e + ki/s e - kd s / (1 + s Tf) y (Astrom and Murray sec. 10.5)
    kp, ki, kd, Tf = 2.0, 30.0, 0.05, 1e-3
    c = PIDController("c", kp=kp, ki=ki, kd=kd, derivative_filter=Tf).state_space()
    s = 1j * 40.0
    assert c(s)[0, 0] == pytest.approx(kp + ki / s, rel=1e-12)
    assert c(s)[0, 1] == pytest.approx(-(kp + ki / s) - kd * s / (1 + s * Tf), rel=1e-12)


@pytest.mark.parametrize("kd", [0.0, 0.02])
@pytest.mark.parametrize("delay", [False, True])
def test_sampled_matrices_match_the_sampled_update(kd, delay):
    # with no limits the nonlinear update and the published linear matrices are the same
    # controller (exact arithmetic up to round-off, 1e-12)
    c = PIDController("c", kp=1.5, ki=8.0, kd=kd, derivative_filter=2e-3 if kd else None,
                      sample_time=1e-3, delay=delay)  # fmt: skip
    A, B, C, D = c.matrices()
    rng = np.random.default_rng(1)
    x_lin = np.zeros(A.shape[0])
    x = c.initial_state()
    for _ in range(40):
        r, y = rng.normal(size=2)
        u_lin = C @ x_lin + D @ [r, y]
        x_lin = A @ x_lin + B @ [r, y]
        u, x = c.sample(x, r, y)
        assert u == pytest.approx(u_lin[0], rel=1e-12, abs=1e-12)
    assert c.state_space().dt == 1e-3


def test_delay_shifts_by_one_sample():
    plain = PIDController("c", kp=1.0, ki=0.0, sample_time=1e-3)
    late = PIDController("c", kp=1.0, ki=0.0, sample_time=1e-3, delay=True)
    xp, xl = plain.initial_state(), late.initial_state()
    out_p, out_l = [], []
    for e in [1.0, 2.0, 3.0]:
        u, xp = plain.sample(xp, e, 0.0)
        out_p.append(u)
        u, xl = late.sample(xl, e, 0.0)
        out_l.append(u)
    assert out_l == [0.0, *out_p[:2]]
    assert not late.has_feedthrough and plain.has_feedthrough


@pytest.mark.parametrize("method", ["back_calculation", "conditional", "none"])
def test_anti_windup_bounds_the_integral(method):
    # a constant large error with the output pinned at the limit: back-calculation drives
    # v towards the limit (I -> u_max - kp e), conditional integration freezes I, no
    # anti-windup lets I grow linearly (Astrom and Hagglund, Advanced PID Control, 3.5)
    c = PIDController("c", kp=1.0, ki=10.0, sample_time=1e-3, output_limits=(-1.0, 1.0),
                      anti_windup=method)  # fmt: skip
    x = c.initial_state()
    for _ in range(5000):
        u, x = c.sample(x, 5.0, 0.0)
        assert u == 1.0
    if method == "back_calculation":
        assert x[0] == pytest.approx(1.0 - 5.0 + c.ki * c.tracking * 5.0, rel=1e-6)
    elif method == "conditional":
        assert x[0] == 0.0
    else:
        assert x[0] == pytest.approx(5000 * 10.0 * 1e-3 * 5.0, rel=1e-12)


def test_sensor_filter_static_gain_and_state_feedback():
    f = sensor_filter("f", 1e-3, 2.0)
    assert control.dcgain(f) == pytest.approx(2.0, rel=1e-12)
    assert f.poles()[0] == pytest.approx(-1e3, rel=1e-12)
    assert static_gain("g", 0.5).D[0, 0] == 0.5
    k = state_feedback("k", [3.0, 4.0], ["i", "w"], reference_gain=7.0)
    np.testing.assert_array_equal(k.D, [[-3.0, -4.0, 7.0]])
    assert k.input_labels == ["i", "w", "reference"]


@pytest.mark.parametrize(
    "kwargs",
    [dict(kp=1.0, kd=1.0), dict(kp=1.0, sample_time=-1.0), dict(kp=1.0, delay=True),
     dict(kp=1.0, output_limits=(2.0, 1.0)), dict(kp=1.0, anti_windup="magic")],
)  # fmt: skip
def test_bad_controller_settings(kwargs):
    with pytest.raises(WirestateError) as info:
        PIDController("c", **kwargs)
    assert info.value.location[:2] == ("blocks", "c")
