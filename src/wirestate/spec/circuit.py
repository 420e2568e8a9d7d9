"""Pydantic models of a circuit model file.

The file has three tables: ``[circuit]`` (name, ground), ``[parts.NAME]`` (one table per
part, tagged by ``kind``) and ``[outputs.NAME]`` (named voltages and currents). Every value
that carries a unit is read by :func:`wirestate.units.parse_quantity` into SI base units;
the validated model holds floats only.
"""

from __future__ import annotations

import re
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from wirestate.errors import ModelFileError, QuantityError
from wirestate.spec.load import QuantityInput
from wirestate.units import parse_quantity, parse_tolerance

NAME_PATTERN = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")


def _quantity(unit: str):
    def read(value: Any) -> Any:
        if value is None:
            return None
        return parse_quantity(value, unit, field="")

    return BeforeValidator(read, json_schema_input_type=QuantityInput)


def _check_name(value: str, what: str) -> str:
    if not isinstance(value, str) or not NAME_PATTERN.match(value):
        raise ValueError(
            f"{what} {value!r} must start with a letter or '_' and hold only letters, "
            "digits and '_'"
        )
    return value


Ohms = Annotated[float, _quantity("ohm")]
Henries = Annotated[float, _quantity("H")]
Farads = Annotated[float, _quantity("F")]
Volts = Annotated[float, _quantity("V")]
Amperes = Annotated[float, _quantity("A")]
Watts = Annotated[float, _quantity("W")]
Siemens = Annotated[float, _quantity("S")]
Dimensionless = Annotated[float, _quantity("1")]
TransOhms = Annotated[float, _quantity("ohm_gain")]
Tolerance = Annotated[
    float,
    BeforeValidator(lambda v: parse_tolerance(v, field=""), json_schema_input_type=QuantityInput),
]
NodeName = Annotated[str, BeforeValidator(lambda v: _check_name(v, "node name"))]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Ratings(_Strict):
    """Ratings shared by every two-terminal part (all optional, SI units)."""

    # a rating of zero or below describes no real part (issue 10.2)
    rated_voltage: Volts | None = Field(default=None, gt=0)
    rated_current: Amperes | None = Field(default=None, gt=0)
    rated_power: Watts | None = Field(default=None, gt=0)


class _TwoTerminal(Ratings):
    nodes: tuple[NodeName, NodeName] = Field(
        description="[positive, negative]; current flows nodes[0] -> nodes[1] through the part"
    )
    description: str | None = None


class _Passive(_TwoTerminal):
    tolerance: Tolerance | None = Field(default=None, description="relative, e.g. '5%'")


class Resistor(_Passive):
    kind: Literal["resistor"]
    value: Ohms = Field(gt=0, description="resistance, e.g. '4.7k' or '10 ohm'")


class Inductor(_Passive):
    kind: Literal["inductor"]
    value: Henries = Field(gt=0, description="inductance, e.g. '100uH'")
    initial: Amperes | None = Field(default=None, description="initial current")


class Capacitor(_Passive):
    kind: Literal["capacitor"]
    value: Farads = Field(gt=0, description="capacitance, e.g. '470uF'")
    initial: Volts | None = Field(default=None, description="initial voltage")


class VoltageSource(_TwoTerminal):
    kind: Literal["voltage_source"]
    value: Volts | None = Field(default=None, description="default drive when a command runs")


class CurrentSource(_TwoTerminal):
    kind: Literal["current_source"]
    value: Amperes | None = Field(default=None, description="default drive when a command runs")


ControlNodes = tuple[NodeName, NodeName]


def _control_nodes(value: Any) -> Any:
    if isinstance(value, str):
        return (value, None)
    return value


class _VoltageControlled(_TwoTerminal):
    control: Annotated[
        tuple[NodeName, NodeName | None],
        BeforeValidator(_control_nodes, json_schema_input_type=str | list[str]),
    ] = Field(description="[node_plus, node_minus] or a single node (measured to ground)")


class _CurrentControlled(_TwoTerminal):
    control: str = Field(description="name of the part whose current controls this source")


class VCVS(_VoltageControlled):
    kind: Literal["vcvs"]
    gain: Dimensionless


class VCCS(_VoltageControlled):
    kind: Literal["vccs"]
    gain: Siemens


class CCVS(_CurrentControlled):
    kind: Literal["ccvs"]
    gain: TransOhms


class CCCS(_CurrentControlled):
    kind: Literal["cccs"]
    gain: Dimensionless


class Coupling(_Strict):
    """Mutual inductance M = k * sqrt(L1 * L2) between two inductors."""

    kind: Literal["coupling"]
    inductors: tuple[str, str]
    coefficient: Dimensionless = Field(gt=0, lt=1)
    description: str | None = None


