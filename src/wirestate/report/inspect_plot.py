"""The ``inspect --plot`` figure: a mode map and Bode magnitude/phase of a block or loop.

The mode map puts every mode at its natural frequency (logarithmic axis, Hz) and damping
ratio, so a 10 Hz mechanical mode and a 10 kHz filter resonance are both read at a glance;
a plot of the s-plane on linear axes squeezes the slow one onto the origin. Each mode is
labelled with its frequency, labels are placed so that none overlaps another. Magnitudes
are drawn on one axis per ratio of units (V/V, Ω, S...), never two units on one axis.
matplotlib (Agg back end, no display needed) is imported inside the functions only.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import ModelFileError, WirestateError
from wirestate.report.figure import (
    DASHES,
    INK,
    PALETTE,
    annotate_apart,
    axis_label,
    figure_format,
    legend_outside,
    new_figure,
    save_figure,
    style_axes,
    unit_text,
)
from wirestate.report.signature import as_linear_model, frequency_response, sorted_poles
from wirestate.report.tables import clean_poles
from wirestate.units import format_quantity

#: at most this many input->output pairs are drawn when none are chosen
MAX_DEFAULT_PAIRS = 6
#: at most this many modes carry a label (the least damped first)
MAX_MODE_LABELS = 14


def bode_frequencies(poles: np.ndarray, points_per_decade: int = 60) -> np.ndarray:
    """Frequencies (rad/s) for a Bode plot: two decades beyond the slowest and fastest
    modes, plus a dense cluster around each lightly damped mode so resonance peaks are
    drawn at their true height (half-power width ``2 zeta wn``; common practice, no source).
    """
    poles = np.asarray(poles, dtype=complex)
    w = np.abs(poles[np.abs(poles) > 0])
    lo, hi = (float(w.min()) / 100, float(w.max()) * 100) if w.size else (0.1, 1e4)
    decades = math.log10(hi / lo)
    grid = [np.geomspace(lo, hi, max(int(points_per_decade * decades), 50))]
    for p in poles:
        wn = abs(p)
        if wn == 0:
            continue
        zeta = -p.real / wn
        if 0 <= zeta < 0.3:
            width = max(zeta, 1e-4) * wn
            grid.append(wn + width * np.linspace(-4, 4, 41))
    out = np.unique(np.concatenate(grid))
    return out[out > 0]


def parse_pair(text: str) -> tuple[str, str]:
    """``"Vs->v_bus"`` or ``"Vs:v_bus"`` -> ``("Vs", "v_bus")`` (for a command-line option)."""
    for separator in ("->", ":"):
        inp, found, out = text.partition(separator)
        if found and inp.strip() and out.strip():
            return inp.strip(), out.strip()
    raise WirestateError(
        "invalid_field",
        f"expected INPUT->OUTPUT or INPUT:OUTPUT, got {text!r}",
        location=("plot",),
    )


def _pairs(model: Any, pairs: Sequence[tuple[str, str]] | None) -> list[tuple[int, int]]:
    if pairs is None:
        chosen = [(j, i) for j in range(len(model.inputs)) for i in range(len(model.outputs))]
        return chosen[:MAX_DEFAULT_PAIRS]
    out = []
    for pair in pairs:
        if len(pair) != 2:
            raise ModelFileError(
                "invalid_field",
                f"expected an input->output pair, got {pair!r}",
                location=("plot",),
            )
        inp, outp = pair
        if inp not in model.inputs:
            raise ModelFileError(
                "unknown_signal",
                f"no input {inp!r}; inputs are {', '.join(model.inputs) or '(none)'}",
                location=("plot", inp),
            )
        if outp not in model.outputs:
            raise ModelFileError(
                "unknown_signal",
                f"no output {outp!r}; outputs are {', '.join(model.outputs) or '(none)'}",
                location=("plot", outp),
            )
        out.append((model.inputs.index(inp), model.outputs.index(outp)))
    return out


def magnitude_axis(units: dict[str, str], out: str, inp: str) -> tuple[str, str]:
    """``(key, y-label)`` of the magnitude axis of one input->output pair: pairs share an
    axis only when their output and input units are the same."""
    a, b = units.get(out, ""), units.get(inp, "")
    if not a or not b:
        return "?", "gain (dB of the SI ratio; units not known)"
    if (a, b) == ("V", "A"):
        return "ohm", axis_label("|Z|", "dB re 1 Ω")
    if (a, b) == ("A", "V"):
        return "S", axis_label("|Y|", "dB re 1 S")
    ratio = f"{unit_text(a)}/{unit_text(b)}"
    return f"{a}/{b}", axis_label("|gain|", f"dB re 1 {ratio}")


def inspect_figure(
    block: Any,
    pairs: Sequence[tuple[str, str]] | None = None,
    *,
    poles: np.ndarray | None = None,
    name: str | None = None,
) -> Any:
    """The mode map and Bode plot of ``block`` as a matplotlib ``Figure``.

    Parameters
    ----------
    block
        A :class:`wirestate.lti.CircuitBlock`, a continuous ``control.StateSpace``, anything
        with ``A, B, C, D`` and signal names, or ``None`` (modes only).
    pairs
        ``(input, output)`` names to draw; by default every pair, at most
        :data:`MAX_DEFAULT_PAIRS`.
    poles
        Poles to map (rad/s); by default the eigenvalues of ``block``'s ``A``.
    name
        Title; by default the block's name.
    """
    model = as_linear_model(block) if block is not None else None
    units = dict(getattr(block, "units", {}) or {})
    chosen = _pairs(model, pairs) if model is not None else []
    if poles is None:
        poles = sorted_poles(model.A) if model is not None else np.zeros(0, dtype=complex)
    title = name or (model.name if model is not None else "")

    H = omegas = None
    zero: list[tuple[int, int]] = []
    if chosen:
        finite = np.asarray(poles, dtype=complex)
        omegas = bode_frequencies(finite[np.isfinite(finite)])
        H = frequency_response(model, omegas)
        # a pair that is zero at every frequency (no path from the input to the output)
        # has no magnitude to draw on a dB axis; it is named in a note instead
        zero = [(j, i) for j, i in chosen if not np.any(H[:, i, j])]
        chosen = [pair for pair in chosen if pair not in zero]
    groups: dict[str, tuple[str, list[tuple[int, int]]]] = {}
    for j, i in chosen:
        key, label = magnitude_axis(units, model.outputs[i], model.inputs[j])
        groups.setdefault(key, (label, []))[1].append((j, i))
    rows = max(len(groups), 1) + 1
    fig = new_figure(12.0, max(5.6, 1.9 * rows + 1.2))
    grid = fig.add_gridspec(rows, 2, width_ratios=(1.0, 1.35))
    ax_modes = fig.add_subplot(grid[:, 0])
    fig.suptitle(f"{title}: modes and frequency response", fontsize=12)
    points = _draw_modes(ax_modes, np.asarray(poles, dtype=complex))

    first = fig.add_subplot(grid[0, 1])
    mags = [first] + [fig.add_subplot(grid[r, 1], sharex=first) for r in range(1, rows - 1)]
    ax_phase = fig.add_subplot(grid[rows - 1, 1], sharex=first)
    if zero:
        names = ", ".join(f"{model.inputs[j]} → {model.outputs[i]}" for j, i in zero)
        ax_phase.set_title(f"zero at every frequency: {names}", fontsize=8, loc="left")
    if not chosen:
        first.text(0.5, 0.5, "no frequency response to draw", ha="center",
                   transform=first.transAxes)  # fmt: skip
        first.set_axis_off()
        ax_phase.set_xticks([])
        ax_phase.set_yticks([])
        ax_phase.spines[:].set_visible(False)
        _label_modes(fig, ax_modes, points)
        return fig
    hertz = omegas / (2 * math.pi)
    k = 0
    for ax, (label, members) in zip(mags, groups.values(), strict=True):
        for j, i in members:
            response = H[:, i, j]
            style = {"color": PALETTE[k % len(PALETTE)], "linestyle": DASHES[j % len(DASHES)],
                     "linewidth": 1.4}  # fmt: skip
            text = f"{model.inputs[j]} → {model.outputs[i]}"
            with np.errstate(divide="ignore"):
                ax.semilogx(hertz, 20 * np.log10(np.abs(response)), label=text, **style)
            ax_phase.semilogx(hertz, np.degrees(np.unwrap(np.angle(response))), **style)
            k += 1
        ax.set_ylabel(label)
        legend_outside(ax)
        style_axes(ax)
        ax.tick_params(labelbottom=False)
    first.set_title("frequency response")
    ax_phase.set_ylabel(axis_label("phase", "°"))
    ax_phase.set_xlabel(axis_label("frequency", "Hz"))
    style_axes(ax_phase)
    # labels last: they are placed in display space, which every axis added above moves
    _label_modes(fig, ax_modes, points)
    return fig


def plot_inspect(
    block: Any,
    path: str | Path,
    pairs: Sequence[tuple[str, str]] | None = None,
    *,
    poles: np.ndarray | None = None,
    name: str | None = None,
) -> Path:
    """Draw :func:`inspect_figure` into a PNG or SVG file (by suffix), atomically.

    Returns the path written.
    """
    path = Path(path)
    figure_format(path)  # refuse an unknown suffix before any drawing
    return save_figure(inspect_figure(block, pairs, poles=poles, name=name), path, dpi=130)


def _mode_points(poles: np.ndarray) -> tuple[list[tuple[float, float, bool]], int, int]:
    """``(frequency in Hz, damping ratio, is a pair)`` per mode, and the counts of poles at
    s = 0 and of pure delays (a sampled loop's z = 0), which a log axis cannot show."""
    points, origin, delays = [], 0, 0
    for p in clean_poles(poles):
        if not np.isfinite(p):
            delays += 1
        elif p == 0:
            origin += 1
        elif p.imag >= 0:
            wn = abs(p)
            points.append((wn / (2 * math.pi), -p.real / wn, bool(p.imag > 0)))
    return points, origin, delays


def _draw_modes(ax: Any, poles: np.ndarray) -> list[tuple[float, float, bool]]:
    """The mode map without its labels; returns the points to label once the figure is
    complete (:func:`_label_modes`)."""
    ax.set_title("modes", pad=22)
    ax.set_xlabel(axis_label("natural frequency", "Hz"))
    ax.set_ylabel("damping ratio")
    style_axes(ax)
    points, origin, delays = _mode_points(poles)
    if not points:
        ax.text(0.5, 0.5, "no modes (a static block)" if not origin else "", ha="center",
                transform=ax.transAxes)  # fmt: skip
    else:
        f = np.array([p[0] for p in points])
        z = np.array([p[1] for p in points])
        pair = np.array([p[2] for p in points])
        from matplotlib.ticker import LogLocator, NullFormatter

        ax.set_xscale("log")
        # whole decades at both ends, so every major tick is a labelled power of ten
        ax.set_xlim(
            10 ** math.floor(math.log10(f.min() / 3)), 10 ** math.ceil(math.log10(f.max() * 3))
        )
        ax.xaxis.set_major_locator(LogLocator(base=10))
        ax.xaxis.set_minor_formatter(NullFormatter())
        low = min(-0.1, float(z.min()) - 0.1)
        ax.set_ylim(low, 1.12)
        ax.axhspan(low, 0.0, color=PALETTE[1], alpha=0.08, linewidth=0)
        ax.axhline(0.0, color=INK, linewidth=0.8)
        ax.text(0.99, 0.02, "unstable below 0", transform=ax.transAxes, ha="right",
                va="bottom", fontsize=7, color=INK)  # fmt: skip
        ax.scatter(f[pair], z[pair], marker="o", s=42, color=PALETTE[0], zorder=3,
                   label="complex pair")  # fmt: skip
        ax.scatter(f[~pair], z[~pair], marker="s", s=34, color=PALETTE[2], zorder=3,
                   label="real pole")  # fmt: skip
        ax.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), ncols=2, frameon=False,
                  fontsize=8, borderaxespad=0.2)  # fmt: skip
    hidden = []
    if origin:
        hidden.append(f"{origin} pole{'s' if origin > 1 else ''} at s = 0")
    if delays:
        hidden.append(f"{delays} one-sample delay{'s' if delays > 1 else ''} (z = 0)")
    if hidden:
        ax.text(0.01, 0.02, "; ".join(hidden) + ": not on a log axis", transform=ax.transAxes,
                fontsize=7, color=INK)  # fmt: skip
    return points


def _label_modes(fig: Any, ax: Any, points: list[tuple[float, float, bool]]) -> None:
    """One label per mode (the least damped first, at most :data:`MAX_MODE_LABELS`), none
    overlapping another. Call it when every axis of the figure exists."""
    if not points:
        return
    fig.canvas.draw()  # lay the axes out first: the labels are placed in display space
    order = sorted(range(len(points)), key=lambda k: points[k][1])[:MAX_MODE_LABELS]
    placed: list[Any] = []
    for k in sorted(order, key=lambda k: points[k][0]):
        f, zeta, pair = points[k]
        text = format_quantity(f, "Hz", 3) + (f", ζ {zeta:.2f}" if pair else "")
        annotate_apart(ax, (f, zeta), text, placed, fontsize=7, color=INK)


def plot_inspection(
    found: Any, path: str | Path, pairs: Sequence[tuple[str, str]] | None = None
) -> Path:
    """Draw an :class:`~wirestate.report.describe.Inspection` (any file kind) to ``path``."""
    return plot_inspect(found.linear, path, pairs=pairs, poles=found.poles, name=found.name)
