"""Figure of a tuning result: where each limit binds, and by how much it is met.

Left, one panel per limited output (time) or output-impedance limit (frequency): the
response at the chosen preferred values, the band it sweeps over the tolerance corners
(``responses["corner_low"]`` to ``["corner_high"]``, when the result carries them), and
each limit as a hatched forbidden region with its name and bound written on it. An arrow
marks the point where the response comes closest to the bound, labelled with the margin
there. Right, a margin ledger: every limit's margin as a share of its bound, at the
preferred values (bar) and at the worst tolerance corner (diamond), failing margins on
the shaded side. matplotlib (Agg) is imported inside :func:`plot_tuning` only.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from wirestate.report.figure import (
    INK,
    PALETTE,
    annotate_apart,
    axis_label,
    legend_outside,
    new_figure,
    quantity_of,
    save_figure,
    style_axes,
    time_scale,
)
from wirestate.units import format_quantity

_RESPONSE = PALETTE[0]
_WORST = PALETTE[1]
_HATCH = "////"


def _label(limit: dict[str, Any]) -> str:
    if limit.get("name"):
        return str(limit["name"])
    target = limit.get("output") or limit.get("part") or ""
    return f"{limit['kind']}_{target}" if target else str(limit["kind"])


def _target(limit: dict[str, Any]) -> str | None:
    if limit.get("part") and limit["kind"] in ("peak_current", "energy"):
        return "i__" + limit["part"] if limit["kind"] == "peak_current" else None
    return limit.get("output")


def _spans(limit: dict[str, Any], final: float, t_end: float) -> list[tuple]:
    """``(t0, t1, lower, upper)`` of the allowed band of a time-domain limit."""
    kind = limit["kind"]
    if kind == "maximum":
        lo, hi = limit.get("window") or (0.0, t_end)
        return [(lo, hi, None, limit["max"])]
    if kind == "minimum":
        lo, hi = limit.get("window") or (0.0, t_end)
        return [(lo, hi, limit["min"], None)]
    if kind == "peak_current":
        return [(0.0, t_end, -limit["max"], limit["max"])]
    if kind in ("overshoot", "settling"):
        width = limit["max"] if kind == "overshoot" else limit["band"]
        start = limit.get("after", 0.0) if kind == "overshoot" else limit["settled_by"]
        if limit.get("percent_of") == "final" or kind == "settling":
            delta = abs(final) * width
            return [(start, t_end, final - delta, final + delta)]
        return [(start, t_end, None, final + width * abs(final))]
    return []


def _rows_by_limit(result: Any, limits: list[dict[str, Any]]) -> list[dict[str, Any] | None]:
    rows = list(getattr(result, "limits", []) or [])
    by_name = {r.get("name"): r for r in rows}
    return [by_name.get(_label(limit)) for limit in limits]


def tuning_figure(result: Any) -> Any:
    """The tuning figure of ``result`` (a :class:`~wirestate.tune.TuningResult`) as a
    matplotlib ``Figure``; see the module docstring (a switched tuning's figure:
    :func:`switched_tuning_figure`)."""
    if "switched" in result.responses:
        return switched_tuning_figure(result)
    responses = result.responses
    limits = list(responses["limits"])
    rows = _rows_by_limit(result, limits)
    outputs = list(responses["outputs"])
    impedances = list(responses["impedance"])
    panels = max(len(outputs) + len(impedances), 1)
    fig = new_figure(12.5, max(4.2, 2.7 * panels + 0.8))
    grid = fig.add_gridspec(panels, 2, width_ratios=(2.4, 1.0))
    times = np.asarray(responses["times"], dtype=float)
    scale, unit_t = time_scale(float(times[-1]) if times.size else 1.0)
    low = responses.get("corner_low")
    high = responses.get("corner_high")
    axes = []
    arrows: list[tuple] = []  # margin arrows, drawn once the figure is laid out
    for row_index, name in enumerate(outputs):
        ax = fig.add_subplot(grid[row_index, 0], sharex=axes[0] if axes else None)
        axes.append(ax)
        i = responses["index"][name]
        y = np.asarray(responses["preferred"][i], dtype=float)
        t = times[: y.size] / scale
        if low is not None and high is not None:
            ax.fill_between(t, np.asarray(low[i])[: y.size], np.asarray(high[i])[: y.size],
                            color=_RESPONSE, alpha=0.22, linewidth=0,
                            label="tolerance corners (envelope)")  # fmt: skip
        ax.plot(t, y, color=_RESPONSE, linewidth=1.6, label="preferred values")
        unit = "A" if name.startswith("i__") else responses["units"].get(name, "")
        shown = f"current in {name[3:]}" if name.startswith("i__") else name
        ax.set_ylabel(axis_label(f"{quantity_of(unit)} {shown}" if not name.startswith("i__")
                                 else shown, unit))  # fmt: skip
        ax.set_xlabel(axis_label("time", unit_t))
        final = float(responses["final"][name]["preferred"])
        for limit, row in zip(limits, rows, strict=True):
            if _target(limit) == name:
                _draw_time_limit(ax, limit, row, t, y, final, float(times[-1]), scale, unit, arrows)
        style_axes(ax)
        legend_outside(ax)
    for k, curve in enumerate(impedances):
        ax = fig.add_subplot(grid[len(outputs) + k, 0])
        f = np.asarray(curve["frequency"], dtype=float)
        z = np.asarray(curve["preferred"], dtype=float)
        ax.loglog(f, z, color=_RESPONSE, linewidth=1.6, label="preferred values")
        row = next((r for lim, r in zip(limits, rows, strict=True)
                    if _label(lim) == curve["name"]), None)  # fmt: skip
        labels = _draw_bound(ax, f[0], f[-1], None, float(curve["max"]), curve["name"], "ohm")
        peak = int(np.argmax(z))
        arrows.append((ax, labels, (f[peak], z[peak], float(curve["max"]), row, "ohm"), True))
        ax.set_xlabel(axis_label("frequency", "Hz"))
        ax.set_ylabel(axis_label("|Z|", "Ω"))
        style_axes(ax)
        legend_outside(ax)
    _draw_ledger(fig.add_subplot(grid[:, 1]), limits, rows)
    return _finish(fig, result, arrows)


def _finish(fig: Any, result: Any, arrows: list[tuple]) -> Any:
    """Title with the preferred values; then, the figure laid out, the margin arrows."""
    names = ", ".join(
        f"{k} = {format_quantity(v['preferred'], v['unit'])}" for k, v in result.variables.items()
    )
    fig.suptitle(f"{result.name}: {names}", fontsize=11)
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    placed: dict[Any, list] = {}
    for ax, labels, job, log in arrows:
        boxes = placed.setdefault(ax, [])
        boxes += [label.get_window_extent(renderer) for label in labels]
        _margin_arrow(ax, *job, boxes, log=log)
    return fig


def _draw_bound(ax: Any, x0: float, x1: float, lower, upper, name: str, unit: str) -> list:
    """The bound(s) of one limit: a line, the forbidden side hatched, the name written on
    the line (the labels are returned)."""
    labels = []
    bounds = [b for b in (lower, upper) if b is not None]
    bottom, top = ax.get_ylim()
    bottom, top = min([bottom, *bounds]), max([top, *bounds])
    pad = 0.08 * ((top - bottom) or abs(top) or 1.0)
    reach = (bottom - pad, top + pad) if ax.get_yscale() == "linear" else (bottom, top * 1.5)
    for bound, sign in ((upper, 1), (lower, -1)):
        if bound is None:
            continue
        ax.hlines(bound, x0, x1, color=INK, linewidth=1.1)
        far = reach[1] * 10 if sign > 0 else reach[0] - 10 * pad
        ax.fill_between([x0, x1], bound, far, facecolor="none", edgecolor=INK, hatch=_HATCH,
                        linewidth=0, alpha=0.35)  # fmt: skip
        relation = "≤" if sign > 0 else "≥"
        labels.append(ax.annotate(
            f"{name} {relation} {format_quantity(bound, unit)}", (x1, bound),
            xytext=(-4, 3 if sign > 0 else -3), textcoords="offset points", ha="right",
            va="bottom" if sign > 0 else "top", fontsize=7, color=INK,
        ))  # fmt: skip
    ax.set_ylim(reach)
    return labels


def _draw_time_limit(ax, limit, row, t, y, final, t_end, scale, unit, arrows) -> None:
    name = _label(limit)
    for t0, t1, lower, upper in _spans(limit, final, t_end):
        inside = (t >= t0 / scale) & (t <= t1 / scale)
        if not inside.any():
            continue
        # margins to each bound over the window; the arrow goes where it is least
        candidates = []
        if upper is not None:
            k = int(np.argmax(np.where(inside, y, -np.inf)))
            candidates.append((upper - y[k], k, upper))
        if lower is not None:
            k = int(np.argmin(np.where(inside, y, np.inf)))
            candidates.append((y[k] - lower, k, lower))
        labels = _draw_bound(ax, t0 / scale, t1 / scale, lower, upper, name, unit)
        _, k, bound = min(candidates)
        arrows.append((ax, labels, (t[k], y[k], bound, row, unit), False))


def _margin_arrow(ax, x, y, bound, row, unit, placed, *, log: bool = False) -> None:
    """An arrow from the response's closest point to the bound, labelled with the margin
    (the tuning report's own figure where there is one), clear of the other labels."""
    margin = row["margin"] if row is not None and "margin" in row else abs(bound - y)
    ax.annotate("", xy=(x, bound), xytext=(x, y),
                arrowprops={"arrowstyle": "<->", "color": _WORST, "linewidth": 1.0})  # fmt: skip
    middle = np.sqrt(abs(y * bound)) if log and y > 0 and bound > 0 else (y + bound) / 2
    annotate_apart(ax, (x, middle), _margin_text(margin, row, unit), placed, fontsize=7,
                   color=_WORST)  # fmt: skip


def _margin_text(margin: float, row: dict | None, unit: str) -> str:
    unit = (row or {}).get("unit", unit)
    if unit in ("1", ""):
        return f"margin {100 * margin:.3g} %"
    return f"margin {format_quantity(margin, unit, 3)}"


def _draw_ledger(ax: Any, limits: list[dict], rows: list[dict | None]) -> None:
    names = [_label(lim) for lim in limits]
    y = np.arange(len(names))[::-1]
    nominal = np.array([100 * r["relative_margin"] if r else np.nan for r in rows])
    worst = np.array(
        [100 * r["relative_margin_worst_corner"]
         if r and "relative_margin_worst_corner" in r else np.nan for r in rows]
    )  # fmt: skip
    ax.barh(y, nominal, height=0.55, color=_RESPONSE, alpha=0.85, label="preferred values")
    if np.isfinite(worst).any():
        ax.scatter(worst, y, marker="D", s=36, color=_WORST, zorder=3,
                   label="worst tolerance corner")  # fmt: skip
    shown = np.concatenate([nominal[np.isfinite(nominal)], worst[np.isfinite(worst)], [0.0]])
    reach = max(float(np.abs(shown).max()) * 1.15, 1.0)
    ax.set_xlim(min(-0.25 * reach, float(shown.min()) * 1.15), reach)
    ax.axvspan(ax.get_xlim()[0], 0.0, color=PALETTE[1], alpha=0.08, linewidth=0)
    ax.axvline(0.0, color=INK, linewidth=0.9)
    ax.set_yticks(y, names, fontsize=8)
    ax.set_xlabel(axis_label("margin", "% of the bound"))
    ax.set_title("margins (failing left of 0)", fontsize=10)
    style_axes(ax)
    ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.12), frameon=False, fontsize=8,
              ncols=1)  # fmt: skip


