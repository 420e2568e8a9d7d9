"""Pulse-width modulator block: a duty-cycle input to one gate or a complementary pair.

At the start of every carrier period the modulator latches its ``duty`` input (clipped to
0..1) and compares it with the carrier, as a digital converter controller does with
regular-sampled PWM (Holmes and Lipo, Pulse Width Modulation for Power Converters, 2003,
sec. 1.2): the gates of the whole period are then known in closed form.

* ``sawtooth`` carrier: the comparator is on for the first ``duty`` of the period
  (trailing-edge modulation); ``triangle``: on for ``duty`` of the period centred in it
  (both edges modulated).
* One output ``gate`` follows the comparator. With ``complementary = True`` the outputs
  are ``high`` (the comparator) and ``low`` (its complement), and every turn-on of either
  is delayed by ``dead_time`` after the comparator edge that asks for it (a turn-on that
  the comparator takes back within the dead time never happens); turn-offs are not
  delayed, so the two are never on together.
* ``phase`` delays the carrier by that fraction of a period.

The gates are 1 (on) and 0 (off), as the ``pwm:`` waveform of
:mod:`wirestate.simulate.pwm`, which is this block with a constant duty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

CARRIERS = ("sawtooth", "triangle")


def comparator_interval(carrier: str, duty: float, period: float) -> tuple[float, float]:
    """``(a, b)``: the comparator is on over ``[a, b)`` from the start of a carrier period.

    Parameters
    ----------
    carrier
        ``"sawtooth"`` or ``"triangle"``.
    duty
        Duty cycle, 0..1.
    period
        Carrier period (s).
    """
    if carrier == "sawtooth":
        return 0.0, duty * period
    return (1.0 - duty) * period / 2.0, (1.0 + duty) * period / 2.0


@dataclass
class Modulator:
    """A carrier-based pulse-width modulator (see the module docstring).

    Parameters
    ----------
    name
        Block name.
    frequency
        Carrier frequency (Hz).
    carrier
        ``"sawtooth"`` (default) or ``"triangle"``.
    dead_time
        Turn-on delay of each output of a complementary pair (s).
    complementary
        Two outputs ``high`` and ``low`` instead of one ``gate``.
    phase
        Carrier delay as a fraction of a period (0..1).
    """

    name: str
    frequency: float
    carrier: str = "sawtooth"
    dead_time: float = 0.0
    complementary: bool = False
    phase: float = 0.0
    inputs: list[str] = field(default_factory=lambda: ["duty"])

    def __post_init__(self) -> None:
        if not (math.isfinite(self.frequency) and self.frequency > 0):
            raise ValueError(f"the carrier frequency must be positive, got {self.frequency!r}")
        if self.carrier not in CARRIERS:
            raise ValueError(f"carrier must be one of {', '.join(CARRIERS)}")
        if not 0.0 <= self.dead_time < self.period:
            raise ValueError("dead_time must lie in [0, one carrier period)")
        self.phase = float(self.phase) % 1.0

    @property
    def period(self) -> float:
        """Carrier period (s)."""
        return 1.0 / self.frequency

    @property
    def outputs(self) -> list[str]:
        return ["high", "low"] if self.complementary else ["gate"]

    #: the gates follow the duty latched at a carrier start, not the duty now
    has_feedthrough = False

    @property
    def units(self) -> dict[str, str]:
        return dict.fromkeys([*self.inputs, *self.outputs], "1")

    def carrier_start(self, index: int) -> float:
        """Start of carrier period ``index`` (s); period 0 starts at ``phase * period``."""
        return (index + self.phase) * self.period

    def first_start_after(self, t: float, tolerance: float = 0.0) -> float:
        """The first carrier start later than ``t + tolerance`` (s)."""
        k = math.floor((t + tolerance) / self.period - self.phase) + 1
        return self.carrier_start(k)

    def schedule(self) -> GateSchedule:
        """A fresh gate schedule for a run (all gates off until the first latch)."""
        return GateSchedule(self)


class GateSchedule:
    """The gates of one modulator over a run: latches and the edges they give.

    :meth:`latch` takes a duty at a carrier start; :meth:`next_edge` is the next time an
    output changes; :meth:`advance_to` applies the changes due; :attr:`values` are the
    outputs now.
    """

    def __init__(self, modulator: Modulator) -> None:
        self.m = modulator
        self.comparator = 0
        self.values = np.zeros(len(modulator.outputs))
        self._pending: list[tuple[float, int, float]] = []  # (time, output, value)
        self.latched: list[tuple[float, float]] = []  # (time, duty) of every latch

    def latch(self, t: float, duty: float, *, start: float | None = None) -> None:
        """Take ``duty`` (clipped to 0..1) for the carrier period starting at ``start``
        (default ``t``); comparator edges of that period before ``t`` set the outputs at
        once (the start of a run inside a period), later ones are scheduled."""
        m = self.m
        start = t if start is None else start
        duty = min(1.0, max(0.0, float(duty))) if math.isfinite(duty) else 0.0
        self.latched.append((t, duty))
        a, b = comparator_interval(m.carrier, duty, m.period)
        if duty <= 0.0:
            changes = [(start, 0)]
        elif duty >= 1.0:
            changes = [(start, 1)]
        else:
            changes = [(start, 1 if a == 0.0 else 0)]
            if a > 0.0:
                changes.append((start + a, 1))
            changes.append((start + b, 0))
        earlier = [value for when, value in changes if when < t]
        if earlier:  # the run starts inside this period: no dead time to wait out
            self.comparator = earlier[-1]
            self._pending.clear()
            self.values[:] = [self.comparator, 1 - self.comparator][: len(self.values)]
        for when, value in changes:
            if when >= t:
                self._set_comparator(when, value)
        # stable: at one instant the turn-off is listed before the turn-on it allows
        self._pending.sort(key=lambda item: item[0])

    def _set_comparator(self, when: float, value: int) -> None:
        if value == self.comparator:
            return
        self.comparator = value
        on, off = (0, 1) if value == 1 else (1, 0)  # output turned on, output turned off
        if off < len(self.values):  # a single gate has no complement to switch
            # a turn-on of the output now turned off that had not happened yet never will
            self._pending = [p for p in self._pending if not (p[1] == off and p[0] > when)]
            self._pending.append((when, off, 0.0))
        if on < len(self.values):
            self._pending.append((when + self.m.dead_time, on, 1.0))

    def next_edge(self) -> float:
        """The next time an output changes (s), or infinity."""
        return self._pending[0][0] if self._pending else math.inf

    def advance_to(self, t: float, tolerance: float = 0.0) -> bool:
        """Apply every change due at or before ``t + tolerance``; True if one was applied."""
        changed = False
        while self._pending and self._pending[0][0] <= t + tolerance:
            _, output, value = self._pending.pop(0)
            changed = changed or self.values[output] != value
            self.values[output] = value
        return changed
