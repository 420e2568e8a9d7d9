"""``wirestate tune SPEC``: size damping parts in closed loop, snap, verify, report.

Prints the table of design variables (continuous optimum, preferred value) and of limits
(margin at the preferred values and at the worst tolerance corner), the stress report, the
safety cautions and the verdict on stdout; progress on stderr (the optimiser's iterations
on one line on a terminal). ``--json`` writes the report atomically; ``--plot`` draws the
responses, also for a tuning that failed. The exit status is the verdict's: 0 every limit
met at the preferred values, at every tolerance corner and within every rating; 1 the
limits are met at the preferred values but a tolerance corner or a rating fails; 2 the
limits are not met (or a mistake in the files).
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any, TextIO

from wirestate.atomic import write_atomic
from wirestate.errors import TuningError, WirestateError
from wirestate.tune import load_tuning, solve
from wirestate.tune.preferred import SERIES_NAMES

#: on a log (not a terminal) only every this many optimiser iterations is printed
LOGGED_ITERATIONS = 10


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("spec", help="tuning file (TOML)")
    parser.add_argument(
        "--series",
        default="E24",
        type=str.upper,
        choices=SERIES_NAMES,
        help="IEC 60063 series for the preferred values (default E24)",
    )
    parser.add_argument("--json", metavar="FILE", help="write the report as JSON (SI units)")
    parser.add_argument("--plot", metavar="FILE", help="write a figure (PNG) of the responses")
    parser.add_argument("--quiet", action="store_true", help="no progress on stderr")


class Progress:
    """Progress lines on ``stream``: a transient line (an optimiser iteration) is shown in
    place on a terminal and thinned out on a log; every other line is kept."""

    def __init__(self, stream: TextIO) -> None:
        self.stream = stream
        self.terminal = stream.isatty()
        self.pending = False
        self.count = 0

    def __call__(self, message: str) -> None:
        if getattr(message, "transient", False):
            self.count += 1
            if self.terminal:
                self.stream.write(f"\rtune: {message}\x1b[K")
                self.stream.flush()
                self.pending = True
            elif self.count == 1 or self.count % LOGGED_ITERATIONS == 0:
                print(f"tune: {message}", file=self.stream, flush=True)
            return
        self.close()
        print(f"tune: {message}", file=self.stream, flush=True)

    def close(self) -> None:
        """End a line left open by a transient message."""
        if self.pending:
            self.stream.write("\r\x1b[K")
            self.stream.flush()
            self.pending = False


def _show(value: float, unit: str) -> str:
    """A number in ``unit`` for the tables of ``yield`` and ``sweep`` (``"%"``: a fraction
    shown in percent, ``"1"``: a bare number)."""
    from wirestate.units import format_quantity

    if unit == "%":
        return f"{100 * value:.3g} %"
    if unit == "1":
        return f"{value:.4g}"
    if unit == "1/s":
        return f"{value:.4g} 1/s"
    return format_quantity(value, unit)


def _table(rows: list[list[str]], header: list[str]) -> str:
    """A plain text table (used by ``yield`` and ``sweep`` too)."""
    from wirestate.report.tables import text_table

    return text_table(rows, header)


def format_report(report: dict[str, Any]) -> str:
    """The human-readable report of :meth:`TuningResult.to_dict` output."""
    from wirestate.report.tables import tuning_report

    return tuning_report(report)


def _output_error(path: str | Path, exc: OSError) -> WirestateError:
    return WirestateError("file_not_found", f"cannot write: {exc.strerror or exc}", file=str(path))


def write_json_atomically(path: str | Path, data: dict[str, Any]) -> None:
    """Write ``data`` as JSON atomically (see :func:`wirestate.atomic.write_atomic`)."""
    try:
        write_atomic(path, json.dumps(data, indent=2) + "\n")
    except OSError as exc:
        raise _output_error(path, exc) from None


def _for_figure(result: Any) -> Any:
    """A failed tuning's result for the figure: its least-violation values in place of the
    preferred values it does not have (the figure shows that point's response)."""
    import copy

    shown = copy.copy(result)
    shown.variables = {
        name: {**entry, "preferred": entry["optimum"]} if entry["preferred"] is None else entry
        for name, entry in result.variables.items()
    }
    return shown


def _outputs(result: Any, args: argparse.Namespace, progress: Progress | None) -> None:
    """Print the report and write the JSON and the figure."""
    report = result.to_dict()
    print(format_report(report))
    if args.json:
        write_json_atomically(args.json, report)
        if progress:
            progress(f"report written to {args.json}")
    if args.plot:
        from wirestate.report.tuning_plot import plot_tuning

        try:
            plot_tuning(_for_figure(result), args.plot)
        except OSError as exc:
            raise _output_error(args.plot, exc) from None
        if progress:
            progress(f"figure written to {args.plot}")


def run(args: argparse.Namespace) -> int:
    from wirestate.commands.outputs import check_outputs

    # before the solve: --json/--plot never replace a model file
    check_outputs(json=args.json, plot=args.plot, figures=("plot",), inputs=(args.spec,))
    spec = load_tuning(args.spec)
    progress = None if args.quiet else Progress(sys.stderr)
    try:
        result = solve(spec, series=args.series, progress=progress, file=args.spec)
    except TuningError as exc:
        if progress:
            progress.close()
        partial = getattr(exc, "result", None)
        if partial is not None:
            _outputs(partial, args, None)
        raise
    if progress:
        progress.close()
    _outputs(result, args, progress)
    verdict = result.verdict
    if not verdict["limits_met"]:
        print(f"error: {args.spec}: limits: {verdict['summary']}", file=sys.stderr)
    return int(verdict["exit_status"])
