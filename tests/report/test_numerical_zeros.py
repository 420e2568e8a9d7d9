"""Small things a reader trips on: counts in the right number, round-off shown as zero
relative to the size of what it was computed from, each complex pole pair listed once."""

from __future__ import annotations

import json

import numpy as np
import pytest

from tests.conftest import MODELS, circuit
from wirestate.cli import main
from wirestate.report.tables import block_json, block_summary, dc_gain_term_sizes
from wirestate.units import format_count, zero_round_off


def test_counts_take_the_right_number():
    assert [format_count(n, "state") for n in (0, 1, 2)] == ["0 states", "1 state", "2 states"]
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["a", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": 1.0},
            "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": 1e-6},
        },
        {"v_b": {"voltage": "b"}},
    )
    assert block_summary(block).splitlines()[0] == "block dut: 1 state, 1 input, 1 output"


def test_a_capacitors_dc_current_is_zero_in_the_json_dc_gain(capsys):
    # the damping leg's DC current is zero (a capacitor blocks DC: Kirchhoff's current law
    # at DC); computed it is a difference of equal terms, 4.9e-18 A/A before rounding
    assert main(["inspect", str(MODELS / "drive_bus_filter.toml"), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    i_damp = data["outputs"].index("i_damp")
    assert data["dc_gain"][i_damp] == [0.0, 0.0]


def test_a_real_small_gain_is_kept():
    # divider through 10 TOhm into 1 Ohm || C: gain R2 / (R1 + R2) ~ 1e-13 is physics, not
    # round-off; it is as large as the terms it comes from (voltage divider rule)
    R1, R2 = 1e13, 1.0
    block = circuit(
        {
            "Vs": {"kind": "voltage_source", "nodes": ["a", "gnd"]},
            "R1": {"kind": "resistor", "nodes": ["a", "b"], "value": R1},
            "R2": {"kind": "resistor", "nodes": ["b", "gnd"], "value": R2},
            "C1": {"kind": "capacitor", "nodes": ["b", "gnd"], "value": 1e-9},
        },
        {"v_b": {"voltage": "b"}},
    )
    shown = block_json(block)["dc_gain"][0][0]
    assert shown == pytest.approx(R2 / (R1 + R2), rel=1e-9)


def test_the_term_sizes_bound_the_round_off():
    # |D| + |C| |A^-1| |B| for a 2x2 case worked by hand
    A = np.array([[-2.0, 1.0], [1.0, -2.0]])
    B = np.array([[1.0], [0.0]])
    C = np.array([[1.0, -1.0]])
    D = np.array([[0.5]])
    # A^-1 = -1/3 [[2, 1], [1, 2]]: |A^-1| |B| = [2/3, 1/3], |C| of that = 1
    assert dc_gain_term_sizes(A, B, C, D)[0, 0] == pytest.approx(1.5, rel=1e-12)
    assert zero_round_off([1e-17, 1e-3, np.inf], [1.0, 1.0, 1.0]).tolist() == [0.0, 1e-3, np.inf]


def test_the_simulation_summary_rounds_off_zeros(capsys):
    args = ["simulate", str(MODELS / "drive_bus_filter.toml"), "--until", "20ms", "--step",
            "1us", "--input", "Vbat=step:48V", "--input", "Iinv=step:20A,at=5ms"]  # fmt: skip
    assert main(args) == 0
    row = next(line for line in capsys.readouterr().out.splitlines() if "i_damp" in line)
    # the capacitor's current has decayed for 15 ms (about 54 time constants): round-off
    assert row.split()[1:3] == ["0", "A"]


def test_json_lists_each_complex_pair_once(capsys):
    assert main(["inspect", str(MODELS / "drive_bus_filter.toml"), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["pole_count"] == 3 and len(data["poles"]) == 2
    pair = next(p for p in data["poles"] if p["conjugate_pair"])
    assert pair["imag"] > 0 and "conjugate" in data["poles_listed"]
    # both forms give the same characteristic polynomial as the matrix (eigenvalues of A)
    A = np.array(data["A"])
    listed = [complex(p["real"], p["imag"]) for p in data["poles"]]
    listed += [complex(p["real"], -p["imag"]) for p in data["poles"] if p["conjugate_pair"]]
    assert np.poly(listed) == pytest.approx(np.poly(A), rel=1e-9)
