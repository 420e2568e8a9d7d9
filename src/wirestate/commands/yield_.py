"""``wirestate yield SPEC``: the fraction of built units that meets every limit of a tuning
file when its parts scatter within their tolerances (Monte Carlo on Dask).

Prints the yield with its Wilson score interval, the failures per limit with the parts
that drive them, and the margin distribution per limit on stdout; a progress bar on
stderr. ``--json`` and ``--plot`` are written atomically.
"""

from __future__ import annotations

import argparse

from wirestate.commands.explore_common import (
    add_cluster_options,
    progress_bar,
    run_options,
    write_json,
)
from wirestate.units import format_quantity

#: as wirestate.explore.sampling.DISTRIBUTIONS (written out so that `wirestate --help`
#: does not import the numerical libraries; a test checks they agree)
DISTRIBUTIONS = ("uniform", "normal")


def configure(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("spec", help="tuning file (TOML)")
    parser.add_argument("--samples", type=int, default=10_000, help="samples (default 10000)")
    parser.add_argument(
        "--distribution",
        choices=DISTRIBUTIONS,
        default="uniform",
        help="uniform over +-tolerance, or normal with the tolerance as 3 sigma, truncated",
    )
    parser.add_argument("--seed", type=int, default=1, help="random seed (default 1)")
    parser.add_argument(
        "--parts",
        metavar="PART,...",
        help="the parts to draw (default: every resistor, capacitor, inductor with a tolerance)",
    )
    add_cluster_options(parser)


def _percent(x: float) -> str:
    return f"{100 * x:.2f} %"


def _margin(value: float | None, unit: str) -> str:
    from wirestate.commands.tune import _show

    if value is None:
        return "-"
    return _show(value, "%" if unit == "1" else unit)


def format_yield(report: dict) -> str:
    """The human-readable report of :meth:`YieldResult.to_dict` output."""
    from wirestate.commands.tune import _table

    low, high = report["interval"]
    parts = ", ".join(
        f"{n} {format_quantity(p['value'], p['unit'])} +-{100 * p['tolerance']:g} %"
        for n, p in report["parts"].items()
    )
    out = [
        f"yield of {report['name']}: {report['samples']} samples, {report['distribution']}, "
        f"seed {report['seed']}",
        f"values: {report['values_source']}",
        f"parts drawn: {parts}",
        f"assumption: {report['assumption']}",
        "",
        f"yield {_percent(report['yield'])} ({report['passed']} of {report['samples']} pass), "
        f"{100 * report['confidence']:g} % Wilson score interval "
        f"[{_percent(low)}, {_percent(high)}]",
        "",
    ]
    rows = []
    for lim in report["limits"]:
        name, unit = lim["name"], lim["unit"]
        summary = report["margins"][name]
        pct = summary.get("percentiles", {})
        top = report["drivers"][name][:2]
        rows.append([
            name, str(report["failures"][name]), _margin(summary.get("min"), unit),
            _margin(pct.get("1"), unit), _margin(pct.get("50"), unit),
            ", ".join(f"{d['part']} {d['rank_correlation']:+.2f}" for d in top) or "-",
        ])  # fmt: skip
    out.append(
        _table(rows, ["limit", "failures", "margin min", "1st pct", "median", "drivers (rho)"])
    )
    out.append("drivers: Spearman rank correlation of each part's value with the margin")
    cluster = report["cluster"]
    out += [
        "",
        f"evaluated on {cluster['kind']} ({cluster['workers']} workers): start-up "
        f"{cluster['startup_s']:.1f} s, evaluation {cluster['evaluation_s']:.1f} s",
    ]
    out += [f"note: {n}" for n in report["notes"]]
    out += ["", "cautions:"] + [f"  - {c}" for c in report["cautions"]]
    return "\n".join(out)


def run(args: argparse.Namespace) -> int:
    from wirestate.commands.outputs import check_outputs
    from wirestate.errors import WirestateError
    from wirestate.explore import tolerance_yield
    from wirestate.tune import load_tuning

    check_outputs(json=args.json, plot=args.plot, figures=("plot",), inputs=(args.spec,))
    if args.seed < 0:  # numpy's SeedSequence takes whole numbers of 0 or more
        raise WirestateError(
            "out_of_range",
            f"the seed must be a whole number of 0 or more, got {args.seed}",
            location=("seed",),
        )
    spec = load_tuning(args.spec)
    parts = [p.strip() for p in args.parts.split(",") if p.strip()] if args.parts else None
    with progress_bar("yield", args.quiet) as bar:
        result = tolerance_yield(
            spec,
            parts=parts,
            samples=args.samples,
            distribution=args.distribution,
            seed=args.seed,
            **run_options(args, bar),
        )
    report = result.to_dict()
    print(format_yield(report))
    if args.json:
        write_json(args.json, report)
    if args.plot:
        from wirestate.report.explore_plot import plot_yield

        plot_yield(result, args.plot)
    return 0
