"""``wirestate regress``: compare model responses with their golden files.

Exit status: 0 when every model matches, 1 when any quantity drifted, 2 when a model or
golden file could not be read (a user error; the other models are still checked).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from wirestate.report.golden import (
    discover_models,
    format_table,
    junit_xml,
    regress_file,
    write_atomic,
)
from wirestate.report.signature import format_value

DEFAULT_MODELS = Path("models")
DEFAULT_GOLDEN = DEFAULT_MODELS / "golden"


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "models",
        nargs="*",
        metavar="MODELS",
        help="circuit, system or tuning files (default: every *.toml below models/)",
    )
    parser.add_argument(
        "--golden",
        metavar="DIR",
        default=str(DEFAULT_GOLDEN),
        help="directory of golden files, mirroring the model paths (default: models/golden)",
    )
    parser.add_argument(
        "--update",
        action="store_true",
        help="rewrite the golden files from the current responses and print what changed",
    )
    parser.add_argument("--junit", metavar="FILE", help="also write a JUnit XML report")


def run(args: argparse.Namespace) -> int:
    golden_dir = Path(args.golden)
    if args.models:
        models = [Path(m) for m in args.models]
    else:
        models = discover_models(DEFAULT_MODELS, golden_dir)
    if args.junit and Path(args.junit).parent.is_dir():  # a missing folder is created later
        from wirestate.simulate.guards import check_output_path

        check_output_path(args.junit, "--junit", inputs=tuple(models))
    outcomes = [regress_file(model, golden_dir, update=args.update) for model in models]

    summary_rows = []
    drift_rows = []
    for outcome in outcomes:
        if outcome.status == "error":
            print(f"error: {outcome.message}", file=sys.stderr)
        if args.update:
            result = outcome.action or outcome.status
        elif outcome.status == "drift":
            result = f"DRIFT ({len(outcome.drifts)})"
        else:
            result = outcome.status
        note = outcome.message if outcome.status in ("skipped",) or outcome.action else ""
        summary_rows.append(
            [outcome.model, outcome.kind or "?", result, f"{outcome.seconds:.2f}", note]
        )
        for drift in outcome.drifts:
            drift_rows.append(
                [
                    outcome.model,
                    drift.quantity,
                    drift.item,
                    drift.at,
                    format_value(drift.golden),
                    format_value(drift.current),
                    format_value(drift.difference),
                    format_value(drift.allowed),
                ]
            )
    if summary_rows:
        header = ["model", "kind", "result", "seconds", "note"]
        if not any(row[-1] for row in summary_rows):
            header, summary_rows = header[:-1], [row[:-1] for row in summary_rows]
        print(format_table(header, summary_rows))
    if drift_rows:
        title = "changes written to the golden files" if args.update else "drifted quantities"
        print(f"\n{title}:")
        print(
            format_table(
                ["model", "quantity", "item", "at", "golden", "now", "|diff|", "allowed"],
                drift_rows,
                left_columns=3,
            )
        )
    counts = {
        s: sum(o.status == s for o in outcomes) for s in ("pass", "drift", "error", "skipped")
    }
    print(
        f"\nregress: {len(outcomes)} file(s): {counts['pass']} passed, {counts['drift']} "
        f"drifted, {counts['error']} error(s), {counts['skipped']} skipped"
    )
    if args.junit:
        write_atomic(args.junit, junit_xml(outcomes), make_parents=True)
    if counts["error"]:
        return 2
    return 1 if counts["drift"] else 0
