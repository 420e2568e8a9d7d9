"""Validated models of wirestate's files (pydantic v2) and their loaders."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from wirestate.errors import ModelFileError
from wirestate.spec.circuit import PART_KINDS, CircuitSpec, Output
from wirestate.spec.load import json_schema, read_toml, validate

__all__ = ["PART_KINDS", "CircuitSpec", "Output", "load_circuit", "parse_circuit", "json_schema"]


#: top-level tables of the other file kinds, as users name them in messages
_OTHER_KINDS = {"system": "system", "tuning": "tuning", "state_space": "state-space"}


def parse_circuit(data: dict[str, Any], *, file: str | None = None) -> CircuitSpec:
    """Validate a circuit given as a mapping (the parsed TOML).

    A file of another kind (a ``[system]``, ``[tuning]`` or ``[state_space]`` table and no
    ``[circuit]``) is refused as such (``wrong_file_kind``), rather than by its first
    unknown field.
    """
    if isinstance(data, dict) and not isinstance(data.get("circuit"), dict):
        for table, kind in _OTHER_KINDS.items():
            if isinstance(data.get(table), dict):
                raise ModelFileError(
                    "wrong_file_kind",
                    f"this is a {kind} file, and a circuit file was expected here (a "
                    "[circuit] table with its [parts])",
                    file=file,
                    location=(table,),
                )
    return validate(CircuitSpec, data, file=file)


def load_circuit(path: str | Path) -> CircuitSpec:
    """Read and validate a circuit model file (TOML)."""
    return parse_circuit(read_toml(path), file=str(path))
