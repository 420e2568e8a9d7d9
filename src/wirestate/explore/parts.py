"""Part names and values given to a yield run or a sweep, checked against the circuit."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from wirestate.errors import TuningError, WirestateError
from wirestate.explore.evaluate import KIND_UNITS, value_parts
from wirestate.tune.problem import Problem
from wirestate.units import parse_quantity


def parse_assignments(text: str, what: str) -> dict[str, str]:
    """``"Rd=220mohm,Cd=240uF"`` -> ``{"Rd": "220mohm", "Cd": "240uF"}`` (texts kept)."""
    out: dict[str, str] = {}
    for item in (s.strip() for s in text.split(",")):
        if not item:
            continue
        name, sep, value = item.partition("=")
        if not sep or not name.strip() or not value.strip():
            raise WirestateError(
                "invalid_field",
                f"{what} takes PART=VALUE items separated by commas, got {item!r}",
                location=(what,),
            )
        out[name.strip()] = value.strip()
    return out


def check_part(model: Problem, name: str, where: str) -> Any:
    """The circuit part ``name`` if it is a resistor, capacitor or inductor, else an
    ``unknown_part`` error at ``where``."""
    parts = value_parts(model)
    if name not in parts:
        known = ", ".join(parts) or "none"
        raise TuningError(
            "unknown_part",
            f"{name!r} is no resistor, capacitor or inductor of circuit "
            f"{model.base_circuit.name!r} (parts with values: {known})",
            file=model.file,
            location=(where, name),
        )
    return parts[name]


def part_value(model: Problem, name: str, text: str | float, where: str) -> float:
    """A positive value for part ``name`` in its unit (ohm, F or H), from text or a number."""
    part = check_part(model, name, where)
    try:
        value = parse_quantity(text, KIND_UNITS[part.kind], field=name)
    except WirestateError as exc:
        raise TuningError(exc.code, exc.message, file=model.file, location=(where, name)) from None
    if not value > 0:
        raise TuningError(
            "out_of_range",
            f"{name} is a {part.kind}; its value must be positive, got {text!r}",
            file=model.file,
            location=(where, name),
        )
    return value


def resolve_values(model: Problem, values: Mapping[str, str | float] | None) -> dict[str, float]:
    """Part values (SI) to use instead of the circuit file's, checked."""
    return {n: part_value(model, n, v, "values") for n, v in (values or {}).items()}


def toleranced_parts(model: Problem, parts: list[str] | None) -> dict[str, float]:
    """``part -> tolerance`` of the parts to vary: ``parts`` (each must have a tolerance),
    or every resistor, capacitor and inductor with one, in file order."""
    if parts is None:
        found = {
            n: float(p.tolerance)
            for n, p in value_parts(model).items()
            if getattr(p, "tolerance", None)
        }
        if not found:
            raise TuningError(
                "no_tolerance",
                f"no resistor, capacitor or inductor of circuit {model.base_circuit.name!r} "
                "has a tolerance; there is nothing to vary",
                file=model.file,
                location=("parts",),
            )
        return found
    out = {}
    for name in parts:
        part = check_part(model, name, "parts")
        if not getattr(part, "tolerance", None):
            raise TuningError(
                "no_tolerance",
                f"{name} has no tolerance in circuit {model.base_circuit.name!r}; give it a "
                "tolerance there or leave it out of the parts to vary",
                file=model.file,
                location=("parts", name),
            )
        out[name] = float(part.tolerance)
    return out
