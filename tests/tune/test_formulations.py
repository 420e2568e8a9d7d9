"""Condensed and multiple-shooting formulations of the same NLP reach the same optimum.

The condensed form eliminates the states (the trajectory is an expression of the design
variables, as in condensing: Bock and Plitt, IFAC 1984); multiple shooting keeps them as
unknowns with the dynamics as equality constraints. ``formulation="auto"`` condenses
only when the loop is stable at the starting point.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from wirestate.spec.tuning import parse_tuning
from wirestate.tune import load_tuning
from wirestate.tune.optimise import is_stable_discrete, solve_nlp
from wirestate.tune.problem import Problem

MODELS = Path(__file__).resolve().parents[2] / "models" / "tuning"


@pytest.mark.parametrize("formulation", ["condensed", "multiple_shooting"])
def test_both_formulations_reproduce_the_rc_closed_form(rc_case, formulation):
    model = Problem(load_tuning(rc_case()))
    solution = solve_nlp(model, formulation=formulation)
    # first-order step response v(t) = 1 - exp(-t / RC) (Ogata, Modern Control Engineering,
    # 5th ed., sec. 5-2): v(1 ms) <= 0.5 V with R = 1 kohm needs C >= 1e-3 / (1e3 ln 2);
    # 1e-6 relative: IPOPT meets the constraint to 1e-8 of the bound
    assert solution.values["C1"] == pytest.approx(1e-3 / (1e3 * math.log(2)), rel=1e-6)
    assert solution.stats["formulation"] == formulation


def test_auto_condenses_a_loop_that_is_stable_at_the_start(rc_case):
    model = Problem(load_tuning(rc_case()))
    assert solve_nlp(model).stats["formulation"] == "condensed"


def _drive_bus(rd_start: str, cd_start: str) -> Problem:
    spec = {
        "tuning": {"name": "drive_bus_start", "circuit": "drive_bus.toml"},
        "variables": {
            "Rd": {"min": "50mohm", "max": "5ohm", "start": rd_start},
            "Cd": {"min": "47uF", "max": "4.7mF", "start": cd_start},
        },
        "controller": {
            "measurement": "i_motor",
            "command": "Vm",
            "kp": 0.63,
            "ki": 157.0,
        },
        "scenario": {
            "until": "4ms",
            "step": "10us",
            "steps": [{"input": "reference", "at": "1ms", "to": "40A"}],
        },
        "limits": [
            {"name": "loop_poles", "kind": "pole_real_part", "max": "-150"},
            {
                "name": "bus_deviation",
                "kind": "overshoot",
                "output": "v_bus",
                "after": "1ms",
                "percent_of": "final",
                "max": "3%",
            },
        ],
        "objective": {"capacitance": 1.0, "parts": ["Cd"]},
    }
    return Problem(parse_tuning(spec, base_dir=str(MODELS)))


def test_an_unstable_start_falls_back_to_multiple_shooting_and_agrees():
    # with Rd = 5 ohm the damping leg barely damps: the constant-power drive makes the
    # filter unstable (spectral radius of the one-step matrix above one, numpy eigvals)
    unstable = _drive_bus("5ohm", "100uF")
    start_ev = unstable.numeric({"Rd": 5.0, "Cd": 100e-6})
    assert np.max(np.abs(np.linalg.eigvals(start_ev.Phi))) > 1.0
    assert not is_stable_discrete(start_ev.Phi)
    shooting = solve_nlp(unstable)
    assert shooting.stats["formulation"] == "multiple_shooting"
    condensed = solve_nlp(_drive_bus("0.5ohm", "1mF"))
    assert condensed.stats["formulation"] == "condensed"
    # the same NLP from two starts and in two formulations: Cd (the objective) 1e-6
    # relative, IPOPT's tolerance 1e-8 on a problem whose scaled variables are of order
    # one. Rd sits where two ringing peaks of the bus deviation are equal (a minimax kink):
    # on the flatter side the excess grows by only 0.9e-2 per unit relative change of Rd
    # (measured here by evaluating it at Rd (1 +- 1e-4)), so a feasibility tolerance of
    # 1e-8 fixes Rd to about 1e-6 relative only; 1e-5 leaves a factor of ten
    assert condensed.values["Cd"] == pytest.approx(shooting.values["Cd"], rel=1e-6)
    assert condensed.values["Rd"] == pytest.approx(shooting.values["Rd"], rel=1e-5)
    # the pole limit holds at the optimum: eigenvalues by numpy, 1e-6 relative of 150 1/s
    poles = np.linalg.eigvals(unstable.numeric(condensed.values).A)
    assert float(np.max(poles.real)) <= -150.0 * (1 - 1e-6)


def test_imposing_only_the_peaks_reaches_the_optimum_of_every_row():
    # the exchange over samples (each limit imposed where its signal peaks, every sample
    # checked after each solve, the violated ones added) against the NLP that imposes
    # every sample of every limit: the same optimum, with far fewer rows. The objective
    # and Cd to 1e-6 relative (IPOPT's tolerance on a problem whose scaled variables are
    # of order one); Rd, which sits on the kink between two equal ringing peaks (see the
    # test above), to 1e-5
    model = _drive_bus("0.5ohm", "1mF")
    peaks = solve_nlp(model)
    every = solve_nlp(model, rows="all")
    assert every.stats["rows_imposed"] == every.stats["rows_total"]
    assert peaks.stats["rows_imposed"] < every.stats["rows_total"] / 4
    assert peaks.objective == pytest.approx(every.objective, rel=1e-6)
    assert peaks.values["Cd"] == pytest.approx(every.values["Cd"], rel=1e-6)
    assert peaks.values["Rd"] == pytest.approx(every.values["Rd"], rel=1e-5)
