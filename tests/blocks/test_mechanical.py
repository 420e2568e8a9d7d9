"""Mechanical blocks against textbook closed forms."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest

from wirestate.blocks import gear, mass_spring_damper, rotary_inertia, torsional_shaft
from wirestate.errors import WirestateError


def test_rotary_inertia_time_constant_and_final_speed():
    # J dw/dt = T - b w: pole -b/J, DC gain 1/b (Ogata, Modern Control Engineering, 5th
    # ed., sec. 3-4); closed form, 1e-12
    sys = rotary_inertia("r", 0.02, 0.5)
    # the speed row alone (the angle integrates it and feeds nothing back)
    a, b_t, b_l = sys.A[0, 0], sys.B[0, 0], sys.B[0, 1]
    assert a == pytest.approx(-25.0, rel=1e-12)
    assert -b_t / a == pytest.approx(2.0, rel=1e-12)
    assert -b_l / a == pytest.approx(-2.0, rel=1e-12)  # load torque opposes
    assert sys.units["speed"] == "rad/s"


def test_torsional_shaft_antiresonance_and_resonance():
    # undamped two-mass drive train: resonance w_r = sqrt(k (J1 + J2) / (J1 J2)), and the
    # drive-side speed has an antiresonance (zero) at w_a = sqrt(k / J2) (Ellis, Control
    # System Design Guide, ch. 16); eigenvalues and zeros, 1e-9 relative
    J1, J2, k = 4e-5, 2e-4, 45.0
    sys = torsional_shaft("s", J1, J2, k)
    wr = math.sqrt(k * (J1 + J2) / (J1 * J2))
    poles = np.sort(np.abs(np.linalg.eigvals(sys.A)))
    assert poles[-1] == pytest.approx(wr, rel=1e-9)
    zeros = control.zeros(sys[0, 0])
    assert np.max(np.abs(zeros)) == pytest.approx(math.sqrt(k / J2), rel=1e-9)


def test_mass_spring_damper_modes():
    # m x'' + c x' + k x = F: wn = sqrt(k/m), zeta = c / (2 sqrt(k m)), static gain 1/k
    # (Ogata sec. 5-3); closed form, 1e-12
    m, k, c = 0.012, 180.0, 0.35
    sys = mass_spring_damper("m", m, k, c)
    wn, zeta, _ = control.damp(sys, doprint=False)
    assert wn[0] == pytest.approx(math.sqrt(k / m), rel=1e-12)
    assert zeta[0] == pytest.approx(c / (2 * math.sqrt(k * m)), rel=1e-12)
    assert control.dcgain(sys[0, 0]) == pytest.approx(1 / k, rel=1e-12)


def test_gear_power_balance():
    # ideal gear: w_load = w_motor / n, T_motor = T_load / n so T w is conserved
    sys = gear("g", 5.0)
    np.testing.assert_allclose(sys.D, [[0.2, 0], [0, 0.2]], rtol=1e-15)
    w_m, t_l = 100.0, 3.0
    w_l, t_m = sys.D @ [w_m, t_l]
    assert t_m * w_m == pytest.approx(t_l * w_l, rel=1e-15)


@pytest.mark.parametrize(
    "make",
    [lambda: rotary_inertia("r", -1.0), lambda: rotary_inertia("r", 1.0, -0.1),
     lambda: gear("g", 0.0), lambda: mass_spring_damper("m", 0.0)],
)  # fmt: skip
def test_non_physical_values_are_refused(make):
    with pytest.raises(WirestateError) as info:
        make()
    assert info.value.code == "out_of_range"