class Electromechanical(_TwoTerminal):
    """A branch coupled to motion: back-EMF ``e = k * speed``, ``torque = k * i``.

    The speed is an input of the block (named ``speed_input``, default the part name); the
    torque (rotary) or force (linear) is an output (``torque_output``, default
    ``torque_<part>`` or ``force_<part>``). Passive sign convention: with current into
    ``nodes[0]`` the part absorbs electrical power ``e * i`` and delivers ``torque * speed``.
    """

    kind: Literal["electromechanical"]
    motion: Literal["rotary", "linear"] = "rotary"
    # read by _read_constant (the unit depends on 'motion'): a number or a string with unit
    emf_constant: Annotated[
        float, WithJsonSchema({"anyOf": [{"type": "number"}, {"type": "string"}]})
    ] = Field(
        gt=0,
        description="back-EMF constant k, equal to the torque (force) constant: V*s/rad "
        "(= N*m/A) for rotary motion, V*s/m (= N/A) for linear motion",
    )
    speed_input: str | None = None
    torque_output: str | None = None

    @model_validator(mode="before")
    @classmethod
    def _read_constant(cls, data: Any) -> Any:
        if isinstance(data, dict) and "emf_constant" in data:
            unit = "V*s/m" if data.get("motion") == "linear" else "V*s/rad"
            data = dict(data)
            data["emf_constant"] = parse_quantity(data["emf_constant"], unit, field="")
        return data


# -- switched parts (issue 12) ------------------------------------------------------------------
#: default resistances of the resistive on/off models (stated in the README)
SWITCH_ON_RESISTANCE = 10e-3
SWITCH_OFF_RESISTANCE = 10e6


class _Switching(_TwoTerminal):
    on_resistance: Ohms = Field(default=SWITCH_ON_RESISTANCE, gt=0)
    off_resistance: Ohms = Field(default=SWITCH_OFF_RESISTANCE, gt=0)

    @model_validator(mode="after")
    def _off_above_on(self):
        if not self.off_resistance > self.on_resistance:
            raise QuantityError(
                "switch_resistance",
                f"off_resistance ({self.off_resistance:g} ohm) must be larger than "
                f"on_resistance ({self.on_resistance:g} ohm)",
            )
        return self


class Switch(_Switching):
    """A resistive piecewise-linear switch: ``on_resistance`` while its gate input exceeds
    0.5, ``off_resistance`` otherwise. The gate is a block input (default: the part name)."""

    kind: Literal["switch"]
    gate: str | None = Field(default=None, description="block input that drives it")

    @field_validator("gate")
    @classmethod
    def _gate_name(cls, value: str | None) -> str | None:
        return None if value is None else _check_name(value, "gate name")


class Diode(_Switching):
    """A resistive piecewise-linear diode, ``nodes = [anode, cathode]``: ``off_resistance``
    below ``forward_voltage``, and above it a line of slope ``1/on_resistance`` that meets
    the off line at ``forward_voltage`` (so the curve is continuous)."""

    kind: Literal["diode"]
    forward_voltage: Volts = Field(default=0.0, ge=0)


class Transformer(_Strict):
    """Ideal transformer: ``v2 = v1 / ratio``, ``i1 = -i2 / ratio`` (dots at the first node
    of each winding; each winding current flows nodes[0] -> nodes[1] through it)."""

    kind: Literal["transformer"]
    primary: tuple[NodeName, NodeName]
    secondary: tuple[NodeName, NodeName]
    ratio: Dimensionless = Field(gt=0, description="turns ratio N1 / N2")
    description: str | None = None


Part = Annotated[
    Resistor
    | Inductor
    | Capacitor
    | VoltageSource
    | CurrentSource
    | VCVS
    | VCCS
    | CCVS
    | CCCS
    | Coupling
    | Electromechanical
    | Switch
    | Diode
    | Transformer,
    Field(discriminator="kind"),
]

PART_KINDS: tuple[str, ...] = (
    "resistor",
    "inductor",
    "capacitor",
    "voltage_source",
    "current_source",
    "vcvs",
    "vccs",
    "ccvs",
    "cccs",
    "coupling",
    "electromechanical",
    "switch",
    "diode",
    "transformer",
)

#: kinds whose resistance depends on the mode (on/off) of a switched circuit
SWITCHING_KINDS: tuple[str, ...] = ("switch", "diode")


#: the field holding each kind's primary value: the one tuning and ``with_values`` replace
PRIMARY_FIELD: dict[str, str] = {
    "resistor": "value",
    "inductor": "value",
    "capacitor": "value",
    "vcvs": "gain",
    "vccs": "gain",
    "ccvs": "gain",
    "cccs": "gain",
    "coupling": "coefficient",
    "electromechanical": "emf_constant",
    "transformer": "ratio",
}


