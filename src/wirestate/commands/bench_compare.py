"""``wirestate bench-compare OLD.json NEW.json``: flag benchmark ratios that got worse.

Exit status 1 when any ratio is more than the threshold worse, a benchmark failed in the
new run, or one disappeared; 2 for an unreadable file.
"""

from __future__ import annotations

import argparse
import math

from wirestate.errors import RegressionError
from wirestate.report.bench_compare import (
    DEFAULT_THRESHOLD,
    compare_results,
    comparison_table,
    load_results,
)
from wirestate.report.golden import format_table


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("old", metavar="OLD.json", help="baseline results (benchmarks/run_all.py)")
    parser.add_argument("new", metavar="NEW.json", help="results to check against the baseline")
    parser.add_argument(
        "--threshold",
        type=float,
        default=DEFAULT_THRESHOLD,
        metavar="FRACTION",
        help="flag a ratio more than this fraction worse (default 0.25 = 25 %%)",
    )


def run(args: argparse.Namespace) -> int:
    threshold = args.threshold
    if not (math.isfinite(threshold) and threshold >= 0):
        # nan lets every regression pass and a negative one flags identical files
        raise RegressionError(
            "out_of_range",
            f"must be a finite fraction of 0 or more (0.25 = 25 %), got {threshold!r}",
            location=("--threshold",),
        )
    old, new = load_results(args.old), load_results(args.new)
    rows = compare_results(old, new, args.threshold)
    header = ["benchmark", "old ratio", "new ratio", "change", "better", "target", "status"]
    if rows:
        print(format_table(header, comparison_table(rows), left_columns=1))
    for failure in new.get("failures", []):
        if isinstance(failure, dict):
            print(f"failed in {args.new}: {failure.get('module')}: {failure.get('error')}")
    regressions = [r for r in rows if r.is_regression]
    assumed = [r.name for r in rows if r.direction_source == "assumed"]
    if assumed:
        print(
            "note: no higher_is_better or target direction for "
            + ", ".join(assumed)
            + "; lower ratio taken as better"
        )
    failed_modules = [f for f in new.get("failures", []) if isinstance(f, dict)]
    print(
        f"\nbench-compare: {len(rows)} benchmark(s), {len(regressions)} regression(s) "
        f"(threshold {100 * args.threshold:.0f} %)"
    )
    return 1 if regressions or failed_modules else 0
