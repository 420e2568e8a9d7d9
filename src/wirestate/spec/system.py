"""Pydantic model of a system file: blocks, the wiring between them, external signals.

A system file is TOML with these tables::

    [system]
    name = "bench_drive"              # system name
    description = "..."               # optional

    [blocks.armature]                 # one table per block, tagged by kind
    kind = "circuit"                  # a circuit model file, path relative to this file
    file = "armature.toml"
    values = { Ra = "1.2ohm" }        # optional part value replacements

    [blocks.feeder]
    kind = "state_space"              # a state-space file (wirestate reduce writes them)
    file = "feeder_reduced.toml"

    [blocks.rotor]
    kind = "rotary_inertia"           # rotary_inertia | gear | torsional_shaft |
    inertia = "2.5e-3 kg*m^2"         #   mass_spring_damper | pi | pid | state_feedback |
    friction = "1e-4 N*m*s/rad"       #   sensor_filter | gain | modulator | circuit

    [blocks.pwm]                      # a pulse-width modulator: duty -> gate (or high, low)
    kind = "modulator"
    frequency = "100kHz"
    carrier = "triangle"              # | "sawtooth" (default)
    complementary = true              # outputs high and low
    dead_time = "50ns"
    phase = 0                         # carrier delay in degrees

    [blocks.speed_loop]
    kind = "pi"
    kp = 0.08
    ki = 4.0
    sample_time = "100us"             # leave out for a continuous controller
    output_limits = ["-48V", "48V"]   # in the unit given by `unit`
    unit = "V"
    anti_windup = "back_calculation"  # | "conditional" | "none"
    delay = true                      # one-sample computation delay

    [wiring]                          # "block.input" = "block.output"
    "rotor.torque" = "armature.torque_M1"
    "armature.M1" = "rotor.speed"

    [inputs]                          # external input = the block input(s) it drives
    Vbat = "armature.Vs"
    speed_ref = ["speed_loop.reference"]

    [outputs]                         # external output = a block output
    speed = "rotor.speed"

Every block input must be driven by the wiring or an external input. Without an
``[outputs]`` table every block output is an output, named ``block.signal``.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    field_validator,
    model_validator,
)

from wirestate.errors import QuantityError, WirestateError
from wirestate.spec.load import Flag, QuantityInput, expect_file_kind, read_toml, validate
from wirestate.units import UNITS, is_si_unit, parse_quantity

_NAME = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_SIGNAL = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*\.[A-Za-z_][A-Za-z0-9_]*$")


def _q(unit: str):
    return BeforeValidator(
        lambda v: None if v is None else parse_quantity(v, unit, field=""),
        json_schema_input_type=QuantityInput,
    )


def _name(value: str, what: str) -> str:
    if not isinstance(value, str) or not _NAME.match(value):
        raise ValueError(
            f"{what} {value!r} must start with a letter or '_' and hold only letters, "
            "digits and '_'"
        )
    return value


def _signal(value: Any) -> str:
    if not isinstance(value, str) or not _SIGNAL.match(value):
        raise ValueError(f"expected a signal written 'block.signal', got {value!r}")
    return value


Signal = Annotated[str, BeforeValidator(_signal)]


def _signal_unit(value: str) -> str:
    # a block's signals are in SI base units, so a prefixed unit (mV) or a word (volts)
    # would misstate every value that crosses the wire
    if value and not is_si_unit(value):
        raise QuantityError(
            "wrong_unit",
            f"{value!r} is not a unit in SI symbols; signals are in SI base units, so write "
            "the unit without a prefix, e.g. V, A, rad/s, N*m or 1 (dimensionless)",
        )
    return value


SignalUnit = Annotated[str, AfterValidator(_signal_unit)]
Seconds = Annotated[float, _q("s")]
# an angle in degrees, written as a number or with "deg" as pwm:...,phase=90deg takes it
Degrees = Annotated[
    float,
    BeforeValidator(
        lambda v: _q("1").func(v.strip().removesuffix("deg") if isinstance(v, str) else v),
        json_schema_input_type=QuantityInput,
    ),
]
Gain = Annotated[float, _q("1")]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class _Block(_Strict):
    description: str | None = None


class CircuitBlockSpec(_Block):
    """A circuit file as a block. Inputs: its sources (V or A) and electromechanical speeds;
    outputs: its [outputs] and electromechanical torques or forces; states: v_<capacitor>
    (V), i_<inductor> (A)."""

    kind: Literal["circuit"]
    file: str = Field(description="circuit model file, relative to the system file")
    values: dict[str, str | float] = Field(
        default_factory=dict, description="part value replacements, e.g. { Rd = '2.2ohm' }"
    )


class StateSpaceBlockSpec(_Block):
    """A state-space file as a block. Inputs: the file's inputs, outputs: its outputs,
    states: its states (bal1, bal2... for a reduced block), each with the unit its units
    table gives."""

    kind: Literal["state_space"]
    file: str = Field(
        description="state-space file (written by `wirestate reduce`), relative to the system file"
    )


class RotaryInertiaSpec(_Block):
    """Rigid rotor. Inputs: torque (N*m), load_torque (N*m); outputs and states: speed
    (rad/s), angle (rad)."""

    kind: Literal["rotary_inertia"]
    inertia: Annotated[float, _q("kg*m^2")] = Field(gt=0)
    friction: Annotated[float, _q("N*m*s/rad")] = Field(default=0.0, ge=0)


class GearSpec(_Block):
    """Ideal gear. Inputs: motor_speed (rad/s), load_torque (N*m); outputs: load_speed
    (rad/s), motor_torque (N*m); no states."""

    kind: Literal["gear"]
    ratio: Gain = Field(gt=0, description="motor speed / load speed")


class TorsionalShaftSpec(_Block):
    """Two inertias on a torsional spring. Inputs: torque (N*m), load_torque (N*m);
    outputs: drive_speed (rad/s), load_speed (rad/s), shaft_torque (N*m); states:
    drive_speed, load_speed (rad/s), twist (rad)."""

    kind: Literal["torsional_shaft"]
    inertia_drive: Annotated[float, _q("kg*m^2")] = Field(gt=0)
    inertia_load: Annotated[float, _q("kg*m^2")] = Field(gt=0)
    stiffness: Annotated[float, _q("N*m/rad")] = Field(gt=0)
    damping: Annotated[float, _q("N*m*s/rad")] = Field(default=0.0, ge=0)
    friction_drive: Annotated[float, _q("N*m*s/rad")] = Field(default=0.0, ge=0)
    friction_load: Annotated[float, _q("N*m*s/rad")] = Field(default=0.0, ge=0)


class MassSpringDamperSpec(_Block):
    """Translational mass. Input: force (N); outputs and states: position (m), velocity
    (m/s)."""

    kind: Literal["mass_spring_damper"]
    mass: Annotated[float, _q("kg")] = Field(gt=0)
    stiffness: Annotated[float, _q("N/m")] = Field(default=0.0, ge=0)
    damping: Annotated[float, _q("N*s/m")] = Field(default=0.0, ge=0)


class _ControllerSpec(_Block):
    kp: Gain
    sample_time: Seconds | None = Field(default=None, gt=0)
    output_limits: tuple[str | float | None, str | float | None] | None = Field(
        default=None, description="[low, high] in `unit`"
    )
    unit: SignalUnit = Field(default="", description="unit of the command, e.g. 'V'")
    anti_windup: Literal["back_calculation", "conditional", "none"] = "back_calculation"
    tracking_time: Seconds | None = Field(default=None, gt=0)
    delay: Flag = False

    def limits_si(self) -> tuple[float | None, float | None] | None:
        """``output_limits`` read in the command unit (SI)."""
        if self.output_limits is None:
            return None
        # any accepted spelling of a unit reads the limits (unit = "Nm" takes "2Nm")
        keys = [k for k, spellings in UNITS.items() if self.unit == k or self.unit in spellings]
        key = keys[0] if keys else "1"
        try:
            return tuple(  # type: ignore[return-value]
                None if v is None else parse_quantity(v, key, field="output_limits")
                for v in self.output_limits
            )
        except QuantityError as exc:
            if key != "1" or exc.code != "wrong_unit":
                raise
            raise QuantityError(
                "wrong_unit",
                f"output_limits {list(self.output_limits)} carry a unit, but the block states "
                'none: set unit (that of the command, e.g. unit = "V") or write plain numbers',
            ) from None


class PISpec(_ControllerSpec):
    """PI controller. Inputs: reference, measurement (the measured signal's unit); output:
    command (`unit`); states: integral (`unit`), with delay also delayed_command."""

    kind: Literal["pi"]
    ki: Gain


class PIDSpec(_ControllerSpec):
    """PID controller. Inputs: reference, measurement (the measured signal's unit); output:
    command (`unit`); states: integral, then derivative_filter (continuous) or derivative
    and last_measurement (sampled), with delay also delayed_command."""

    kind: Literal["pid"]
    ki: Gain = 0.0
    kd: Gain
    derivative_filter: Seconds = Field(gt=0)


class StateFeedbackSpec(_Block):
    """Static state feedback u = -K x (+ reference_gain * reference). Inputs: one per name
    in `measured`, and reference with reference_gain; output: command; no states."""

    kind: Literal["state_feedback"]
    measured: list[str] = Field(min_length=1, description="input names of the measured states")
    gain: list[float] = Field(min_length=1, description="K, one entry per measured state")
    reference_gain: float | None = None


class SensorFilterSpec(_Block):
    """First-order measurement filter. Input: signal (`unit`); output and state: measured
    (`unit`)."""

    kind: Literal["sensor_filter"]
    time_constant: Seconds = Field(gt=0)
    gain: Gain = 1.0
    unit: SignalUnit = ""


class GainSpec(_Block):
    """Static gain. Input: input (the unit of what drives it); output: output (`unit`);
    no states."""

    kind: Literal["gain"]
    gain: Gain
    unit: SignalUnit = ""


class ModulatorSpec(_Block):
    """A pulse-width modulator: input ``duty``; output ``gate``, or ``high`` and ``low``."""

    kind: Literal["modulator"]
    frequency: Annotated[float, _q("Hz")] = Field(gt=0, description="carrier frequency")
    carrier: Literal["sawtooth", "triangle"] = "sawtooth"
    complementary: Flag = Field(
        default=False, description="two outputs, high and low, instead of one gate"
    )
    dead_time: Seconds = Field(default=0.0, ge=0, description="turn-on delay of each output")
    phase: Degrees = Field(default=0.0, description="carrier delay in degrees of a period")

    @model_validator(mode="after")
    def _dead_time_within_a_period(self):
        # from half a period on, one output of a leg never turns on at any duty
        if not self.dead_time * self.frequency < 0.5 - 1e-9:  # round-off of "5us" and the like
            raise ValueError(
                f"dead_time ({self.dead_time:g} s) must be shorter than half the carrier "
                f"period ({0.5 / self.frequency:g} s)"
            )
        return self


BlockSpec = Annotated[
    CircuitBlockSpec
    | StateSpaceBlockSpec
    | RotaryInertiaSpec
    | GearSpec
    | TorsionalShaftSpec
    | MassSpringDamperSpec
    | PISpec
    | PIDSpec
    | StateFeedbackSpec
    | SensorFilterSpec
    | GainSpec
    | ModulatorSpec,
    Field(discriminator="kind"),
]

BLOCK_KINDS: tuple[str, ...] = (
    "circuit",
    "state_space",
    "rotary_inertia",
    "gear",
    "torsional_shaft",
    "mass_spring_damper",
    "pi",
    "pid",
    "state_feedback",
    "sensor_filter",
    "gain",
    "modulator",
)


class SystemHeader(_Strict):
    name: str
    description: str | None = None

    @field_validator("name")
    @classmethod
    def _check(cls, value: str) -> str:
        return _name(value, "system name")


class SystemSpec(_Strict):
    """A validated system file (values in SI units)."""

    system: SystemHeader
    blocks: dict[str, BlockSpec]
    wiring: dict[Signal, Signal] = Field(default_factory=dict)
    inputs: dict[str, Signal | list[Signal]] = Field(default_factory=dict)
    outputs: dict[str, Signal] = Field(default_factory=dict)

    @field_validator("blocks")
    @classmethod
    def _blocks(cls, blocks: dict[str, Any]) -> dict[str, Any]:
        if not blocks:
            raise ValueError("a system needs at least one block")
        for name in blocks:
            _name(name, "block name")
        return blocks

    @field_validator("wiring")
    @classmethod
    def _wiring(cls, wiring: dict[str, str]) -> dict[str, str]:
        for key in wiring:
            _signal(key)
        return wiring

    @field_validator("inputs", "outputs")
    @classmethod
    def _names(cls, table: dict[str, Any]) -> dict[str, Any]:
        for name in table:
            _name(name, "signal name")
        return table

    @property
    def name(self) -> str:
        return self.system.name

    def input_targets(self) -> dict[str, list[str]]:
        """External input name -> the block inputs it drives."""
        return {k: [v] if isinstance(v, str) else list(v) for k, v in self.inputs.items()}


def parse_system(data: dict[str, Any], *, file: str | None = None) -> SystemSpec:
    """Validate a system given as a mapping (the parsed TOML)."""
    expect_file_kind(data, "system", file=file)
    try:
        return validate(SystemSpec, data, file=file)
    except WirestateError as exc:
        # pydantic puts the union tag after the block name; the user never wrote it
        loc = exc.location
        if len(loc) > 2 and loc[0] == "blocks" and loc[2] in BLOCK_KINDS:
            exc.location = loc[:2] + loc[3:]
            exc.args = (str(exc),)
        raise


def load_system_spec(path: str | Path) -> SystemSpec:
    """Read and validate a system file (TOML)."""
    return parse_system(read_toml(path), file=str(path))
