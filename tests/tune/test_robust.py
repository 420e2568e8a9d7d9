"""Corner-robust tuning (``[solver] robust = true``): every limit at every tolerance corner.

The RC case of ``conftest.py``: Vs = 1 V charges C1 through R1 = 1 kohm (5 %) from zero,
v(t) = 1 - exp(-t / (R C)) (first-order step response; Nilsson and Riedel, Electric
Circuits, sec. 7.4). v rises monotonically, so the limit v <= 0.5 V over [0, 1 ms] is
v(1 ms) <= 0.5 V, that is R C >= 1 ms / ln 2. It is hardest with R and C both low, so the
robust optimum (least C whose worst corner still meets the limit) is

    C* = 1 ms / (ln 2 * R (1 - t_R) (1 - t_C)) = 1e-3 / (ln 2 * 950 * 0.9) = 1.6874 uF,

against 1e-3 / (1e3 ln 2) = 1.4427 uF at nominal values (test_known_answer.py).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from wirestate.errors import WirestateError
from wirestate.tune import load_tuning, solve
from wirestate.tune.optimise import solve_nlp
from wirestate.tune.problem import Problem

DEMO = Path(__file__).resolve().parents[2] / "models" / "tuning" / "drive_bus_damping.toml"

# closed forms of the module docstring
C_ROBUST = 1e-3 / (math.log(2) * 1e3 * 0.95 * 0.9)
C_NOMINAL = 1e-3 / (math.log(2) * 1e3)


def _v(t, r, c):
    # v = V (1 - exp(-t / (R C))), V = 1 V (Nilsson and Riedel, Electric Circuits, sec. 7.4)
    return 1.0 - math.exp(-t / (r * c))


def _robust(path: Path) -> Path:
    path.write_text(
        path.read_text(encoding="utf-8") + "[solver]\nrobust = true\n", encoding="utf-8"
    )
    return path


def test_robust_rc_optimum_meets_the_limit_at_the_worst_corner(rc_case):
    result = solve(load_tuning(_robust(rc_case())), series="E24")
    variable = result.variables["C1"]
    # closed form C*; 1e-6 relative: IPOPT meets the constraint to 1e-8 of the bound and
    # the limit's slope dv/dC is of order one in these units (as in test_known_answer.py)
    assert variable["optimum"] == pytest.approx(C_ROBUST, rel=1e-6)
    # at the continuous optimum the worst corner sits on the limit, v(1 ms) = 0.5 V (closed
    # form); 1e-6 absolute from the optimum's 1e-6 relative accuracy
    assert _v(1e-3, 950.0, 0.9 * variable["optimum"]) == pytest.approx(0.5, abs=1e-6)
    # IEC 60063 E24 values either side of 1.6874 uF: 1.3, 1.5, 1.6 | 1.8, 2.0, 2.2 uF; the
    # least that holds at the worst corner is 1.8 uF (0.855 * 1.6 uF * 1 kohm = 1.368 ms
    # < 1.4427 ms <= 0.855 * 1.8 uF * 1 kohm = 1.539 ms)
    assert variable["preferred"] == pytest.approx(1.8e-6, rel=1e-12)
    (limit,) = result.limits
    # re-verification against the closed form; 1e-9 absolute: exact ZOH stepping (scipy's
    # matrix exponential) reproduces the exponential at the samples to ~1e-12
    assert limit["margin"] == pytest.approx(0.5 - _v(1e-3, 1e3, 1.8e-6), abs=1e-9)
    assert limit["margin_worst_corner"] == pytest.approx(0.5 - _v(1e-3, 950.0, 1.62e-6), abs=1e-9)
    assert limit["worst_corner"] == pytest.approx({"R1": 950.0, "C1": 1.62e-6})
    assert limit["margin_worst_corner"] > 0
    assert result.corners_checked == 4 and result.feasible
    # the corner exchange imposes the limit at the one corner that binds (R1, C1 both
    # low: the fastest rise) and finds every other corner met
    assert result.solver["tolerance_corners"] == 4
    assert result.solver["tolerance_corners_in_optimiser"] == 1


def test_both_formulations_give_the_robust_closed_form(rc_case):
    # condensed (states eliminated) and multiple shooting (states as unknowns, one set per
    # corner) are the same problem; closed form C* of the module docstring, 1e-6 relative
    # as above
    model = Problem(load_tuning(_robust(rc_case())))
    for formulation in ("condensed", "multiple_shooting"):
        solution = solve_nlp(model, formulation=formulation, robust=True)
        assert solution.success, (formulation, solution.status)
        assert solution.values["C1"] == pytest.approx(C_ROBUST, rel=1e-6), formulation
        assert solution.stats["formulation"] == formulation
    # without robust the same model gives the nominal closed form 1.4427 uF
    nominal = solve_nlp(model)
    assert nominal.values["C1"] == pytest.approx(C_NOMINAL, rel=1e-6)
    assert "tolerance_corners_in_optimiser" not in nominal.stats


def test_robust_without_toleranced_parts_is_the_nominal_problem(rc_case):
    path = _robust(rc_case())
    circuit = path.parent / "rc.toml"
    text = circuit.read_text(encoding="utf-8")
    circuit.write_text(
        "\n".join(line for line in text.splitlines() if not line.startswith("tolerance")),
        encoding="utf-8",
    )
    result = solve(load_tuning(path))
    # no corners: the nominal closed form 1e-3 / (1e3 ln 2) (module docstring), 1e-6 rel
    assert result.variables["C1"]["optimum"] == pytest.approx(C_NOMINAL, rel=1e-6)
    assert result.solver["tolerance_corners_in_optimiser"] == 0
    assert result.corners_checked == 0


def test_robust_needs_the_tolerance_corners(rc_case):
    path = _robust(rc_case())
    path.write_text(
        path.read_text(encoding="utf-8") + "[stress]\ntolerance_corners = false\n",
        encoding="utf-8",
    )
    with pytest.raises(WirestateError) as info:
        solve(load_tuning(path), file=str(path))
    assert info.value.code == "invalid_field"
    assert tuple(info.value.location) == ("solver", "robust")


@pytest.fixture(scope="module")
def demo():
    """The bundled demo, solved once for the tests below (about 8 s)."""
    spec = load_tuning(DEMO)
    return spec, solve(spec)


def test_the_robust_demo_passes_every_corner_in_re_verification(demo):
    spec, result = demo
    assert spec.solver.robust, "the bundled demo is meant to use the robust option"
    assert result.feasible
    assert result.solver["status"] == "Solve_Succeeded"
    # Rd, Cd (the design variables) and Cf, Lf: 2**4 corners, in the optimiser and after
    assert result.toleranced_parts == ["Cd", "Rd", "Cf", "Lf"]
    assert result.corners_checked == 16
    # all 16 corners checked at the optimum; the exchange imposed only those that bind
    assert result.solver["tolerance_corners"] == 16
    assert 1 <= result.solver["tolerance_corners_in_optimiser"] < 16
    for row in result.limits:
        # the numeric re-verification at the preferred values and at all 16 corners
        assert row["margin"] > 0, row
        assert row["margin_worst_corner"] > 0, row
        # the continuous optimum meets every limit at nominal values too (to IPOPT's
        # 1e-8 relative constraint tolerance)
        assert row["margin_at_optimum"] >= -1e-7 * abs(row["bound"]), row
    assert result.tightest["margin_worst_corner"] > 0
    # the worst corner is printed with each part's unit (Cd = 192 µF, not 0.000192)
    from wirestate.report.tables import tuning_report

    line = next(x for x in tuning_report(result.to_dict()).splitlines() if "worst corner (" in x)
    assert "Cd = " in line and "F" in line.split("Cd = ")[1].split(",")[0], line
    assert "Rd = " in line and "Ω" in line.split("Rd = ")[1].split(",")[0], line


def test_the_exchange_reaches_the_optimum_of_every_row_at_every_corner(demo):
    # the exchange (solve with the peaks of each limit at the binding corners, check every
    # sample at every corner, add the violated ones) must land on the optimum of the NLP
    # that imposes every sample of every limit at all 16 corners at once; both meet
    # IPOPT's tolerance, so 1e-6 relative
    spec, result = demo
    full = solve_nlp(Problem(spec), robust=True, rows="all")
    assert full.stats["tolerance_corners_in_optimiser"] == 16
    assert full.stats["rows_imposed"] == full.stats["rows_total"]
    assert result.solver["rows_imposed"] < result.solver["rows_total"] / 20
    for name, value in full.values.items():
        assert result.variables[name]["optimum"] == pytest.approx(value, rel=1e-6)


def test_demo_worst_corner_minimum_against_an_ode_solver(demo):
    # the bus minimum at the worst corner of the robust demo, re-simulated with scipy's
    # adaptive Runge-Kutta (solve_ivp, DOP853) on the continuous closed loop instead of the
    # exact zero-order hold; 1e-6 relative: the ODE solver's tolerance (rtol 1e-10 here,
    # inputs piecewise constant between the step times)
    from scipy.integrate import solve_ivp

    spec, result = demo
    row = next(r for r in result.limits if r["name"] == "bus_minimum")
    model = Problem(spec)
    values = {
        **{n: v["preferred"] for n, v in result.variables.items()},
        **row["worst_corner"],
    }
    ev = model.numeric(values)
    A, B, C, D = ev.A, ev.B, ev.extra["Cc"], ev.extra["Dc"]
    V = model.schedule.inputs
    times = model.times
    changes = [0] + [k for k in range(1, V.shape[1]) if np.any(V[:, k] != V[:, k - 1])]
    x = ev.X[:, 0]
    states = []
    for i, k0 in enumerate(changes):
        k1 = changes[i + 1] if i + 1 < len(changes) else len(times) - 1
        u = V[:, k0]
        span = times[k0 : k1 + 1]
        sol = solve_ivp(
            lambda _t, z, u=u: A @ z + B @ u,
            (span[0], span[-1]),
            x,
            method="DOP853",
            t_eval=span,
            rtol=1e-10,
            atol=1e-12,
        )
        states.append(sol.y[:, :-1] if k1 != len(times) - 1 else sol.y)
        x = sol.y[:, -1]
    X = np.hstack(states)
    index = model.outputs.index("v_bus")
    v_bus = C[index] @ X + D[index] @ V
    assert float(np.min(v_bus)) == pytest.approx(45.0 + row["margin_worst_corner"], rel=1e-6)
    assert float(np.min(v_bus)) > 45.0


def _with_energy_limit(path: Path, e_max: str) -> Path:
    text = path.read_text(encoding="utf-8").replace(
        "[objective]",
        f'[[limits]]\nname = "charge_loss"\nkind = "energy"\npart = "R1"\nmax = "{e_max}"\n\n'
        "[objective]",
    )
    path.write_text(text, encoding="utf-8")
    return path


def _energy(r, c, horizon=2e-3):
    # energy dissipated in R while C charges from zero through it (V = 1 V):
    # integral of (V/R)^2 exp(-2t/(RC)) R dt = (C V^2 / 2) (1 - exp(-2T/(RC))), from the
    # step response v = V (1 - exp(-t/(RC))) (Nilsson and Riedel, Electric Circuits, 7.4)
    return 0.5 * c * (1.0 - math.exp(-2.0 * horizon / (r * c)))


def test_an_energy_limit_at_every_corner_in_both_formulations(rc_case):
    # 1 uJ: at C* the worst energy corner (R low, C high) takes _energy(950, 1.1 C*) =
    # 0.83 uJ, so the limit holds but sits in the problem at all five points
    path = _with_energy_limit(_robust(rc_case()), "1uJ")
    model = Problem(load_tuning(path))
    solution = solve_nlp(model, formulation="multiple_shooting", robust=True, rows="all")
    assert solution.success, solution.status
    # closed form C* (module docstring), 1e-6 relative as above
    assert solution.values["C1"] == pytest.approx(C_ROBUST, rel=1e-6)
    # one design variable, then per point (nominal + 4 corners) the state and the running
    # energy at 201 samples (2 ms / 10 us = 200 steps)
    assert solution.stats["unknowns"] == 1 + 5 * (201 + 201)
    result = solve(load_tuning(path))
    row = next(r for r in result.limits if r["name"] == "charge_loss")
    assert row["worst_corner"] == pytest.approx({"R1": 950.0, "C1": 1.1 * 1.8e-6})
    # the exact integral of the piecewise solution (Van Loan's block exponential) against
    # the closed form; 1e-15 J absolute, about 1e-9 of the 0.83 uJ: matrix-exponential
    # accuracy (a trapezoid over the samples would be off by about 1e-11 J here)
    assert row["margin_worst_corner"] == pytest.approx(1e-6 - _energy(950.0, 1.98e-6), abs=1e-15)
    assert result.feasible and row["margin_worst_corner"] > 0


def test_a_limit_that_only_a_corner_breaks_makes_the_robust_problem_infeasible(rc_case):
    # 0.75 uJ: the nominal optimum 1.4427 uF takes _energy(1e3, 1.4427 uF) = 0.68 uJ, but
    # every C >= C* = 1.6874 uF (needed for the rise at the slow corner) takes at least
    # _energy(950, 1.1 C*) = 0.83 uJ at the fast corner: no C meets both at every corner
    assert _energy(1e3, C_NOMINAL) < 0.75e-6 < _energy(950.0, 1.1 * C_ROBUST)
    nominal = solve(load_tuning(_with_energy_limit(rc_case(), "0.75uJ")))
    assert nominal.variables["C1"]["optimum"] == pytest.approx(C_NOMINAL, rel=1e-6)
    path = _with_energy_limit(_robust(rc_case()), "0.75uJ")
    with pytest.raises(WirestateError) as info:
        solve(load_tuning(path), file=str(path))
    assert info.value.code == "infeasible_limits"
    # the failing limits are judged at their worst corner: at the least-violation point
    # (between 1.4427 and 1.6874 uF) the slow corner misses the rise and the fast corner
    # the energy, though the nominal rise is met there
    assert "slow_rise" in info.value.message and "charge_loss" in info.value.message
    rows = {r["name"]: r for r in info.value.result.limits}
    assert rows["slow_rise"]["margin"] > 0 > rows["slow_rise"]["margin_worst_corner"]
    assert rows["slow_rise"]["worst_corner"] == pytest.approx(
        {"R1": 950.0, "C1": 0.9 * info.value.result.variables["C1"]["optimum"]}
    )
