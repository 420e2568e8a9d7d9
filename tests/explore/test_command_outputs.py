"""What `wirestate yield` and `wirestate sweep` show and write: the progress bar on a
terminal, Ctrl-C leaving no half-written file (a real subprocess and SIGINT), the stated
distribution, the JSON keys, the margin distribution and the ranked drivers per limit,
the figures, and the sweep's CSV against its JSON."""

from __future__ import annotations

import csv
import io
import json
import os
import pty
import select
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from scipy.stats import rankdata

from tests.conftest import MODELS
from wirestate.cli import main
from wirestate.commands.explore_common import ProgressBar
from wirestate.explore import tolerance_yield
from wirestate.tune import load_tuning

DAMPING = str(MODELS / "tuning" / "drive_bus_damping.toml")
PNG = b"\x89PNG\r\n\x1a\n"


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_is_one_line_redrawn_in_place_on_a_terminal():
    stream = Terminal()
    bar = ProgressBar("yield", stream)
    bar.start -= 10.0  # a long run: past the delay
    for done in range(500, 10_001, 500):
        bar(done, 10_000)
    text = stream.getvalue()
    assert text.count("\n") == 1 and text.endswith("\n")  # one line, ended once
    assert text.count("\r") == 20  # every update redraws it in place
    assert "10000/10000" in text and "[" + "#" * 30 + "]" in text
    # not a terminal (a pipe or a file): no bar at all
    piped = io.StringIO()
    quiet = ProgressBar("yield", piped)
    quiet.start -= 10.0
    quiet(500, 1000)
    assert piped.getvalue() == ""
    # a run interrupted half way ends the bar's line so an error starts its own
    open_bar = ProgressBar("sweep", Terminal())
    open_bar.start -= 10.0
    open_bar(3, 10)
    open_bar.close()
    assert open_bar.stream.getvalue().endswith("\n")


def test_yield_draws_the_bar_on_a_terminal_stderr(rc_spread, monkeypatch, capsys):
    terminal = Terminal()
    monkeypatch.setattr(sys, "stderr", terminal)
    monkeypatch.setattr(ProgressBar, "delay", 0.0)
    assert main(["yield", str(rc_spread), "--samples", "1500", "--workers", "1"]) == 0
    lines = terminal.getvalue().split("\n")
    assert lines[-1] == "" and len(lines) == 2  # one line on stderr
    assert lines[0].startswith("\ryield: [") and "1500/1500" in lines[0]


@pytest.mark.parametrize("workers", ["1", "2"])
def test_ctrl_c_leaves_the_old_file_and_no_temporary(rc_spread, tmp_path, workers):
    # a long run on a pseudo-terminal, so the progress bar shows when evaluation runs;
    # then SIGINT to the whole process group, as Ctrl-C at a terminal sends it (worker
    # processes included)
    report = tmp_path / "kept.json"
    report.write_text("old\n")
    leader, follower = pty.openpty()
    code = "import sys; from wirestate.cli import main; sys.exit(main())"
    process = subprocess.Popen(
        [sys.executable, "-c", code, "yield", str(rc_spread), "--samples", "2000000",
         "--workers", workers, "--json", str(report), "--plot", str(tmp_path / "y.png")],
        stdin=subprocess.DEVNULL, stdout=subprocess.PIPE, stderr=follower, cwd=tmp_path,
        start_new_session=True,
    )  # fmt: skip
    os.close(follower)
    seen = b""
    deadline = time.monotonic() + 240
    while b"yield: [" not in seen and time.monotonic() < deadline:
        ready, _, _ = select.select([leader], [], [], 1.0)
        if ready:
            seen += os.read(leader, 4096)
    assert b"yield: [" in seen, seen
    os.killpg(process.pid, signal.SIGINT)
    try:
        out, _ = process.communicate(timeout=120)
    finally:
        _end_group(process.pid)
    while True:  # what the process wrote to its terminal after the bar
        ready, _, _ = select.select([leader], [], [], 0.2)
        if not ready:
            break
        try:
            chunk = os.read(leader, 4096)
        except OSError:
            break
        if not chunk:
            break
        seen += chunk
    os.close(leader)
    text = seen.decode(errors="replace")
    assert process.returncode == 130
    assert "Traceback" not in text and "error: interrupted" in text
    # the error starts its own line after the bar
    assert "\nerror: interrupted" in text.replace("\r\n", "\n")
    assert report.read_text() == "old\n"  # the user's file is untouched
    # nothing half-written: only the tuning files and the kept report are there
    assert sorted(p.name for p in tmp_path.iterdir()) == ["kept.json", "rc.toml", "rc_tune.toml"]
    assert out == b""  # no report printed for an interrupted run


