"""Limit sensitivities on the command line: ``inspect TUNING_FILE --sensitivity`` (text and
JSON) and the "most sensitive parts" section of ``wirestate tune`` (text and JSON)."""

from __future__ import annotations

import json

import pytest

from tests.conftest import MODELS
from wirestate.cli import main
from wirestate.spec import load_circuit

TUNING = MODELS / "tuning" / "drive_bus_damping.toml"
LIMITS = {
    "bus_deviation",
    "bus_minimum",
    "bus_settling",
    "damping_resistor_current",
    "damping_resistor_energy",
    "loop_poles",
}
#: every part of drive_bus.toml with a value: not only the design variables Rd and Cd
PARTS = {"Rs", "Lf", "Cf", "Rd", "Cd", "Gcpl", "Fmotor", "Gmotor", "La", "Ra"}


def test_inspect_tuning_file_prints_limit_elasticities(capsys):
    assert main(["inspect", str(TUNING), "--sensitivity"]) == 0
    out = capsys.readouterr().out
    table = out[out.index("sensitivities of drive_bus_damping") :]
    # says where the elasticities were taken: this file records no tuning result
    assert "at the circuit file's part values" in table
    for name in LIMITS:
        assert name in table
    header = next(line for line in table.splitlines() if line.strip().startswith("quantity"))
    assert set(header.split()[3:]) <= PARTS and "Gmotor" in header
    assert "each limit's value is attained at" in table
    assert "mode " in table and "t = " in table  # a pole limit's mode, a path limit's sample


def test_inspect_tuning_file_json_shape(capsys):
    assert main(["inspect", str(TUNING), "--sensitivity", "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["kind"] == "tuning"
    # sensitivity -> limit -> part -> elasticity, as for a circuit's quantities
    assert set(data["sensitivity"]) == LIMITS
    for row in data["sensitivity"].values():
        assert set(row) == PARTS
        assert all(isinstance(v, float) for v in row.values())
    assert "circuit file" in data["sensitivity_at"]["design"]
    circuit = load_circuit(MODELS / "tuning" / "drive_bus.toml")
    assert data["sensitivity_at"]["values"]["Cd"] == pytest.approx(circuit.parts["Cd"].value)
    limits = data["sensitivity_limits"]
    assert limits["loop_poles"]["kind"] == "pole_real_part"
    assert limits["loop_poles"]["unit"] == "1/s" and limits["loop_poles"]["value"] < 0
    assert limits["damping_resistor_energy"]["active"] == "the horizon"
    assert limits["bus_minimum"]["active"].startswith("t = ")
    assert "sample that attains it" in data["sensitivity_notes"]["block"]


def test_tune_report_has_most_sensitive_parts(tmp_path, capsys):
    report_path = tmp_path / "report.json"
    assert main(["tune", str(TUNING), "--quiet", "--json", str(report_path)]) == 0
    out = capsys.readouterr().out
    section = out[out.index("most sensitive parts at the preferred values") :]
    section = section[: section.index("solver:")]
    for name in LIMITS:
        assert name in section
    report = json.loads(report_path.read_text(encoding="utf-8"))
    top = report["most_sensitive_parts"]
    assert set(top) == LIMITS
    for name, parts in top.items():
        assert 1 <= len(parts) <= 3
        # real parts of the circuit, largest |elasticity| first, as printed
        assert {p["part"] for p in parts} <= PARTS
        sizes = [abs(p["elasticity"]) for p in parts]
        assert sizes == sorted(sizes, reverse=True)
        assert sizes[0] == max(abs(v) for v in report["sensitivity"][name].values())
        line = next(line for line in section.splitlines() if line.startswith(name))
        assert parts[0]["part"] in line
    assert "preferred values" in report["sensitivity_notes"]["design"]
    assert set(report["sensitivity_active"]) == LIMITS
    # inspect at the preferred values the report records gives the same table: the same
    # design, start and code path (1e-12: the same arithmetic, kept loose for BLAS order)
    assert main(["inspect", str(TUNING), "--sensitivity", "--json", "--preferred",
                 str(report_path)]) == 0  # fmt: skip
    data = json.loads(capsys.readouterr().out)
    assert str(report_path) in data["sensitivity_at"]["design"]
    preferred = {n: v["preferred"] for n, v in report["variables"].items()}
    assert {n: data["sensitivity_at"]["values"][n] for n in preferred} == preferred
    for name, row in report["sensitivity"].items():
        assert data["sensitivity"][name] == pytest.approx(row, rel=1e-12, abs=1e-12)
