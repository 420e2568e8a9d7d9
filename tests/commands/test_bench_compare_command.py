"""`wirestate bench-compare`: direction-aware 25 % regression rule on synthetic results.

Synthetic result files are enough here: the test checks the comparison logic, not speed.
"""

from __future__ import annotations

import json

import pytest

from wirestate.cli import main
from wirestate.report.bench_compare import compare_results, direction


def result(name, ratio, **extra):
    entry = {
        "name": name,
        "median_s": 1e-3,
        "reference_median_s": 1e-3,
        "ratio": ratio,
        "target": extra.pop("target", "-"),
        "meets_target": True,
        "details": {},
        "module": "bench_synthetic",
    }
    entry.update(extra)
    return entry


def write(path, results, failures=()):
    doc = {
        "format": "wirestate-benchmarks",
        "version": 1,
        "results": results,
        "failures": list(failures),
    }
    path.write_text(json.dumps(doc), encoding="utf-8")
    return str(path)


@pytest.mark.parametrize(
    ("old", "new", "higher", "status"),
    [
        # lower is better (a cost ratio): 1.0 -> 1.24 is 24 % worse, 1.26 is 26 % worse
        (1.0, 1.24, False, "ok"),
        (1.0, 1.26, False, "regressed"),
        (1.0, 0.70, False, "improved"),
        # higher is better (a speed-up): 10 -> 7.6 is 24 % worse, 7.4 is 26 % worse
        (10.0, 7.6, True, "ok"),
        (10.0, 7.4, True, "regressed"),
        (10.0, 14.0, True, "improved"),
        # a rise of a speed-up is never a regression
        (10.0, 100.0, True, "improved"),
    ],
)
def test_threshold_is_direction_aware(old, new, higher, status):
    rows = compare_results(
        {"results": [result("b", old, higher_is_better=higher)]},
        {"results": [result("b", new, higher_is_better=higher)]},
    )
    assert [r.status for r in rows] == [status]


def test_direction_is_read_from_the_target_when_not_stated():
    assert direction({"target": ">= 10"}) == (True, "target")
    assert direction({"target": "<= 1.2"}) == (False, "target")
    assert direction({"target": "fast"}) == (False, "assumed")
    assert direction({"higher_is_better": True, "target": "<= 1"}) == (True, "stated")


def test_cli_flags_a_regression_and_exits_1(tmp_path, capsys):
    old = write(
        tmp_path / "old.json",
        [
            result("stepper_vs_numpy", 1.1, higher_is_better=False, target="<= 1.2"),
            result("batch_vs_forced_response", 12.0, higher_is_better=True, target=">= 10"),
            result("compile_scaling", 1.05),
        ],
    )
    new = write(
        tmp_path / "new.json",
        [
            result("stepper_vs_numpy", 1.15, higher_is_better=False, target="<= 1.2"),
            result("batch_vs_forced_response", 8.0, higher_is_better=True, target=">= 10"),
            result("compile_scaling", 1.0),
            result("brand_new", 3.0),
        ],
    )
    assert main(["bench-compare", old, new]) == 1
    out = capsys.readouterr().out
    lines = {line.split()[0]: line for line in out.splitlines() if line.strip()}
    assert "REGRESSED" in lines["batch_vs_forced_response"]
    assert "33.3% worse" in lines["batch_vs_forced_response"]  # (12 - 8) / 12
    assert lines["stepper_vs_numpy"].rstrip().endswith("ok")
    assert lines["brand_new"].rstrip().endswith("new")
    assert "(assumed)" in lines["compile_scaling"]
    assert "1 regression(s)" in out


def test_cli_passes_when_nothing_got_worse(tmp_path, capsys):
    old = write(tmp_path / "old.json", [result("a", 2.0, higher_is_better=True)])
    new = write(tmp_path / "new.json", [result("a", 2.2, higher_is_better=True)])
    assert main(["bench-compare", old, new]) == 0
    assert "0 regression(s)" in capsys.readouterr().out


def test_failed_and_missing_benchmarks_are_regressions(tmp_path, capsys):
    old = write(tmp_path / "old.json", [result("a", 1.0), result("b", 1.0)])
    new = write(
        tmp_path / "new.json",
        [],
        failures=[{"module": "bench_synthetic", "error": "RuntimeError: boom"}],
    )
    assert main(["bench-compare", old, new]) == 1
    out = capsys.readouterr().out
    assert "FAILED" in out and "RuntimeError: boom" in out
    gone = write(tmp_path / "gone.json", [result("a", 1.0)])
    rows = compare_results(json.loads(open(old).read()), json.loads(open(gone).read()))
    assert [r.status for r in rows] == ["ok", "missing"]


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("{broken", "not valid JSON"),
        ('{"results": 3}', '"results" list'),
        ('{"results": [{"ratio": 1}]}', '"name" string'),
    ],
)
def test_unreadable_files_are_user_errors(tmp_path, capsys, content, message):
    bad = tmp_path / "bad.json"
    bad.write_text(content, encoding="utf-8")
    good = write(tmp_path / "good.json", [result("a", 1.0)])
    assert main(["bench-compare", good, str(bad)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "bad.json" in err and message in err
    assert main(["bench-compare", str(tmp_path / "none.json"), good]) == 2
    assert "no such file" in capsys.readouterr().err
