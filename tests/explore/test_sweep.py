"""Design sweeps: the feasible region of the RC case against its closed form, and the
tuning optimum on the region's boundary."""

from __future__ import annotations

import numpy as np
import pytest

from tests.explore.conftest import TAU_MAX
from wirestate.explore import sweep
from wirestate.tune import load_tuning, solve


def test_feasible_region_is_the_closed_form_one(rc_spread):
    spec = load_tuning(rc_spread)
    result = sweep(spec, {"R1": ("500ohm", "2kohm", 13), "C1": ("0.4uF", "2uF", 11)}, workers=1)
    R, C = np.meshgrid(*[np.asarray(a["values"]) for a in result.axes], indexing="ij")
    # the limit holds exactly when R C <= tau_max (first-order step response); no grid
    # point lies within 1e-6 of the boundary, so the comparison is exact
    assert np.min(np.abs(R * C / TAU_MAX - 1)) > 1e-6
    np.testing.assert_array_equal(result.feasible, R * C <= TAU_MAX)
    # margin v(1 ms) - 0.6 V in closed form (exact zero-order hold: 1e-9)
    expected = (1 - np.exp(-1e-3 / (R * C))) - 0.6
    np.testing.assert_allclose(result.margins[..., 0], expected, atol=1e-9)
    csv_lines = result.to_csv().splitlines()
    assert csv_lines[0] == "R1,C1,fast_rise,feasible" and len(csv_lines) == 1 + 13 * 11


SLOW_RISE = """
[tuning]
name = "rc_slow_rise"
circuit = "rc.toml"
[variables.C1]
min = "0.1uF"
max = "10uF"
start = "3uF"
[scenario]
until = "2ms"
step = "10us"
initial = "zero"
[[limits]]
name = "slow_rise"
kind = "maximum"
output = "v_out"
window = ["0s", "1ms"]
max = "0.6V"
[objective]
capacitance = 1.0
parts = ["C1"]
"""


def test_tuning_optimum_lies_on_the_feasible_boundary(rc_spread):
    # least C1 with v(1 ms) <= 0.6 V: the limit binds, R C >= tau_max, so the continuous
    # optimum C1* = tau_max / R1 is on the boundary of the sweep's feasible region
    path = rc_spread.parent / "slow_rise.toml"
    path.write_text(SLOW_RISE, encoding="utf-8")
    spec = load_tuning(path)
    c_opt = solve(spec).variables["C1"]["optimum"]
    assert c_opt == pytest.approx(TAU_MAX / 1e3, rel=1e-5)  # IPOPT tolerance 1e-8, margin
    # a 2 x 2 grid around the optimum (R1 +-0.01 %, C1 +-0.1 %): infeasible at the lower
    # C1, feasible at the upper one, for both R1
    grid = {"R1": ("999.9ohm", "1000.1ohm", 2), "C1": (c_opt * 0.999, c_opt * 1.001, 2)}
    result = sweep(spec, grid, workers=1)
    assert not result.feasible[:, 0].any()
    assert result.feasible[:, 1].all()
    # and on a wide grid every feasible point has C1 >= the optimum's at its R1 (none
    # cheaper is feasible), the nearest feasible one within one grid step of the boundary
    wide = sweep(spec, {"R1": ("800ohm", "1.2kohm", 5), "C1": ("0.5uF", "2uF", 31)}, workers=1)
    R, C = np.meshgrid(*[np.asarray(a["values"]) for a in wide.axes], indexing="ij")
    np.testing.assert_array_equal(wide.feasible, R * C >= TAU_MAX)
    row = wide.feasible[2]  # R1 = 1 kohm
    first = int(np.argmax(row))
    assert C[2, first] >= c_opt and C[2, first - 1] < c_opt
