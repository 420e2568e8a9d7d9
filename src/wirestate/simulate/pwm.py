"""Pulse-width-modulated gate waveforms with edges known in closed form.

Text form (``simulate --input`` and scenarios), values 1 (on) and 0 (off)::

    pwm:100kHz,duty=0.42                      high-side gate, sawtooth carrier
    pwm:100kHz,duty=42%,side=low,dead=40ns    the other switch of the leg, 40 ns dead time
    pwm:100kHz,duty=0.42,carrier=triangle,phase=90deg

* ``duty``: on-time fraction of the high-side gate (0..1, or a percentage).
* ``carrier``: ``sawtooth`` (default; the high side turns on at each period start, trailing
  edge modulated) or ``triangle`` (symmetric; the high-side pulse is centred in the
  period, both edges modulated).
* ``side``: ``high`` (default) or ``low``, the complement of the high side.
* ``dead``: dead time; every turn-on edge of this gate is delayed by it, so a high and a
  low gate of one leg with the same ``dead`` are never on together.
* ``phase``: carrier delay as an angle of a period (``90deg``, or ``90`` in degrees).

Regular-sampled PWM as in digital converter controllers (Holmes and Lipo, Pulse Width
Modulation for Power Converters, 2003, ch. 1): the duty is constant here; the modulator
block of a system file (:mod:`wirestate.blocks.modulator`, the same comparator) latches a
new duty at every carrier period start.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from wirestate.blocks.modulator import CARRIERS, comparator_interval
from wirestate.simulate.inputs import Waveform, _arguments, _degrees
from wirestate.units import parse_quantity

SIDES = ("high", "low")


@dataclass(frozen=True)
class PulseWidth(Waveform):
    """A PWM gate: 1 while on, 0 while off (see the module docstring)."""

    frequency: float
    duty: float
    dead: float = 0.0
    phase: float = 0.0  # fraction of a period
    side: str = "high"
    carrier: str = "sawtooth"

    @property
    def period(self) -> float:
        return 1.0 / self.frequency

    def local_intervals(self) -> list[tuple[float, float]]:
        """On intervals relative to a carrier period start, over this and the next period."""
        T = self.period
        a, b = comparator_interval(self.carrier, self.duty, T)
        if self.side == "high":
            start, end = a, b
        else:
            start, end = b, a + T
        start += self.dead
        return [(start, end)] if end - start > 0.0 else []

    def intervals(self, t0: float, t1: float) -> list[tuple[float, float]]:
        """Merged on intervals (s) overlapping ``[t0, t1]``."""
        T = self.period
        offset = self.phase * T
        first = math.floor((t0 - offset) / T) - 1
        last = math.floor((t1 - offset) / T) + 1
        out: list[list[float]] = []
        for k in range(first, last + 1):
            base = offset + k * T
            for s, e in self.local_intervals():
                s, e = base + s, base + e
                if e < t0 or s > t1:
                    continue
                if out and s <= out[-1][1]:
                    out[-1][1] = max(out[-1][1], e)
                else:
                    out.append([s, e])
        return [(s, e) for s, e in out]

    def edges(self, t0: float, t1: float) -> list[float]:
        """Times in ``(t0, t1]`` where the gate switches, exact (closed form)."""
        times = [x for s, e in self.intervals(t0, t1) for x in (s, e)]
        return sorted(x for x in times if t0 < x <= t1)

    def values(self, t: np.ndarray) -> np.ndarray:
        t = np.asarray(t, dtype=float)
        T = self.period
        shifted = t - self.phase * T
        k = np.floor(shifted / T)
        local = shifted - k * T
        on = np.zeros(np.shape(t), dtype=bool)
        for s, e in self.local_intervals():
            for back in (0.0, T):  # this period's interval, or the previous one running over
                on |= (local + back >= s) & (local + back < e)
        return on.astype(float)

    def value_at(self, t: float) -> float:
        """The gate at one time (1.0 or 0.0); plain arithmetic, for the event loop."""
        T = self.period
        shifted = t - self.phase * T
        local = shifted - math.floor(shifted / T) * T
        for s, e in self.local_intervals():
            if s <= local < e or s <= local + T < e:
                return 1.0
        return 0.0

    def expression(self, t):
        import casadi as ca

        T = self.period
        shifted = t - self.phase * T
        local = shifted - ca.floor(shifted / T) * T
        on = 0
        for s, e in self.local_intervals():
            for back in (0.0, T):
                on = ca.fmax(on, ca.logic_and(local + back >= s, local + back < e))
        return on

    @property
    def breakpoints(self) -> tuple[float, ...]:
        return ()


def parse_pwm(rest: str) -> PulseWidth:
    """Read the arguments of ``pwm:...`` (after the colon); ``ValueError`` on a mistake.

    Same reading rules as the other waveforms (:func:`~wirestate.simulate.inputs.
    parse_waveform`): the carrier frequency first, then ``key=value`` options, each once.
    """
    positional, options = _arguments(rest)
    if len(positional) != 1:
        raise ValueError(
            "pwm takes the carrier frequency first and options after it, e.g. pwm:100kHz,duty=0.42"
        )
    frequency = parse_quantity(positional[0], "Hz", field="")
    if not frequency > 0:
        raise ValueError(f"the pwm frequency must be positive, got {positional[0]!r}")
    unknown = sorted(set(options) - set(PWM_OPTIONS))
    if unknown:
        raise ValueError(f"pwm has no option {unknown[0]!r} (options: {', '.join(PWM_OPTIONS)})")
    if "duty" not in options:
        raise ValueError("pwm needs duty=..., e.g. duty=0.42 or duty=42%")
    duty = _duty(options["duty"])
    dead = parse_quantity(options.get("dead", "0"), "s", field="")
    if not 0.0 <= dead * frequency < 0.5 - 1e-9:  # 5us at 100 kHz reads as 4.99...e-6 s
        # from half a period on, one switch of a leg never turns on at any duty (and a
        # single gate never at a duty below one half): no converter runs so
        raise ValueError(
            f"dead time must lie in [0, half a period) = [0, {0.5 / frequency:g} s), got "
            f"{options.get('dead')!r}"
        )
    side = options.get("side", "high").lower()
    carrier = options.get("carrier", "sawtooth").lower()
    if side not in SIDES:
        raise ValueError(f"side must be one of {', '.join(SIDES)}, got {side!r}")
    if carrier not in CARRIERS:
        raise ValueError(f"carrier must be one of {', '.join(CARRIERS)}, got {carrier!r}")
    phase = _degrees(options.get("phase", "0")) / 360.0
    return PulseWidth(frequency, duty, dead, phase % 1.0, side, carrier)


#: the options of ``pwm:``, in the order the messages list them
PWM_OPTIONS = ("duty", "dead", "side", "carrier", "phase")


def _duty(text: str) -> float:
    percent = text.endswith("%")
    duty = parse_quantity(text[:-1] if percent else text, "1", field="duty")
    duty = duty / 100.0 if percent else duty
    if not 0.0 <= duty <= 1.0:
        raise ValueError(f"duty must lie in 0..1 (or 0..100 %), got {text!r}")
    return duty
