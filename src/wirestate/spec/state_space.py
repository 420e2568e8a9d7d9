"""Pydantic model of a state-space file: a named LTI block given by its matrices.

``wirestate reduce`` writes one; it may also be written by hand. TOML::

    [state_space]
    name = "feeder"                       # block name
    description = "..."                   # optional
    inputs = ["Vinv"]
    outputs = ["v_motor", "i_inverter"]
    states = ["bal1", "bal2"]             # any identifiers
    units = { Vinv = "V", v_motor = "V", i_inverter = "A" }   # optional, by signal name
    input_defaults = { Vinv = 48.0 }      # optional default drive (SI), like a source value

    [matrices]                            # dx/dt = A x + B u, y = C x + D u (SI units)
    A = [[-1.0, 0.0], [0.0, -2.0]]        # one row per state
    B = [[1.0], [1.0]]                    # one row per state, one column per input
    C = [[1.0, 1.0], [0.5, 0.0]]          # one row per output
    D = [[0.0], [0.0]]
    initial = [0.0, 0.0]                  # optional initial state

    [reduction]                           # optional: how the block was made
    method = "balanced_truncation"        # or "singular_perturbation"
    gramians = "dense"                    # or "low_rank"
    error_bound = 1.26                    # H-infinity bound on |full - reduced|, SI
    relative_error_bound = 0.0047         # error_bound / reference_norm
    reference_norm = 268.5                # H-infinity norm of the full block's stable part
    hankel_singular_values = [...]        # every one computed, largest first
    kept_modes = 0                        # modes kept exactly (unstable, marginal, s = 0)
    [reduction.source]
    file = "feeder_cable.toml"            # relative to this file
    sha256 = "..."                        # digest of the source file's bytes
    states = 13

A file whose ``[reduction.source]`` digest no longer matches the source file is *stale*:
loading it warns, ``wirestate regress`` refuses it (see :mod:`wirestate.lti`).
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path
from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field, StrictFloat, field_validator, model_validator

from wirestate.errors import ModelFileError
from wirestate.spec.circuit import NAME_PATTERN, _check_name
from wirestate.spec.load import expect_file_kind, read_toml, validate
from wirestate.units import is_si_unit

#: matrix entries are numbers in SI base units: text (even "1e3" or "nan") and booleans are
#: refused rather than read, so that a quoted unit or a typo cannot slip in
Matrix = list[list[StrictFloat]]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class StateSpaceHeader(_Strict):
    name: str = Field(description="block name")
    description: str | None = None
    inputs: list[str] = Field(description="input names, one per column of B and D")
    outputs: list[str] = Field(description="output names, one per row of C and D")
    states: list[str] = Field(description="state names, one per row of A")
    units: dict[str, str] = Field(
        default_factory=dict, description="unit of each input, output or state, e.g. 'V'"
    )
    input_defaults: dict[str, StrictFloat] = Field(
        default_factory=dict, description="default drive of inputs (SI), by input name"
    )

    @field_validator("name")
    @classmethod
    def _name(cls, value: str) -> str:
        return _check_name(value, "block name")

    @field_validator("inputs", "outputs", "states")
    @classmethod
    def _names(cls, values: list[str]) -> list[str]:
        for value in values:
            _check_name(value, "signal name")
        duplicates = sorted({v for v in values if values.count(v) > 1})
        if duplicates:
            raise ValueError(f"names given twice: {', '.join(duplicates)}")
        return values

    @field_validator("units")
    @classmethod
    def _units(cls, values: dict[str, str]) -> dict[str, str]:
        for name, unit in values.items():
            if unit and not is_si_unit(unit):
                raise ModelFileError(
                    "wrong_unit",
                    f"{unit!r} is not a unit in SI symbols; the matrices are in SI base "
                    "units, so write the unit without a prefix, e.g. V, A, rad/s, N*m, 1/s "
                    "or 1 (dimensionless)",
                    location=("state_space", "units", name),
                )
        return values


class Matrices(_Strict):
    A: Matrix = Field(description="state matrix, one row per state")
    B: Matrix = Field(description="input matrix, one row per state")
    C: Matrix = Field(description="output matrix, one row per output")
    D: Matrix = Field(description="feedthrough matrix, one row per output")
    initial: list[StrictFloat] | None = Field(default=None, description="initial state")


class ReductionSource(_Strict):
    file: str = Field(description="the reduced model file, relative to this file")
    sha256: str = Field(pattern=r"^[0-9a-f]{64}$", description="SHA-256 of its bytes")
    states: int = Field(ge=0, description="its number of states")


class ReductionRecord(_Strict):
    method: Literal["balanced_truncation", "singular_perturbation"]
    gramians: Literal["dense", "low_rank"]
    error_bound: float = Field(ge=0, description="H-infinity bound on |full - reduced|, SI")
    relative_error_bound: float = Field(ge=0)
    reference_norm: float = Field(ge=0, description="H-infinity norm of the full stable part")
    hankel_singular_values: list[float] = Field(description="largest first")
    kept_modes: int = Field(default=0, ge=0, description="modes kept exactly")
    source: ReductionSource


class StateSpaceSpec(_Strict):
    """A validated state-space file (values in SI units)."""

    state_space: StateSpaceHeader
    matrices: Matrices
    reduction: ReductionRecord | None = None

    @model_validator(mode="after")
    def _shapes(self) -> StateSpaceSpec:
        head, m = self.state_space, self.matrices
        n, k, p = len(head.states), len(head.inputs), len(head.outputs)
        expected = {"A": (n, n), "B": (n, k), "C": (p, n), "D": (p, k)}
        what = {"A": ("state", "state"), "B": ("state", "input"), "C": ("output", "state"),
                "D": ("output", "input")}  # fmt: skip
        for key, (rows, cols) in expected.items():
            matrix = getattr(m, key)
            if len(matrix) != rows:
                raise ModelFileError(
                    "invalid_field",
                    f"{key} has {len(matrix)} rows; expected {rows} (one per {what[key][0]})",
                    location=("matrices", key),
                )
            for index, row in enumerate(matrix):
                if len(row) != cols:
                    raise ModelFileError(
                        "invalid_field",
                        f"row {index + 1} of {key} has {len(row)} entries; expected {cols} "
                        f"(one per {what[key][1]})",
                        location=("matrices", key, index),
                    )
        if m.initial is not None and len(m.initial) != n:
            raise ModelFileError(
                "invalid_field",
                f"initial has {len(m.initial)} entries; expected {n} (one per state)",
                location=("matrices", "initial"),
            )
        signals = set(head.inputs) | set(head.outputs) | set(head.states)
        for table, names in (("units", head.units), ("input_defaults", head.input_defaults)):
            allowed = signals if table == "units" else set(head.inputs)
            for name in names:
                if name not in allowed:
                    raise ModelFileError(
                        "unknown_signal",
                        f"{name!r} is not one of the block's "
                        f"{'signals' if table == 'units' else 'inputs'}",
                        location=("state_space", table, name),
                    )
        return self

    @property
    def name(self) -> str:
        return self.state_space.name


def is_state_space_file(data: dict[str, Any]) -> bool:
    """True for parsed file data with a top-level ``[state_space]`` table."""
    return isinstance(data.get("state_space"), dict)


def parse_state_space(data: dict[str, Any], *, file: str | None = None) -> StateSpaceSpec:
    """Validate a state-space file given as a mapping (the parsed TOML); a file of another
    kind is refused as such (``wrong_file_kind``)."""
    expect_file_kind(data, "state_space", file=file)
    return validate(StateSpaceSpec, data, file=file)


def load_state_space_spec(path: str | Path) -> StateSpaceSpec:
    """Read and validate a state-space file (TOML)."""
    return parse_state_space(read_toml(path), file=str(path))


def file_digest(path: str | Path) -> str:
    """SHA-256 of a file's bytes (hex), the digest stored in ``[reduction.source]``."""
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


