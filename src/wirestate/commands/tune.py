"""``wirestate tune SPEC``: size damping parts in closed loop, snap, verify, report.

Prints the table of design variables (continuous optimum, preferred value) and of limits
(margin at the preferred values and at the worst tolerance corner), the stress report and
the safety cautions on stdout; progress (solver iterations, corners checked) on stderr.
``--json`` writes the report atomically; ``--plot`` draws responses before and after
tuning with the limit envelopes.
"""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import Any

from wirestate.atomic import write_atomic
from wirestate.errors import TuningError, WirestateError
from wirestate.tune import load_tuning, solve
from wirestate.tune.preferred import SERIES_NAMES
from wirestate.units import format_quantity

EXIT_NOT_MET = 1


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


def _progress(quiet: bool):
    if quiet:
        return None

    def say(message: str) -> None:
        print(f"tune: {message}", file=sys.stderr, flush=True)

    return say


def _unit(unit: str) -> str:
    return {"1": "1", "1/s": "1/s"}.get(unit, unit)


def _show(value: float, unit: str) -> str:
    if unit == "%":
        return f"{100 * value:.3g} %"
    if unit == "1":
        return f"{value:.4g}"
    if unit == "1/s":
        return f"{value:.4g} 1/s"
    return format_quantity(value, unit)


def _table(rows: list[list[str]], header: list[str]) -> str:
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    lines = ["  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))]
    lines.append("  ".join("-" * w for w in widths))
    for r in rows:
        lines.append("  ".join(str(c).ljust(w) for c, w in zip(r, widths, strict=True)))
    return "\n".join(lines)


def format_report(report: dict[str, Any]) -> str:
    """The human-readable report of :meth:`TuningResult.to_dict` output."""
    out = [f"tuning {report['name']} (series {report['series']})", ""]
    rows = [
        [
            name,
            _show(v["optimum"], v["unit"]),
            _show(v["preferred"], v["unit"]),
            f"{v['tolerance'] * 100:g} %" if v.get("tolerance") else "-",
        ]
        for name, v in report["variables"].items()
    ]
    out.append(_table(rows, ["variable", "continuous optimum", "preferred", "tolerance"]))
    out.append("")
    rows = []
    for lim in report["limits"]:
        unit = "%" if lim["kind"] in ("overshoot", "settling") else _unit(lim["unit"])
        worst = lim.get("margin_worst_corner", lim["margin"])
        rows.append(
            [
                lim["name"],
                lim["kind"],
                _show(lim["bound"], unit),
                _show(lim["value"], unit),
                _show(lim["margin"], unit),
                _show(worst, unit),
                "ok"
                if lim["margin"] >= 0 and worst >= 0
                else ("corner fails" if lim["margin"] >= 0 else "NOT MET"),
            ]
        )
    out.append(
        _table(
            rows,
            ["limit", "kind", "bound", "value", "margin", "margin (worst corner)", "status"],
        )
    )
    tight = report.get("tightest")
    if tight:
        corner = ", ".join(f"{k} = {v:.4g}" for k, v in tight["worst_corner"].items()) or "nominal"
        out.append("")
        kind = next((x["kind"] for x in report["limits"] if x["name"] == tight["name"]), "")
        unit = "%" if kind in ("overshoot", "settling") else tight["unit"]
        out.append(
            f"tightest limit (relative to its bound): {tight['name']}, margin "
            f"{_show(tight['margin_worst_corner'], unit)} at the worst corner ({corner}); "
            f"{report['corners_checked']} corners checked"
        )
    if report["stress"]:
        out.append("")
        out.append("stress at the preferred values:")
        for s in report["stress"]:
            parts = [
                f"  {s['part']} ({s['kind']}): peak {format_quantity(s['peak_current'], 'A')}, "
                f"{format_quantity(s['peak_voltage'], 'V')}"
            ]
            if s["kind"] == "resistor":
                parts.append(
                    f"energy {format_quantity(s['energy'], 'J')}, scenario average "
                    f"{format_quantity(s['average_power_scenario'], 'W')}, continuous "
                    f"{format_quantity(s['continuous_power'], 'W')} (of which ripple "
                    f"{format_quantity(s['ripple_power'], 'W')})"
                )
            elif "ripple_current_amplitude" in s:
                parts.append(
                    f"ripple {format_quantity(s['ripple_current_amplitude'], 'A')} peak, "
                    f"{format_quantity(s['ripple_voltage_amplitude'], 'V')} peak"
                )
            for r in s["ratings"]:
                unit = {"voltage": "V", "current": "A", "power": "W"}[r["quantity"]]
                flag = "  <-- above rating" if r["fraction_of_rating"] > 1 else ""
                parts.append(
                    f"{r['quantity']} {format_quantity(r['used'], unit)} of "
                    f"{format_quantity(r['rated'], unit)} rated "
                    f"({100 * r['fraction_of_rating']:.0f} %){flag}"
                )
            out.append("; ".join(parts))
    solver = report["solver"]
    out.append("")
    out.append(
        f"solver: {solver['status']}, {solver['iterations']} iterations, "
        f"{solver['seconds']:.2f} s, {solver.get('unknowns', '?')} unknowns, "
        f"{solver.get('constraints', '?')} constraints"
    )
    for note in report["notes"]:
        out.append(f"note: {note}")
    out.append("")
    out.append("cautions:")
    for caution in report["cautions"]:
        out.append(f"  - {caution}")
    out.append("")
    out.append(
        "result: "
        + (
            "every limit met at the preferred values"
            if report["feasible"]
            else "NOT every limit is met at the preferred values"
        )
    )
    return "\n".join(out)


def _output_error(path: str | Path, exc: OSError) -> WirestateError:
    return WirestateError("file_not_found", f"cannot write: {exc.strerror or exc}", file=str(path))


def write_json_atomically(path: str | Path, data: dict[str, Any]) -> None:
    """Write ``data`` as JSON atomically (see :func:`wirestate.atomic.write_atomic`)."""
    try:
        write_atomic(path, json.dumps(data, indent=2) + "\n")
    except OSError as exc:
        raise _output_error(path, exc) from None


def run(args: argparse.Namespace) -> int:
    from wirestate.commands.outputs import check_outputs

    # before the solve: --json/--plot never replace a model file
    check_outputs(json=args.json, plot=args.plot, figures=("plot",), inputs=(args.spec,))
    spec = load_tuning(args.spec)
    progress = _progress(args.quiet)
    try:
        result = solve(spec, series=args.series, progress=progress, file=args.spec)
    except TuningError as exc:
        partial = getattr(exc, "result", None)
        if partial is not None:
            print(format_report(partial.to_dict()))
            if args.json:
                write_json_atomically(args.json, partial.to_dict())
        raise
    report = result.to_dict()
    print(format_report(report))
    if args.json:
        write_json_atomically(args.json, report)
        if progress:
            progress(f"report written to {args.json}")
    if args.plot:
        from wirestate.report.tuning_plot import plot_tuning

        try:
            plot_tuning(result, args.plot)
        except OSError as exc:
            raise _output_error(args.plot, exc) from None
        if progress:
            progress(f"figure written to {args.plot}")
    if not result.feasible:
        print(
            "error: " + args.spec + ": limits: no combination of neighbouring "
            f"{args.series} values meets every limit (see the table)",
            file=sys.stderr,
        )
        return EXIT_NOT_MET
    return 0