def switched_tuning_figure(result: Any) -> Any:
    """The figure of a tuning over switching transients.

    Left, top: the limited output over one switching period in periodic steady state at
    the preferred values, the turn-off marked. Left, middle: the same around the turn-off
    (time after the edge), the band it sweeps over the tolerance corners inside the peak
    window, the peak window's bound hatched and named, the report's peak marked and its
    margin arrowed, the ring-settling band drawn from ``settled_by``. Left, bottom: the
    ring-settling window close up, its band's edges hatched. Right: the margin ledger of
    every limit, as for the linear tuning. ``result.responses["switched"]`` is called for
    the arrays (:func:`wirestate.tune.switched_figure.figure_data`).
    """
    data = result.responses["switched"]()
    rows = list(getattr(result, "limits", []) or [])
    limits = [{"name": r["name"], "kind": r.get("kind", "")} for r in rows]
    unit = data["unit"]
    name = data["output"]
    ylabel = axis_label(f"{quantity_of(unit)} {name}", unit)
    peak, ring = data.get("peak"), data.get("ring")
    fig = new_figure(12.5, 9.0)
    grid = fig.add_gridspec(3, 2, width_ratios=(2.4, 1.0), height_ratios=(0.8, 1.3, 1.0))
    arrows: list[tuple] = []
    # one period
    ax = fig.add_subplot(grid[0, 0])
    scale, unit_t = time_scale(data["period"])
    ax.plot(data["period_times"] / scale, data["period_values"], color=_RESPONSE,
            linewidth=1.2, label="preferred values")  # fmt: skip
    ax.axvline(data["edge"] / scale, color=INK, linestyle=":", linewidth=1.0,
               label=f"{data['edge_name']}")  # fmt: skip
    ax.set_xlim(0.0, data["period"] / scale)
    ax.set_xlabel(axis_label("time from the carrier start", unit_t))
    ax.set_ylabel(ylabel)
    ax.set_title(f"one switching period in periodic steady state (duty {data['duty']:.4f})",
                 fontsize=10)  # fmt: skip
    style_axes(ax)
    legend_outside(ax)
    # around the turn-off
    ax = fig.add_subplot(grid[1, 0])
    t = data["times"]
    scale, unit_t = time_scale(float(np.max(np.abs(t))))
    if "corner_low" in data:
        ax.fill_between(data["corner_times"] / scale, data["corner_low"], data["corner_high"],
                        color=_RESPONSE, alpha=0.22, linewidth=0,
                        label=f"tolerance corners (envelope, {data['corners']})")  # fmt: skip
    ax.plot(t / scale, data["values"], color=_RESPONSE, linewidth=1.6, label="preferred values")
    ax.axvline(0.0, color=INK, linestyle=":", linewidth=1.0, label=data["edge_name"])
    if ring is not None:
        lo, hi = ring["window"]
        ax.fill_between(np.array([lo, hi]) / scale, ring["final"] - ring["band"],
                        ring["final"] + ring["band"], color=PALETTE[2], alpha=0.6,
                        linewidth=0, label=f"{ring['name']} band")  # fmt: skip
    if peak is not None:
        ax.plot([peak["time"] / scale], [peak["value"]], marker="o", color=_WORST,
                linestyle="none", label=f"peak {format_quantity(peak['value'], unit)}",
                gid="peak")  # fmt: skip
        lo, hi = peak["window"]
        title = f"{peak['name']} (window {format_quantity(hi, 's')})"
        labels = _draw_bound(ax, lo / scale, hi / scale, None, peak["bound"], title, unit)
        row = next((r for r in rows if r["name"] == peak["name"]), None)
        arrows.append((ax, labels, (peak["time"] / scale, peak["value"], peak["bound"], row,
                                    unit), False))  # fmt: skip
    ax.set_xlabel(axis_label(f"time after the {data['edge_name']}", unit_t))
    ax.set_ylabel(ylabel)
    style_axes(ax)
    legend_outside(ax)
    # the ring-settling window close up
    if ring is not None:
        ax = fig.add_subplot(grid[2, 0])
        lo, hi = ring["window"]
        pad = 0.1 * (hi - lo)
        inside = (t >= lo - pad) & (t <= hi + pad)
        ax.plot(t[inside] / scale, data["values"][inside], color=_RESPONSE, linewidth=1.6,
                label="preferred values")  # fmt: skip
        ax.set_xlim((lo - pad) / scale, (hi + pad) / scale)
        final, band = ring["final"], ring["band"]
        ax.set_ylim(final - 3 * band, final + 3 * band)
        labels = _draw_bound(ax, lo / scale, hi / scale, final - band, final + band,
                             ring["name"], unit)  # fmt: skip
        ax.axhline(final, color=INK, linestyle="--", linewidth=0.8,
                   label=f"value at {format_quantity(hi, 's')}")  # fmt: skip
        row = next((r for r in rows if r["name"] == ring["name"]), None)
        when, worst = ring["worst"]
        bound = final + band if worst >= final else final - band
        arrows.append((ax, labels, (when / scale, worst, bound, row, unit), False))
        ax.set_xlabel(axis_label(f"time after the {data['edge_name']}", unit_t))
        ax.set_ylabel(ylabel)
        ax.set_title(f"{ring['name']}: settled within ±{format_quantity(band, unit)} from "
                     f"{format_quantity(lo, 's')}", fontsize=10)  # fmt: skip
        style_axes(ax)
        legend_outside(ax)
    _draw_ledger(fig.add_subplot(grid[:, 1]), limits, rows)
    return _finish(fig, result, arrows)


def plot_tuning(result: Any, path: str | Path) -> Path:
    """Draw :func:`tuning_figure` of ``result`` to a PNG or SVG file, atomically.

    Returns the path written.
    """
    return save_figure(tuning_figure(result), Path(path), dpi=110)


__all__ = ["plot_tuning", "switched_tuning_figure", "tuning_figure"]
