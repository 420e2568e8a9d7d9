"""Validated models of wirestate's files (pydantic v2) and their loaders."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from wirestate.spec.circuit import PART_KINDS, CircuitSpec, Output
from wirestate.spec.load import expect_file_kind, json_schema, read_toml, validate

__all__ = ["PART_KINDS", "CircuitSpec", "Output", "load_circuit", "parse_circuit", "json_schema"]


def parse_circuit(data: dict[str, Any], *, file: str | None = None) -> CircuitSpec:
    """Validate a circuit given as a mapping (the parsed TOML); a file of another kind is
    refused as such (``wrong_file_kind``)."""
    expect_file_kind(data, "circuit", file=file)
    return validate(CircuitSpec, data, file=file)


def load_circuit(path: str | Path) -> CircuitSpec:
    """Read and validate a circuit model file (TOML)."""
    return parse_circuit(read_toml(path), file=str(path))