def _end_group(group: int) -> None:
    """Wait up to 30 s for every process of the run's group to end (the workers go with
    the run); a straggler is killed, so the test leaves nothing running either way."""
    deadline = time.monotonic() + 30
    while time.monotonic() < deadline:
        try:
            os.killpg(group, 0)
        except ProcessLookupError:
            return
        time.sleep(0.2)
    os.killpg(group, signal.SIGKILL)
    raise AssertionError("worker processes outlived the interrupted run")


def test_normal_distribution_is_stated_and_the_json_has_every_key(rc_spread, tmp_path, capsys):
    report = tmp_path / "y.json"
    assert main(["yield", str(rc_spread), "--samples", "1000", "--distribution", "normal",
                 "--workers", "1", "--json", str(report), "--quiet"]) == 0  # fmt: skip
    out = capsys.readouterr().out
    assert "3 standard deviations, truncated at +-tolerance" in out
    data = json.loads(report.read_text())
    for key in ("samples", "yield", "interval", "failures", "seed", "distribution",
                "assumption", "confidence", "drivers", "margins", "limits", "parts",
                "passed", "cautions"):  # fmt: skip
        assert key in data, key
    assert data["distribution"] == "normal" and "3 standard deviations" in data["assumption"]
    assert data["samples"] == 1000 and data["seed"] == 1
    low, high = data["interval"]
    assert 0.0 <= low <= data["yield"] <= high <= 1.0
    assert data["failures"] == {"fast_rise": 1000 - data["passed"]}


def test_margin_distribution_and_ranked_drivers_per_limit():
    spec = load_tuning(MODELS / "tuning" / "drive_bus_damping.toml")
    result = tolerance_yield(spec, values={"Rd": "220mohm", "Cd": "240uF"}, samples=600,
                             seed=4, workers=1)  # fmt: skip
    report = result.to_dict()
    names = [lim["name"] for lim in result.limits]
    assert set(report["margins"]) == set(names) == set(report["drivers"])
    for j, name in enumerate(names):
        summary = report["margins"][name]
        m = result.margins[:, j]
        assert summary["evaluated"] == 600 and sum(summary["histogram"]["counts"]) == 600
        assert summary["min"] == m.min() and summary["max"] == m.max()
        assert summary["percentiles"]["50"] == pytest.approx(np.median(m), rel=1e-12)
        drivers = report["drivers"][name]
        strengths = [abs(d["rank_correlation"]) for d in drivers]
        assert strengths == sorted(strengths, reverse=True)  # strongest first
        for d in drivers:
            # Spearman's rho is Pearson's correlation of the ranks (Spearman 1904)
            values = result.values[:, list(result.parts).index(d["part"])]
            expected = np.corrcoef(rankdata(values), rankdata(m))[0, 1]
            assert d["rank_correlation"] == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_yield_and_sweep_figures_are_written(rc_spread, tmp_path, suffix):
    figure = tmp_path / f"y{suffix}"
    assert main(["yield", str(rc_spread), "--samples", "300", "--workers", "1",
                 "--plot", str(figure), "--quiet"]) == 0  # fmt: skip
    line = tmp_path / f"s1{suffix}"
    grid = tmp_path / f"s2{suffix}"
    assert main(["sweep", str(rc_spread), "--grid", "C1=0.5uF:2uF:9", "--workers", "1",
                 "--plot", str(line), "--quiet"]) == 0  # fmt: skip
    assert main(["sweep", str(rc_spread), "--grid", "R1=500ohm:2kohm:5,C1=0.5uF:2uF:4",
                 "--workers", "1", "--plot", str(grid), "--quiet"]) == 0  # fmt: skip
    for path in (figure, line, grid):
        head = path.read_bytes()[:200]
        assert head.startswith(PNG) if suffix == ".png" else b"<svg" in head


def test_sweep_csv_and_json_hold_the_same_grid(rc_spread, tmp_path, capsys):
    out_json, out_csv = tmp_path / "s.json", tmp_path / "s.csv"
    assert main(["sweep", str(rc_spread), "--grid", "R1=500ohm:2kohm:5,C1=0.5uF:2uF:4",
                 "--log", "--workers", "1", "--json", str(out_json), "--csv", str(out_csv),
                 "--quiet"]) == 0  # fmt: skip
    data = json.loads(out_json.read_text())
    rows = list(csv.DictReader(out_csv.read_text().splitlines()))
    assert len(rows) == data["points"] == 20
    r_values, c_values = (a["values"] for a in data["axes"])
    assert np.allclose(np.diff(np.log(r_values)), np.log(4) / 4)  # --log: geometric
    k = 0
    for i, r in enumerate(r_values):
        for j, c in enumerate(c_values):
            row = rows[k]
            assert float(row["R1"]) == r and float(row["C1"]) == c
            assert float(row["fast_rise"]) == data["margins"]["fast_rise"][i][j]
            assert row["feasible"] == ("1" if data["feasible"][i][j] else "0")
            k += 1
    assert data["feasible_points"] == sum(row["feasible"] == "1" for row in rows)
    assert "every limit met at" in capsys.readouterr().out
