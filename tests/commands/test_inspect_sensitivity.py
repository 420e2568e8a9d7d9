"""``wirestate inspect --sensitivity``: the table, the JSON and the errors."""

from __future__ import annotations

import json

import pytest

from tests.conftest import MODELS
from wirestate.cli import main

MODEL = str(MODELS / "drive_bus_filter.toml")


def test_table_lists_modes_gains_and_parts(capsys):
    assert main(["inspect", MODEL, "--sensitivity"]) == 0
    out = capsys.readouterr().out
    table = out[out.index("sensitivities of bus_filter") :]
    for text in (
        "natural frequency, mode i_Lf/v_Cbus",
        "damping ratio, mode i_Lf/v_Cbus",
        "DC gain v_bus/Iinv",
        "Rd",
        "Cbus",
    ):
        assert text in table
    # the damping resistor moves the damped real pole most, so it heads the columns
    header = next(line for line in table.splitlines() if line.strip().startswith("quantity"))
    assert header.split()[3] == "Rd"
    # quantities without elasticities are explained, not printed as numbers
    assert "zero DC gain" in table and "by definition" in table


def test_json_has_quantity_part_elasticity(capsys):
    assert main(["inspect", MODEL, "--sensitivity", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    sensitivity = data["sensitivity"]
    # DC drop per inverter ampere is -Rcable: elasticity 1 to Rcable, 0 to the rest
    # (Ohm's law; AD round-off only, 1e-12)
    row = sensitivity["DC gain v_bus/Iinv"]
    assert set(row) == {"Rcable", "Lf", "Cbus", "Rd", "Cd"}
    assert row["Rcable"] == pytest.approx(1.0, abs=1e-12)
    assert all(abs(row[p]) < 1e-12 for p in ("Lf", "Cbus", "Rd", "Cd"))
    assert "DC gain i_damp/Vbat" not in sensitivity
    assert "zero" in data["sensitivity_notes"]["DC gain i_damp/Vbat"]
    # without the flag, no sensitivity keys
    assert main(["inspect", MODEL, "--json"]) == 0
    assert "sensitivity" not in json.loads(capsys.readouterr().out)


def test_too_large_block_is_one_line(tmp_path, capsys):
    from wirestate.sensitivity import MAX_STATES

    lines = ['[circuit]\nname = "line"\n[parts.Vs]\nkind = "voltage_source"\nnodes = ["n0", "gnd"]']
    for k in range(1, MAX_STATES // 2 + 2):
        lines.append(
            f'[parts.L{k}]\nkind = "inductor"\nnodes = ["n{k - 1}", "n{k}"]\nvalue = "1uH"\n'
            f'[parts.C{k}]\nkind = "capacitor"\nnodes = ["n{k}", "gnd"]\nvalue = "1nF"\n'
            f'[parts.R{k}]\nkind = "resistor"\nnodes = ["n{k}", "gnd"]\nvalue = "1k"'
        )
    path = tmp_path / "line.toml"
    path.write_text("\n".join(lines) + "\n")
    assert main(["inspect", str(path), "--sensitivity"]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"error: {path}: circuit: ") and err.count("\n") == 1
    assert "reduce it first" in err


def test_sensitivity_of_a_system_file_is_refused_in_one_line(capsys):
    # elasticities are defined here for circuit files; a system file gets one line naming
    # the option, and no partial output
    path = "models/systems/battery_drive.toml"
    assert main(["inspect", path, "--sensitivity"]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert captured.err.startswith(f"error: {path}") and captured.err.count("\n") == 1
    assert "--sensitivity" in captured.err
