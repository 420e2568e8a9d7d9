"""Plain-text tables and JSON for compiled blocks."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from wirestate.lti import LARGE_BLOCK_STATES, CircuitBlock, extreme_poles, modes


def table(headers: Sequence[str], rows: Sequence[Sequence[Any]], *, indent: str = "  ") -> str:
    """A left/right aligned text table (numbers right-aligned)."""
    cells = [[str(h) for h in headers]] + [[_cell(v) for v in row] for row in rows]
    widths = [max(len(r[i]) for r in cells) for i in range(len(headers))]
    numeric = [
        all(_is_number(row[i]) for row in rows) if rows else False for i in range(len(headers))
    ]
    lines = []
    for k, row in enumerate(cells):
        parts = [
            c.rjust(w) if numeric[i] and k > 0 else c.ljust(w)
            for i, (c, w) in enumerate(zip(row, widths, strict=True))
        ]
        lines.append(indent + "  ".join(parts).rstrip())
        if k == 0:
            lines.append(indent + "  ".join("-" * w for w in widths))
    return "\n".join(lines)


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float | np.floating | np.integer) and not isinstance(value, bool)


def _cell(value: Any) -> str:
    if isinstance(value, float | np.floating):
        if math.isnan(value):
            return "-"
        return f"{value:.6g}"
    return str(value)


def block_summary(block: CircuitBlock) -> str:
    """The text ``wirestate inspect`` prints."""
    out = [f"block {block.name}: {block.n_states} states, {len(block.inputs)} inputs, "]
    out[0] += f"{len(block.outputs)} outputs"
    out.append("")
    out.append("signals")
    listed = block.states if block.n_states <= 40 else block.states[:20]
    rows = [("state", name, block.units.get(name, "")) for name in listed]
    if len(listed) < block.n_states:
        rows.append(("state", f"... {block.n_states - len(listed)} more", ""))
    rows += [
        (
            "input",
            name,
            block.units.get(name, ""),
        )
        for name in block.inputs
    ]
    rows += [("output", name, block.units.get(name, "")) for name in block.outputs]
    out.append(table(("role", "name", "unit"), rows))
    out.append("")
    large = block.n_states > LARGE_BLOCK_STATES
    if large:
        slowest, fastest = extreme_poles(_state_matrix(block), 10)
        out.append(
            f"modes (poles of A): {block.n_states} states; the 10 slowest, then the 10 "
            "fastest (shift-invert Arnoldi)"
        )
        shown = np.concatenate([slowest, fastest])
    else:
        out.append("modes (poles of A)")
        shown = block.poles()
    mode_rows = []
    for m in modes(shown):
        if m["imag"] < 0:
            continue  # one line per conjugate pair
        mode_rows.append(
            (
                m["real"],
                abs(m["imag"]),
                m["wn"],
                m["wn"] / (2 * math.pi),
                m["zeta"],
                "pair" if m["imag"] > 0 else "real",
            )
        )
    if mode_rows:
        out.append(
            table(
                ("real [1/s]", "imag [rad/s]", "wn [rad/s]", "fn [Hz]", "damping ratio", "type"),
                mode_rows,
            )
        )
    else:
        out.append("  (no states)")
    out.append("")
    out.append("DC gain (output per input, SI units)")
    gain = _clean(block.dc_gain())
    if block.inputs and block.outputs:
        rows = [[name, *map(_gain_cell, gain[i])] for i, name in enumerate(block.outputs)]
        out.append(table(("output \\ input", *block.inputs), rows))
        if np.isinf(gain).any():
            out.append(
                "  unbounded: a pole at s = 0 that this input drives and this output sees "
                "(the response grows without limit, as a capacitor charged by a current)"
            )
    else:
        out.append("  (no inputs or no outputs)")
    if block.notes:
        out.append("")
        out.append("notes")
        out.extend(f"  {note}" for note in block.notes)
    return "\n".join(out)


def _gain_cell(value: float) -> float | str:
    return value if math.isfinite(value) else ("unbounded" if value > 0 else "-unbounded")


def block_json(block: CircuitBlock) -> dict[str, Any]:
    """JSON-ready description: names, matrices (SI), poles, modes, DC gain.

    A block with more than :data:`~wirestate.lti.LARGE_BLOCK_STATES` states lists its 10
    slowest, then its 10 fastest poles (``"poles_listed"`` says so) and gives ``A`` in
    coordinate form (``{"shape", "row", "col", "value"}``, its non-zero entries): every
    pole and a dense ``A`` of thousands of states would be hundreds of megabytes of text.
    """
    large = block.n_states > LARGE_BLOCK_STATES
    if large:
        slowest, fastest = extreme_poles(_state_matrix(block), 10)
        poles = np.concatenate([slowest, fastest])
        listed = f"the 10 slowest, then the 10 fastest of {block.n_states}"
    else:
        poles = block.poles()
        listed = "all"
    gain = block.dc_gain()
    return {
        "name": block.name,
        "states": list(block.states),
        "inputs": list(block.inputs),
        "outputs": list(block.outputs),
        "units": dict(block.units),
        "A": _coordinates(_state_matrix(block)) if large else _rows(block.A),
        "B": _rows(block.B),
        "C": _rows(block.C),
        "D": _rows(block.D),
        "x0": [float(v) for v in block.x0],
        "state_offset": _rows(block.state_offset),
        "poles_listed": listed,
        "poles": [[float(p.real), float(p.imag)] for p in poles],
        "modes": [
            {"wn": m["wn"], "zeta": None if math.isnan(m["zeta"]) else m["zeta"]}
            for m in modes(poles)
        ],
        "dc_gain": [[_json_float(v) for v in row] for row in gain],
        "notes": list(block.notes),
    }


def _state_matrix(block: CircuitBlock) -> Any:
    """``A`` in the form the block holds it: SciPy sparse for a large sparse block."""
    return block.A if block.sparse_A is None else block.sparse_A


def _coordinates(A: Any) -> dict[str, Any]:
    if not hasattr(A, "tocoo"):
        rows, cols = np.nonzero(A)
        values = A[rows, cols]
    else:
        coo = A.tocoo()
        rows, cols, values = coo.row, coo.col, coo.data
    return {
        "shape": [int(v) for v in A.shape],
        "row": [int(v) for v in rows],
        "col": [int(v) for v in cols],
        "value": [float(v) for v in values],
    }


def _clean(matrix: np.ndarray) -> np.ndarray:
    """For display: entries below 1e-12 of the largest finite entry are round-off."""
    out = np.array(matrix, dtype=float)
    finite = np.isfinite(out)
    scale = np.abs(out[finite]).max(initial=0.0)
    out[finite & (np.abs(out) < 1e-12 * scale)] = 0.0
    return out


def _rows(matrix: np.ndarray) -> list[list[float]]:
    return [[float(v) for v in row] for row in np.asarray(matrix)]


def _json_float(value: float) -> float | str | None:
    value = float(value)
    if math.isnan(value):
        return None
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    return value
