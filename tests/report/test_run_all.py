"""benchmarks/run_all.py: one JSON file, failures recorded, non-zero exit on failure."""

from __future__ import annotations

import importlib.util
import json
import os
from pathlib import Path

import pytest

RUN_ALL = Path(__file__).resolve().parents[2] / "benchmarks" / "run_all.py"

GOOD = """
def run():
    return [{"name": "good_one", "median_s": 2e-3, "reference_median_s": 1e-3, "ratio": 2.0,
             "target": "<= 3", "meets_target": True, "details": {"n": 3},
             "higher_is_better": False}]
"""
BROKEN = """
def run():
    raise RuntimeError("solver exploded")
"""
INCOMPLETE = """
def run():
    return [{"name": "no_ratio"}]
"""


@pytest.fixture
def run_all(tmp_path, monkeypatch):
    spec = importlib.util.spec_from_file_location("run_all_under_test", RUN_ALL)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    monkeypatch.setattr(module, "HERE", tmp_path)
    return module


def test_results_and_failures_go_into_one_file(run_all, tmp_path, capsys):
    (tmp_path / "bench_good.py").write_text(GOOD)
    (tmp_path / "bench_broken.py").write_text(BROKEN)
    (tmp_path / "bench_incomplete.py").write_text(INCOMPLETE)
    out = tmp_path / "results" / "run.json"
    assert run_all.main(["--out", str(out)]) == 1
    doc = json.loads(out.read_text())
    assert doc["format"] == "wirestate-benchmarks" and doc["version"] == 1
    assert [r["name"] for r in doc["results"]] == ["good_one"]
    assert doc["results"][0]["module"] == "bench_good"
    failures = {f["module"]: f["error"] for f in doc["failures"]}
    assert failures["bench_broken"] == "RuntimeError: solver exploded"
    assert "lacks" in failures["bench_incomplete"] and "ratio" in failures["bench_incomplete"]
    machine = doc["machine"]
    assert machine["cpu_count"] >= 1 and machine["versions"]["numpy"]
    assert [p.name for p in out.parent.iterdir()] == ["run.json"]  # no temp file left


def test_only_selects_modules_and_a_clean_run_exits_0(run_all, tmp_path):
    (tmp_path / "bench_good.py").write_text(GOOD)
    (tmp_path / "bench_broken.py").write_text(BROKEN)
    out = tmp_path / "run.json"
    assert run_all.main(["--out", str(out), "--only", "good"]) == 0
    assert json.loads(out.read_text())["failures"] == []


def test_no_benchmarks_is_a_failure(run_all, tmp_path):
    out = tmp_path / "run.json"
    assert run_all.main(["--out", str(out)]) == 1
    assert json.loads(out.read_text())["failures"][0]["error"] == "no benchmark modules found"


def test_thread_pinning_is_refused_once_numpy_is_loaded(run_all, tmp_path, capsys, monkeypatch):
    # inside pytest numpy is already imported, so the BLAS pool can no longer be pinned:
    # the runner must say so and leave the environment as it was
    (tmp_path / "bench_good.py").write_text(GOOD)
    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    assert run_all.main(["--out", str(tmp_path / "run.json"), "--threads", "1"]) == 0
    assert "--threads has no effect" in capsys.readouterr().err
    assert "OPENBLAS_NUM_THREADS" not in os.environ
