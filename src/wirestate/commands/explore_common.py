"""What ``wirestate yield`` and ``wirestate sweep`` share: the part values to centre on,
the Dask options, a one-line progress bar and writing result files atomically.

The values default to the preferred values of the last tuning: those of a tuning report
(``wirestate tune --json``) given by ``--tuned``, else those kept in the tuning file's
golden file (``models/golden/...``, written by ``wirestate regress --update``), else the
circuit file's own values. ``--values`` overrides single parts.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any, TextIO

from wirestate.atomic import write_atomic
from wirestate.errors import WirestateError
from wirestate.report.golden import golden_path, read_golden


def add_cluster_options(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--values",
        metavar="PART=VALUE,...",
        help="part values to use (default: the preferred values of the last tuning)",
    )
    parser.add_argument(
        "--tuned",
        metavar="REPORT",
        help="a `wirestate tune --json` report whose preferred values to use, or 'none' "
        "for the circuit file's values (default: the tuning's golden file, if any)",
    )
    parser.add_argument(
        "--scheduler", metavar="ADDRESS", help="an existing Dask scheduler (tcp://host:8786)"
    )
    parser.add_argument(
        "--workers", type=int, metavar="N", help="workers of the local Dask cluster"
    )
    parser.add_argument("--json", metavar="FILE", help="write the result as JSON (SI units)")
    parser.add_argument("--plot", metavar="FILE", help="write a figure (PNG or SVG)")
    parser.add_argument("--quiet", action="store_true", help="no progress on stderr")


def _report_values(path: Path) -> dict[str, float]:
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
        return {k: float(v["preferred"]) for k, v in data["variables"].items()}
    except FileNotFoundError:
        raise WirestateError("file_not_found", "no such tuning report", file=str(path)) from None
    except (OSError, ValueError, KeyError, TypeError, AttributeError):
        raise WirestateError(
            "invalid_field",
            "not a tuning report of `wirestate tune --json` (no variables with preferred values)",
            file=str(path),
        ) from None


def _golden_values(spec_path: Path) -> tuple[dict[str, float], str] | None:
    for folder in spec_path.resolve().parents:
        if (folder / "golden").is_dir():
            candidate = golden_path(spec_path, folder / "golden")
            if not candidate.is_file():
                return None
            tuned = read_golden(candidate).get("signature", {}).get("tuned", {})
            values = {k: float(v["preferred"]) for k, v in tuned.items() if "preferred" in v}
            return (values, str(candidate)) if values else None
    return None


def _shown_path(path: str) -> str:
    # relative to the working directory where it lies below it
    try:
        return str(Path(path).resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return path


def centre_values(args: argparse.Namespace) -> tuple[dict[str, Any], str]:
    """The part values to use and a sentence saying where they come from."""
    spec_path = Path(args.spec)
    values: dict[str, Any] = {}
    source = "the circuit file's values"
    if args.tuned and args.tuned.lower() == "none":
        pass
    elif args.tuned:
        values = _report_values(Path(args.tuned))
        source = f"preferred values of the tuning report {args.tuned}"
    else:
        found = _golden_values(spec_path)
        if found is not None:
            values = found[0]
            source = f"preferred values of the last tuning, from {_shown_path(found[1])}"
    if args.values:
        from wirestate.explore.parts import parse_assignments

        given = parse_assignments(args.values, "values")
        values.update(given)
        source += f"; {', '.join(given)} from --values"
    return values, source


class ProgressBar:
    """``progress(done, total)`` drawn as one line on a terminal (redrawn in place), shown
    once a run has taken more than :attr:`delay` seconds; nothing when not a terminal."""

    delay = 0.5

    def __init__(self, label: str, stream: TextIO | None = None) -> None:
        self.label = label
        self.stream = stream or sys.stderr
        self.start = time.perf_counter()
        self.drawn = False
        self.open = False
        self.terminal = bool(getattr(self.stream, "isatty", lambda: False)())

    def __call__(self, done: int, total: int) -> None:
        elapsed = time.perf_counter() - self.start
        if not self.terminal or (elapsed < self.delay and done < total):
            return
        width = 30
        filled = int(width * done / max(total, 1))
        line = (
            f"\r{self.label}: [{'#' * filled}{'.' * (width - filled)}] {done}/{total} "
            f"{elapsed:.1f} s"
        )
        # marked open before the write: Ctrl-C may land right after the line shows
        self.drawn = True
        self.open = done < total
        self.stream.write(line if self.open else line + "\n")
        self.stream.flush()

    def close(self) -> None:
        """End a bar left open by an interrupted or failed run, so that the error message
        starts its own line."""
        if self.open:
            self.stream.write("\n")
            self.stream.flush()
            self.open = False


@contextlib.contextmanager
def progress_bar(label: str, quiet: bool) -> Iterator[ProgressBar | None]:
    """A :class:`ProgressBar` (``None`` with ``--quiet``) closed however the run ends."""
    bar = None if quiet else ProgressBar(label)
    try:
        yield bar
    finally:
        if bar is not None:
            bar.close()


def run_options(args: argparse.Namespace, progress: ProgressBar | None) -> dict[str, Any]:
    """The keyword arguments ``tolerance_yield`` and ``sweep`` share, from the options of
    :func:`add_cluster_options` (the part values as :func:`centre_values` finds them)."""
    values, source = centre_values(args)
    return {
        "values": values,
        "values_source": source,
        "scheduler": args.scheduler,
        "workers": args.workers,
        "progress": progress,
        "file": args.spec,
    }


def check_outputs(args: argparse.Namespace) -> None:
    """The result files of ``--json``, ``--csv`` and ``--plot``, checked before any sample
    is drawn: a folder that exists, no model file replaced, a figure suffix we write."""
    from wirestate.report.figure import figure_format
    from wirestate.simulate.guards import check_output_path

    for option in ("json", "csv", "plot"):
        path = getattr(args, option, None)
        if path:
            check_output_path(path, f"--{option}", inputs=(args.spec,))
    if args.plot:
        figure_format(args.plot)


def write_text(path: str, text: str | bytes) -> None:
    """Write a result file atomically: an interrupted run leaves the old file or none."""
    try:
        write_atomic(path, text)
    except OSError as exc:
        raise WirestateError(
            "file_not_found", f"cannot write: {exc.strerror or exc}", file=str(path)
        ) from None


def write_json(path: str, data: dict[str, Any]) -> None:
    write_text(path, json.dumps(data, indent=2, allow_nan=False) + "\n")
