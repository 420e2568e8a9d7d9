"""Input waveforms and their one-line text form.

A waveform is written ``KIND:ARGUMENTS`` (on the command line ``NAME=KIND:ARGUMENTS``):
the main value first, then ``key=value`` options in any order. Values carry the unit of the
input they drive (``V`` for a voltage source, ``A`` for a current source, ``rad/s`` for a
speed input, ``N*m`` for a torque); times carry ``s`` with an SI prefix.

=============================================  ================================
Each kind is one entry of :data:`WAVEFORM_KINDS` (a function from the parsed arguments to
a :class:`Waveform`), so a new waveform is one more function and one more entry. Each
waveform evaluates on a numpy time grid (:meth:`Waveform.values`) and, for the CasADi
integrators, as a symbolic expression of time (:meth:`Waveform.expression`).
"""

from __future__ import annotations

import csv
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from wirestate.errors import SimulationError, WirestateError
from wirestate.units import PREFIXES, UNITS, parse_quantity


@dataclass(frozen=True)
class Waveform:
    """Base class: a scalar input signal ``u(t)`` in SI units."""

    def values(self, t: np.ndarray) -> np.ndarray:
        """The waveform on the time grid ``t`` (s)."""
        raise NotImplementedError

    def expression(self, t):  # pragma: no cover - overridden
        """The waveform as a CasADi expression of the symbol ``t``."""
        raise NotImplementedError

    @property
    def breakpoints(self) -> tuple[float, ...]:
        """Times (s) where the waveform or its slope jumps (integrators restart there)."""
        return ()


@dataclass(frozen=True)
class Constant(Waveform):
    value: float

    def values(self, t: np.ndarray) -> np.ndarray:
        return np.full(np.shape(t), self.value, dtype=float)

    def expression(self, t):
        return self.value + 0 * t


@dataclass(frozen=True)
class Step(Waveform):
    """``initial`` before ``at``, ``final`` from ``at`` on (the step belongs to ``at``)."""

    final: float
    at: float = 0.0
    initial: float = 0.0

    def values(self, t: np.ndarray) -> np.ndarray:
        return np.where(np.asarray(t) >= self.at, self.final, self.initial).astype(float)

    def expression(self, t):
        import casadi as ca

        return ca.if_else(t >= self.at, self.final, self.initial)

    @property
    def breakpoints(self) -> tuple[float, ...]:
        return (self.at,)


@dataclass(frozen=True)
class PiecewiseLinear(Waveform):
    """Linear between ``(times[i], levels[i])``, constant outside the points."""

    times: tuple[float, ...]
    levels: tuple[float, ...]

    def values(self, t: np.ndarray) -> np.ndarray:
        return np.interp(np.asarray(t, dtype=float), self.times, self.levels)

    def expression(self, t):
        import casadi as ca

        if len(self.times) == 1:
            return self.levels[0] + 0 * t
        # clamp to the end values, as np.interp does
        tc = ca.fmin(ca.fmax(t, self.times[0]), self.times[-1])
        return ca.pw_lin(tc, ca.DM(self.times), ca.DM(self.levels))

    @property
    def breakpoints(self) -> tuple[float, ...]:
        return tuple(self.times)


@dataclass(frozen=True)
class Sine(Waveform):
    """``offset + amplitude sin(2 pi frequency (t - start) + phase)`` for t >= start."""

    amplitude: float
    frequency: float
    offset: float = 0.0
    phase: float = 0.0  # rad
    start: float = 0.0

    def values(self, t: np.ndarray) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        wave = self.offset + self.amplitude * np.sin(
            2 * math.pi * self.frequency * (t - self.start) + self.phase
        )
        return np.where(t >= self.start, wave, self.offset)

    def expression(self, t):
        import casadi as ca

        wave = self.offset + self.amplitude * ca.sin(
            2 * math.pi * self.frequency * (t - self.start) + self.phase
        )
        return ca.if_else(t >= self.start, wave, self.offset)

    @property
    def breakpoints(self) -> tuple[float, ...]:
        return (self.start,)


