"""Exact event-driven simulation of switched (piecewise-linear) circuits.

Within a mode the circuit is affine, ``dx/dt = A x + B u + f`` (see
:mod:`wirestate.switching`), and with the inputs held the state is advanced by the exact
zero-order hold of ``[A, [B f]]`` (Van Loan 1978, :mod:`wirestate.simulate.discretize`).
Every step is split at every event:

* **gate edges** of ``pwm:`` waveforms (and the jumps of step-like waveforms) are known in
  closed form and become segment boundaries exactly;
* **diode turn-on / turn-off** is located on the exact in-mode solution. With the mode's
  eigen-decomposition ``A = V diag(lambda) V^-1`` the diode voltage is an explicit sum
  of exponentials, ``v(tau) = Re(r (e^{lambda tau} z0 + tau phi1(lambda tau) b)) + q``
  with ``phi1(w) = (e^w - 1) / w`` (Moler and Van Loan, SIAM Review 45(1), 2003, method
  14 for the modal form). Sign changes are searched on points no further apart than an
  eighth of the mode's fastest oscillation period (at least a few per step, and
  geometrically close to an event just passed), and each root is refined by safeguarded
  Newton steps to ``min(1e-12 * step, 1 ps)``. Modes whose eigenvectors are
  ill-conditioned fall back to the matrix exponential at every trial point.

After each event the mode is re-evaluated: a diode is on when its voltage is above its
forward voltage (or on it and rising), off otherwise; one instant allows at most
``max_changes`` mode changes before a ``switching_chatter`` error names the parts.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
from scipy.linalg import expm

from wirestate.errors import SimulationError
from wirestate.simulate.discretize import Discretization
from wirestate.simulate.inputs import InputSet, Waveform, build_inputs
from wirestate.simulate.linear import time_grid
from wirestate.simulate.results import SimulationResult
from wirestate.switching import GATE_THRESHOLD, ModeModel, SwitchedCircuit, switched_circuit

#: event times are located to this fraction of the step, or this many seconds if smaller
EVENT_RELATIVE_TOLERANCE = 1e-12
EVENT_ABSOLUTE_TOLERANCE = 1e-12
#: modes whose eigenvector matrix is worse conditioned use the matrix exponential instead
MODAL_CONDITION_LIMIT = 1e8


class SwitchEvent(NamedTuple):
    """One mode change: ``(time, part, "off -> on")``."""

    time: float
    part: str
    change: str


@dataclass
class _Modal:
    """Eigen-decomposition of one mode and the diode voltage rows in modal coordinates."""

    lam: np.ndarray
    V: np.ndarray
    Vinv: np.ndarray
    R: np.ndarray  # diode voltage rows times V (complex)
    omega: float  # fastest oscillation (rad/s)
    ok: bool


class _ModeData:
    def __init__(self, mode: ModeModel, diode_rows: np.ndarray) -> None:
        self.mode = mode
        self.disc = Discretization(mode.A, mode.B_affine, max_entries=256)
        self.Pv = mode.P[diode_rows]
        self.Qv = mode.Q[diode_rows]
        self.pv = mode.p[diode_rows]
        self.modal = _modal(mode.A, self.Pv)


def _modal(A: np.ndarray, rows: np.ndarray) -> _Modal:
    n = A.shape[0]
    if n == 0:
        empty = np.zeros(0, complex)
        return _Modal(empty, np.zeros((0, 0)), np.zeros((0, 0)), rows.astype(complex), 0.0, True)
    lam, V = np.linalg.eig(A)
    ok = bool(np.all(np.isfinite(lam))) and np.linalg.cond(V) < MODAL_CONDITION_LIMIT
    Vinv = np.linalg.inv(V) if ok else np.zeros_like(V)
    omega = float(np.abs(lam.imag).max(initial=0.0))
    return _Modal(lam, V, Vinv, rows @ V, omega, ok)


def _phi1(w: np.ndarray) -> np.ndarray:
    small = np.abs(w) < 1e-8
    with np.errstate(all="ignore"):
        out = np.where(small, 1.0 + w / 2.0, np.expm1(w) / np.where(small, 1.0, w))
    return out


class SwitchedEngine:
    """State, mode and time of a switched circuit, advanced exactly with events.

    Parameters
    ----------
    circuit
        The switched circuit.
    x0
        Initial state (default: the parts' ``initial`` values).
    max_changes
        Mode changes allowed at one instant (default ``4 * devices + 4``).
    """

    def __init__(
        self,
        circuit: SwitchedCircuit,
        x0: np.ndarray | None = None,
        *,
        max_changes: int | None = None,
    ) -> None:
        self.circuit = circuit
        self.x = np.array(circuit.x0 if x0 is None else x0, dtype=float)
        self.on = list(circuit.off)
        self.time = 0.0
        self.events: list[SwitchEvent] = []
        self.max_changes = 4 * len(circuit.devices) + 4 if max_changes is None else max_changes
        devices = circuit.devices
        self.diodes = [k for k, d in enumerate(devices) if d.kind == "diode"]
        self.switches = [k for k, d in enumerate(devices) if d.kind == "switch"]
        self._diode_rows = np.array([len(devices) + k for k in self.diodes], dtype=int)
        self._vf = np.array([devices[k].forward_voltage for k in self.diodes])
        self._data: dict[tuple[bool, ...], _ModeData] = {}
        self._instant = (-math.inf, 0, [])  # (time, changes there, parts that changed)
        self._fresh = True  # the next segment starts at an event

    # -- modes ---------------------------------------------------------------------------
    def data(self, on: tuple[bool, ...] | None = None) -> _ModeData:
        key = tuple(self.on) if on is None else on
        found = self._data.get(key)
        if found is None:
            found = _ModeData(self.circuit.mode(key), self._diode_rows)
            self._data[key] = found
        return found

    def _change(self, k: int, record: bool) -> None:
        before = self.data()
        self.on[k] = not self.on[k]
        after = self.data()
        if record:
            d = self.circuit.devices[k]
            change = "off -> on" if self.on[k] else "on -> off"
            self.events.append(SwitchEvent(self.time, d.name, change))
            self._fresh = True
        # a shifted state keeps its physical value across the change
        if np.any(before.mode.state_offset != after.mode.state_offset):
            self.x = self.x + (before.mode.state_offset - after.mode.state_offset) @ self._u

    def apply(self, u: np.ndarray, *, record: bool = True) -> None:
        """Hold inputs ``u`` from now on: switches follow their gates, diodes settle."""
        self._u = np.asarray(u, dtype=float)
        for k in self.switches:
            want = self._u[self.circuit.gate_index[self.circuit.devices[k].name]] > GATE_THRESHOLD
            if want != self.on[k]:
                self._change(k, record)
        self.settle(record=record)

    def settle(self, *, record: bool = True) -> None:
        """Flip diodes until every one is consistent with its present voltage."""
        t, count, parts = self._instant
        if self.time != t:
            t, count, parts = self.time, 0, []
        while True:
            k = self._inconsistent_diode()
            if k is None:
                self._instant = (t, count, parts)
                return
            count += 1
            parts.append(self.circuit.devices[k].name)
            if count > self.max_changes:
                names = ", ".join(dict.fromkeys(parts))
                raise SimulationError(
                    "switching_chatter",
                    f"{self.circuit.name}: {names} changed mode {count} times at "
                    f"t = {self.time:.9g} s without settling (diodes and switches fighting "
                    "over one instant); check the gate timing or add series resistance",
                    location=("parts", parts[-1]),
                )
            self._change(k, record)

    def _inconsistent_diode(self) -> int | None:
        if not self.diodes:
            return None
        data = self.data()
        v = data.Pv @ self.x + data.Qv @ self._u + data.pv - self._vf
        on = np.array([self.on[k] for k in self.diodes])
        tol = 1e-9 * (1.0 + float(np.abs(self._u).max(initial=0.0)))
        wrong = np.where(on, v < -tol, v > tol)
        near = np.abs(v) <= tol
        if near.any():
            m = data.mode
            rate = data.Pv @ (m.A @ self.x + m.B @ self._u + m.f)
            wrong |= near & np.where(on, rate < 0.0, rate > 0.0)
        if not wrong.any():
            return None
        score = np.where(wrong, np.abs(v) + 1e-300, 0.0)
        return self.diodes[int(np.argmax(score))]

    # -- advancing -----------------------------------------------------------------------
    def advance(self, h: float) -> None:
        """Advance ``h`` seconds with the held inputs, splitting at every diode event."""
        tol_t = min(EVENT_RELATIVE_TOLERANCE * h, EVENT_ABSOLUTE_TOLERANCE)
        remaining = h
        end = self.time + h
        while remaining > 0.0:
            data = self.data()
            tau = self._first_crossing(data, remaining, tol_t) if self.diodes else None
            if tau is None:
                self.x = self._propagate(data, remaining)
                self.time = end
                self._fresh = False
                return
            self.x = self._propagate(data, tau) if tau > 0.0 else self.x
            remaining -= tau
            self.time = end - remaining if remaining > tol_t else end
            if remaining <= tol_t:
                remaining = 0.0
            self._fresh = False
            self.settle()

    def _propagate(self, data: _ModeData, tau: float) -> np.ndarray:
        Ad, Bd = data.disc.zoh(tau)
        return Ad @ self.x + Bd[:, :-1] @ self._u + Bd[:, -1]

    def _first_crossing(self, data: _ModeData, h: float, tol_t: float) -> float | None:
        """Earliest time in ``(0, h]`` where a diode leaves its side, or None."""
        m = data.modal
        grid = self._search_grid(m, h)
        sign = np.array([1.0 if self.on[k] else -1.0 for k in self.diodes])
        q = data.Qv @ self._u + data.pv - self._vf
        if m.ok:
            z0 = m.Vinv @ self.x
            b = m.Vinv @ (data.mode.B @ self._u + data.mode.f)
            values = sign[:, None] * (self._modal_values(m, z0, b, grid) + q[:, None])
        else:
            values = np.column_stack([
                sign * (data.Pv @ self._exact_state(data, t) + q) for t in grid
            ])  # fmt: skip
        tol = 1e-9 * (1.0 + float(np.abs(self._u).max(initial=0.0)))
        below = values < -tol
        if not below.any():
            return None
        column = int(np.argmax(below.any(axis=0)))
        best = None
        for row in np.flatnonzero(below[:, column]):
            a = 0.0 if column == 0 else grid[column - 1]
            root = self._refine(data, row, sign[row], q[row], a, grid[column], tol_t)
            best = root if best is None else min(best, root)
        return best

    def _search_grid(self, m: _Modal, h: float) -> np.ndarray:
        count = max(2, min(20000, math.ceil(h * m.omega * 4.0 / math.pi)))
        grid = np.linspace(0.0, h, count + 1)[1:]
        if self._fresh:  # fast transients right after an event
            grid = np.union1d(h * np.logspace(-9, -1, 9), grid)
        return grid

    @staticmethod
    def _modal_values(m: _Modal, z0: np.ndarray, b: np.ndarray, tau: np.ndarray) -> np.ndarray:
        w = m.lam[:, None] * tau[None, :]
        modal = np.exp(w) * z0[:, None] + tau[None, :] * _phi1(w) * b[:, None]
        return (m.R @ modal).real

    def _exact_state(self, data: _ModeData, tau: float) -> np.ndarray:
        n = self.x.size
        M = np.zeros((n + 1, n + 1))
        M[:n, :n] = data.mode.A * tau
        M[:n, n] = (data.mode.B @ self._u + data.mode.f) * tau
        E = expm(M)
        return E[:n, :n] @ self.x + E[:n, n]

    def _refine(self, data, row, sign, q, a, b, tol_t) -> float:
        """Root of one diode's watch function in ``[a, b]`` (safeguarded Newton)."""
        m = data.modal

        def value(tau: float) -> tuple[float, float]:
            if not m.ok:
                x = self._exact_state(data, tau)
                mm = data.mode
                rate = data.Pv[row] @ (mm.A @ x + mm.B @ self._u + mm.f)
                return sign * (data.Pv[row] @ x + q), sign * rate
            z0 = m.Vinv @ self.x
            bb = m.Vinv @ (data.mode.B @ self._u + data.mode.f)
            e = np.exp(m.lam * tau)
            zt = e * z0 + tau * _phi1(m.lam * tau) * bb
            rate = (m.R[row] @ (m.lam * zt + bb)).real
            return sign * ((m.R[row] @ zt).real + q), sign * rate

        fa, _ = value(a)
        if fa <= 0.0:
            return a
        tau = 0.5 * (a + b)
        for _ in range(100):
            f, df = value(tau)
            if f > 0.0:
                a = tau
            else:
                b = tau
            if b - a <= tol_t:
                break
            step = tau - f / df if df != 0.0 else 0.5 * (a + b)
            tau = step if a < step < b else 0.5 * (a + b)
        return b

    def outputs(self) -> tuple[np.ndarray, np.ndarray]:
        """File outputs and device rows (currents then voltages) now."""
        m = self.data().mode
        return m.C @ self.x + m.D @ self._u + m.g, m.P @ self.x + m.Q @ self._u + m.p

    def physical_state(self) -> np.ndarray:
        return self.x + self.data().mode.state_offset @ self._u


def _gate_edges(waveforms: Mapping[str, Waveform], gates: list[str], until: float) -> np.ndarray:
    times: set[float] = set()
    for gate in gates:
        w = waveforms.get(gate)
        if w is None:
            continue
        if hasattr(w, "edges"):
            times.update(w.edges(0.0, until))
        else:
            times.update(b for b in w.breakpoints if 0.0 < b <= until)
    return np.array(sorted(times))


def device_output_names(circuit: SwitchedCircuit) -> list[tuple[str, str, int]]:
    """``(name, what, index)`` of the per-device outputs a switched run adds: ``i_<part>``,
    ``v_<part>`` and ``on_<part>`` (1 while conducting), skipping names the file uses."""
    taken = set(circuit.outputs)
    n = len(circuit.devices)
    out = []
    for k, d in enumerate(circuit.devices):
        for name, what, index in ((f"i_{d.name}", "row", k), (f"v_{d.name}", "row", n + k),
                                  (f"on_{d.name}", "on", k)):  # fmt: skip
            if name not in taken:
                out.append((name, what, index))
    return out


def simulate_switched(
    model: Any,
    until: float,
    step: float,
    inputs: Mapping[str, str | float | Waveform] | InputSet | None = None,
    *,
    use_defaults: bool = True,
    base: Path | None = None,
    fine_step: float | None = None,
    fine_window: float | None = None,
    x0: np.ndarray | None = None,
    max_changes: int | None = None,
    progress: Callable[[float], None] | None = None,
) -> SimulationResult:
    """Simulate a switched circuit exactly, with every switching event located.

    Parameters
    ----------
    model
        A :class:`~wirestate.switching.SwitchedCircuit` or the compiled block of a circuit
        with switches or diodes.
    until, step
        Horizon and output step (s). Inputs other than gates are held over each output
        step (zero-order hold); gates are evaluated exactly between their edges.
    inputs
        Waveforms by input name; gates take ``pwm:...`` (see :mod:`.pwm`).
    fine_step, fine_window
        After every event, also sample every ``fine_step`` for ``fine_window`` (to resolve
        turn-off ringing without a fine step everywhere).
    x0
        Initial state (default: the parts' ``initial`` values).
    max_changes
        Mode changes allowed at one instant before ``switching_chatter``.

    Returns
    -------
    SimulationResult
        Outputs (the file's, then ``i_``, ``v_`` and ``on_`` of every switch and diode),
        physical states, inputs and ``events``.
    """
    circuit = switched_circuit(model)
    if circuit is None:
        raise SimulationError("invalid_field", "the model has no switches or diodes")
    if (fine_step is None) != (fine_window is None) or (fine_step is not None and not (
        0 < fine_step <= step and fine_window > 0
    )):  # fmt: skip
        raise SimulationError(
            "invalid_step",
            "fine_step and fine_window go together, with 0 < fine_step <= step < horizon",
        )
    grid = time_grid(until, step)
    input_set = build_inputs(
        inputs or {},
        circuit.inputs,
        circuit.units,
        defaults=circuit.input_defaults if use_defaults else None,
        base=base,
    )
    run = _Run(circuit, grid, step, input_set, fine_step, fine_window, x0, max_changes)
    return run.execute(progress)


class _Run:
    def __init__(self, circuit, grid, step, input_set, fine_step, fine_window, x0, max_changes):
        self.circuit = circuit
        self.grid = grid
        self.step = step
        self.until = float(grid[-1])
        self.U = input_set.matrix(circuit.inputs, grid)
        gates = sorted({d.gate for d in circuit.devices if d.gate is not None})
        self.gate_rows = [
            (circuit.inputs.index(g), input_set.waveforms[g])
            for g in gates
            if g in input_set.waveforms
        ]
        self.edges = _gate_edges(input_set.waveforms, gates, self.until)
        self.fine = (fine_step, fine_window) if fine_step else None
        self.engine = SwitchedEngine(circuit, x0, max_changes=max_changes)
        self.extra = device_output_names(circuit)
        self.rows: dict[str, list] = {"t": [], "y": [], "x": [], "u": []}

    def inputs_over(self, t: float, t_next: float, k: int) -> np.ndarray:
        u = self.U[:, min(k, self.U.shape[1] - 1)].copy()
        mid = np.array([0.5 * (t + t_next)])
        for row, wave in self.gate_rows:
            u[row] = wave.values(mid)[0]
        return u

    def record(self, t: float, u: np.ndarray) -> None:
        e = self.engine
        y, dev = e.outputs()
        extra = [dev[i] if what == "row" else float(e.on[i]) for _, what, i in self.extra]
        self.rows["t"].append(t)
        self.rows["y"].append(np.concatenate([y, extra]))
        self.rows["x"].append(e.physical_state())
        self.rows["u"].append(u)

    def next_time(self, t: float, k: int) -> tuple[float, bool]:
        """Next segment end and whether it is a sample time."""
        candidates = [(float(self.grid[k + 1]), True)] if k + 1 < len(self.grid) else []
        events = self.engine.events
        if self.fine and events:
            fs, window = self.fine
            last = events[-1].time
            n = math.floor((t - last) / fs * (1 + 1e-12)) + 1
            if last + n * fs < last + window:
                candidates.append((last + n * fs, True))
        j = int(np.searchsorted(self.edges, t, side="right"))
        if j < len(self.edges):
            candidates.append((float(self.edges[j]), False))
        t_next, sample = min(candidates)
        # an edge within round-off of a sample is that sample
        for value, is_sample in candidates:
            if abs(value - t_next) <= 1e-15 * max(1.0, abs(t_next)) * 1e3:
                sample = sample or is_sample
                if is_sample:
                    t_next = value
        return t_next, sample

    def execute(self, progress) -> SimulationResult:
        e = self.engine
        t, k, is_sample, first = 0.0, 0, True, True
        last_report = 0.0
        while True:
            t_next, next_is_sample = self.next_time(t, k) if t < self.until else (t, False)
            e.apply(self.inputs_over(t, t_next, k), record=not first)
            first = False
            if is_sample:
                self.record(t, e._u)
            if t >= self.until:
                break
            e.advance(t_next - t)
            t = e.time = t_next
            while k + 1 < len(self.grid) and self.grid[k + 1] <= t:
                k += 1
            is_sample = next_is_sample
            if progress is not None and t - last_report > 0.05 * self.until:
                last_report = t
                progress(t / self.until)
        return self.result()

    def result(self) -> SimulationResult:
        c = self.circuit
        names = [*c.outputs, *(name for name, _, _ in self.extra)]
        units = dict(c.units)
        for name, what, i in self.extra:
            units[name] = "1" if what == "on" else ("A" if i < len(c.devices) else "V")
        states = [s.removesuffix("_shifted") for s in c.states]
        for s, s_phys in zip(c.states, states, strict=True):
            units[s_phys] = c.units.get(s, "")
        e = self.engine
        return SimulationResult(
            name=c.name,
            time=np.array(self.rows["t"]),
            output_names=names,
            outputs=np.array(self.rows["y"]).T.reshape(len(names), -1),
            state_names=states,
            states=np.array(self.rows["x"]).T.reshape(len(states), -1),
            input_names=list(c.inputs),
            inputs=np.array(self.rows["u"]).T.reshape(len(c.inputs), -1),
            units=units,
            method=(
                f"exact piecewise-linear: ZOH within each mode, {len(e.events)} switching "
                f"events located on the exact solution, {len(c.visited_modes)} modes compiled"
            ),
            events=list(e.events),
        )
