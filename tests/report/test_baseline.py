"""The committed benchmark baseline is a complete run_all.py file bench-compare can read."""

from __future__ import annotations

from pathlib import Path

import pytest

from wirestate.report.bench_compare import compare_results, load_results

ROOT = Path(__file__).resolve().parents[2]
BASELINE = ROOT / "benchmarks" / "baseline.json"


@pytest.mark.skipif(not BASELINE.is_file(), reason="benchmarks/baseline.json not committed yet")
def test_baseline_is_a_clean_full_run():
    document = load_results(BASELINE)
    assert document["format"] == "wirestate-benchmarks"
    assert document["failures"] == []
    machine = document["machine"]
    assert {"platform", "python", "cpu_count", "versions"} <= set(machine)
    # every benchmark module in the repository contributed at least one result
    modules = {p.stem for p in (ROOT / "benchmarks").glob("bench_*.py")}
    assert modules <= {entry["module"] for entry in document["results"]}
    # compared with itself nothing regresses, and every ratio is a positive number
    rows = compare_results(document, document)
    assert rows and all(row.status == "ok" for row in rows)
