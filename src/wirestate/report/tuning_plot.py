"""Figure of a tuning result: responses before and after tuning, with the limit envelopes.

One panel per limited output (time in ms), one per output-impedance limit (|Z| against
frequency). The response at the starting values is drawn thin and dashed, the one at the
chosen preferred values thick; each bound is a dashed line, and a band allowed on both sides
(deviation, settling) is tinted. matplotlib (Agg) is imported inside :func:`plot_tuning` only.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from wirestate.report.figure import save_figure

_BEFORE = "#8c8c8c"
_AFTER = "#1b6e8a"
_FORBIDDEN = "#d9822b"
_ALLOWED = "#cfe8d5"
_UNIT_LABEL = {"V": "voltage (V)", "A": "current (A)", "W": "power (W)"}


def _envelopes(limit: dict[str, Any], final: float, t_end: float) -> list[tuple]:
    """(t0, t1, lower, upper) spans of the allowed band for one limit on one output."""
    kind = limit["kind"]
    if kind == "maximum":
        lo, hi = limit["window"] or (0.0, t_end)
        return [(lo, hi, None, limit["max"])]
    if kind == "minimum":
        lo, hi = limit["window"] or (0.0, t_end)
        return [(lo, hi, limit["min"], None)]
    if kind in ("overshoot", "settling"):
        width = limit["max"] if kind == "overshoot" else limit["band"]
        start = limit["after"] if kind == "overshoot" else limit["settled_by"]
        if limit["percent_of"] == "final" or kind == "settling":
            delta = abs(final) * width
            return [(start, t_end, final - delta, final + delta)]
        return [(start, t_end, None, final + width * abs(final))]
    return []


def plot_tuning(result: Any, path: str | Path) -> Path:
    """Draw ``result`` (a :class:`~wirestate.tune.TuningResult`) to a PNG file, atomically.

    Returns the path written.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    responses = result.responses
    outputs = responses["outputs"]
    impedances = responses["impedance"]
    panels = len(outputs) + len(impedances)
    fig, axes = plt.subplots(max(panels, 1), 1, figsize=(8.0, 2.6 * max(panels, 1)), squeeze=False)
    axes = axes[:, 0]
    times = responses["times"]
    t_ms = times * 1e3
    for ax, name in zip(axes, outputs, strict=False):
        i = responses["index"][name]
        ax.plot(t_ms, responses["start"][i], color=_BEFORE, lw=1.0, ls="--", label="start values")
        ax.plot(t_ms, responses["preferred"][i], color=_AFTER, lw=1.8, label="preferred values")
        final = responses["final"][name]["preferred"]
        for limit in responses["limits"]:
            target = limit.get("output") or ("i__" + limit["part"] if limit.get("part") else None)
            if target != name:
                continue
            if limit["kind"] == "peak_current":
                spans = [(0.0, times[-1], -limit["max"], limit["max"])]
            else:
                spans = _envelopes(limit, final, times[-1])
            for t0, t1, lower, upper in spans:
                x = [t0 * 1e3, t1 * 1e3]
                if lower is not None and upper is not None:
                    ax.fill_between(x, lower, upper, color=_ALLOWED, alpha=0.35, lw=0)
                for bound in (lower, upper):
                    if bound is not None:
                        ax.hlines(bound, *x, color=_FORBIDDEN, lw=1.2, ls=(0, (4, 2)))
        label = name[3:] if name.startswith("i__") else name
        unit = "A" if name.startswith("i__") else responses["units"].get(name, "")
        shown = f"current through {label}" if name.startswith("i__") else label
        ax.set_ylabel(f"{shown}\n{_UNIT_LABEL.get(unit, unit)}")
        ax.set_xlabel("time (ms)")
        ax.grid(True, color="#dddddd", lw=0.6)
        ax.legend(loc="best", fontsize=8, frameon=False)
    for ax, curve in zip(axes[len(outputs) :], impedances, strict=False):
        ax.loglog(
            curve["frequency"], curve["start"], color=_BEFORE, lw=1.0, ls="--", label="start values"
        )
        ax.loglog(
            curve["frequency"], curve["preferred"], color=_AFTER, lw=1.8, label="preferred values"
        )
        ax.axhline(curve["max"], color=_FORBIDDEN, lw=1.0, label="limit")
        ax.set_xlabel("frequency (Hz)")
        ax.set_ylabel(f"{curve['name']}\n|Z| (ohm)")
        ax.grid(True, which="both", color="#dddddd", lw=0.6)
        ax.legend(loc="best", fontsize=8, frameon=False)
    from wirestate.units import format_quantity

    names = ", ".join(
        f"{k} = {format_quantity(v['preferred'], v['unit'])}" for k, v in result.variables.items()
    )
    fig.suptitle(f"{result.name}: {names}", fontsize=10)
    fig.tight_layout()
    path = Path(path)
    save_figure(fig, path, dpi=110)
    return path
