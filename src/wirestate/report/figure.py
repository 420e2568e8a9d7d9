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
