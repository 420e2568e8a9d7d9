"""Plain-text tables and JSON for compiled blocks and tuning reports."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from wirestate.lti import LARGE_BLOCK_STATES, CircuitBlock, dc_gain_limit, extreme_poles, modes
from wirestate.units import format_count as count
from wirestate.units import format_quantity, zero_round_off


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
    out = [f"block {block.name}: {count(block.n_states, 'state')}, "]
    out[0] += f"{count(len(block.inputs), 'input')}, {count(len(block.outputs), 'output')}"
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
    shown, large = listed_poles(block)
    if large:
        out.append(
            f"modes (poles of A): {block.n_states} states; the 10 slowest, then the 10 "
            "fastest (shift-invert Arnoldi)"
        )
    else:
        out.append("modes (poles of A)")
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
                ("real (1/s)", "imag (rad/s)", "wn (rad/s)", "fn (Hz)", "damping ratio", "type"),
                mode_rows,
            )
        )
    else:
        out.append("  (no states)")
    out.append("")
    out.append("DC gain (output per input, SI units)")
    gain = shown_dc_gain(block)
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
    listed, large = listed_poles(block)
    if large:
        entries = pole_entries(listed)
        entries["pole_count"] = block.n_states
        entries["poles_listed"] = (
            f"the 10 slowest, then the 10 fastest of {block.n_states}; " + entries["poles_listed"]
        )
    else:
        entries = pole_entries(listed)
    gain = shown_dc_gain(block)
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
        **entries,
        "dc_gain": [[_json_float(v) for v in row] for row in gain],
        "notes": list(block.notes),
    }


def shown_dc_gain(block: CircuitBlock) -> np.ndarray:
    """The DC gain as tables and JSON show it: entries that are round-off of terms that
    cancel are 0 (:func:`dc_gain_term_sizes`). Above
    :data:`~wirestate.lti.LARGE_BLOCK_STATES` states, where the term sizes would need a
    dense inverse, entries below 1e-12 of the largest finite entry count as round-off."""
    gain = block.dc_gain()
    if block.n_states > LARGE_BLOCK_STATES:
        return _clean(gain)
    return zero_round_off(gain, dc_gain_term_sizes(block.A, block.B, block.C, block.D))


def dc_gain_term_sizes(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray) -> np.ndarray:
    """Per entry, the size of the terms a DC gain ``D - C A^-1 B`` is summed from:
    ``|D| + |C| |A^-1| |B|`` (a componentwise bound of the kind used in rounding-error
    analysis of linear solves, Higham, Accuracy and Stability of Numerical Algorithms,
    2nd ed., ch. 7). Blocks above :data:`~wirestate.lti.LARGE_BLOCK_STATES` states use
    ``|C| |A^-1 B|``; a singular ``A`` the gain's own size. An entry far below its size
    is round-off of terms that cancel (a capacitor's DC current, say)."""
    A, B, C, D = (np.asarray(M, dtype=float) for M in (A, B, C, D))
    n = A.shape[0]
    if n == 0 or B.shape[1] == 0 or C.shape[0] == 0:
        return np.abs(D)
    try:
        if n <= LARGE_BLOCK_STATES:
            if np.linalg.cond(A) > 1e14:
                raise np.linalg.LinAlgError
            inner = np.abs(np.linalg.inv(A)) @ np.abs(B)
        else:
            inner = np.abs(np.linalg.solve(A, B))
    except np.linalg.LinAlgError:
        inner = None
    if inner is None or not np.isfinite(inner).all():
        return np.abs(dc_gain_limit(A, B, C, D))
    return np.abs(D) + np.abs(C) @ inner


def listed_poles(block: CircuitBlock) -> tuple[np.ndarray, bool]:
    """The poles ``inspect`` lists (rad/s) and whether the block counts as large.

    Every pole of a block with up to :data:`~wirestate.lti.LARGE_BLOCK_STATES` states;
    above that its 10 slowest, then its 10 fastest (:func:`~wirestate.lti.extreme_poles`),
    found once per block and kept: the table, the JSON and the figure share them, and a
    dense eigenvalue solve of thousands of states takes most of a minute.
    """
    if block.n_states <= LARGE_BLOCK_STATES:
        return block.poles(), False
    listed = block.__dict__.get("_listed_poles")
    if listed is None:
        slowest, fastest = extreme_poles(_state_matrix(block), 10)
        listed = block.__dict__["_listed_poles"] = np.concatenate([slowest, fastest])
    return listed, True


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


#: a pole component below this fraction of the pole's magnitude is round-off (eigenvalues
#: of a balanced real matrix are accurate to about machine epsilon times its norm; common
#: practice, no source)
POLE_ROUND_OFF = 1e-12


def clean_poles(poles: np.ndarray) -> np.ndarray:
    """Poles with real or imaginary parts below :data:`POLE_ROUND_OFF` of ``|p|`` set to 0."""
    p = np.asarray(poles, dtype=complex).copy()
    size = np.abs(p)
    finite = np.isfinite(size)
    re, im = p.real.copy(), p.imag.copy()
    re[finite & (np.abs(re) < POLE_ROUND_OFF * size)] = 0.0
    im[finite & (np.abs(im) < POLE_ROUND_OFF * size)] = 0.0
    return re + 1j * im


def _mode_list(poles: np.ndarray, z: np.ndarray | None) -> list[dict[str, Any]]:
    """One entry per real pole or complex pair (the member with positive imaginary part),
    slowest first; a sampled loop's ``z`` is carried along."""
    p = clean_poles(poles)
    zs = None if z is None else np.asarray(z, dtype=complex)
    entries = []
    for k, pole in enumerate(p):
        if pole.imag < 0:
            continue
        wn = abs(pole)
        entry = {
            "real": float(pole.real),
            "imag": float(pole.imag),
            "conjugate_pair": bool(pole.imag > 0),
            "natural_frequency": float(wn),
            "damping_ratio": float(-pole.real / wn) if 0 < wn < math.inf else None,
        }
        if zs is not None:
            entry["z"] = [float(zs[k].real), float(zs[k].imag)]
        entries.append(entry)
    entries.sort(key=lambda e: (e["natural_frequency"], e["imag"]))
    return entries


def pole_entries(poles: np.ndarray, *, z: np.ndarray | None = None) -> dict[str, Any]:
    """JSON form of poles: each complex pair listed once, its conjugate stated, not repeated.

    Returns ``{"pole_count": n, "poles": [...], "poles_listed": "..."}``; each entry has
    ``real``, ``imag`` (rad/s, ``imag >= 0``), ``conjugate_pair`` (``true``: ``real - j imag``
    is a pole as well), ``natural_frequency`` (rad/s) and ``damping_ratio``; a sampled
    loop's entries carry ``z`` too (a pole at ``z = 0``, a pure delay, has ``real = -inf``).
    """
    return {
        "pole_count": int(np.asarray(poles).size),
        "poles": [
            {k: (_json_float(v) if isinstance(v, float) else v) for k, v in e.items()}
            for e in _mode_list(poles, z)
        ],
        "poles_listed": "each complex pair once, with imag > 0; conjugate_pair = true "
        "means real - j imag is a pole as well",
    }


def pole_table(poles: np.ndarray, *, z: np.ndarray | None = None) -> str:
    """Text table of poles: one line per real pole or complex pair (units in brackets
    after the quantity, as in the figures)."""
    rows = []
    for e in _mode_list(poles, z):
        wn = e["natural_frequency"]
        if not math.isfinite(wn):
            row = ["-", "-", "-", "-", "-", "z = 0 (one-sample delay)"]
        else:
            zeta = e["damping_ratio"]
            row = [
                e["real"],
                e["imag"],
                wn,
                wn / (2 * math.pi),
                float("nan") if zeta is None else zeta,
                "pair" if e["conjugate_pair"] else "real",
            ]
        if z is not None:
            row.insert(0, float(abs(complex(*e["z"]))))
        rows.append(row)
    if not rows:
        return "  (no poles)"
    headers = [
        "real (1/s)",
        "imag (rad/s)",
        "wn (rad/s)",
        "fn (Hz)",
        "damping ratio",
        "type",
    ]
    if z is not None:
        headers.insert(0, "|z|")
    return table(headers, rows)


# -- tuning ---------------------------------------------------------------------------------


def text_table(rows: list[list[str]], header: list[str]) -> str:
    """Columns of text, left-aligned under a header and a rule."""
    widths = [max(len(str(r[i])) for r in [header, *rows]) for i in range(len(header))]
    lines = ["  ".join(h.ljust(w) for h, w in zip(header, widths, strict=True))]
    lines.append("  ".join("-" * w for w in widths))
    for r in rows:
        lines.append("  ".join(str(c).ljust(w) for c, w in zip(r, widths, strict=True)))
    return "\n".join(lines)


def _part_value(value: float | None, unit: str) -> str:
    return "-" if value is None else format_quantity(value, unit)


def _limit_rows(report: dict[str, Any]) -> list[list[str]]:
    from wirestate.tune.report import show_margin

    rows = []
    for lim in report["limits"]:
        kind, unit = lim["kind"], lim["unit"]
        worst = lim.get("margin_worst_corner", lim["margin"])
        status = "ok"
        if lim["margin"] < 0:
            status = "NOT MET"
        elif worst < 0:
            status = "corner fails"
        rows.append(
            [lim["name"], kind, show_margin(lim["bound"], kind, unit),
             show_margin(lim["value"], kind, unit), show_margin(lim["margin"], kind, unit),
             show_margin(worst, kind, unit), status]
        )  # fmt: skip
    return rows


def _stress_lines(stress: list[dict[str, Any]]) -> list[str]:
    out = ["stress at the preferred values:"]
    for s in stress:
        parts = [
            f"  {s['part']} ({s['kind']}): peak {format_quantity(s['peak_current'], 'A')}, "
            f"{format_quantity(s['peak_voltage'], 'V')}"
        ]
        if s["kind"] == "resistor":
            parts.append(
                f"energy {format_quantity(s['energy'], 'J')}, scenario average "
                f"{format_quantity(s['average_power_scenario'], 'W')}, continuous "
                f"{format_quantity(s['continuous_power'], 'W')} (of which ripple "
                f"{format_quantity(s['ripple_power'], 'W')})"
            )
        elif "ripple_current_amplitude" in s:
            parts.append(
                f"ripple {format_quantity(s['ripple_current_amplitude'], 'A')} peak, "
                f"{format_quantity(s['ripple_voltage_amplitude'], 'V')} peak"
            )
        for r in s["ratings"]:
            unit = {"voltage": "V", "current": "A", "power": "W"}[r["quantity"]]
            flag = "  <-- above rating" if r["fraction_of_rating"] > 1 else ""
            parts.append(
                f"{r['quantity']} {format_quantity(r['used'], unit)} of "
                f"{format_quantity(r['rated'], unit)} rated "
                f"({100 * r['fraction_of_rating']:.0f} %){flag}"
            )
        out.append("; ".join(parts))
    return out


def most_sensitive_lines(report: dict[str, Any]) -> list[str]:
    """The "most sensitive parts" section of the tuning report: per limit, the parts whose
    values move it most at the preferred values (elasticities, signed), with the sample
    that attains it and the limit's notes."""
    active = report.get("sensitivity_active", {})
    notes = report.get("sensitivity_notes", {})
    rows = []
    for name, parts in report["most_sensitive_parts"].items():
        shown = ", ".join(f"{p['part']} {p['elasticity']:+.3g}" for p in parts)
        rows.append([name, active.get(name, ""), shown or "none"])
    out = [
        "most sensitive parts at the preferred values (elasticity: % change of the limit's "
        "value per % change of the part)",
        text_table(rows, ["limit", "attained at", "parts"]),
    ]
    out += [f"  {name}: {note}" for name, note in notes.items() if name != "design"]
    return out


def tuning_report(report: dict[str, Any]) -> str:
    """The text ``wirestate tune`` prints for a :meth:`TuningResult.to_dict` report."""
    from wirestate.tune.report import show_margin

    out = [f"tuning {report['name']} (series {report['series']})", ""]
    rows = [
        [
            name,
            format_quantity(v["optimum"], v["unit"]),
            _part_value(v["preferred"], v["unit"]) if v.get("snapped", True) else "not snapped",
            f"{v['tolerance'] * 100:g} %" if v.get("tolerance") else "-",
        ]
        for name, v in report["variables"].items()
    ]
    out += [text_table(rows, ["variable", "continuous optimum", "preferred", "tolerance"]), ""]
    header = ["limit", "kind", "bound", "value", "margin", "margin (worst corner)", "status"]
    out.append(text_table(_limit_rows(report), header))
    tight = report.get("tightest")
    if tight:
        units = tight.get("worst_corner_units", {})
        worst = tight["worst_corner"].items()
        corner = ", ".join(f"{k} = {format_quantity(v, units.get(k, ''))}" for k, v in worst)
        corner = corner or "nominal"
        kind = next((x["kind"] for x in report["limits"] if x["name"] == tight["name"]), "")
        out += [
            "",
            f"tightest limit (relative to its bound): {tight['name']}, margin "
            f"{show_margin(tight['margin_worst_corner'], kind, tight['unit'])} at the worst "
            f"corner ({corner}); {report['corners_checked']} corners checked",
        ]
    if report["stress"]:
        out += [""] + _stress_lines(report["stress"])
    if "most_sensitive_parts" in report:
        out += [""] + most_sensitive_lines(report)
    elif "sensitivity_notes" in report:
        out += ["", f"most sensitive parts: {report['sensitivity_notes']['design']}"]
    solver = report["solver"]
    out += [
        "",
        f"solver: {solver['status']}, {solver['iterations']} iterations, "
        f"{solver['seconds']:.2f} s, {solver.get('unknowns', '?')} unknowns, "
        f"{solver.get('constraints', '?')} constraints",
    ]
    out += [f"note: {note}" for note in report["notes"]]
    out += ["", "cautions:"] + [f"  - {caution}" for caution in report["cautions"]]
    summary = report.get("verdict", {}).get("summary")
    out += ["", f"result: {summary}" if summary else "result: see the table"]
    return "\n".join(out)
