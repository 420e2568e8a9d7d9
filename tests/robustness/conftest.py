"""Shared helpers for the robustness reproducers (issue 10): small circuits as dicts."""

from __future__ import annotations

from typing import Any


def part(kind: str, nodes: list[str] | None = None, **fields: Any) -> dict[str, Any]:
    """One part table."""
    out: dict[str, Any] = {"kind": kind, **fields}
    if nodes is not None:
        out["nodes"] = nodes
    return out


def circuit(name: str, parts: dict[str, dict], outputs: dict[str, dict] | None = None) -> dict:
    """A circuit file as the parsed TOML mapping."""
    return {"circuit": {"name": name}, "parts": parts, "outputs": outputs or {}}


#: V1 (5 V) - R1 (1 kohm) - C1 (1 uF) to ground, output the capacitor voltage
RC = circuit(
    "rc",
    {"V1": part("voltage_source", ["a", "gnd"], value="5V"),
     "R1": part("resistor", ["a", "b"], value="1kohm"),
     "C1": part("capacitor", ["b", "gnd"], value="1uF")},
    {"v": {"voltage": "b"}},
)  # fmt: skip


def buck(inductance: str = "22uH") -> dict:
    """A buck converter (a switch Q1, a diode D1, an LC filter, a 4 ohm load), as a dict."""
    return circuit(
        "buck",
        {"V1": part("voltage_source", ["a", "gnd"], value="48V"),
         "Q1": part("switch", ["a", "b"]),
         "D1": part("diode", ["gnd", "b"], forward_voltage="0.7V"),
         "L1": part("inductor", ["b", "c"], value=inductance),
         "C1": part("capacitor", ["c", "gnd"], value="47uF"),
         "R1": part("resistor", ["c", "gnd"], value="4ohm")},
        {"v_out": {"voltage": "c"}},
    )  # fmt: skip


def toml_text(data: dict[str, Any]) -> str:
    """A small TOML writer for the test files (tables of scalars, arrays and inline tables)."""
    lines: list[str] = []

    def scalar(value: Any) -> str:
        if isinstance(value, bool):
            return "true" if value else "false"
        if isinstance(value, int | float):
            return (
                repr(value)
                if value == value and abs(value) != float("inf")
                else ("nan" if value != value else ("inf" if value > 0 else "-inf"))
            )
        if isinstance(value, str):
            return '"' + value.replace("\\", "\\\\").replace('"', '\\"') + '"'
        if isinstance(value, list | tuple):
            return "[" + ", ".join(scalar(v) for v in value) + "]"
        if isinstance(value, dict):
            return "{ " + ", ".join(f'"{k}" = {scalar(v)}' for k, v in value.items()) + " }"
        raise TypeError(type(value))

    def table(prefix: str, body: dict[str, Any]) -> None:
        plain = {k: v for k, v in body.items() if not isinstance(v, dict)}
        nested = {k: v for k, v in body.items() if isinstance(v, dict)}
        if prefix:
            lines.append(f"[{prefix}]")
        for key, value in plain.items():
            if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
                for item in value:
                    lines.append(f'[[{prefix + "." if prefix else ""}"{key}"]]')
                    for k, v in item.items():
                        lines.append(f'"{k}" = {scalar(v)}')
                continue
            lines.append(f'"{key}" = {scalar(value)}')
        for key, value in nested.items():
            table(f'{prefix + "." if prefix else ""}"{key}"', value)

    table("", data)
    return "\n".join(lines) + "\n"