# -- writing ------------------------------------------------------------------------------


def _value(value: Any) -> str:
    """One TOML value: strings as basic strings, floats exactly (repr round-trips)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if not math.isfinite(value):
            raise ValueError(f"cannot write {value!r} to a state-space file")
        return repr(value)
    if isinstance(value, list):
        return "[" + ", ".join(_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{_key(k)} = {_value(v)}" for k, v in value.items()) + " }"
    raise TypeError(f"cannot write {type(value).__name__}")


def _key(key: str) -> str:
    return key if NAME_PATTERN.match(key) else json.dumps(key)


def dumps_state_space(spec: StateSpaceSpec, *, comment: str = "") -> str:
    """The TOML text of a state-space file (matrices one row per line; floats exact)."""
    lines = [f"# {line}".rstrip() for line in comment.splitlines()] if comment else []
    if lines:
        lines.append("")
    head = spec.state_space
    lines.append("[state_space]")
    for key in ("name", "description", "inputs", "outputs", "states"):
        value = getattr(head, key)
        if value is not None:
            lines.append(f"{key} = {_value(value)}")
    if head.units:
        lines.append(f"units = {_value(dict(head.units))}")
    if head.input_defaults:
        lines.append(f"input_defaults = {_value(dict(head.input_defaults))}")
    lines += ["", "[matrices]"]
    for key in ("A", "B", "C", "D"):
        rows = getattr(spec.matrices, key)
        if not rows:
            lines.append(f"{key} = []")
            continue
        lines.append(f"{key} = [")
        lines += [f"  {_value([float(v) for v in row])}," for row in rows]
        lines.append("]")
    if spec.matrices.initial is not None:
        lines.append(f"initial = {_value([float(v) for v in spec.matrices.initial])}")
    if spec.reduction is not None:
        record = spec.reduction
        lines += ["", "[reduction]"]
        for key in ("method", "gramians", "error_bound", "relative_error_bound",
                    "reference_norm", "hankel_singular_values", "kept_modes"):  # fmt: skip
            value = getattr(record, key)
            value = [float(v) for v in value] if isinstance(value, list) else value
            lines.append(f"{key} = {_value(value)}")
        lines += ["", "[reduction.source]"]
        for key in ("file", "sha256", "states"):
            lines.append(f"{key} = {_value(getattr(record.source, key))}")
    return "\n".join(lines) + "\n"
