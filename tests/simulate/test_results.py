"""CSV output: header, one row per step from t = 0, SI values, atomic write."""

from __future__ import annotations

import csv

import numpy as np
import pytest

from tests.simulate.test_stepper import rc_block
from wirestate.errors import SimulationError
from wirestate.simulate import simulate


def test_csv_columns_and_rows(tmp_path):
    result = simulate(rc_block(), 1e-3, 1e-5, {"Vs": "step:5V"})
    path = result.write_csv(tmp_path / "out.csv")
    rows = list(csv.reader(path.open()))
    assert rows[0] == ["time", "v_out", "i_R1"]
    assert len(rows) == 1 + 101
    data = np.array(rows[1:], dtype=float)
    np.testing.assert_array_equal(data[:, 0], result.time)
    np.testing.assert_array_equal(data[:, 1:].T, result.outputs)  # repr round-trips floats
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


def test_csv_into_missing_directory(tmp_path):
    result = simulate(rc_block(), 1e-4, 1e-5)
    with pytest.raises(SimulationError) as info:
        result.write_csv(tmp_path / "nowhere" / "out.csv")
    assert info.value.code == "file_not_found"


def test_unknown_output_name():
    result = simulate(rc_block(), 1e-4, 1e-5)
    with pytest.raises(SimulationError) as info:
        result.output("v_bus")
    assert info.value.code == "unknown_signal" and "v_out" in info.value.message
