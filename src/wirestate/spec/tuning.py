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

    [controller]                # optional PI loop around the circuit
    measure = "i_motor"         # a circuit output
    drive = "Vm"                # a circuit input
    proportional = 0.63         # drive units per measured unit
    integral = 157.0            # per second
    # reference = "30A"         # default: the measured output at the operating point
    # sample_time = "20us"      # a sampled PI held by a zero-order hold

    [scenario]
    horizon = "8ms"
    step = "10us"
    initial = "steady_state"    # or "zero"
    # initial_values = { v_Cf = "42V" }   # states set at t = 0 on top of that
    # [scenario.waveforms]      # disturbances in the syntax of `simulate --input`
    # Iport = "sine:2A,2kHz,start=2ms"
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
    relative_to = "final"       # or "change" (classic percent overshoot)
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

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, model_validator

from wirestate.spec.load import read_toml, validate
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


Seconds = Annotated[float, BeforeValidator(_seconds)]
Hertz = Annotated[float, BeforeValidator(_hertz)]
Fraction = Annotated[float, BeforeValidator(_fraction)]
Quantity = Annotated[float, BeforeValidator(_any_quantity)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


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
            # (neither, with 'block': the system is given in Python, see TuningModel)
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
    written_units: dict[str, str] = Field(default_factory=dict, exclude=True)

    @model_validator(mode="before")
    @classmethod
    def _remember_units(cls, data: Any) -> Any:
        # the part kind is known only once the circuit is read; keep the units as written
        if isinstance(data, dict):
            data = dict(data)
            data["written_units"] = {
                k: u for k in ("min", "max", "start") if (u := unit_of(data.get(k))) is not None
            }
        return data

    @model_validator(mode="after")
    def _ordered(self) -> DesignVariable:
        if not self.min < self.max:
            raise ValueError(f"min ({self.min:g}) must be below max ({self.max:g})")
        if self.start is not None and not self.min <= self.start <= self.max:
            raise ValueError(f"start ({self.start:g}) must lie within [min, max]")
        return self


class Controller(_Strict):
    """A PI controller: ``drive = offset + kp e + ki int e``, ``e = reference - measure``.

    With ``sample_time`` the PI is sampled (forward-Euler integral) and its output held
    by a zero-order hold; the scenario step must divide the sample time, and the limits
    are checked at every scenario step, between the samples too.
    """

    measure: str = Field(description="circuit output the controller measures")
    drive: str = Field(description="circuit input the controller drives")
    proportional: float = Field(description="kp, drive units per measured unit")
    integral: float = Field(default=0.0, ge=0, description="ki, per second")
    reference: Quantity | None = Field(
        default=None, description="setpoint; default: the measured output at the operating point"
    )
    sample_time: Seconds | None = Field(default=None, gt=0)


class InputStep(_Strict):
    input: str
    at: Seconds = Field(ge=0)
    to: Quantity


class Scenario(_Strict):
    horizon: Seconds = Field(gt=0)
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
        "--input' (e.g. 'sine:2A,2kHz,offset=30A,start=1ms'), sampled at the scenario "
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
            raise ValueError("the sample step must be shorter than the horizon")
        count = self.horizon / self.step
        # a horizon between two grid points would be rounded silently (issue 10.7); the
        # 1e-9 relative slack only absorbs the rounding of decimal prefixes
        if abs(count - round(count)) > 1e-9 * count:
            raise ValueError(
                f"the horizon ({self.horizon:g} s) is not a whole number of steps "
                f"({self.step:g} s; {count:.4f} steps): make it {round(count) * self.step:g} s "
                "or choose a step that divides it"
            )
        for s in self.steps:
            if s.at >= self.horizon:
                raise ValueError(f"step of {s.input!r} at {s.at:g} s lies beyond the horizon")
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


class Limit(_Strict):
    """One limit. Which fields apply depends on ``kind``:

    * ``maximum`` / ``minimum``: ``output``, ``max`` / ``min``, optional ``window``;
    * ``overshoot``: ``output``, ``max`` (fraction or %) of the step in the final value
      after ``after`` (the overshoot beyond the final value, relative to the change);
    * ``settling``: ``output``, ``band`` (fraction or %) of the change, reached ``by``;
    * ``peak_current``: ``part``, ``max`` (A, absolute value over the horizon);
    * ``energy``: ``part`` (a resistor), ``max`` (J dissipated over the horizon);
    * ``damping_ratio``: ``min`` of every closed-loop pole;
    * ``pole_real_part``: ``max`` real part of every closed-loop pole (1/s, negative);
    * ``output_impedance``: ``input`` (a current source injecting at the port),
      ``output`` (the port voltage), ``band`` = [f_low, f_high] in Hz, ``max`` in ohm.
    """

    name: str | None = None
    kind: Literal[LIMIT_KINDS]  # type: ignore[valid-type]
    output: str | None = None
    input: str | None = None
    part: str | None = None
    max: Quantity | None = None
    min: Quantity | None = None
    window: tuple[Seconds, Seconds] | None = None
    after: Seconds = 0.0
    by: Seconds | None = None
    band: tuple[Hertz, Hertz] | Fraction | None = None
    points: int = Field(default=200, ge=10, le=5000, description="frequency grid points")
    relative_to: Literal["change", "final"] = Field(
        default="change",
        description="overshoot and settling band relative to the change of the final value "
        "(one-sided overshoot) or to the final value itself (deviation either way)",
    )

    @model_validator(mode="before")
    @classmethod
    def _read_fractions(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("kind") in ("overshoot",) and "max" in data:
            data = dict(data)
            data["max"] = _fraction(data["max"])
        return data

    @model_validator(mode="after")
    def _fields_for_kind(self) -> Limit:
        need: dict[str, tuple[str, ...]] = {
            "maximum": ("output", "max"),
            "minimum": ("output", "min"),
            "overshoot": ("output", "max"),
            "settling": ("output", "band", "by"),
            "peak_current": ("part", "max"),
            "energy": ("part", "max"),
            "damping_ratio": ("min",),
            "pole_real_part": ("max",),
            "output_impedance": ("input", "output", "band", "max"),
        }
        for field in need[self.kind]:
            if getattr(self, field) is None:
                raise ValueError(f"a {self.kind!r} limit needs the field {field!r}")
        if self.kind == "output_impedance" and not isinstance(self.band, tuple):
            raise ValueError("an 'output_impedance' limit takes band = [f_low, f_high] in Hz")
        if self.kind == "settling" and isinstance(self.band, tuple):
            raise ValueError("a 'settling' limit takes band as a fraction such as '2%'")
        if isinstance(self.band, tuple) and not 0 < self.band[0] < self.band[1]:
            raise ValueError("band must be [f_low, f_high] with 0 < f_low < f_high")
        if self.window is not None and not self.window[0] < self.window[1]:
            raise ValueError("window must be [t_start, t_end] with t_start < t_end")
        return self

    @property
    def label(self) -> str:
        if self.name:
            return self.name
        target = self.output or self.part or ""
        return f"{self.kind}_{target}" if target else self.kind


class Objective(_Strict):
    """A weighted sum; each term is normalised by its value at the starting point.

    * ``capacitance``: weight of the total capacitance of ``parts`` (the damping capacitors);
    * ``resistor_energy``: weight of the energy dissipated in ``parts`` (resistors);
    * ``ise``: weight of the integral squared error of ``output`` from its final value;
    * ``peak_impedance``: weight of the peak output impedance over the band of every
      ``output_impedance`` limit (minimised, epigraph form).
    """

    capacitance: float = Field(default=0.0, ge=0)
    resistor_energy: float = Field(default=0.0, ge=0)
    ise: float = Field(default=0.0, ge=0)
    peak_impedance: float = Field(default=0.0, ge=0)
    parts: list[str] = Field(default_factory=list)
    output: str | None = None

    @model_validator(mode="after")
    def _something(self) -> Objective:
        if not any((self.capacitance, self.resistor_energy, self.ise, self.peak_impedance)):
            raise ValueError(
                "the objective needs a positive weight on capacitance, resistor_energy, "
                "ise or peak_impedance"
            )
        if (self.capacitance or self.resistor_energy) and not self.parts:
            raise ValueError("capacitance and resistor_energy terms need the list 'parts'")
        if self.ise and not self.output:
            raise ValueError("an 'ise' term needs 'output'")
        return self


class Ripple(_Strict):
    """A sinusoidal ripple on one circuit input (e.g. switching-frequency current)."""

    input: str
    amplitude: Quantity = Field(gt=0, description="peak amplitude, SI units of the input")
    frequency: Hertz = Field(gt=0)


class Stress(_Strict):
    ripple: Ripple | None = None
    tolerance_corners: bool = Field(default=True, description="check every tolerance corner")
    corners_must_pass: bool = Field(
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
    robust: bool = Field(
        default=False,
        description="impose every limit at the nominal values and at every tolerance corner "
        "inside the optimiser, and snap to values that pass every corner",
    )


class TuningSpec(_Strict):
    """A validated tuning file (SI base units). ``base_dir`` is the file's directory."""

    tuning: TuningHeader
    variables: dict[str, DesignVariable]
    controller: Controller | None = None
    scenario: Scenario
    limits: list[Limit] = Field(default_factory=list)
    objective: Objective
    stress: Stress = Field(default_factory=Stress)
    solver: SolverOptions = Field(default_factory=SolverOptions)
    base_dir: str = Field(default=".", exclude=True)

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
    data = dict(data)
    data["base_dir"] = base_dir
    return validate(TuningSpec, data, file=file)


def load_tuning(path: str | Path) -> TuningSpec:
    """Read and validate a tuning file (TOML); the circuit path is taken relative to it."""
    path = Path(path)
    return parse_tuning(read_toml(path), file=str(path), base_dir=str(path.parent))
