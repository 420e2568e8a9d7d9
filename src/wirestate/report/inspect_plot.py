"""The ``inspect --plot`` figure: pole map and Bode magnitude/phase of a block.

matplotlib (Agg back end, no display needed) is imported inside :func:`plot_inspect` only,
so nothing else in wirestate pays for it.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import ModelFileError, WirestateError
from wirestate.report.figure import figure_format, save_figure
from wirestate.report.signature import as_linear_model, frequency_response, sorted_poles

#: at most this many input->output pairs are drawn when none are chosen
MAX_DEFAULT_PAIRS = 6

# colours of our own: a dark slate for poles, then a muted cycle for the Bode traces
_POLE_COLOUR = "#2f4858"
_LINE_STYLES = ("-", "--", "-.", ":")
_TRACE_COLOURS = ("#c8553d", "#28666e", "#f2a541", "#5b5f97", "#7c9885", "#b5838d")


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


def _ratio_unit(units: dict[str, str], out: str, inp: str) -> str:
    a, b = units.get(out, ""), units.get(inp, "")
    if not a or not b:
        return ""
    return "1" if a == b else f"{a}/{b}"


def plot_inspect(
    block: Any,
    path: str | Path,
    pairs: Sequence[tuple[str, str]] | None = None,
    *,
    poles: np.ndarray | None = None,
    name: str | None = None,
) -> Path:
    """Draw the pole map and the Bode plot of a block into a PNG or SVG file.

    Parameters
    ----------
    block
        A :class:`wirestate.lti.CircuitBlock` (or a continuous ``control.StateSpace``).
    path
        Output file; the suffix (``.png`` or ``.svg``) picks the format. Written
        atomically (temporary file in the same folder, then rename).
    pairs
        ``(input, output)`` names to draw; by default every pair, at most
        :data:`MAX_DEFAULT_PAIRS`.

    Returns
    -------
    Path
        The file written. The pole map shows the s-plane in rad/s (a symmetric-log scale
        when the poles span more than three decades); the Bode plot shows magnitude in dB
        (of the SI ratio output/input) and phase in degrees against frequency in Hz.
    """
    path = Path(path)
    figure_format(path)  # refuse an unknown suffix before any drawing
    # an Agg canvas on a bare Figure: no pyplot, no global back-end switch, no display
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    model = as_linear_model(block) if block is not None else None
    units = dict(getattr(block, "units", {}) or {})
    chosen = _pairs(model, pairs) if model is not None else []
    if poles is None:
        poles = sorted_poles(model.A)
    poles = np.asarray(poles, dtype=complex)
    poles = poles[np.isfinite(poles)]
    title = name or model.name

    fig = Figure(figsize=(11.0, 6.2), layout="constrained")
    grid = fig.add_gridspec(2, 2, width_ratios=(1.0, 1.35))
    ax_poles = fig.add_subplot(grid[:, 0])
    ax_mag = fig.add_subplot(grid[0, 1])
    ax_phase = fig.add_subplot(grid[1, 1], sharex=ax_mag)
    FigureCanvasAgg(fig)
    fig.suptitle(f"{title}: poles and frequency response", fontsize=12)

    _draw_poles(ax_poles, poles)

    omegas = bode_frequencies(poles)
    H = frequency_response(model, omegas) if chosen else None
    hertz = omegas / (2 * math.pi)
    for k, (j, i) in enumerate(chosen):
        response = H[:, i, j]
        colour = _TRACE_COLOURS[k % len(_TRACE_COLOURS)]
        style = _LINE_STYLES[j % len(_LINE_STYLES)]  # one dash pattern per input
        unit = _ratio_unit(units, model.outputs[i], model.inputs[j])
        label = f"{model.inputs[j]} → {model.outputs[i]}" + (f" [{unit}]" if unit else "")
        with np.errstate(divide="ignore"):
            ax_mag.semilogx(
                hertz, 20 * np.log10(np.abs(response)), color=colour, linestyle=style, label=label
            )
        ax_phase.semilogx(
            hertz, np.degrees(np.unwrap(np.angle(response))), color=colour, linestyle=style
        )
    ax_mag.set_ylabel("magnitude [dB re 1 SI unit of output/input]")
    ax_phase.set_ylabel("phase [degrees]")
    ax_phase.set_xlabel("frequency [Hz]")
    ax_mag.set_title("Bode plot")
    for ax in (ax_mag, ax_phase):
        ax.grid(True, which="both", color="#d9d9d9", linewidth=0.6)
    if chosen:
        ax_mag.legend(fontsize=8, loc="best", frameon=False)
    else:
        ax_mag.text(0.5, 0.5, "no inputs or outputs", ha="center", transform=ax_mag.transAxes)

    save_figure(fig, path, dpi=130)
    return path


def _draw_poles(ax: Any, poles: np.ndarray) -> None:
    ax.set_title("pole map")
    ax.axhline(0.0, color="#8a8a8a", linewidth=0.8)
    ax.axvline(0.0, color="#8a8a8a", linewidth=0.8)
    if poles.size:
        ax.scatter(
            poles.real, poles.imag, marker="x", s=60, color=_POLE_COLOUR, zorder=3, label="poles"
        )
        mags = np.abs(poles)
        nonzero = mags[mags > 0]
        if nonzero.size and nonzero.max() / nonzero.min() > 1e3:
            # poles over many decades (stiff circuit + mechanics): symmetric log axes
            threshold = float(nonzero.min())
            ax.set_xscale("symlog", linthresh=threshold)
            ax.set_yscale("symlog", linthresh=threshold)
        else:
            from matplotlib.ticker import MaxNLocator

            reach = float(mags.max()) * 1.15 if mags.max() > 0 else 1.0
            ax.set_xlim(-reach, reach * 0.15)
            ax.set_ylim(-reach, reach)
            ax.xaxis.set_major_locator(MaxNLocator(5))
            ax.ticklabel_format(style="sci", scilimits=(-3, 3))
        for p in poles:
            if p.imag >= 0 and abs(p) > 0:
                zeta = -p.real / abs(p)
                ax.annotate(
                    f"ωn={abs(p):.3g}, ζ={zeta:.2f}",
                    (p.real, p.imag),
                    textcoords="offset points",
                    xytext=(6, 6),
                    fontsize=7,
                    color=_POLE_COLOUR,
                )
    else:
        ax.text(0.5, 0.5, "no states (static block)", ha="center", transform=ax.transAxes)
    ax.set_xlabel("real part σ [rad/s]")
    ax.set_ylabel("imaginary part ω [rad/s]")
    ax.grid(True, color="#e3e3e3", linewidth=0.6)


def plot_inspection(
    found: Any, path: str | Path, pairs: Sequence[tuple[str, str]] | None = None
) -> Path:
    """Draw an :class:`~wirestate.report.describe.Inspection` (any file kind) to ``path``."""
    return plot_inspect(found.linear, path, pairs=pairs, poles=found.poles, name=found.name)