@dataclass(frozen=True)
class InputSet:
    """Waveforms by input name; inputs not listed are held at zero."""

    waveforms: dict[str, Waveform] = field(default_factory=dict)

    def matrix(self, names: Sequence[str], t: np.ndarray) -> np.ndarray:
        """``(len(names), len(t))`` samples, zero rows for inputs without a waveform."""
        U = np.zeros((len(names), len(t)))
        for row, name in enumerate(names):
            if name in self.waveforms:
                U[row] = self.waveforms[name].values(t)
        return U

    @property
    def breakpoints(self) -> tuple[float, ...]:
        return tuple(sorted({b for w in self.waveforms.values() for b in w.breakpoints}))


#: marks an input whose unit is not known (a bare control.StateSpace): any unit is read
ANY_UNIT = "*"


#: signal units that wirestate.units has no field for (mechanical outputs, positions)
EXTRA_UNITS: dict[str, tuple[str, ...]] = {
    "m": ("m",),
    "m/s": ("m/s",),
    "rad": ("rad",),
}

_NUMBER = re.compile(r"^\s*([+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(.*?)\s*$")


def _unit_key(unit: str | None) -> str:
    if unit in EXTRA_UNITS:
        return unit
    return unit if unit in UNITS and unit != "1" else ANY_UNIT


def _extra_quantity(text: str, unit: str) -> float:
    # same reading rule as wirestate.units: the unit spelling is matched first, so "0.5m"
    # on a position is 0.5 metre and "0.5mm" is half a millimetre
    match = _NUMBER.match(text)
    if match is None:
        raise ValueError(f"cannot read {text!r} as a number with an optional SI prefix and {unit}")
    number, rest = float(match.group(1)), match.group(2).replace(" ", "")
    if rest == "":
        return number
    for spelling in EXTRA_UNITS[unit]:
        if rest.endswith(spelling) and rest[: -len(spelling)] in PREFIXES:
            return number * PREFIXES[rest[: -len(spelling)]]
    raise ValueError(f"{text!r} is not in {unit}")


def parse_waveform(
    text: str, unit: str | None = None, *, name: str = "input", base: Path | None = None
) -> Waveform:
    """Read a waveform from its text form (see the module docstring for the syntax).

    Parameters
    ----------
    text
        For example ``"step:48V,at=1ms"``.
    unit
        Unit of the input it drives (a key of :data:`wirestate.units.UNITS`; anything
        else accepts plain numbers only).
    name
        Input name, used in messages and to pick a CSV column.
    base
        Directory that relative CSV paths are read from (default: the working directory).

    Raises
    ------
    SimulationError
        ``invalid_input_signal`` naming the input and what was wrong.
    """
    unit_key = _unit_key(unit)
    text = text.strip()
    try:
        if ":" not in text:
            return Constant(_value(text, unit_key))
        kind, _, rest = text.partition(":")
        kind = kind.strip().lower()
        if kind not in WAVEFORM_KINDS:
            raise SimulationError(
                "invalid_input_signal",
                f"unknown waveform {kind!r}; expected one of {', '.join(WAVEFORM_KINDS)}",
                location=("inputs", name),
            )
        if kind == "csv":
            return _csv(rest, name, base)
        if kind == "pwm":  # gate waveform with closed-form edges (its own parser)
            from wirestate.simulate.pwm import parse_pwm

            return parse_pwm(rest)
        positional, options = _arguments(rest)
        return WAVEFORM_KINDS[kind](_Arguments(kind, positional, options, unit_key))
    except WirestateError as exc:
        code = "file_not_found" if exc.code == "file_not_found" else "invalid_input_signal"
        raise SimulationError(
            code,
            f"{text!r}: {exc.message}",
            file=exc.file,
            location=("inputs", name),
        ) from None
    except ValueError as exc:
        raise SimulationError(
            "invalid_input_signal", f"{text!r}: {exc}", location=("inputs", name)
        ) from None


@dataclass(frozen=True)
class _Arguments:
    """The parsed ``KIND:ARGUMENTS`` text handed to one entry of :data:`WAVEFORM_KINDS`."""

    kind: str
    positional: list[str]
    options: dict[str, str]
    unit_key: str

    def expect(self, count: int, allowed: set[str]) -> None:
        _expect(self.positional, self.options, count, allowed, self.kind)

    def value(self, key: str, default: str = "0") -> float:
        return _value(self.options.get(key, default), self.unit_key)

    def time(self, key: str, default: str | None = "0") -> float:
        if key not in self.options and default is None:
            raise ValueError(f"{self.kind} needs {key}=TIME")
        return _time(self.options.get(key, default or "0"))