def check_couplings(parts: dict[str, Any]) -> None:
    """Refuse couplings that describe no passive magnetic structure.

    Two couplings on one pair of inductors are refused (``duplicate_coupling``). Every group
    of coupled inductors must have a positive definite inductance matrix ``L`` (stored
    magnetic energy ``i^T L i / 2 > 0`` for every current vector i != 0, e.g. Hayt and
    Kemmerly, Engineering Circuit Analysis, ch. 13, "the energy stored in coupled
    inductors"); ``0 < k < 1`` per pair is necessary but not sufficient for three or more
    inductors. Tested by a Cholesky factorisation; ``indefinite_inductance`` names the
    couplings of the group. Couplings naming unknown parts are left to the topology check.
    """
    import numpy as np

    seen: dict[frozenset[str], str] = {}
    groups: dict[str, set[str]] = {}
    for name, part in parts.items():
        if getattr(part, "kind", None) != "coupling":
            continue
        a, b = part.inductors
        if any(getattr(parts.get(x), "kind", None) != "inductor" for x in (a, b)) or a == b:
            continue
        pair = frozenset((a, b))
        if pair in seen:
            raise ModelFileError(
                "duplicate_coupling",
                f"{name} couples {a} and {b}, which {seen[pair]} already couples; give one "
                "coupling per pair of inductors",
                location=("parts", name),
            )
        seen[pair] = name
        merged = groups.get(a, {a}) | groups.get(b, {b})
        for inductor in merged:
            groups[inductor] = merged
    for group in {id(g): g for g in groups.values()}.values():
        names = sorted(group)
        index = {n: k for k, n in enumerate(names)}
        # scale by sqrt(L): the matrix of coefficients has unit diagonal, so the test does
        # not depend on how far the inductances spread
        K = np.eye(len(names))
        couplings = []
        for pair, coupling in seen.items():
            if pair <= group:
                a, b = sorted(pair)
                K[index[a], index[b]] = K[index[b], index[a]] = parts[coupling].coefficient
                couplings.append(coupling)
        if np.linalg.eigvalsh(K).min() <= 1e-12:  # common practice, no source: round-off
            raise ModelFileError(
                "indefinite_inductance",
                f"couplings {', '.join(sorted(couplings))} make the inductance matrix of "
                f"{', '.join(names)} not positive definite (the coefficients cannot all hold "
                "at once: some current pattern would store negative energy); lower them",
                location=("parts", sorted(couplings)[0]),
            )


def part_parameter(kind: str) -> str | None:
    """Name of the field that holds a part's primary value (``None`` for sources)."""
    return PRIMARY_FIELD.get(kind)


def _voltage_output(value: Any) -> Any:
    if isinstance(value, str):
        return (value, None)
    return value


class Output(_Strict):
    """A named output: a voltage between two nodes, or the current through a part."""

    voltage: (
        Annotated[
            tuple[NodeName, NodeName | None],
            BeforeValidator(_voltage_output, json_schema_input_type=str | list[str]),
        ]
        | None
    ) = Field(default=None, description="[node_plus, node_minus] or a node (to ground)")
    current: str | None = Field(default=None, description="part name, nodes[0] -> nodes[1]")
    unit: str | None = Field(
        default=None,
        description="optional, and then the output's own unit: V for a voltage, A for a current",
    )
    description: str | None = None

    @model_validator(mode="after")
    def _exactly_one(self) -> Output:
        if (self.voltage is None) == (self.current is None):
            raise ValueError("an output takes exactly one of 'voltage' or 'current'")
        # the unit follows from what is measured; another one was accepted and ignored
        kind, unit = ("voltage", "V") if self.voltage is not None else ("current", "A")
        if self.unit is not None and self.unit != unit:
            raise ValueError(
                f"unit {self.unit!r} does not fit a {kind} output, which is in {unit} (or "
                "leave 'unit' out)"
            )
        return self


class CircuitHeader(_Strict):
    name: str
    ground: NodeName = "gnd"
    description: str | None = None

    @field_validator("name")
    @classmethod
    def _name(cls, value: str) -> str:
        return _check_name(value, "circuit name")


class CircuitSpec(_Strict):
    """A validated circuit model: every value in SI base units."""

    circuit: CircuitHeader
    parts: dict[str, Part]
    outputs: dict[str, Output] = Field(default_factory=dict)

    @field_validator("parts")
    @classmethod
    def _part_names(cls, parts: dict[str, Any]) -> dict[str, Any]:
        if not parts:
            raise ValueError("a circuit needs at least one part")
        for name in parts:
            _check_name(name, "part name")
        return parts

    @field_validator("outputs")
    @classmethod
    def _output_names(cls, outputs: dict[str, Any]) -> dict[str, Any]:
        for name in outputs:
            _check_name(name, "output name")
        return outputs

    @model_validator(mode="after")
    def _physical_couplings(self) -> CircuitSpec:
        check_couplings(self.parts)
        return self

    @property
    def name(self) -> str:
        return self.circuit.name

    @property
    def ground(self) -> str:
        return self.circuit.ground

    def with_values(self, values: dict[str, float]) -> CircuitSpec:
        """A copy with some part values replaced (SI base units), validated again."""
        data = self.model_dump(mode="python")
        for part, value in values.items():
            if part not in data["parts"]:
                raise ModelFileError(
                    "unknown_part",
                    f"no part named {part!r} (parts: {', '.join(sorted(data['parts']))})",
                    location=("parts", part),
                )
            field = part_parameter(data["parts"][part]["kind"])
            if field is None:
                raise ModelFileError(
                    "unknown_part",
                    f"{part} ({data['parts'][part]['kind']}) has no value to replace",
                    location=("parts", part),
                )
            data["parts"][part][field] = float(value)
        from wirestate.spec.load import validate

        # the same one-line errors as a file (issue 10.6), not pydantic's report
        return validate(CircuitSpec, data)
