"""Text and JSON for sensitivities (elasticities of modes and DC gains to part values)."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

from wirestate.report.tables import table
from wirestate.sensitivity import Sensitivities

if TYPE_CHECKING:
    from wirestate.tune.sensitivity import LimitSensitivities

#: the table shows this many parts as columns, the most influential first
TABLE_PARTS = 8
#: an elasticity below this fraction of its row's largest is shown as 0 (display only; the
#: JSON keeps every digit)
SHOWN_AS_ZERO = 1e-6


def sensitivity_text(
    sens: Sensitivities, *, max_parts: int = TABLE_PARTS, at: str = "the file's values"
) -> str:
    """The sensitivity table ``wirestate inspect --sensitivity`` prints.

    Rows are quantities (natural frequency and damping ratio per mode, slowest first, then
    DC gains), columns the parts, the part with the largest elasticity anywhere first.
    Quantities without elasticities (repeated poles, zero or unbounded gains, damping
    ratios of real poles) are listed under the notes with the reason. ``at`` says where
    the elasticities were taken.
    """
    ranked = sens.ranking()
    shown = [part for part, _, _ in ranked[:max_parts]]
    rows = []
    for q in sens.quantities:
        if q.elasticity is None or (q.kind == "damping_ratio" and q.note):
            continue
        scale = max(1.0, *(abs(v) for v in q.elasticity.values()))
        cells = [_rounded(q.elasticity.get(part, 0.0), scale) for part in shown]
        rows.append((q.name, float(f"{q.value:.5g}"), q.unit, *cells))
    out = [
        f"sensitivities of {sens.block}: elasticities d ln(quantity) / d ln(part value) at {at}",
        "  (+1: the quantity rises 1 % per 1 % increase of the part; values below "
        f"{SHOWN_AS_ZERO:g} times the row's largest (or 1) are shown as 0; every digit in "
        "--json)",
    ]
    if rows:
        out.append(table(("quantity", "value", "unit", *shown), rows))
    else:
        out.append("  (no quantity with an elasticity)")
    rest = ranked[max_parts:]
    if rest:
        largest = rest[0][1]
        names = ", ".join(part for part, _, _ in rest)
        if largest == 0.0:
            out.append(f"  no effect on these quantities: {names}")
        else:
            out.append(f"  other parts, each below {largest:.3g} in every row: {names}")
    grouped: dict[str, list[str]] = {}
    for q in sens.quantities:
        if q.note:
            grouped.setdefault(q.note, []).append(q.name)
    if grouped or sens.notes:
        out.append("")
        out.append("sensitivity notes")
        out.extend(f"  {note}" for note in sens.notes)
        for note, names_with_note in grouped.items():
            out.append(f"  {', '.join(names_with_note)}: {note}")
    return "\n".join(out)


def sensitivity_json(sens: Sensitivities) -> dict[str, Any]:
    """``sensitivity`` (quantity -> part -> elasticity) and ``sensitivity_notes`` (quantity
    -> why it has no elasticity, or what its numbers mean) for ``inspect --json``."""
    return {
        "sensitivity": sens.to_dict(),
        "sensitivity_notes": {**sens.quantity_notes(), **_general(sens.notes)},
    }


def limit_sensitivity_text(sens: LimitSensitivities) -> str:
    """The table ``wirestate inspect TUNING_FILE --sensitivity`` prints: one row per limit
    (its value at the design and its elasticities), then the sample, frequency or mode
    that attains each limit's value."""
    out = [sensitivity_text(sens, at=sens.at)]
    rows = [(name, sens.active.get(name, "")) for name in sens.kinds]
    out += ["", "each limit's value is attained at", table(("limit", "at"), rows)]
    return "\n".join(out)


def limit_sensitivity_json(sens: LimitSensitivities) -> dict[str, Any]:
    """:func:`sensitivity_json` for a tuning file (quantities are limits), with
    ``sensitivity_at`` (where the elasticities were taken, and the part values there) and
    ``sensitivity_limits`` (limit -> kind, value, unit, the sample that attains it, note)."""
    return {
        **sensitivity_json(sens),
        "sensitivity_at": {"design": sens.at, "values": dict(sens.values)},
        "sensitivity_limits": sens.limit_values(),
    }


def _general(notes: list[str]) -> dict[str, str]:
    return {"block": "; ".join(notes)} if notes else {}


def most_sensitive_parts(
    elasticities: Mapping[str, Mapping[str, float | None]], *, count: int = 5
) -> str:
    """A short "most sensitive parts" section from any table of elasticities.

    Parameters
    ----------
    elasticities
        Quantity -> part -> elasticity, as :func:`wirestate.sensitivity.elasticities`
        returns it (``None`` entries are skipped).
    count
        How many parts to list.

    Returns
    -------
    str
        One line per part, the largest ``|elasticity|`` first, with the quantity where it
        occurs: ``Rd  -1.39  natural frequency, mode v_Cd``.
    """
    best: dict[str, tuple[float, str]] = {}
    for quantity, row in elasticities.items():
        for part, value in row.items():
            if value is None or not math.isfinite(value):
                continue
            if part not in best or abs(value) > abs(best[part][0]):
                best[part] = (value, quantity)
    ranked = sorted(best.items(), key=lambda item: -abs(item[1][0]))[:count]
    lines = ["most sensitive parts (largest elasticity d ln y / d ln p, and where)"]
    if not ranked:
        lines.append("  (none)")
        return "\n".join(lines)
    rows = [(part, _rounded(value, abs(value)), quantity) for part, (value, quantity) in ranked]
    lines.append(table(("part", "elasticity", "quantity"), rows))
    return "\n".join(lines)


def _rounded(value: float, scale: float) -> float:
    """Three significant digits; 0 below :data:`SHOWN_AS_ZERO` times ``scale``."""
    if not math.isfinite(value):
        return value
    if value == 0.0 or abs(value) < SHOWN_AS_ZERO * scale:
        return 0.0
    return float(f"{value:.3g}")
