"""Time-response figure of a simulation: one panel per unit, shared time axis."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from wirestate.errors import SimulationError
from wirestate.report.figure import (
    DASHES,
    PALETTE,
    axis_label,
    legend_outside,
    quantity_of,
    save_figure,
    style_axes,
    time_scale,
)


def plot_simulation(result: Any, path: str | Path, *, title: str | None = None) -> Path:
    """Draw the outputs of a :class:`~wirestate.simulate.SimulationResult` to a PNG file.

    Outputs that share a unit share a panel; the time axis is scaled to µs, ms or s. The
    file is written atomically (temporary file in the same directory, then ``os.replace``).
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    if not directory.is_dir():
        raise SimulationError(
            "file_not_found", "the directory for the plot does not exist", file=str(path)
        )
    groups: dict[str, list[int]] = {}
    for i, name in enumerate(result.output_names):
        groups.setdefault(result.units.get(name, "") or "-", []).append(i)
    if not groups:
        groups["-"] = []
    span = float(result.time[-1]) if len(result.time) else 1.0
    scale, label = time_scale(span)
    fig, axes = plt.subplots(
        len(groups), 1, sharex=True, figsize=(9.0, 1.2 + 2.2 * len(groups)), squeeze=False,
        layout="constrained",
    )  # fmt: skip
    t = result.time / scale
    for ax, (unit, rows) in zip(axes[:, 0], groups.items(), strict=True):
        for n, i in enumerate(rows):
            ax.plot(t, result.outputs[i], color=PALETTE[n % len(PALETTE)], linewidth=1.3,
                    linestyle=DASHES[(n // len(PALETTE)) % len(DASHES)],
                    label=result.output_names[i])  # fmt: skip
        ax.set_ylabel(axis_label(quantity_of(unit), unit) if unit != "-" else "value")
        style_axes(ax)
        if rows:
            legend_outside(ax)
    _mark_events(axes[:, 0], getattr(result, "events", None) or [], scale)
    axes[-1, 0].set_xlabel(axis_label("time", label))
    fig.suptitle(title or result.name, x=0.02, ha="left", fontsize=11)
    save_figure(fig, path, dpi=110)
    return path


def _mark_events(axes: Any, events: list, scale: float) -> None:
    """Switching events as short ticks along the top of every panel, one colour per part
    (turn-on ticks full height, turn-off ticks half height), named in the top legend."""
    if not events:
        return
    parts = list(dict.fromkeys(e.part for e in events))
    for ax in axes:
        for n, part in enumerate(parts):
            colour = PALETTE[(n + 2) % len(PALETTE)]
            label = f"{part} on / off" if ax is axes[0] else None
            for after, low in (("on", 0.94), ("off", 0.97)):
                times = [e.time / scale for e in events if e.part == part and e.after == after]
                if times:
                    ax.vlines(times, low, 1.0, transform=ax.get_xaxis_transform(),
                              colors=colour, linewidth=0.8, alpha=0.9, label=label)  # fmt: skip
                    label = None
    legend_outside(axes[0])
