"""Saving matplotlib figures: format by suffix, written atomically."""

from __future__ import annotations

import io
from pathlib import Path
from typing import Any

from wirestate.atomic import write_atomic
from wirestate.errors import WirestateError

FORMATS = ("png", "svg")


def figure_format(path: str | Path) -> str:
    """``png`` or ``svg`` from the file suffix; any other suffix is a user error."""
    suffix = Path(path).suffix.lower().lstrip(".")
    if suffix not in FORMATS:
        raise WirestateError(
            "invalid_field",
            f"a figure is written as PNG or SVG; the name must end in .png or .svg, got "
            f"{Path(path).name!r}",
            file=str(path),
        )
    return suffix


def save_figure(fig: Any, path: str | Path, *, dpi: int = 120) -> Path:
    """Render ``fig`` in the format its suffix names and write it atomically; closes ``fig``."""
    path = Path(path)
    try:
        buffer = io.BytesIO()
        fig.savefig(buffer, format=figure_format(path), dpi=dpi)
        try:
            write_atomic(path, buffer.getvalue())
        except OSError as exc:
            raise WirestateError(
                "file_not_found", f"cannot write: {exc.strerror or exc}", file=str(path)
            ) from None
    finally:
        if getattr(fig.canvas, "manager", None) is not None:
            import matplotlib.pyplot as plt  # only figures made through pyplot need closing

            plt.close(fig)
    return path


# -- the look shared by every figure ------------------------------------------------------

#: line colours of our own, in order of use. Chosen by a search that maximises the least
#: CIELAB distance between any two of them under normal vision and under simulated
#: protanopia, deuteranopia and tritanopia, with lightness 30-68 and chroma <= 62 (legible
#: on white, not garish) and away from well-known plotting palettes; tests/report/
#: test_figure_style.py checks the distances
PALETTE = ("#1f41a0", "#7f2c00", "#3fb15d", "#d284e7", "#65395a", "#8e9e9e")
#: dash patterns that go with the colours, so that a print in grey still tells lines apart
DASHES = ("-", "--", "-.", ":", (0, (5, 1, 1, 1)), (0, (1, 1)))
#: limits, bounds and other marks that are not data
INK = "#2b2b2b"
GRID = "#dedede"

#: how a unit key is written on an axis
_UNIT_TEXT = {
    "ohm": "Ω",
    "ohm_gain": "Ω",
    "1": "",
    "N*m": "N·m",
    "kg*m^2": "kg·m²",
    "N*m*s/rad": "N·m·s/rad",
    "N*m/rad": "N·m/rad",
    "N*s/m": "N·s/m",
    "V*s/rad": "V·s/rad",
    "V*s/m": "V·s/m",
}
#: the quantity a unit measures, for axis labels
QUANTITY = {
    "V": "voltage",
    "A": "current",
    "W": "power",
    "J": "energy",
    "ohm": "impedance",
    "S": "admittance",
    "F": "capacitance",
    "H": "inductance",
    "s": "time",
    "Hz": "frequency",
    "rad/s": "angular speed",
    "rad": "angle",
    "N*m": "torque",
    "N": "force",
    "m": "position",
    "m/s": "velocity",
    "1/s": "rate",
}


def unit_text(unit: str) -> str:
    """A unit key as it is printed: ``ohm`` -> ``Ω``, ``N*m`` -> ``N·m``, ``1`` -> ``""``."""
    return _UNIT_TEXT.get(unit, unit)


def axis_label(quantity: str, unit: str = "") -> str:
    """``"voltage (V)"``: the one unit style of every figure, the unit in parentheses after
    the quantity (ISO 80000-1 discourages square brackets around a unit, which denote "the
    unit of" a quantity)."""
    shown = unit_text(unit)
    return f"{quantity} ({shown})" if shown else quantity


def quantity_of(unit: str) -> str:
    """The quantity a unit measures (``V`` -> ``voltage``); ``value`` when unknown."""
    return QUANTITY.get(unit, "value")


#: time units for axes, by the span they suit
_TIME_SCALES = ((1e-9, "ns"), (1e-6, "µs"), (1e-3, "ms"), (1.0, "s"))


def time_scale(span: float) -> tuple[float, str]:
    """``(seconds per unit, unit)`` for a time axis spanning ``span`` seconds."""
    return next(((s, u) for s, u in _TIME_SCALES if span < 1000 * s), (1.0, "s"))


def style_axes(ax: Any) -> None:
    """Grid behind the data, no top or right frame line."""
    ax.grid(True, which="both", color=GRID, linewidth=0.6)
    ax.set_axisbelow(True)
    ax.spines[["top", "right"]].set_visible(False)


def legend_outside(ax: Any, **options: Any) -> Any:
    """The legend to the right of the axes, never over the curves."""
    return ax.legend(
        loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0, frameon=False,
        fontsize=8, **options,
    )  # fmt: skip


def new_figure(width: float, height: float) -> Any:
    """A matplotlib ``Figure`` on an Agg canvas (no pyplot state, no display)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def annotate_apart(
    ax: Any,
    xy: tuple[float, float],
    text: str,
    placed: list[Any],
    *,
    dx: float = 5.0,
    tries: int = 12,
    **style: Any,
) -> Any | None:
    """Write ``text`` beside the data point ``xy``, moved up or down (in steps of one line)
    until its box overlaps none of the boxes in ``placed``, leaves the axes' frame at the
    bottom or top, or ``tries`` positions are used up (then nothing is written).

    The figure must have been laid out (``fig.canvas.draw()``) so that display boxes are
    final. Returns the annotation, whose box is appended to ``placed``, or ``None``.
    """
    renderer = ax.figure.canvas.get_renderer()
    frame = ax.get_window_extent(renderer)
    for step in range(tries):
        dy = (8 + 11 * (step // 2)) * (1 if step % 2 == 0 else -1)
        label = ax.annotate(text, xy, textcoords="offset points", xytext=(dx, dy),
                            va="center", annotation_clip=False, **style)  # fmt: skip
        label.set_in_layout(False)
        box = label.get_window_extent(renderer)
        fits = frame.y0 <= box.y0 and box.y1 <= frame.y1
        if fits and not any(box.overlaps(other) for other in placed):
            placed.append(box)
            return label
        label.remove()
    return None