def _const(a: _Arguments) -> Waveform:
    a.expect(1, set())
    return Constant(_value(a.positional[0], a.unit_key))


def _step(a: _Arguments) -> Waveform:
    a.expect(1, {"at", "from"})
    return Step(_value(a.positional[0], a.unit_key), a.time("at"), a.value("from"))


def _ramp(a: _Arguments) -> Waveform:
    a.expect(1, {"from", "start", "end"})
    start, end = a.time("start"), a.time("end", default=None)
    if not end > start:
        raise ValueError(f"a ramp must end after it starts (start {start:g} s, end {end:g} s)")
    return PiecewiseLinear((start, end), (a.value("from"), _value(a.positional[0], a.unit_key)))


def _sinusoid(a: _Arguments) -> Waveform:
    a.expect(2, {"mean", "phase", "start"})
    frequency = parse_quantity(a.positional[1], "Hz", field="")
    if not frequency > 0:
        # a negative frequency is the same wave with its sign and phase turned, zero Hz a
        # constant: both are a mistake when written as a sinusoid
        raise ValueError(f"the sinusoid frequency must be positive, got {a.positional[1]!r}")
    return Sine(
        _value(a.positional[0], a.unit_key),
        frequency,
        offset=a.value("mean"),
        phase=math.radians(_degrees(a.options.get("phase", "0"))),
        start=a.time("start"),
    )


def _points(a: _Arguments) -> Waveform:
    if a.positional:
        raise ValueError(f"points are written TIME=VALUE, such as 1ms=48V, got {a.positional[0]!r}")
    if not a.options:
        raise ValueError("points needs at least one TIME=VALUE")
    # _arguments keeps the option order (dict insertion order): the points as written
    times = [_time(t) for t in a.options]
    if any(b <= c for c, b in zip(times, times[1:], strict=False)):
        raise ValueError("the times of points must increase strictly")
    levels = [_value(v, a.unit_key) for v in a.options.values()]
    return PiecewiseLinear(tuple(times), tuple(levels))


def _degrees(text: str) -> float:
    text = text.strip()
    # parse_quantity refuses NaN and infinity, naming the field
    return parse_quantity(text[:-3] if text.endswith("deg") else text, "1", field="phase")


#: waveform kind -> parser of its arguments (``csv`` reads a file and is handled apart)
WAVEFORM_KINDS = {
    "const": _const,
    "step": _step,
    "ramp": _ramp,
    "sinusoid": _sinusoid,
    "points": _points,
    "csv": None,
    "pwm": None,
}


def parse_assignment(text: str) -> tuple[str, str]:
    """Split ``NAME=WAVEFORM`` (the ``--input`` option) into its two halves."""
    name, sep, wave = text.partition("=")
    name = name.strip()
    if not sep or not name or not wave.strip():
        raise SimulationError(
            "invalid_input_signal",
            f"expected NAME=WAVEFORM such as 'Vs=step:48V', got {text!r}",
            location=("inputs",),
        )
    return name, wave.strip()


def build_inputs(
    assignments: Mapping[str, str | float | Waveform] | InputSet,
    names: Sequence[str],
    units: Mapping[str, str],
    *,
    defaults: Mapping[str, float] | None = None,
    base: Path | None = None,
) -> InputSet:
    """Waveforms for a block's inputs.

    ``assignments`` maps input names to waveform text, numbers (constants) or
    :class:`Waveform` objects. Inputs not assigned but present in ``defaults`` (a source's
    ``value`` field) are driven by that constant. An assignment to an unknown input raises
    ``unknown_signal``. An :class:`InputSet` is returned as it is.
    """
    if isinstance(assignments, InputSet):
        return assignments
    waveforms: dict[str, Waveform] = {}
    for name, value in (defaults or {}).items():
        if name in names and value is not None:
            waveforms[name] = Constant(float(value))
    for name, value in assignments.items():
        if name not in names:
            raise SimulationError(
                "unknown_signal",
                f"no input named {name!r} (inputs: {', '.join(names) or 'none'})",
                location=("inputs", name),
            )
        if isinstance(value, Waveform):
            waveforms[name] = value
        elif isinstance(value, int | float) and not isinstance(value, bool):
            waveforms[name] = Constant(float(value))
        else:
            waveforms[name] = parse_waveform(str(value), units.get(name), name=name, base=base)
    return InputSet(waveforms)


