"""``wirestate tune``: the bundled demo end to end, the JSON report, the figure, and errors."""

from __future__ import annotations

import json
import textwrap
from pathlib import Path

import pytest

from wirestate.cli import main

MODELS = Path(__file__).resolve().parents[2] / "models" / "tuning"
DEMO = MODELS / "drive_bus_damping.toml"


def test_demo_prints_the_table_writes_json_and_figure(tmp_path, capsys):
    report_path = tmp_path / "report.json"
    figure_path = tmp_path / "tune.png"
    code = main(["tune", str(DEMO), "--json", str(report_path), "--plot", str(figure_path)])
    out, err = capsys.readouterr()
    assert code == 0, err
    # the table: variables with optimum and preferred value, limits with both margins
    assert "continuous optimum" in out and "preferred" in out
    assert "margin (worst corner)" in out
    for name in ("Rd", "Cd", "bus_deviation", "bus_settling", "damping_resistor_energy"):
        assert name in out
    assert "cautions:" in out and "licensed" in out
    # progress on stderr: solver iterations and corners
    assert "solver iteration" in err and "corners checked" in err
    report = json.loads(report_path.read_text(encoding="utf-8"))
    assert report["feasible"] is True
    assert set(report["variables"]) == {"Rd", "Cd"}
    for entry in report["variables"].values():
        assert entry["optimum"] > 0 and entry["preferred"] > 0
    assert all({"name", "margin", "margin_worst_corner"} <= set(x) for x in report["limits"])
    assert all(x["margin"] >= 0 for x in report["limits"])
    # PNG signature
    assert figure_path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(tmp_path.glob(".*.tmp"))  # no temporary file left behind


def _rc_files(tmp_path: Path, c_max: str) -> Path:
    (tmp_path / "rc.toml").write_text(
        textwrap.dedent(
            """
            [circuit]
            name = "rc"
            [parts.Vs]
            kind = "voltage_source"
            nodes = ["in", "gnd"]
            value = "1V"
            [parts.R1]
            kind = "resistor"
            nodes = ["in", "out"]
            value = "1kohm"
            [parts.C1]
            kind = "capacitor"
            nodes = ["out", "gnd"]
            value = "1uF"
            [outputs.v_out]
            voltage = "out"
            """
        ),
        encoding="utf-8",
    )
    spec = tmp_path / "tune.toml"
    spec.write_text(
        textwrap.dedent(
            """
            [tuning]
            circuit = "rc.toml"
            [variables.C1]
            min = "0.1uF"
            max = "{c_max}"
            [scenario]
            until = "2ms"
            step = "10us"
            initial = "zero"
            [[limits]]
            name = "slow_rise"
            kind = "maximum"
            output = "v_out"
            window = ["0s", "1ms"]
            max = "0.5V"
            [objective]
            capacitance = 1.0
            parts = ["C1"]
            """
        ).replace("{c_max}", c_max),
        encoding="utf-8",
    )
    return spec


def test_infeasible_limits_exit_nonzero_with_one_error_line(tmp_path, capsys):
    spec = _rc_files(tmp_path, "1uF")
    code = main(["tune", str(spec), "--quiet"])
    out, err = capsys.readouterr()
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error: ")
    assert "slow_rise" in lines[0] and "Traceback" not in err
    assert "NOT MET" in out  # the least-violation point is still reported


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["tune", "no/such/file.toml"], "no such file"),
        # the missing folder is found before the solve and named with the option
        (["tune", "{spec}", "--json", "{tmp}/absent/report.json"], "--json: the folder"),
        (["tune", "{spec}", "--plot", "{tmp}/absent/tune.png"], "--plot: the folder"),
    ],
)
def test_user_mistakes_give_one_line(tmp_path, capsys, args, needle):
    spec = _rc_files(tmp_path, "10uF")
    args = [a.replace("{spec}", str(spec)).replace("{tmp}", str(tmp_path)) for a in args]
    code = main([*args, "--quiet"])
    _, err = capsys.readouterr()
    assert code == 2
    assert err.startswith("error: ") and needle in err
