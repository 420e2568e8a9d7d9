"""Pydantic model of a tuning file: which part values to size, under which limits.

A tuning file (TOML) names a circuit file (path relative to the tuning file), the design
variables (part values with bounds), an optional PI controller closing a loop around the
circuit, a time-domain scenario (operating point, input steps, horizon, sample step), the
limits, the objective and the stress conditions. Every quantity is read into SI base units.

.. code-block:: toml

    [tuning]
    name = "bus_damping"
    circuit = "drive_bus.toml"  # relative to this file
    # or: system = "gantry.toml" with block = "bus" (the circuit block whose parts are
    # sized); the system file's controllers then close the loop, no [controller] table

    [variables.Rd]              # part values to size; log-scaled inside the optimiser
    min = "50mohm"
    max = "5ohm"
    start = "0.5ohm"            # optional; default: geometric mean of the bounds
    [variables.Cd]
    min = "47uF"
    max = "4.7mF"

    [controller]                # optional PI loop around the circuit (names as the
    measurement = "i_motor"     # system file's pi block): a circuit output
    command = "Vm"              # a circuit input
    kp = 0.63                   # command units per measured unit
    ki = 157.0                  # command units per measured unit and second
    # reference = "30A"         # default: the measured output at the operating point
    # sample_time = "20us"      # a sampled PI held by a zero-order hold

    [scenario]
    until = "8ms"               # as `wirestate simulate --until`
    step = "10us"
    initial = "steady_state"    # or "zero"
    # initial_values = { v_Cf = "42V" }   # states set at t = 0 on top of that
    # [scenario.waveforms]      # disturbances in the syntax of `simulate --input`
    # Iport = "sinusoid:2A,2kHz,start=2ms"
    [scenario.inputs]           # operating point; default: the sources' values
    Vbat = "48V"
    [[scenario.steps]]          # input steps (the PI's "reference" too)
    input = "reference"
    at = "1ms"
    to = "40A"

    [[limits]]
    name = "bus_deviation"
    kind = "overshoot"          # maximum | minimum | overshoot | settling | peak_current |
    output = "v_bus"            # energy | damping_ratio | pole_real_part | output_impedance
    after = "1ms"
    percent_of = "final"        # or "change" (classic percent overshoot)
    max = "3%"
    [[limits]]
    kind = "energy"
    part = "Rd"
    max = "5mJ"
    [[limits]]
    kind = "output_impedance"   # Middlebrook's input-filter criterion
    input = "Iport"             # a current source injecting at the port
    output = "v_bus"
    band = ["100Hz", "20kHz"]
    max = "1ohm"

    [objective]                 # weighted sum, each term divided by its starting value
    capacitance = 1.0
    parts = ["Cd"]

    [stress.ripple]             # a sinusoid on one input for the stress report
    input = "Iport"
    amplitude = "6A"
    frequency = "20kHz"

    [solver]                    # optional IPOPT settings
    max_iterations = 300
    robust = false              # true: every limit at every tolerance corner as well
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, WrapValidator, model_validator
from pydantic.json_schema import SkipJsonSchema

from wirestate.errors import TuningError
from wirestate.spec.load import Flag, QuantityInput, expect_file_kind, read_toml, validate
from wirestate.units import PREFIXES, parse_quantity, parse_tolerance

__all__ = ["TuningSpec", "load_tuning", "parse_tuning", "LIMIT_KINDS"]


def _seconds(value: Any) -> Any:
    return None if value is None else parse_quantity(value, "s", field="")


def _hertz(value: Any) -> Any:
    return None if value is None else parse_quantity(value, "Hz", field="")


def _fraction(value: Any) -> Any:
    # "10%" -> 0.1; a bare number is a fraction
    if value is None:
        return None
    if not isinstance(value, str | int | float) or isinstance(value, bool):
        raise ValueError(f"expected a fraction or a percentage such as '2%', got {value!r}")
    if isinstance(value, str) and value.strip().endswith("%"):
        return float(value.strip()[:-1]) / 100.0
    return parse_tolerance(value, field="") if isinstance(value, str) else float(value)


_ANY_UNITS = ("V", "A", "ohm", "F", "H", "J", "W", "S", "s", "Hz", "rad/s", "1")


def unit_of(value: Any) -> str | None:
    """The unit dimension a quantity string is written in (``None`` for a bare number)."""
    if not isinstance(value, str):
        return None
    rest = re.sub(r"^\s*[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?\s*", "", value).strip()
    if rest in PREFIXES:
        return None  # a bare number or a number with a prefix only: SI base units
    for unit in _ANY_UNITS:
        try:
            parse_quantity(value, unit, field="")
        except Exception:  # not this dimension
            continue
        return unit
    return None


def _any_quantity(value: Any) -> Any:
    # limits and part values carry the unit of what they bound (V, A, ohm, F, H, J, W ...);
    # the first dimension whose spelling fits is taken (all are read into SI base units)
    if value is None or isinstance(value, int | float) and not isinstance(value, bool):
        return value
    last: Exception | None = None
    for unit in _ANY_UNITS:
        try:
            return parse_quantity(value, unit, field="")
        except Exception as exc:  # try the next dimension
            last = exc
    assert last is not None
    raise last


class Written(float):
    """A value read from a file (SI base units) that remembers the unit it was written in.

    ``unit`` is the unit key of :data:`wirestate.units.UNITS` (``None`` for a bare number);
    :func:`check_units` compares it with the unit of what the value bounds or drives.
    """

    unit: str | None = None


def _written(value: Any, handler: Any) -> Any:
    out = handler(_any_quantity(value))
    if out is None:
        return None
    written = Written(out)
    written.unit = unit_of(value)
    return written


Seconds = Annotated[float, BeforeValidator(_seconds, json_schema_input_type=QuantityInput)]
Hertz = Annotated[float, BeforeValidator(_hertz, json_schema_input_type=QuantityInput)]
Fraction = Annotated[float, BeforeValidator(_fraction, json_schema_input_type=QuantityInput)]
Quantity = Annotated[float, WrapValidator(_written, json_schema_input_type=QuantityInput)]


class _Strict(BaseModel):
    # file keys differ from a few attribute names (aliases); reports write the file keys
    model_config = ConfigDict(extra="forbid", frozen=True, serialize_by_alias=True)


class TuningHeader(_Strict):
    name: str = "tuning"
    circuit: str | None = Field(
        default=None, description="circuit model file, relative to the tuning file"
    )
    system: str | None = Field(
        default=None,
        description="system file (blocks wired by signal name), relative to the tuning file; "
        "instead of 'circuit'",
    )
    block: str | None = Field(
        default=None,
        description="with 'system': the circuit block whose parts are sized and watched",
    )
    description: str | None = None

    @model_validator(mode="after")
    def _one_model(self) -> TuningHeader:
        if self.circuit is not None and self.system is not None:
            raise ValueError("give exactly one of 'circuit' and 'system'")
        if self.circuit is None and self.system is None and self.block is None:
            # (neither, with 'block': the system is given in Python, see wirestate.tune.problem)
            raise ValueError("give exactly one of 'circuit' and 'system'")
        if self.system is not None and self.block is None:
            raise ValueError("with 'system', 'block' names the circuit block to size")
        if self.circuit is not None and self.block is not None:
            raise ValueError("'block' applies only with 'system'")
        return self


class DesignVariable(_Strict):
    """A part value to size; handled on a logarithmic scale inside the optimiser."""

    min: Quantity = Field(gt=0, description="lower bound, SI units of the part value")
    max: Quantity = Field(gt=0, description="upper bound")
    start: Quantity | None = Field(default=None, gt=0, description="starting value")

    @property
    def written_units(self) -> dict[str, str]:
        """The units ``min``, ``max``, ``start`` were written in (checked against the part)."""
        return {
            k: u
            for k in ("min", "max", "start")
            if (u := getattr(getattr(self, k), "unit", None)) is not None
        }

    @model_validator(mode="after")
    def _ordered(self) -> DesignVariable:
        if not self.min < self.max:
            raise ValueError(f"min ({self.min:g}) must be below max ({self.max:g})")
        if self.start is not None and not self.min <= self.start <= self.max:
            raise ValueError(f"start ({self.start:g}) must lie within [min, max]")
        return self


class Controller(_Strict):
    """A PI controller: ``command = offset + kp e + ki int e``, ``e = reference - measurement``.

    The file keys are those of the system file's ``pi`` block (``measurement``, ``command``,
    ``kp``, ``ki``); the attributes keep the names ``measure``, ``drive``, ``proportional``,
    ``integral``.

    With ``sample_time`` the PI is sampled (forward-Euler integral) and its output held
    by a zero-order hold; the scenario step must divide the sample time, and the limits
    are checked at every scenario step, between the samples too.
    """

    measure: str = Field(alias="measurement", description="circuit output the controller measures")
    drive: str = Field(alias="command", description="circuit input the controller's command drives")
    proportional: float = Field(alias="kp", description="command units per measured unit")
    integral: float = Field(
        default=0.0, ge=0, alias="ki", description="command units per measured unit and second"
    )
    reference: Quantity | None = Field(
        default=None, description="setpoint; default: the measured output at the operating point"
    )
    sample_time: Seconds | None = Field(default=None, gt=0)


class InputStep(_Strict):
    input: str
    at: Seconds = Field(ge=0)
    to: Quantity


class Scenario(_Strict):
    horizon: Seconds = Field(
        gt=0, alias="until", description="end of the scenario, as 'wirestate simulate --until'"
    )
    step: Seconds = Field(gt=0, description="sample step of the discretised response")
    inputs: dict[str, Quantity] = Field(
        default_factory=dict, description="operating point; default: the sources' values"
    )
    steps: list[InputStep] = Field(default_factory=list)
    initial: Literal["steady_state", "zero"] = Field(
        default="steady_state",
        description="state at t = 0: the steady state at the operating point, or zero",
    )
    waveforms: dict[str, str] = Field(
        default_factory=dict,
        description="inputs driven by a waveform in the text form of 'wirestate simulate "
        "--input' (e.g. 'sinusoid:2A,2kHz,mean=30A,start=1ms'), sampled at the scenario "
        "steps and held; replaces the input's level",
    )
    initial_values: dict[str, Quantity] = Field(
        default_factory=dict,
        description="states set at t = 0 on top of 'initial', by state name (SI units), "
        "e.g. a precharged capacitor { v_Cf = '42V' }",
    )

    @model_validator(mode="after")
    def _steps_inside(self) -> Scenario:
        if self.step >= self.horizon:
            raise ValueError("the sample step must be shorter than 'until'")
        count = self.horizon / self.step
        # a horizon between two grid points would be rounded silently (issue 10.7); the
        # 1e-9 relative slack only absorbs the rounding of decimal prefixes
        if abs(count - round(count)) > 1e-9 * count:
            raise ValueError(
                f"'until' ({self.horizon:g} s) is not a whole number of steps "
                f"({self.step:g} s; {count:.4f} steps): make 'until' "
                f"{round(count) * self.step:g} s "
                "or choose a step that divides it"
            )
        for s in self.steps:
            if s.at >= self.horizon:
                raise ValueError(f"step of {s.input!r} at {s.at:g} s lies beyond 'until'")
        return self


LIMIT_KINDS = (
    "maximum",
    "minimum",
    "overshoot",
    "settling",
    "peak_current",
    "energy",
    "damping_ratio",
    "pole_real_part",
    "output_impedance",
)

#: limits on the switching period of a switched scenario (issue 12): judged on the mode
#: sequence of one switching period in periodic steady state (see wirestate.tune.switched)
SWITCHED_LIMIT_KINDS = (
    "peak_after_switching",
    "ring_settling",
    "energy_per_period",
    "average_power",
    "efficiency",
)


class Limit(_Strict):
    """One limit. Which fields apply depends on ``kind``:

    * ``maximum`` / ``minimum``: ``output``, ``max`` / ``min``, optional ``window``;
    * ``overshoot``: ``output``, ``max`` (fraction or %) of the step in the final value
      after ``after`` (the overshoot beyond the final value, relative to the change);
    * ``settling``: ``output``, ``band`` (fraction or %) of the change, kept from
      ``settled_by`` on;
    * ``peak_current``: ``part``, ``max`` (A, absolute value over the horizon);
    * ``energy``: ``part`` (a resistor), ``max`` (J dissipated over the horizon);
    * ``damping_ratio``: ``min`` of every closed-loop pole;
    * ``pole_real_part``: ``max`` real part of every closed-loop pole (1/s, negative);
    * ``output_impedance``: ``input`` (a current source injecting at the port),
      ``output`` (the port voltage), ``band`` = [f_low, f_high] in Hz, ``max`` in ohm.

    Switched scenarios (a circuit with switches and diodes driven by a modulator):

    * ``peak_after_switching``: ``output``, ``part`` (a switch), ``edge`` (``"turn_off"``
      or ``"turn_on"``), ``within`` (s after that edge), ``max``; ``points`` samples;
    * ``ring_settling``: ``output``, ``part``, ``edge``, ``within``, ``settled_by`` (s after
      the edge), ``max``: from ``settled_by`` to ``within`` the output stays within
      ``max`` of its value at ``within``;
    * ``energy_per_period``: ``part`` (a resistor), ``max`` (J per switching period);
    * ``average_power``: ``part`` (a resistor), ``max`` (W at the switching frequency);
    * ``efficiency``: ``input`` (the voltage source feeding the converter), ``loads``
      (resistors and current sources fed by it), ``min`` (fraction or %).
    """

    name: str | None = None
    kind: Literal[LIMIT_KINDS + SWITCHED_LIMIT_KINDS]  # type: ignore[valid-type]
    output: str | None = None
    input: str | None = None
    part: str | None = None
    max: Quantity | None = None
    min: Quantity | None = None
    window: tuple[Seconds, Seconds] | None = None
    after: Seconds = 0.0
    by: Seconds | None = Field(
        default=None,
        alias="settled_by",
        description="settling: the output stays in the band from here on",
    )
    band: tuple[Hertz, Hertz] | Fraction | None = None
    points: int = Field(default=200, ge=10, le=5000, description="frequency grid points")
    edge: Literal["turn_off", "turn_on"] | None = Field(
        default=None, description="switched limits: the switch edge the window starts at"
    )
    within: Seconds | None = Field(
        default=None, gt=0, description="switched limits: length of the window after the edge"
    )
    loads: list[str] | None = Field(
        default=None, description="efficiency: the parts whose power counts as output"
    )
    relative_to: Literal["change", "final"] = Field(
        default="change",
        alias="percent_of",
        description="overshoot and settling band relative to the change of the final value "
        "(one-sided overshoot) or to the final value itself (deviation either way)",
    )

    @model_validator(mode="before")
    @classmethod
    def _read_fractions(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("kind") in ("overshoot",) and "max" in data:
            data = dict(data)
            data["max"] = _fraction(data["max"])
        if isinstance(data, dict) and data.get("kind") == "efficiency" and "min" in data:
            data = dict(data)
            if unit_of(data["min"]) is not None:
                raise ValueError(
                    f"an 'efficiency' limit takes min as a fraction or a percentage such as "
                    f"'90%', got {data['min']!r}"
                )
            data["min"] = _fraction(data["min"])
        return data

    @model_validator(mode="after")
    def _fields_for_kind(self) -> Limit:
        need: dict[str, tuple[str, ...]] = {
            "maximum": ("output", "max"),
            "minimum": ("output", "min"),
            "overshoot": ("output", "max"),
            "settling": ("output", "band", "settled_by"),
            "peak_current": ("part", "max"),
            "energy": ("part", "max"),
            "damping_ratio": ("min",),
            "pole_real_part": ("max",),
            "output_impedance": ("input", "output", "band", "max"),
            "peak_after_switching": ("output", "part", "edge", "within", "max"),
            "ring_settling": ("output", "part", "edge", "within", "settled_by", "max"),
            "energy_per_period": ("part", "max"),
            "average_power": ("part", "max"),
            "efficiency": ("input", "loads", "min"),
        }
        for field in need[self.kind]:
            if getattr(self, _ATTRIBUTE.get(field, field)) is None:
                self._refuse(field, f"a {self.kind!r} limit needs the field {field!r}")
        self._refuse_fields_that_do_not_apply()
        if self.kind == "output_impedance" and not isinstance(self.band, tuple):
            self._refuse("band", "an 'output_impedance' limit takes band = [f_low, f_high] in Hz")
        if self.kind == "settling" and isinstance(self.band, tuple):
            self._refuse("band", "a 'settling' limit takes band as a fraction such as '2%'")
        if isinstance(self.band, tuple) and not 0 < self.band[0] < self.band[1]:
            self._refuse("band", "band must be [f_low, f_high] with 0 < f_low < f_high")
        if self.window is not None and not self.window[0] < self.window[1]:
            self._refuse("window", "window must be [t_start, t_end] with t_start < t_end")
        if self.kind == "ring_settling" and not 0 <= self.by < self.within:
            self._refuse("settled_by", "settled_by must lie within [0, within)")
        if self.kind == "efficiency" and not 0 < self.min < 1:
            self._refuse("min", "an efficiency 'min' must lie between 0 and 100 %")
        return self

    def _refuse(self, field: str, message: str) -> None:
        # located at the limit's name and the field, as the unit checks locate theirs
        # (pydantic would give the list index); a TuningError passes through validation
        raise TuningError("invalid_field", message, location=("limits", self.label, field))

    def _refuse_fields_that_do_not_apply(self) -> None:
        applies = LIMIT_FIELDS[self.kind]
        given = [_KEY.get(f, f) for f in self.model_fields_set if f not in ("name", "kind")]
        extra = sorted(f for f in given if f not in applies)
        if extra:
            hint = ""
            if self.kind in ("peak_current", "energy") and "output" in extra:
                hint = ' (limits on a part\'s stress name the part: part = "...")'
            self._refuse(
                extra[0],
                f"{extra[0]!r} does not apply to a {self.kind!r} limit{hint}; its fields are "
                f"{', '.join(applies)}",
            )

    @property
    def label(self) -> str:
        if self.name:
            return self.name
        target = self.output or self.part or ""
        return f"{self.kind}_{target}" if target else self.kind


#: the fields (file keys) each limit kind takes, besides ``name`` and ``kind``
LIMIT_FIELDS: dict[str, tuple[str, ...]] = {
    "maximum": ("output", "max", "window"),
    "minimum": ("output", "min", "window"),
    "overshoot": ("output", "max", "after", "percent_of"),
    "settling": ("output", "band", "settled_by", "after", "percent_of"),
    "peak_current": ("part", "max"),
    "energy": ("part", "max"),
    "damping_ratio": ("min",),
    "pole_real_part": ("max",),
    "output_impedance": ("input", "output", "band", "max", "points"),
    "peak_after_switching": ("output", "part", "edge", "within", "max", "points"),
    "ring_settling": ("output", "part", "edge", "within", "settled_by", "max", "points"),
    "energy_per_period": ("part", "max"),
    "average_power": ("part", "max"),
    "efficiency": ("input", "loads", "min"),
}
# attribute name -> file key, where they differ
_KEY = {"by": "settled_by", "relative_to": "percent_of"}
_ATTRIBUTE = {v: k for k, v in _KEY.items()}


class Objective(_Strict):
    """A weighted sum; each term is normalised by its value at the starting point.

    * ``capacitance``: weight of the total capacitance of ``parts`` (the damping capacitors);
    * ``resistor_energy``: weight of the energy dissipated in ``parts`` (resistors);
    * ``squared_error``: weight of the integral of the squared error of ``output`` from
      its final value (attribute ``ise``);
    * ``peak_impedance``: weight of the peak output impedance over the band of every
      ``output_impedance`` limit (minimised, epigraph form).
    """

    capacitance: float = Field(default=0.0, ge=0)
    resistor_energy: float = Field(default=0.0, ge=0)
    ise: float = Field(default=0.0, ge=0, alias="squared_error")
    peak_impedance: float = Field(default=0.0, ge=0)
    parts: list[str] = Field(default_factory=list)
    output: str | None = None

    @model_validator(mode="after")
    def _something(self) -> Objective:
        if not any((self.capacitance, self.resistor_energy, self.ise, self.peak_impedance)):
            raise ValueError(
                "the objective needs a positive weight on capacitance, resistor_energy, "
                "squared_error or peak_impedance"
            )
        if (self.capacitance or self.resistor_energy) and not self.parts:
            raise ValueError("capacitance and resistor_energy terms need the list 'parts'")
        if self.ise and not self.output:
            raise ValueError("a 'squared_error' term needs 'output'")
        return self


class Ripple(_Strict):
    """A sinusoidal ripple on one circuit input (e.g. switching-frequency current)."""

    input: str
    amplitude: Quantity = Field(gt=0, description="peak amplitude, SI units of the input")
    frequency: Hertz = Field(gt=0)


class Stress(_Strict):
    ripple: Ripple | None = None
    tolerance_corners: Flag = Field(default=True, description="check every tolerance corner")
    corners_must_pass: Flag = Field(
        default=False,
        description="choose the preferred values (three neighbours each side) so that every "
        "tolerance corner meets every limit, not only the nominal values",
    )


class SolverOptions(_Strict):
    """IPOPT settings (rarely needed), and ``robust``.

    ``robust = true`` imposes every limit inside the optimiser not only at the nominal part
    values but also at every tolerance corner (each resistor, capacitor and inductor with
    a ``tolerance`` t, design variables included, at ``value * (1 +- t)``; at most 8 parts,
    design variables first, so at most 256 corners), with the same design variables and
    the objective at nominal values. The continuous optimum then meets every limit at
    every corner, and snapping prefers the preferred values that do too (as with
    ``stress.corners_must_pass``). Each corner adds the nominal problem's constraints once
    more, so solve time grows with the number of corners. Needs
    ``stress.tolerance_corners = true``.
    """

    max_iterations: int = Field(default=300, ge=1, le=10000)
    tolerance: float = Field(default=1e-8, gt=0, lt=1)
    robust: Flag = Field(
        default=False,
        description="impose every limit at the nominal values and at every tolerance corner "
        "inside the optimiser, and snap to values that pass every corner",
    )


class TuningSpec(_Strict):
    """A validated tuning file (SI base units)."""

    tuning: TuningHeader
    variables: dict[str, DesignVariable]
    controller: Controller | None = None
    scenario: Scenario
    limits: list[Limit] = Field(default_factory=list)
    objective: Objective
    stress: Stress = Field(default_factory=Stress)
    solver: SolverOptions = Field(default_factory=SolverOptions)
    # the file's directory, set by the loader (never by the file, never in the schema)
    base_dir: SkipJsonSchema[str] = Field(default=".", exclude=True)

    @model_validator(mode="after")
    def _checks(self) -> TuningSpec:
        if not self.variables:
            raise ValueError("at least one design variable is needed")
        labels = [limit.label for limit in self.limits]
        duplicates = sorted({x for x in labels if labels.count(x) > 1})
        if duplicates:
            raise ValueError(f"limit names must be unique; repeated: {', '.join(duplicates)}")
        if self.tuning.system is not None and self.controller is not None:
            raise ValueError(
                "with 'system' the controllers are blocks of the system file; remove the "
                "[controller] table"
            )
        if self.objective.peak_impedance and not any(
            limit.kind == "output_impedance" for limit in self.limits
        ):
            raise ValueError("a 'peak_impedance' objective needs an 'output_impedance' limit")
        return self

    @property
    def name(self) -> str:
        return self.tuning.name

    @property
    def circuit_path(self) -> Path:
        """The circuit file (with 'system': see :attr:`system_path`; the design block's
        file is known once the system file is read)."""
        return Path(self.base_dir) / (self.tuning.circuit or self.tuning.system or "")

    @property
    def system_path(self) -> Path | None:
        return None if self.tuning.system is None else Path(self.base_dir) / self.tuning.system


def parse_tuning(
    data: dict[str, Any], *, file: str | None = None, base_dir: str = "."
) -> TuningSpec:
    """Validate a tuning file given as a mapping (the parsed TOML)."""
    expect_file_kind(data, "tuning", file=file)
    data = dict(data)
    if "base_dir" in data:
        # set from the file's place, never from the file (and not in the schema)
        raise TuningError(
            "unknown_field", "unknown field 'base_dir'", file=file, location=("base_dir",)
        )
    data["base_dir"] = base_dir
    return validate(TuningSpec, data, file=file)


def load_tuning(path: str | Path) -> TuningSpec:
    """Read and validate a tuning file (TOML); the circuit path is taken relative to it."""
    path = Path(path)
    return parse_tuning(read_toml(path), file=str(path), base_dir=str(path.parent))


#: the unit of a limit's bound, by kind ("output": the unit of the output it names;
#: None: a bare number or a fraction, any written unit is refused)
_LIMIT_UNITS: dict[str, str | None] = {
    "maximum": "output",
    "minimum": "output",
    "peak_current": "A",
    "energy": "J",
    "output_impedance": "ohm",
    "damping_ratio": None,
    "pole_real_part": None,
    "peak_after_switching": "output",
    "ring_settling": "output",
    "energy_per_period": "J",
    "average_power": "W",
    "efficiency": None,
}


def check_units(spec: TuningSpec, units: dict[str, str], *, file: str | None = None) -> None:
    """Refuse limit bounds and scenario values written in a unit other than what they name.

    Parameters
    ----------
    spec
        The validated tuning file; its :class:`Written` values remember their units.
    units
        Unit of every signal and state of the loop (``V``, ``A``, ...; ``""`` or missing
        where unknown, and then nothing is checked). The controller's ``reference`` input
        takes the unit of the measured output.
    file
        The tuning file, for messages.

    Raises
    ------
    TuningError
        ``wrong_unit`` naming the field, the unit written and the unit expected.
    """
    units = dict(units)
    if spec.controller is not None:
        units.setdefault("reference", units.get(spec.controller.measure, ""))

    def check(value: Any, expected: str | None, what: str, location: tuple) -> None:
        written = getattr(value, "unit", None)
        if written is None or written == expected or expected in ("", "*", "output"):
            return
        shown = "a bare number" if expected is None else expected
        raise TuningError(
            "wrong_unit",
            f"{what} is written in {written}; it must be {shown}",
            file=file,
            location=location,
        )

    for limit in spec.limits:
        expected = _LIMIT_UNITS.get(limit.kind, "")
        if expected == "output":
            expected = units.get(limit.output or "", "")
        for key in ("max", "min"):
            value = getattr(limit, key)
            if value is not None:
                what = f"limit {limit.label!r}: {key}"
                check(value, expected, what, ("limits", limit.label, key))
    scenario = spec.scenario
    for name, value in scenario.inputs.items():
        check(value, units.get(name, ""), f"scenario input {name!r}", ("scenario", "inputs", name))
    for index, step in enumerate(scenario.steps):
        what = f"the step of {step.input!r} (to)"
        check(step.to, units.get(step.input, ""), what, ("scenario", "steps", index, "to"))
    for name, value in scenario.initial_values.items():
        where = ("scenario", "initial_values", name)
        check(value, units.get(name, ""), f"initial value of {name!r}", where)
    ripple = spec.stress.ripple
    if ripple is not None:
        what = f"the ripple on {ripple.input!r} (amplitude)"
        check(
            ripple.amplitude, units.get(ripple.input, ""), what, ("stress", "ripple", "amplitude")
        )
    if spec.controller is not None and spec.controller.reference is not None:
        check(
            spec.controller.reference,
            units["reference"],
            "controller reference",
            ("controller", "reference"),
        )
