"""Figures of a tolerance Monte Carlo and of a design sweep.

Yield: one panel per limit with the histogram of its margin (the failing side, margin
below zero, tinted), and a last panel with each part's rank correlation with every
limit's margin as grouped horizontal bars. Sweep (two parts): one panel per limit with
filled contours of its margin on a diverging map centred on zero, the zero contour drawn
thick, and the region where every limit holds hatched; one part: every margin against
the part value with the feasible stretch tinted. Axes carry the parts' units.
matplotlib (Agg) is imported inside the functions only.
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.report.figure import PALETTE, legend_outside, save_figure
from wirestate.units import format_quantity

_FAIL = "#c8553d"
_PASS = "#3d7ea6"
_FEASIBLE = "#2a9d8f"
_UNIT = {"ohm": "Ω", "F": "F", "H": "H", "1": "", "V": "V", "A": "A", "J": "J", "1/s": "1/s"}


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _margin_label(limit: dict[str, Any]) -> str:
    unit = _UNIT.get(limit["unit"], limit["unit"])
    return f"margin of {limit['name']}" + (f" ({unit})" if unit else " (fraction)")


def plot_yield(result: Any, path: str | Path) -> Path:
    """Draw a :class:`~wirestate.explore.YieldResult` to ``path`` (PNG or SVG), atomically."""
    plt = _pyplot()
    limits = result.limits
    panels = len(limits) + 1
    cols = 2
    rows = math.ceil(panels / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(10.0, 2.8 * rows), squeeze=False)
    flat = axes.ravel()
    for j, (ax, limit) in enumerate(zip(flat, limits, strict=False)):
        m = result.margins[:, j]
        m = m[np.isfinite(m)]
        if m.size:
            counts, edges = np.histogram(m, bins=40)
            centres = 0.5 * (edges[:-1] + edges[1:])
            colours = [_FAIL if c < 0 else _PASS for c in centres]
            ax.bar(centres, counts, width=np.diff(edges), color=colours, edgecolor="none")
            if edges[0] < 0:
                ax.axvspan(edges[0], min(0.0, edges[-1]), color=_FAIL, alpha=0.08)
            # the zero line only where it does not squash the histogram into one bar
            if edges[0] - 0.25 * (edges[-1] - edges[0]) <= 0.0:
                ax.axvline(0.0, color="black", lw=0.8)
            else:
                ax.text(0.02, 0.9, "every margin > 0", transform=ax.transAxes, fontsize=7)
        ax.set_xlabel(_margin_label(limit))
        ax.set_ylabel("samples")
        ax.set_title(f"{limit['name']}: {result.failures[limit['name']]} fail", fontsize=9)
    ax = flat[len(limits)]
    names = list(result.parts)
    height = 0.8 / max(len(limits), 1)
    for j, limit in enumerate(limits):
        rho = {d["part"]: d["rank_correlation"] for d in result.drivers[limit["name"]]}
        y = np.arange(len(names)) + j * height
        ax.barh(y, [rho.get(n, 0.0) for n in names], height=height, label=limit["name"],
                color=PALETTE[j % len(PALETTE)])  # fmt: skip
    ax.set_yticks(np.arange(len(names)) + 0.4 - height / 2, names)
    ax.set_xlim(-1, 1)
    ax.axvline(0.0, color="black", lw=0.8)
    ax.set_xlabel("Spearman rank correlation with the margin")
    legend_outside(ax)
    for extra in flat[panels:]:
        extra.set_visible(False)
    low, high = result.interval
    fig.suptitle(
        f"{result.name}: yield {100 * result.yield_fraction:.2f} % "
        f"[{100 * low:.2f}, {100 * high:.2f}] % ({result.samples} samples, "
        f"{result.distribution})",
        fontsize=10,
    )
    fig.tight_layout()
    return save_figure(fig, path)


def _axis_label(axis: dict[str, Any]) -> str:
    return f"{axis['part']} ({_UNIT.get(axis['unit'], axis['unit'])})"


def plot_sweep(result: Any, path: str | Path) -> Path:
    """Draw a :class:`~wirestate.explore.SweepResult` to ``path`` (PNG or SVG), atomically."""
    plt = _pyplot()
    if len(result.axes) == 1:
        return _plot_line(plt, result, path)
    limits = result.limits
    cols = 2 if len(limits) > 1 else 1
    rows = math.ceil(len(limits) / cols)
    fig, axes = plt.subplots(rows, cols, figsize=(5.2 * cols, 4.0 * rows), squeeze=False)
    ax_x, ax_y = result.axes
    X, Y = np.meshgrid(ax_x["values"], ax_y["values"], indexing="ij")
    for j, (ax, limit) in enumerate(zip(axes.ravel(), limits, strict=False)):
        M = np.ma.masked_invalid(result.margins[..., j])
        span = float(np.nanmax(np.abs(M))) if M.count() else 1.0
        levels = np.linspace(-span, span, 21) if span > 0 else 21
        filled = ax.contourf(X, Y, M, levels=levels, cmap="PuOr", extend="both")
        if np.nanmin(M) < 0 < np.nanmax(M):
            ax.contour(X, Y, M, levels=[0.0], colors="black", linewidths=1.6)
        ax.contourf(X, Y, result.feasible.astype(float), levels=[0.5, 1.5], colors="none",
                    hatches=["//"])  # fmt: skip
        ax.contour(X, Y, result.feasible.astype(float), levels=[0.5], colors=_FEASIBLE,
                   linewidths=1.2, linestyles="--")  # fmt: skip
        fig.colorbar(filled, ax=ax, label=_margin_label(limit))
        if ax_x["scale"] == "log":
            ax.set_xscale("log")
            ax.set_yscale("log")
        ax.set_xlabel(_axis_label(ax_x))
        ax.set_ylabel(_axis_label(ax_y))
        ax.set_title(f"{limit['name']} (black: zero margin)", fontsize=9)
    for extra in axes.ravel()[len(limits) :]:
        extra.set_visible(False)
    fig.suptitle(
        f"{result.name}: hatched where every limit holds "
        f"({int(result.feasible.sum())} of {result.feasible.size} points)",
        fontsize=10,
    )
    fig.tight_layout()
    return save_figure(fig, path)


def _plot_line(plt: Any, result: Any, path: str | Path) -> Path:
    axis = result.axes[0]
    x = np.asarray(axis["values"])
    fig, ax = plt.subplots(figsize=(8.0, 4.0))
    for j, limit in enumerate(result.limits):
        ax.plot(x, result.relative[:, j], label=limit["name"], color=PALETTE[j % len(PALETTE)])
    ax.axhline(0.0, color="black", lw=0.8)
    feasible = result.feasible
    for k in range(len(x) - 1):
        if feasible[k] and feasible[k + 1]:
            ax.axvspan(x[k], x[k + 1], color=_FEASIBLE, alpha=0.15, lw=0)
    if axis["scale"] == "log":
        ax.set_xscale("log")
    ax.set_xlabel(_axis_label(axis))
    ax.set_ylabel("margin / |bound|")
    ax.set_title(
        f"{result.name}: every limit holds in the tinted range "
        f"({format_quantity(x[0], axis['unit'])} to {format_quantity(x[-1], axis['unit'])})",
        fontsize=9,
    )
    legend_outside(ax)
    fig.tight_layout()
    return save_figure(fig, path)