def _arguments(rest: str) -> tuple[list[str], dict[str, str]]:
    positional: list[str] = []
    options: dict[str, str] = {}
    if "@" in rest:
        raise ValueError(
            "times are written as options: at=TIME (step), start=/end=TIME (ramp), "
            "TIME=VALUE (points)"
        )
    for item in rest.split(","):
        item = item.strip()
        if not item:
            raise ValueError("empty argument")
        key, sep, value = item.partition("=")
        if sep:
            key = key.strip()
            if key in options:
                raise ValueError(f"{key!r} is given twice")
            options[key] = value.strip()
        elif options:
            raise ValueError(f"positional argument {item!r} after a key=value option")
        else:
            positional.append(item)
    return positional, options


def _expect(
    positional: list[str], options: dict[str, str], count: int, allowed: set[str], kind: str
) -> None:
    if len(positional) != count:
        raise ValueError(f"{kind} takes {count} positional argument(s), got {len(positional)}")
    unknown = set(options) - allowed
    if unknown:
        raise ValueError(
            f"{kind} has no option {sorted(unknown)[0]!r} "
            f"(options: {', '.join(sorted(allowed)) or 'none'})"
        )


def _value(text: str, unit_key: str) -> float:
    if unit_key in EXTRA_UNITS:
        return _extra_quantity(text, unit_key)
    if unit_key != ANY_UNIT:
        return parse_quantity(text, unit_key, field="")
    # unit unknown: a plain number, or a number in any unit wirestate reads
    try:
        return parse_quantity(text, "1", field="")
    except WirestateError as exc:
        if exc.code != "wrong_unit":
            raise
    for key in UNITS:
        try:
            return parse_quantity(text, key, field="")
        except WirestateError:
            continue
    raise SimulationError("invalid_quantity", f"cannot read {text!r} as a value with a unit")


def _time(text: str) -> float:
    return parse_quantity(text, "s", field="")


def _csv_source(rest: str, base: Path | None) -> tuple[Path, str]:
    """The file and the column option of a ``csv:FILE[,column=NAME]`` waveform."""
    path_text, _, option = rest.partition(",column=")
    path = Path(path_text.strip())
    if base is not None and not path.is_absolute():
        path = base / path
    return path, option


def input_files(waveforms: Sequence[str], base: Path | None = None) -> list[Path]:
    """The files that ``csv:`` waveform texts read (so that no output replaces them)."""
    found = []
    for text in waveforms:
        kind, sep, rest = text.strip().partition(":")
        if sep and kind.strip().lower() == "csv":
            found.append(_csv_source(rest, base)[0])
    return found


def _csv(rest: str, name: str, base: Path | None) -> PiecewiseLinear:
    path, option = _csv_source(rest, base)
    try:
        with path.open(newline="", encoding="utf-8") as handle:
            rows = list(csv.reader(handle))
    except OSError as exc:
        raise SimulationError(
            "file_not_found", f"cannot read input file: {exc.strerror}", file=str(path)
        ) from None
    if len(rows) < 2:
        raise ValueError(f"{path}: needs a header row and at least one data row")
    header = [h.strip() for h in rows[0]]
    if "time" not in header:
        raise ValueError(f"{path}: no 'time' column (columns: {', '.join(header)})")
    others = [h for h in header if h != "time"]
    column = option.strip() or (name if name in header else (others[0] if len(others) == 1 else ""))
    if column not in header or column == "time":
        raise ValueError(
            f"{path}: cannot tell which column drives {name!r}; use csv:FILE,column=NAME "
            f"(columns: {', '.join(header)})"
        )
    t_index, v_index = header.index("time"), header.index(column)
    times, levels = [], []
    for line, row in enumerate(rows[1:], start=2):
        if not row or all(not cell.strip() for cell in row):
            continue
        try:
            times.append(float(row[t_index]))
            levels.append(float(row[v_index]))
        except (ValueError, IndexError):
            raise ValueError(f"{path}: line {line} is not numeric") from None
    if any(b <= a for a, b in zip(times, times[1:], strict=False)):
        raise ValueError(f"{path}: times must increase strictly")
    if not all(math.isfinite(v) for v in times + levels):
        raise ValueError(f"{path}: values must be finite")
    return PiecewiseLinear(tuple(times), tuple(levels))
