"""``wirestate sweep SPEC --grid PART=LOW:HIGH:POINTS[,PART=...]``: every limit's margin
of a tuning file over a grid of one or two part values, and where every limit holds.

Prints, per limit, at how many grid points it holds and its margin range; ``--json``,
``--csv`` and ``--plot`` (a contour figure of each margin with the feasible region
shaded) are written atomically.
"""

from __future__ import annotations

import argparse

from wirestate.commands.explore_common import (
    add_cluster_options,
    progress_bar,
    run_options,
    write_json,
    write_text,
)
from wirestate.units import format_quantity


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("spec", help="tuning file (TOML)")
    parser.add_argument(
        "--grid",
        required=True,
        metavar="PART=LOW:HIGH:POINTS,...",
        help="one or two parts, e.g. Rd=50mohm:2ohm:25,Cd=47uF:1mF:25",
    )
    parser.add_argument("--log", action="store_true", help="logarithmic spacing of the grid")
    parser.add_argument("--csv", metavar="FILE", help="write one row per grid point (SI units)")
    add_cluster_options(parser)


def format_sweep(result) -> str:
    """The human-readable summary of a :class:`~wirestate.explore.SweepResult`."""
    from wirestate.commands.tune import _show, _table
    from wirestate.explore.evaluate import FEASIBILITY_TOLERANCE

    axes = " x ".join(
        f"{a['part']} ({len(a['values'])} points, {format_quantity(a['values'][0], a['unit'])}"
        f" to {format_quantity(a['values'][-1], a['unit'])}, {a['scale']})"
        for a in result.axes
    )
    out = [f"sweep of {result.name} over {axes}", f"values: {result.values_source}", ""]
    import numpy as np

    rows = []
    for j, lim in enumerate(result.limits):
        m = result.margins[..., j]
        unit = "%" if lim["unit"] == "1" else lim["unit"]
        met = int((result.relative[..., j] >= -FEASIBILITY_TOLERANCE).sum())
        finite = m[np.isfinite(m)]
        low = _show(float(finite.min()), unit) if finite.size else "-"
        high = _show(float(finite.max()), unit) if finite.size else "-"
        rows.append([lim["name"], lim["kind"], f"{met}/{m.size}", low, high])
    out.append(_table(rows, ["limit", "kind", "met at", "margin min", "margin max"]))
    out += ["", f"every limit met at {int(result.feasible.sum())} of {result.feasible.size} points"]
    out += [f"note: {n}" for n in result.notes]
    out += ["", "cautions:"] + [f"  - {c}" for c in result.cautions]
    return "\n".join(out)


def run(args: argparse.Namespace) -> int:
    from wirestate.commands.outputs import check_outputs
    from wirestate.explore import parse_grid, sweep
    from wirestate.tune import load_tuning

    check_outputs(
        json=args.json, csv=args.csv, plot=args.plot, figures=("plot",), inputs=(args.spec,)
    )
    grid = parse_grid(args.grid)  # before the tuning file: a mistyped grid costs nothing
    spec = load_tuning(args.spec)
    with progress_bar("sweep", args.quiet) as bar:
        result = sweep(spec, grid, log=args.log, **run_options(args, bar))
    print(format_sweep(result))
    if args.json:
        write_json(args.json, result.to_dict())
    if args.csv:
        write_text(args.csv, result.to_csv())
    if args.plot:
        from wirestate.report.explore_plot import plot_sweep

        plot_sweep(result, args.plot)
    return 0
