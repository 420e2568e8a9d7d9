"""wirestate yield / sweep on the command line: default values from the golden file, files
written, and bad input as one-line errors with exit status 2."""

from __future__ import annotations

import json

import pytest

from tests.conftest import MODELS
from wirestate.cli import main
from wirestate.commands import yield_
from wirestate.explore.sampling import DISTRIBUTIONS

DAMPING = str(MODELS / "tuning" / "drive_bus_damping.toml")


def test_yield_of_the_bundled_design_at_the_golden_preferred_values(tmp_path, capsys):
    report, figure = tmp_path / "y.json", tmp_path / "y.png"
    code = main(["yield", DAMPING, "--samples", "200", "--workers", "1", "--json", str(report),
                 "--plot", str(figure), "--quiet"])  # fmt: skip
    assert code == 0
    out = capsys.readouterr().out
    assert "golden" in out and "cautions:" in out and "Wilson" in out
    data = json.loads(report.read_text())
    # the golden file's preferred values (models/golden/tuning/drive_bus_damping.json)
    assert data["parts"]["Rd"]["value"] == 0.22 and data["parts"]["Cd"]["value"] == 0.00024
    assert figure.stat().st_size > 0
    assert yield_.DISTRIBUTIONS == DISTRIBUTIONS


def test_sweep_writes_json_csv_and_figure(tmp_path, capsys):
    out = [tmp_path / n for n in ("s.json", "s.csv", "s.png")]
    code = main(["sweep", DAMPING, "--grid", "Rd=0.1ohm:1ohm:4,Cd=100uF:1mF:3", "--log",
                 "--workers", "1", "--json", str(out[0]), "--csv", str(out[1]),
                 "--plot", str(out[2]), "--quiet"])  # fmt: skip
    assert code == 0
    data = json.loads(out[0].read_text())
    assert data["points"] == 12 and len(data["margins"]["bus_deviation"]) == 4
    assert len(out[1].read_text().splitlines()) == 13 and out[2].stat().st_size > 0


@pytest.mark.parametrize(
    ("args", "code_name"),
    [
        (["yield", DAMPING, "--values", "Rx=1ohm"], "Rx"),
        (["sweep", DAMPING, "--grid", "Rq=1ohm:2ohm:3"], "Rq"),
        (["yield", DAMPING, "--parts", "Rs"], "no tolerance"),
        (["yield", DAMPING, "--samples", "0"], "sample"),
        (["sweep", DAMPING, "--grid", "Rd=1ohm:2ohm"], "LOW:HIGH:POINTS"),
        (["yield", DAMPING, "--samples", "10", "--scheduler", "tcp://127.0.0.1:9"], "scheduler"),
    ],
)
def test_bad_input_is_one_line_and_exit_two(args, code_name, tmp_path, capsys):
    kept = tmp_path / "kept.json"
    kept.write_text("old\n")
    assert main([*args, "--json", str(kept), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("error: ") and "\n" not in err and code_name in err
    assert kept.read_text() == "old\n"  # nothing the user had is overwritten
