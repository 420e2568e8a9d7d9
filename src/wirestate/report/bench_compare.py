"""Comparing two benchmark result files (written by ``benchmarks/run_all.py``).

Each benchmark reports a *ratio* against a reference computed in the same run (for
example ``stepper time / bare numpy loop time``, or ``reference time / our time`` for a
speed-up), so two runs on differently loaded machines stay comparable. A ratio that got
more than ``threshold`` (25 % by default) worse is a regression. "Worse" depends on the
benchmark: each result states ``higher_is_better``; when it does not, the direction is read
from its ``target`` (``">= 10"`` means higher is better, ``"<= 1.2"`` lower), and failing
that a ratio is taken as a cost (lower is better) and the table says the direction was
assumed.

The worsening is measured as a fraction of the old ratio:
``(new - old) / old`` when lower is better, ``(old - new) / old`` when higher is better.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from wirestate.errors import RegressionError

BENCH_FORMAT = "wirestate-benchmarks"
BENCH_VERSION = 1
DEFAULT_THRESHOLD = 0.25


def load_results(path: str | Path) -> dict[str, Any]:
    """Read a benchmark result file; ``file_not_found``/``invalid_benchmark_file`` errors."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RegressionError("file_not_found", "no such file", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RegressionError(
            "invalid_benchmark_file", f"cannot read: {exc}", file=str(path)
        ) from None
    try:
        document = json.loads(text)
    except json.JSONDecodeError as exc:
        raise RegressionError(
            "invalid_benchmark_file", f"not valid JSON: {exc}", file=str(path)
        ) from None
    if not isinstance(document, dict) or not isinstance(document.get("results"), list):
        raise RegressionError(
            "invalid_benchmark_file",
            'expected a JSON object with a "results" list (from benchmarks/run_all.py)',
            file=str(path),
            location=("results",),
        )
    for index, entry in enumerate(document["results"]):
        if not isinstance(entry, dict) or not isinstance(entry.get("name"), str):
            raise RegressionError(
                "invalid_benchmark_file",
                'each result must be an object with a "name" string',
                file=str(path),
                location=("results", index),
            )
        ratio = entry.get("ratio")
        # a ratio is a positive finite number, or null where the benchmark gave none
        if ratio is not None and (
            isinstance(ratio, bool)
            or not isinstance(ratio, int | float)
            or not math.isfinite(ratio)
            or ratio <= 0
        ):
            raise RegressionError(
                "invalid_benchmark_file",
                f"the ratio of {entry['name']!r} must be a positive number or null, got {ratio!r}",
                file=str(path),
                location=("results", index, "ratio"),
            )
    failures = document.get("failures", [])
    if not isinstance(failures, list):
        raise RegressionError(
            "invalid_benchmark_file",
            '"failures" must be a list',
            file=str(path),
            location=("failures",),
        )
    return document


_TARGET = re.compile(r"^\s*(>=|=>|≥|>|<=|=<|≤|<)")


def direction(entry: Mapping[str, Any]) -> tuple[bool, str]:
    """``(higher_is_better, source)`` with source ``"stated"``, ``"target"`` or ``"assumed"``."""
    stated = entry.get("higher_is_better")
    if isinstance(stated, bool):
        return stated, "stated"
    target = entry.get("target")
    if isinstance(target, str):
        match = _TARGET.match(target)
        if match:
            return match.group(1) in (">=", "=>", "≥", ">"), "target"
    return False, "assumed"


def _ratio(entry: Mapping[str, Any] | None) -> float | None:
    if entry is None:
        return None
    value = entry.get("ratio")
    if isinstance(value, bool) or not isinstance(value, int | float):
        return None
    value = float(value)
    return value if math.isfinite(value) and value > 0 else None


@dataclass
class Comparison:
    """One benchmark in both files.

    ``status``: ``ok``, ``improved``, ``regressed`` (ratio worse by more than the threshold),
    ``failed`` (the new run recorded an error for it), ``missing`` (in the old file only),
    ``new`` (in the new file only) or ``no ratio`` (a ratio absent or not a positive number).
    ``worse`` is the fractional worsening (negative = better).
    """

    name: str
    old_ratio: float | None
    new_ratio: float | None
    higher_is_better: bool
    direction_source: str
    worse: float | None
    status: str
    target: str = ""

    @property
    def is_regression(self) -> bool:
        return self.status in ("regressed", "failed", "missing")


def compare_results(
    old: Mapping[str, Any], new: Mapping[str, Any], threshold: float = DEFAULT_THRESHOLD
) -> list[Comparison]:
    """Compare the ratios of two result documents (see :func:`load_results`)."""
    old_by_name = {e["name"]: e for e in old["results"]}
    new_by_name = {e["name"]: e for e in new["results"]}
    failed_modules = {f.get("module") for f in new.get("failures", []) if isinstance(f, dict)}
    names = list(old_by_name) + [n for n in new_by_name if n not in old_by_name]
    rows = []
    for name in names:
        old_entry, new_entry = old_by_name.get(name), new_by_name.get(name)
        higher, source = direction(new_entry or old_entry or {})
        old_ratio, new_ratio = _ratio(old_entry), _ratio(new_entry)
        raw_target = (new_entry or old_entry or {}).get("target")
        target = "" if raw_target is None else str(raw_target)
        worse = None
        if new_entry is not None and new_entry.get("error"):
            status = "failed"
        elif new_entry is None:
            failed = old_entry is not None and old_entry.get("module") in failed_modules
            status = "failed" if failed else "missing"
        elif old_entry is None:
            status = "new"
        elif old_ratio is None or new_ratio is None:
            status = "no ratio"
        else:
            change = (new_ratio - old_ratio) / old_ratio
            worse = -change if higher else change
            if worse > threshold:
                status = "regressed"
            elif worse < -threshold:
                status = "improved"
            else:
                status = "ok"
        rows.append(Comparison(name, old_ratio, new_ratio, higher, source, worse, status, target))
    return rows


def comparison_table(rows: Sequence[Comparison]) -> list[list[str]]:
    """Rows for a text table: benchmark, old, new, change, better, target, status."""

    def num(value: float | None) -> str:
        return "-" if value is None else f"{value:.4g}"

    table = []
    for row in rows:
        change = (
            "-"
            if row.worse is None
            else f"{100 * row.worse:.1f}% worse"
            if row.worse > 0
            else f"{-100 * row.worse:.1f}% better"
        )
        better = ("higher" if row.higher_is_better else "lower") + (
            " (assumed)" if row.direction_source == "assumed" else ""
        )
        status = row.status.upper() if row.is_regression else row.status
        table.append(
            [
                row.name,
                num(row.old_ratio),
                num(row.new_ratio),
                change,
                better,
                row.target or "-",
                status,
            ]
        )
    return table
