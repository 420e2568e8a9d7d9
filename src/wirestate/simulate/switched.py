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

The state itself is advanced in the same modal form when the eigenvector matrix is well
conditioned (``cond(V) <= 1e5``), and by the matrix exponential otherwise. On stiff modes
(a switch's on-resistance across a picofarad capacitance puts eigenvalues near -1e14 /s
beside a 10 kHz output filter) scaling and squaring loses accuracy with the number of
squarings: against 50-digit mpmath, the modal form was within 5e-12 where scipy's expm
was at 1.5e-9 (measured on the snubbed buck of the tests). It also needs no new
exponential for each of the arbitrary partial steps between located events.

After each event the mode is re-evaluated: a diode is on when its voltage is above its
forward voltage (or on it and rising), off otherwise; one instant allows at most
``max_changes`` mode changes before a ``switching_chatter`` error names the parts.
"""

from __future__ import annotations

import bisect
import ctypes
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any, NamedTuple

import numpy as np
from scipy.linalg import expm

from wirestate.errors import SimulationError
from wirestate.native import is_native_disabled, optional_kernel
from wirestate.simulate.discretize import Discretization
from wirestate.simulate.inputs import InputSet, Waveform, build_inputs
from wirestate.simulate.linear import time_grid
from wirestate.simulate.pwm import PulseWidth
from wirestate.simulate.results import SimulationResult
from wirestate.switching import GATE_THRESHOLD, ModeModel, SwitchedCircuit, switched_circuit

#: event times are located to this fraction of the step, or this many seconds if smaller
EVENT_RELATIVE_TOLERANCE = 1e-12
EVENT_ABSOLUTE_TOLERANCE = 1e-12
#: modes whose eigenvector matrix is worse conditioned use the matrix exponential instead
MODAL_CONDITION_LIMIT = 1e8
#: modes whose eigenvector matrix is at most this badly conditioned advance in modal form
MODAL_PROPAGATION_LIMIT = 1e5


class SwitchEvent(NamedTuple):
    """One mode change: ``(time, part, "off -> on")``.

    ``located`` is True when the time was found by root finding on the exact in-mode
    solution (a diode turning on or off by itself), False when it lies on a boundary known
    in advance (a gate edge, an input step, the start of the run).
    """

    time: float
    part: str
    change: str
    located: bool = False

    @property
    def before(self) -> str:
        """``"on"`` or ``"off"`` before the event."""
        return self.change.split(" -> ")[0]

    @property
    def after(self) -> str:
        """``"on"`` or ``"off"`` after the event."""
        return self.change.split(" -> ")[1]


class ModeInterval(NamedTuple):
    """The circuit stayed in mode ``on`` (conduction of every switch and diode, in the
    order of :attr:`SwitchedCircuit.devices`) from ``start`` to ``end`` (s)."""

    start: float
    end: float
    on: tuple[bool, ...]


def mode_sequence(
    initial: tuple[bool, ...], events: list[SwitchEvent], devices: list[str], until: float
) -> list[ModeInterval]:
    """The modes between events: ``initial`` from 0, each event flipping its part.

    Several changes at one instant leave one interval (the mode after the last of them);
    no interval has zero length.
    """
    index = {name: k for k, name in enumerate(devices)}
    on = list(initial)
    start = 0.0
    out: list[ModeInterval] = []
    for event in events:
        if event.time > start:
            out.append(ModeInterval(start, float(event.time), tuple(on)))
            start = float(event.time)
        on[index[event.part]] = event.after == "on"
    if until > start or not out:
        out.append(ModeInterval(start, float(until), tuple(on)))
    return out


@dataclass
class _Modal:
    """Eigen-decomposition of one mode and the diode voltage rows in modal coordinates."""

    lam: np.ndarray
    V: np.ndarray
    Vinv: np.ndarray
    R: np.ndarray  # diode voltage rows times V (complex)
    omega: float  # fastest oscillation (rad/s)
    ok: bool
    propagate: bool  # well enough conditioned to advance the state in modal form


#: a placeholder for the kernel's pointer tables where the mode has no such array
_NO_ARRAY = np.zeros(1)


def _pointers(arrays: list[np.ndarray]) -> Any:
    """A C array of the arrays' data pointers (the caller keeps the arrays alive)."""
    return (ctypes.c_void_p * max(1, len(arrays)))(*(a.ctypes.data for a in arrays))


_kernel_state: dict[str, Any] = {}


def event_kernel() -> Any:
    """The compiled event search (``event_kernel.c``'s ``ws_first_crossing``), or None.

    Built once per user and source (:func:`wirestate.native.build_kernel`). None when
    ``WIRESTATE_NO_NATIVE`` is set, or when there is no C compiler or the build fails:
    then the search runs in Python, with the same results to round-off, and a
    :class:`~wirestate.errors.WirestateWarning` says so once per process.
    """
    if is_native_disabled():
        return None
    if "kernel" not in _kernel_state:
        _kernel_state["kernel"] = None
        library = optional_kernel(
            "wirestate.simulate", "event_kernel.c",
            "switched engine: the diode event search runs in Python (the same results, slower)",
        )  # fmt: skip
        if library is not None:
            function = library.ws_first_crossing
            function.restype = ctypes.c_int
            function.argtypes = [
                *[ctypes.c_int] * 5, *[ctypes.c_double] * 4, *[ctypes.c_void_p] * 9,
            ]  # fmt: skip
            states = library.ws_states_at
            states.restype = ctypes.c_int
            states.argtypes = [ctypes.c_int, ctypes.c_long, ctypes.c_long, *[ctypes.c_void_p] * 6]
            check = library.ws_inconsistent_diode
            check.restype = ctypes.c_int
            check.argtypes = [ctypes.c_int, ctypes.c_int, *[ctypes.c_void_p] * 4, ctypes.c_double]
            _kernel_state["check"] = check
            stretch = library.ws_sample_stretch
            stretch.restype = ctypes.c_long
            stretch.argtypes = [
                ctypes.c_void_p, ctypes.c_long, *[ctypes.c_double] * 3, ctypes.c_int,
                ctypes.c_int, *[ctypes.c_double] * 3, ctypes.c_long, ctypes.c_void_p,
                ctypes.c_int, *[ctypes.c_void_p] * 6, ctypes.c_double, ctypes.c_void_p,
            ]  # fmt: skip
            _kernel_state["stretch"] = stretch
            _kernel_state["kernel"] = function
            _kernel_state["states"] = states
    return _kernel_state["kernel"]


#: the kernel's sample buffers grow up to this many samples (longer stretches: their own)
KERNEL_SAMPLE_BUFFER_LIMIT = 4096

#: at most this many sets of held inputs keep their constants per mode (a run whose
#: inputs change at every output step must not grow the cache without bound)
HELD_CACHE_SIZE = 16


class _ModeData:
    """Everything about one mode that does not depend on the state: matrices, modal
    form, and (lazily) the exponentials of the search points that recur in every visit."""

    def __init__(self, mode: ModeModel, diode_rows: np.ndarray, diodes: list[int]) -> None:
        self.mode = mode
        self.disc = Discretization(mode.A, mode.B_affine, max_entries=256)
        self.Pv = mode.P[diode_rows]
        self.Qv = mode.Q[diode_rows]
        self.pv = mode.p[diode_rows]
        self.Pv_abs = np.abs(self.Pv)
        self.Qv_abs = np.abs(self.Qv)
        self.modal = m = _modal(mode.A, self.Pv)
        self.on_diodes = np.array([mode.on[k] for k in diodes], dtype=bool)
        #: +1 for a conducting diode (its margin must stay >= 0), -1 for a blocking one
        self.sign = np.where(self.on_diodes, 1.0, -1.0)
        self.has_offset = bool(np.any(mode.state_offset))
        self.Vinv_abs = np.abs(m.Vinv)
        self.R_abs = np.abs(m.R)
        # the state-dependent parts of the margin band and of the modal noise, one product
        self.tolerance_rows = 1e-12 * self.Pv_abs + 1e-13 * (self.R_abs @ self.Vinv_abs)
        #: margins and their rates in one product: ``[Pv; Pv A] @ x``
        self.margin_rows = np.vstack([self.Pv, self.Pv @ mode.A])
        self.lam_real = m.lam.real
        self.inverse_rate = 1.0 / np.maximum(np.abs(m.lam), 1e-300)
        lam = m.lam
        #: every eigenvalue in the open left half-plane (see ``_never_crosses``)
        self.stable = bool(
            lam.size and not (np.any(lam.real > 0.0) or np.any(np.abs(lam) < 1e-300))
        )
        #: the slowest rate: ``tau * slowest >= 1e-8`` lets ``_phi1`` skip its series
        self.slowest = float(np.abs(lam).min(initial=math.inf))
        self.oscillating = np.flatnonzero((lam.imag > 0.0) & np.isfinite(lam))
        self.R_oscillating = m.R[:, self.oscillating]
        self.decay = (-lam.real[self.oscillating]).tolist()
        #: eight search points per period of each oscillating eigenvalue
        self.spacing = math.pi / (4.0 * lam.imag[self.oscillating])
        #: the earliest point a ring of the search can put (infinity without rings)
        self.first_ring = float(self.spacing.min(initial=math.inf))
        self._rings: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray]] = {}
        self.held: dict[bytes, _Held] = {}
        self._native: tuple | None = None
        self._native_rings: tuple | None = None

    def native_table(self) -> tuple:
        """The event kernel's per-mode pointer table (``event_kernel.c``, ``M_*``) and the
        contiguous arrays it points into (kept alive here)."""
        if self._native is None:
            m = self.modal
            arrays = [
                np.ascontiguousarray(m.lam, dtype=complex),
                np.ascontiguousarray(m.R, dtype=complex),
                *(np.ascontiguousarray(a, dtype=float) for a in (
                    self.Pv, self.tolerance_rows, self.R_abs, self.inverse_rate,
                    self.lam_real, self.sign, self.oscillating, self.spacing, self.decay,
                    _EVEN, _EARLY,
                )),
            ]  # fmt: skip
            #: the addresses ``ws_states_at`` reads: eigenvalues and eigenvectors
            vectors = np.ascontiguousarray(m.V, dtype=complex)
            arrays.append(vectors)
            arrays += [
                np.ascontiguousarray(a, dtype=float)
                for a in (self.margin_rows, self.Pv_abs, self.on_diodes)
            ]
            self.native_states = (arrays[0].ctypes.data, vectors.ctypes.data)
            self._native = (_pointers(arrays), arrays)
        return self._native[0]

    def native_rings(self) -> tuple:
        """The cached ring exponentials for the event kernel: pointers ``(E_j, Phi_j)``
        per oscillating eigenvalue and their column counts (0 while not computed)."""
        if self._native_rings is None:
            arrays, sizes = [], []
            for j in range(len(self.oscillating)):
                found = self._rings.get(j)
                if found is None:
                    arrays += [_NO_ARRAY, _NO_ARRAY]
                    sizes.append(0)
                else:
                    arrays += [np.ascontiguousarray(a, dtype=complex) for a in found[1:]]
                    sizes.append(len(found[0]))
            size_array = np.array(sizes + [0], dtype=np.int64)
            self._native_rings = (_pointers(arrays), size_array.ctypes.data, arrays, size_array)
        return self._native_rings

    def ring(self, j: int, count: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``e^{lambda tau}`` and ``tau phi1(lambda tau)`` at ``tau = k spacing[j]`` (the
        ``j``-th oscillating eigenvalue's spacing),
        ``k = 1 ... >= count``, as ``(n, K)`` arrays computed once per mode and grown;
        first the times ``tau``."""
        found = self._rings.get(j)
        if found is None or len(found[0]) < count:
            size = count if found is None else max(count, 2 * len(found[0]))
            tau = self.spacing[j] * np.arange(1, size + 1)
            w = self.modal.lam[:, None] * tau[None, :]
            e = np.exp(w)
            found = (tau, e, tau[None, :] * _phi1(w, e=e))
            self._rings[j] = found
            self._native_rings = None
        return found


class _Held:
    """The constants of one mode with one set of held inputs ``u``."""

    __slots__ = (
        "c", "b", "q", "tol_base", "tol_inputs", "noise_inputs", "Rb", "final", "b_lam",
        "b_oscillating", "tol_const", "Pc", "_native", "native_b",
    )  # fmt: skip

    def __init__(self, data: _ModeData, u: np.ndarray, vf: np.ndarray) -> None:
        mode, m = data.mode, data.modal
        self.c = mode.B @ u + mode.f  # dx/dt = A x + c
        self.q = data.Qv @ u + data.pv - vf  # margin = Pv x + q
        u_abs = np.abs(u)
        self.tol_base = 1e-9 * (1.0 + float(u_abs.max(initial=0.0)))
        self.tol_inputs = data.Qv_abs @ u_abs + np.abs(data.pv)
        self.tol_const = self.tol_base + 1e-12 * self.tol_inputs
        self.Pc = data.Pv @ self.c  # the input part of the margins' rates
        self.b = m.Vinv @ self.c  # modal form of c
        self.noise_inputs = data.Vinv_abs @ np.abs(self.c)
        self.Rb = m.R * self.b[None, :]
        self.b_oscillating = self.b[data.oscillating] / m.lam[data.oscillating]
        if data.stable:
            self.b_lam = self.b / m.lam
            self.final = data.sign * (self.q - (m.R @ self.b_lam).real)
        self._native = None

    def native_table(self, data: _ModeData) -> Any:
        """The event kernel's per-inputs pointer table (``event_kernel.c``, ``H_*``)."""
        if self._native is None:
            stable = data.stable
            arrays = [
                np.ascontiguousarray(self.q, dtype=float),
                np.ascontiguousarray(np.broadcast_to(self.tol_const, self.q.shape), dtype=float),
                np.ascontiguousarray(self.b, dtype=complex),
                np.ascontiguousarray(self.Rb, dtype=complex),
                np.ascontiguousarray(self.b_lam, dtype=complex) if stable else _NO_ARRAY,
                np.ascontiguousarray(self.final, dtype=float) if stable else _NO_ARRAY,
                np.ascontiguousarray(self.noise_inputs, dtype=float),
                np.ascontiguousarray(self.b_oscillating, dtype=complex),
                np.ascontiguousarray(self.Pc, dtype=float),
            ]
            self._native = (_pointers(arrays), arrays)
            self.native_b = arrays[2].ctypes.data  # for ``ws_states_at``
        return self._native[0]


def _modal(A: np.ndarray, rows: np.ndarray) -> _Modal:
    n = A.shape[0]
    if n == 0:
        empty = np.zeros(0, complex)
        return _Modal(
            empty, np.zeros((0, 0)), np.zeros((0, 0)), rows.astype(complex), 0.0, True, True
        )
    lam, V = np.linalg.eig(A)
    cond = np.linalg.cond(V) if np.all(np.isfinite(lam)) else math.inf
    ok = cond < MODAL_CONDITION_LIMIT
    Vinv = np.linalg.inv(V) if ok else np.zeros_like(V)
    omega = float(np.abs(lam.imag).max(initial=0.0))
    return _Modal(lam, V, Vinv, rows @ V, omega, ok, cond <= MODAL_PROPAGATION_LIMIT)


#: Taylor coefficients of phi1(w) = sum w^k / (k + 1)!, highest first (seven terms: the
#: first one left out is below 2.5e-19 for |w| < 1e-2)
_PHI1_SERIES = tuple(1.0 / math.factorial(k + 1) for k in range(6, -1, -1))
#: arrays up to this size take numpy's expm1 (fewer calls); larger ones the cheaper form
_PHI1_SMALL_ARRAY = 256


def _phi1(w: np.ndarray, smallest: float = 0.0, e: np.ndarray | None = None) -> np.ndarray:
    """``(e^w - 1) / w``, with ``1`` at ``w = 0``.

    ``smallest``, a lower bound on ``|w|`` known to the caller, skips the special case
    (``>= 1e-8``). Large arrays (samples of a whole stretch) avoid numpy's complex
    ``expm1``, which costs three times ``exp``: where ``|w| >= 1e-2`` the quotient is
    formed from ``e = e^w`` (passed in when the caller has it; relative error at most
    about ``eps / |w| <= 2e-14``), below that from the Taylor series.
    """
    if w.size <= _PHI1_SMALL_ARRAY:
        if smallest >= 1e-8:
            return np.expm1(w) / w
        return np.divide(np.expm1(w), w, out=1.0 + 0.5 * w, where=np.abs(w) >= 1e-8)
    if e is None:
        e = np.exp(w)
    near = np.abs(w) < 1e-2
    out = np.divide(e - 1.0, w, out=np.ones_like(w), where=~near)
    if near.any():
        ws = w[near]
        series = np.full_like(ws, _PHI1_SERIES[0])
        for coefficient in _PHI1_SERIES[1:]:
            series *= ws
            series += coefficient
        out[near] = series
    return out


class Chunk(NamedTuple):
    """States of one stretch of a run without events: ``states[:, j]`` at ``times[j]``,
    all in mode ``on`` with inputs ``u`` held."""

    times: np.ndarray
    states: np.ndarray
    on: tuple[bool, ...]
    u: np.ndarray


#: ``sample(t0, t1, include_start)`` -> times in ``(t0, t1)`` (or ``[t0, t1)``) to record
Sampler = Callable[[float, float, bool], np.ndarray]


class SwitchedEngine:
    """State, mode and time of a switched circuit, advanced exactly with events.

    Parameters
    ----------
    circuit
        The switched circuit (or any model with its interface: ``devices``,
        ``gate_index``, ``mode(on)``, ``x0``, ``off``, ``name``).
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
        self._gates = [(k, circuit.gate_index[devices[k].name]) for k in self.switches]
        self._diode_rows = np.array([len(devices) + k for k in self.diodes], dtype=int)
        self._vf = np.array([devices[k].forward_voltage for k in self.diodes])
        self._data: dict[tuple[bool, ...], _ModeData] = {}
        self._u = np.zeros(len(circuit.inputs))
        self._instant: tuple[float, int, list[str]] = (-math.inf, 0, [])
        self._fresh = True  # the next segment starts at an event
        self._located = False  # changes now happen at a root found on the exact solution
        self._time_slack = 0.0  # how far past a located crossing the state may be (s)
        self._leaving: set[int] = set()  # diodes whose margin the search saw leave their side
        self._kernel = event_kernel() if self.diodes else None
        self._kernel_states = _kernel_state.get("states") if self._kernel else None
        self._kernel_check = _kernel_state.get("check") if self._kernel else None
        self._kernel_stretch = _kernel_state.get("stretch") if self._kernel else None
        self._kernel_flags = np.zeros(max(1, len(self.diodes)), dtype=np.intc)
        self._kernel_flags_address = self._kernel_flags.ctypes.data
        # the kernel's arguments and results, at fixed addresses (one call per stretch)
        self._kernel_x = np.zeros(max(1, self.x.size))
        self._kernel_z = np.zeros(max(1, self.x.size), dtype=complex)
        self._kernel_out = np.zeros(1)
        self._kernel_leaving = np.zeros(max(1, len(self.diodes)), dtype=np.intc)
        self._kernel_need = np.zeros(2, dtype=np.int64)
        self._kernel_sample_buffers(256)
        self._kernel_end = np.zeros(max(1, self.x.size))  # where a stretch ends
        self._kernel_end_address = self._kernel_end.ctypes.data
        self._kernel_addresses = tuple(a.ctypes.data for a in (
            self._kernel_x, self._kernel_z, self._kernel_out, self._kernel_leaving,
            self._kernel_need,
        ))  # fmt: skip

    # -- modes ---------------------------------------------------------------------------
    def data(self, on: tuple[bool, ...] | None = None) -> _ModeData:
        key = tuple(self.on) if on is None else on
        found = self._data.get(key)
        if found is None:
            found = _ModeData(self.circuit.mode(key), self._diode_rows, self.diodes)
            self._data[key] = found
        return found

    def _held(self, data: _ModeData) -> _Held:
        """The constants of ``data``'s mode with the inputs held now (cached per mode)."""
        key = self._u.tobytes()
        found = data.held.get(key)
        if found is None:
            if len(data.held) >= HELD_CACHE_SIZE:
                data.held.clear()
            found = data.held[key] = _Held(data, self._u, self._vf)
        return found

    def _change(self, k: int, record: bool) -> None:
        before = self.data()
        self.on[k] = not self.on[k]
        after = self.data()
        if record:
            d = self.circuit.devices[k]
            change = "off -> on" if self.on[k] else "on -> off"
            self.events.append(SwitchEvent(float(self.time), d.name, change, self._located))
            self._fresh = True
        # a shifted state keeps its physical value across the change
        if (before.has_offset or after.has_offset) and np.any(
            before.mode.state_offset != after.mode.state_offset
        ):
            self.x = self.x + (before.mode.state_offset - after.mode.state_offset) @ self._u

    def apply(self, u: np.ndarray, *, record: bool = True) -> None:
        """Hold inputs ``u`` from now on: switches follow their gates, diodes settle."""
        self._u = np.asarray(u, dtype=float)
        for k, gate in self._gates:
            if (self._u[gate] > GATE_THRESHOLD) != self.on[k]:
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
            self._leaving.discard(k)  # the search's verdict is spent once acted on
            self._change(k, record)

    def _inconsistent_diode(self) -> int | None:
        """A diode on the wrong side of its forward voltage, or None.

        After a located event the state is up to ``_time_slack`` past the true crossing,
        so a voltage that moves fast in this mode (an off diode across no capacitance
        moves at ~1e12 V/s) is on the threshold within its rate times that slack; there,
        the sign of the rate decides (a diode stays off while its voltage falls).
        """
        if not self.diodes:
            return None
        data = self.data()
        held = self._held(data)
        if self._kernel_check is not None:
            return self._native_inconsistent(data, held)
        x = self.x
        n = len(self.diodes)
        both = (data.margin_rows @ x).tolist()
        tol = self._margin_tolerance(data, held).tolist()
        slack = self._time_slack
        # a few diodes: plain Python per diode beats a dozen numpy calls on tiny arrays
        found, score = None, 0.0
        for i, (q, pc, on) in enumerate(
            zip(held.q.tolist(), held.Pc.tolist(), data.on_diodes.tolist(), strict=True)
        ):
            vi, ri = both[i] + q, both[n + i] + pc
            ti = tol[i] + abs(ri) * slack if slack else tol[i]
            wrong = vi < -ti if on else vi > ti
            if not wrong and abs(vi) <= ti:
                # inside the band the search's verdict counts: it saw the margin beyond
                # -tol a little later, on the exact solution; the instantaneous rate is a
                # difference of stiff terms (1e14 /s times volts) and can have either sign
                wrong = self.diodes[i] in self._leaving or (ri < 0.0 if on else ri > 0.0)
            if wrong and abs(vi) + 1e-300 > score:
                found, score = i, abs(vi) + 1e-300
        return None if found is None else self.diodes[found]

    def _native_inconsistent(self, data: _ModeData, held: _Held) -> int | None:
        """:meth:`_inconsistent_diode` by the kernel (``ws_inconsistent_diode``)."""
        table, held_table = data.native_table(), held.native_table(data)
        n = self.x.size
        self._kernel_x[:n] = self.x
        flags = self._kernel_flags
        leaving = self._leaving
        for i, k in enumerate(self.diodes):
            flags[i] = k in leaving
        found = self._kernel_check(
            n, len(self.diodes), table, held_table, self._kernel_addresses[0],
            self._kernel_flags_address, self._time_slack,
        )  # fmt: skip
        return None if found < 0 else self.diodes[found]

    def _margin_tolerance(self, data: _ModeData, held: _Held) -> np.ndarray:
        """Per diode, how far from its forward voltage a voltage counts as on it (V).

        An off diode's voltage is a difference of large terms (the off resistance times a
        small current mismatch), so round-off in it scales with the terms, not with the
        result: 1e-12 of their magnitude, plus 1e-9 of the inputs (measured: 3.5e-7 V of
        round-off at 10 Mohm, where the fixed 1e-9 V scale made a diode chatter).
        """
        return held.tol_const + 1e-12 * (data.Pv_abs @ np.abs(self.x))

    # -- advancing -----------------------------------------------------------------------
    def advance(self, h: float, sample: Sampler | None = None) -> list[Chunk]:
        """Advance ``h`` seconds with the held inputs, splitting at every diode event."""
        return self.advance_to(self.time + h, sample)

    def advance_to(self, end: float, sample: Sampler | None = None) -> list[Chunk]:
        """Advance to the time ``end`` with the held inputs, splitting at diode events.

        ``sample(t0, t1, include_start)`` names the times in ``(t0, t1)`` (``[t0, t1)``
        right after a located event) where the state is wanted; they are computed on the
        exact in-mode solution, vectorised, and returned as :class:`Chunk` s in order. A
        time equal to ``end`` is left to the caller, who applies new inputs there first.
        """
        chunks: list[Chunk] = []
        h = end - self.time
        tol_t = min(EVENT_RELATIVE_TOLERANCE * h, EVENT_ABSOLUTE_TOLERANCE)
        include_start = False
        idle = 0  # crossings found in a row that changed nothing
        clock = self._native_clock(sample)
        while end - self.time > tol_t:
            remaining = end - self.time
            data = self.data()
            held = self._held(data)
            # the state in modal coordinates, shared by the search, the samples and the step
            z0 = data.modal.Vinv @ self.x if data.modal.ok else None
            tau = self._first_crossing(data, held, z0, remaining, tol_t) if self.diodes else None
            stop = remaining if tau is None else tau
            if clock is not None and data.modal.propagate and data.modal.lam.size:
                # samples and the end state in one call (``_propagate`` in modal form)
                chunk = self._native_samples(clock, data, held, stop, include_start)
                if chunk is not None:
                    chunks.append(chunk)
                if stop > 0.0:
                    self.x = self._kernel_end[: self.x.size].copy()
            else:
                if sample is not None:
                    times = sample(self.time, self.time + stop, include_start)
                    if len(times):
                        states = self.states_at(data, times - self.time, z0, held)
                        chunks.append(Chunk(times, states, tuple(self.on), self._u))
                if stop > 0.0:
                    self.x = self._propagate(data, stop, z0, held)
            self._fresh = False
            if tau is None:
                break
            self.time = self.time + tau if end - (self.time + tau) > tol_t else end
            self._located, self._time_slack = True, 2.0 * tol_t
            before = len(self.events)
            try:
                self.settle()
            finally:
                self._located, self._time_slack = False, 0.0
                self._leaving = set()
            idle = idle + 1 if len(self.events) == before else 0
            if idle > self.max_changes:  # never loop for ever on a grazing diode
                names = ", ".join(self.circuit.devices[k].name for k in self.diodes)
                raise SimulationError(
                    "switching_chatter",
                    f"{self.circuit.name}: the diodes ({names}) graze their forward voltage "
                    f"at t = {self.time:.9g} s without changing mode; check the circuit "
                    "(a diode with no capacitance or resistance to settle it)",
                    location=("parts", self.circuit.devices[self.diodes[0]].name),
                )
            include_start = True
        self.time = end
        return chunks

    def _propagate(
        self, data: _ModeData, tau: float, z0: np.ndarray | None, held: _Held
    ) -> np.ndarray:
        m = data.modal
        if m.propagate and self._kernel_states is not None and m.lam.size:
            return self._native_states(data, held, float(tau), z0)
        if m.propagate:
            w = m.lam * tau
            return (m.V @ (np.exp(w) * z0 + tau * _phi1(w, tau * data.slowest) * held.b)).real
        Ad, Bd = data.disc.zoh(tau)
        return Ad @ self.x + Bd[:, :-1] @ self._u + Bd[:, -1]

    def states_at(
        self,
        data: _ModeData,
        taus: np.ndarray,
        z0: np.ndarray | None = None,
        held: _Held | None = None,
    ) -> np.ndarray:
        """``(n, len(taus))`` states ``taus`` seconds from now in the present mode
        (``z0``, the state in modal coordinates, and ``held`` are computed if not given)."""
        m = data.modal
        held = self._held(data) if held is None else held
        if m.propagate:
            z0 = m.Vinv @ self.x if z0 is None else z0
            if self._kernel_states is not None and m.lam.size:
                return self._native_states(data, held, taus, z0)
            w = m.lam[:, None] * taus[None, :]
            e = np.exp(w)
            modal = e * z0[:, None] + taus[None, :] * _phi1(w, e=e) * held.b[:, None]
            return (m.V @ modal).real
        return np.column_stack([self._propagate(data, float(t), z0, held) for t in taus])

    def _kernel_sample_buffers(self, size: int) -> None:
        """Times and states of up to ``size`` samples at fixed addresses for the kernel."""
        self._kernel_taus = np.zeros(size)
        self._kernel_samples = np.zeros((max(1, self.x.size), size))
        self._kernel_times = np.zeros(size)
        self._kernel_sample_addresses = (
            self._kernel_taus.ctypes.data,
            self._kernel_samples.ctypes.data,
            self._kernel_times.ctypes.data,
        )

    def _native_clock(self, sample: Sampler | None) -> SampleClock | None:
        """The :class:`SampleClock` behind ``sample`` when the kernel can generate its
        times itself (``ws_sample_stretch``), else None (``sample`` is called)."""
        clock = getattr(sample, "__self__", None)
        if (
            self._kernel_stretch is None
            or not isinstance(clock, SampleClock)
            or getattr(sample, "__func__", None) is not SampleClock.sample
            or clock.engine is not self
        ):
            return None
        return clock

    def _native_samples(
        self,
        clock: SampleClock,
        data: _ModeData,
        held: _Held,
        stop: float,
        include_start: bool,
    ) -> Chunk | None:
        """``clock.sample`` over the next ``stop`` seconds and :meth:`states_at` there, in
        one call of the kernel (``ws_sample_stretch``), as a :class:`Chunk` (None when
        the stretch holds no sample); the state ``stop`` from now goes to
        ``_kernel_end``.

        Called only after this stretch's :meth:`_native_crossing` (a mode that advances
        in modal form is searched in modal form), which built the pointer tables and put
        the state in modal coordinates at the kernel's address.
        """
        n = self.x.size
        lam, vectors = data.native_states
        fine, events = clock.fine, self.events
        has_fine = bool(fine) and bool(events)
        step, window = fine if has_fine else (0.0, 0.0)
        last = events[-1].time if has_fine else 0.0
        t0 = self.time
        head = (clock.grid_address, clock.grid_count, clock.snap, t0, t0 + stop, include_start,
                has_fine, step, window, last)  # fmt: skip
        taus, out, times = self._kernel_sample_addresses
        capacity = self._kernel_times.size
        z, b = self._kernel_addresses[1], held.native_b
        end = (stop, self._kernel_end_address)
        count = self._kernel_stretch(
            *head, capacity, times, n, lam, vectors, z, b, taus, out, *end
        )  # fmt: skip
        if capacity < count <= KERNEL_SAMPLE_BUFFER_LIMIT:
            # a fine window holds more samples than the buffers: grow them once per run
            self._kernel_sample_buffers(min(KERNEL_SAMPLE_BUFFER_LIMIT, max(count, 2 * capacity)))
            taus, out, times = self._kernel_sample_addresses
            capacity = self._kernel_times.size
            count = self._kernel_stretch(
                *head, capacity, times, n, lam, vectors, z, b, taus, out, *end
            )  # fmt: skip
        if 0 < count <= capacity:
            times = self._kernel_times[:count].copy()
            states = self._kernel_samples[:n, :count].copy()
        elif count > capacity:  # a long stretch: its own arrays
            times_array, states = np.empty(count), np.empty((n, count))
            taus_array = np.empty(count)
            count = self._kernel_stretch(
                *head, count, times_array.ctypes.data, n, lam, vectors, z, b,
                taus_array.ctypes.data, states.ctypes.data, *end,
            )  # fmt: skip
            times = times_array
        if count < 0:
            raise MemoryError("switched engine: the event kernel could not allocate")
        if count == 0:
            return None
        return Chunk(times, states, tuple(self.on), self._u)

    def _native_states(
        self, data: _ModeData, held: _Held, taus: np.ndarray | float, z0: np.ndarray
    ) -> np.ndarray:
        """:meth:`states_at` in modal form by the compiled kernel (``ws_states_at``); a
        float ``taus`` gives the one state there."""
        data.native_table()
        held.native_table(data)
        n = self.x.size
        self._kernel_z[:n] = z0
        single = isinstance(taus, float)
        count = 1 if single else len(taus)
        lam, vectors = data.native_states
        if count > self._kernel_taus.size:  # a long stretch: its own arrays
            taus = np.ascontiguousarray(taus, dtype=float)
            states = np.empty((n, count))
            self._call_states(n, count, count, lam, vectors, held, taus, states)
            return states
        self._kernel_taus[:count] = taus
        self._call_states(n, count, self._kernel_taus.size, lam, vectors, held, None, None)
        if single:
            return self._kernel_samples[:n, 0].copy()
        return self._kernel_samples[:n, :count].copy()

    def _call_states(self, n, count, ld, lam, vectors, held, taus, states) -> None:
        times, out = self._kernel_sample_addresses[:2]
        if taus is not None:
            times, out = taus.ctypes.data, states.ctypes.data
        status = self._kernel_states(
            n, count, ld, lam, vectors, self._kernel_addresses[1], held.native_b, times, out
        )
        if status < 0:
            raise MemoryError("switched engine: the event kernel could not allocate")

    def _first_crossing(
        self, data: _ModeData, held: _Held, z0: np.ndarray | None, h: float, tol_t: float
    ) -> float | None:
        """Earliest time in ``(0, h]`` where a diode leaves its side, or None."""
        m = data.modal
        if self._kernel is not None and m.ok and m.lam.size:
            return self._native_crossing(data, held, z0, h, tol_t)
        sign = data.sign
        q = held.q
        x_abs = np.abs(self.x)
        if m.ok:
            # the margin band (see _margin_tolerance) widened by the modal noise
            tol = held.tol_const + data.tolerance_rows @ x_abs + self._modal_noise(data, held, h)
            # the modal sum at tau = 0 differs from P x by round-off that grows with the
            # condition of V and the size of the terms (10 Mohm off states); measured
            # from the direct value, a margin cannot seem to cross at tau = 0
            bias = data.Pv @ self.x - (m.R @ z0).real
            offset = q + bias
            first = min(h * (_EARLY[0] if self._fresh else _EVEN[0]), data.first_ring)
            if self._never_crosses(data, held, z0, offset, tol, first):
                return None
            grid, modal = self._search(data, held, z0, h, float(tol.min()))
            values = sign[:, None] * (modal + offset[:, None])
        else:
            tol = held.tol_const + 1e-12 * (data.Pv_abs @ x_abs)
            bias = np.zeros(len(self.diodes))
            pieces, rings = self._search_times(data, h)
            rings = [data.spacing[j] * np.arange(1, count + 1) for j, count in rings]
            grid = np.concatenate([*pieces, *rings])
            values = np.column_stack([
                sign * (data.Pv @ self._exact_state(data, t) + q) for t in grid
            ])  # fmt: skip
        below = values < -tol[:, None]
        if not below.any():
            return None
        order = np.argsort(grid, kind="stable")
        grid, below = grid[order], below[:, order]
        column = int(np.argmax(below.any(axis=0)))
        roots = {}
        for row in np.flatnonzero(below[:, column]):
            a = 0.0 if column == 0 else grid[column - 1]
            offset = q[row] + bias[row]
            roots[row] = self._refine(
                data, held, z0, row, sign[row], offset, a, grid[column], tol_t, tol[row]
            )
        best = min(roots.values())
        self._leaving = {self.diodes[row] for row, root in roots.items() if root <= best + tol_t}
        return best

    def _native_crossing(
        self, data: _ModeData, held: _Held, z0: np.ndarray, h: float, tol_t: float
    ) -> float | None:
        """:meth:`_first_crossing` on the modal form by one call of the compiled kernel
        (``event_kernel.c`` follows the Python methods step by step)."""
        table, held_table = data.native_table(), held.native_table(data)
        n, nd = self.x.size, len(self.diodes)
        self._kernel_x[:n] = self.x
        self._kernel_z[:n] = z0
        x, z, out, leaving, need = self._kernel_addresses
        while True:
            rings, sizes = data.native_rings()[:2]
            status = self._kernel(
                n, nd, len(data.oscillating), data.stable, self._fresh, h, tol_t,
                data.first_ring, data.slowest, table, held_table, rings, sizes, x, z, out,
                leaving, need,
            )  # fmt: skip
            if status != 2:
                break
            data.ring(*self._kernel_need.tolist())  # the same growth as the Python search
        if status < 0:
            raise MemoryError("switched engine: the event kernel could not allocate")
        if status == 0:
            return None
        flags = self._kernel_leaving.tolist()
        self._leaving = {self.diodes[i] for i in range(nd) if flags[i]}
        return float(self._kernel_out[0])

    def _modal_noise(self, data: _ModeData, held: _Held, h: float) -> np.ndarray:
        """Per diode, how far round-off in the modal amplitudes can move a margin (V):
        the part from the inputs (``data.tolerance_rows`` holds the state's part).

        A state on the slow manifold of a stiff mode still has a round-off amplitude
        ``~1e-16 |V^-1| |x|`` along the fast eigenvector; the modal sum turns it into a
        transient that dies within femtoseconds but, through the large rows of an off
        diode (10 Mohm times a current), can be microvolts: a crossing that is not
        there (measured 2e-6 V on the bundled buck, where the direct rate showed the
        diode moving away). 1e-13 of the terms (1000 ulps) keeps such sign changes out.
        """
        scale = np.minimum(h, data.inverse_rate)
        return 1e-13 * (data.R_abs @ (held.noise_inputs * scale))

    @staticmethod
    def _never_crosses(
        data: _ModeData,
        held: _Held,
        z0: np.ndarray,
        offset: np.ndarray,
        tol: np.ndarray,
        first: float,
    ) -> bool:
        """True when no diode can leave its side at any search point (all at or after
        ``first`` seconds) in this mode.

        With every eigenvalue in the closed left half-plane and none at zero, the modal
        solution is ``z(t) = e^{lambda t} (z0 + b / lambda) - b / lambda``, so from
        ``first`` on each margin is its final value plus terms no larger than
        ``|r_k (z0_k + b_k / lambda_k)| e^{Re(lambda_k) first}``. If the final value
        exceeds their sum, the margin keeps its sign there. The decay over ``first``
        matters in stiff modes: a 1e15 /s mode carries the round-off of its large
        amplitude, gone long before the first point the search would look at.
        """
        if data.modal.lam.size == 0:
            return bool((data.sign * held.q > tol).all())
        if not data.stable:
            return False
        spread = data.R_abs @ np.abs((z0 + held.b_lam) * np.exp(data.lam_real * first))
        final = held.final + data.sign * (offset - held.q)
        return bool((final - spread > tol).all())

    def _search_times(
        self,
        data: _ModeData,
        h: float,
        z0: np.ndarray | None = None,
        held: _Held | None = None,
        tol: float = 0.0,
    ) -> tuple[list[np.ndarray], list[tuple[int, int]]]:
        """Trial points in ``(0, h]`` for the sign-change search: ``(pieces, rings)``.

        Sixteen even points, eight per period of each oscillating mode while that mode can
        still move a margin by more than ``tol`` (its weight times its decay), and
        geometric points right after an event, where fast modes act. A ring at 50 MHz
        dies within a few hundred nanoseconds, so it sets the spacing there and not over
        the whole off-time. ``pieces`` are arrays of times; each ring ``(j, count)``
        stands for the times ``k * data.spacing[j]``, ``k = 1 ... count`` (the same in
        every visit of the mode, so their exponentials are computed once: ``data.ring``).
        """
        pieces = [h * _EVEN]
        if self._fresh:
            pieces.append(h * _EARLY)
        rings: list[tuple[int, int]] = []
        if len(data.oscillating):
            weights = None
            if z0 is not None and tol > 0.0:
                c = z0[data.oscillating] + held.b_oscillating
                weights = np.abs(data.R_oscillating * c[None, :]).max(axis=0, initial=0.0)
                weights = weights.tolist()
            budget = 20000
            for i, spacing in enumerate(data.spacing.tolist()):
                span = h
                if weights is not None:
                    weight, decay = weights[i], data.decay[i]
                    if weight <= 0.0:
                        span = 0.0
                    elif decay > 0.0:
                        span = min(h, math.log(max(weight / tol, 1.0)) / decay)
                count = math.ceil(span / spacing)
                if count > 16 and span > 0.0:
                    if count > budget:  # thinner, but still over the whole life
                        count = max(budget, 0)
                        pieces.append(np.linspace(0.0, span, count + 1)[1:])
                    else:
                        rings.append((i, min(count, math.floor(h / spacing))))
                    budget -= count
        return pieces, rings

    def _search(
        self, data: _ModeData, held: _Held, z0: np.ndarray, h: float, tol: float
    ) -> tuple[np.ndarray, np.ndarray]:
        """The search's trial times (unsorted) and the modal part of every diode margin
        there, ``Re(r (e^{lambda tau} z0 + tau phi1(lambda tau) b))``."""
        pieces, rings = self._search_times(data, h, z0, held, tol)
        times = np.concatenate(pieces)
        first = h * (_EARLY[0] if self._fresh else _EVEN[0])  # the earliest of `times`
        values = [self._modal_values(data, z0, held.b, times, first)]
        if rings:
            times = [times]
            Rz = data.modal.R * z0[None, :]
            for j, count in rings:
                tau, E, Phi = data.ring(j, count)
                values.append((Rz @ E[:, :count] + held.Rb @ Phi[:, :count]).real)
                times.append(tau[:count])
            return np.concatenate(times), np.hstack(values)
        return times, values[0]

    @staticmethod
    def _modal_values(
        data: _ModeData, z0: np.ndarray, b: np.ndarray, tau: np.ndarray, first: float
    ) -> np.ndarray:
        """The modal part of the margins at times ``tau`` (none before ``first``)."""
        m = data.modal
        w = m.lam[:, None] * tau[None, :]
        e = np.exp(w)
        phi = _phi1(w, first * data.slowest, e)
        modal = e * z0[:, None] + tau[None, :] * phi * b[:, None]
        return (m.R @ modal).real

    def _exact_state(self, data: _ModeData, tau: float) -> np.ndarray:
        n = self.x.size
        M = np.zeros((n + 1, n + 1))
        M[:n, :n] = data.mode.A * tau
        M[:n, n] = (data.mode.B @ self._u + data.mode.f) * tau
        E = expm(M)
        return E[:n, :n] @ self.x + E[:n, n]

    def _refine(self, data, held, z0, row, sign, q, a, b, tol_t, tol_v) -> float:
        """Root of one diode's watch function in ``[a, b]`` (safeguarded Newton).

        The watch function is above ``-tol_v`` at ``a`` and below it at ``b``. Its zero is
        the event; when the function is already at or below zero at ``a`` (a diode
        inside its tolerance band, which ``settle`` left in place), the crossing of
        ``-tol_v`` is taken instead, where the diode is certainly inconsistent, so the run
        always moves on.
        """
        m = data.modal
        if m.ok:
            lam, slowest = m.lam, data.slowest
            rz, rb = m.R[row] * z0, held.Rb[row]
            slope = rz * lam + rb  # d/dtau of r z(tau) is slope @ e^{lambda tau}

        def value(tau: float) -> tuple[float, float]:
            if not m.ok:
                x = self._exact_state(data, tau)
                mm = data.mode
                rate = data.Pv[row] @ (mm.A @ x + mm.B @ self._u + mm.f)
                return sign * (data.Pv[row] @ x + q) - level, sign * rate
            w = lam * tau
            e = np.exp(w)
            v = (rz @ e + tau * (rb @ _phi1(w, tau * slowest))).real
            return sign * (v + q) - level, sign * (slope @ e).real

        level = 0.0
        fa, dfa = value(a)
        if fa <= 0.0:
            level = -tol_v
            fa, dfa = value(a)
            if fa <= 0.0:
                return a
        # safeguarded Newton from the side where the function is still positive; once a
        # step is shorter than the tolerance, one probe just past it closes the bracket
        tau, f, df = a, fa, dfa
        for _ in range(100):
            step = tau - f / df if df < 0.0 else 0.5 * (a + b)
            tau = step if a < step < b else 0.5 * (a + b)
            f, df = value(tau)
            if f > 0.0:
                a = tau
                if b - a > tol_t and df < 0.0 and f / -df < 0.5 * tol_t:
                    probe = min(b, tau + tol_t)
                    if value(probe)[0] <= 0.0:
                        return probe
            else:
                b = tau
            if b - a <= tol_t:
                break
        return b

    # -- reading and restoring -----------------------------------------------------------
    def outputs(self) -> tuple[np.ndarray, np.ndarray]:
        """File outputs and device rows (currents then voltages) now."""
        m = self.data().mode
        return m.C @ self.x + m.D @ self._u + m.g, m.P @ self.x + m.Q @ self._u + m.p

    def physical_state(self) -> np.ndarray:
        return self.x + self.data().mode.state_offset @ self._u

    @property
    def inputs(self) -> np.ndarray:
        """The inputs held now."""
        return self._u.copy()

    def save(self) -> tuple:
        """Everything that determines the future: state, mode, time, held inputs, and the
        bookkeeping of the present instant (for :meth:`restore`)."""
        return (
            self.x.copy(), tuple(self.on), self.time, self._u.copy(), len(self.events),
            (self._instant[0], self._instant[1], list(self._instant[2])), self._fresh,
        )  # fmt: skip

    def restore(self, saved: tuple) -> None:
        """Go back to a snapshot of :meth:`save`; events after it are forgotten."""
        x, on, time, u, n_events, instant, fresh = saved
        self.x = x.copy()
        self.on = list(on)
        self.time = time
        self._u = u.copy()
        del self.events[n_events:]
        self._instant = (instant[0], instant[1], list(instant[2]))
        self._fresh = fresh


#: fractions of a segment sampled right after an event, where fast modes act
_EARLY = np.logspace(-9, -1, 9)
#: sixteen even fractions of a segment, the search's coarsest points
_EVEN = np.arange(1, 17) / 16.0


def _gate_edges(waveforms: Mapping[str, Waveform], gates: list[str], until: float) -> np.ndarray:
    """Times in ``(0, until)`` where a gate may change: pwm edges in closed form, and the
    breakpoints of other gate waveforms."""
    times: set[float] = set()
    for gate in gates:
        w = waveforms.get(gate)
        if w is None:
            continue
        if isinstance(w, PulseWidth):
            times.update(w.edges(0.0, until))
        else:
            times.update(b for b in w.breakpoints if 0.0 < b <= until)
    return np.array(sorted(t for t in times if 0.0 < t < until))


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


def result_labels(
    circuit: SwitchedCircuit, extra: list[tuple[str, str, int]]
) -> tuple[list[str], dict[str, str], list[str]]:
    """Output names (the file's, then ``extra`` of :func:`device_output_names`), units of
    outputs and states, and the physical state names of a switched run's result."""
    names = [*circuit.outputs, *(name for name, _, _ in extra)]
    units = dict(circuit.units)
    for name, what, i in extra:
        units[name] = "1" if what == "on" else ("A" if i < len(circuit.devices) else "V")
    states = [s.removesuffix("_shifted") for s in circuit.states]
    for s, s_phys in zip(circuit.states, states, strict=True):
        units[s_phys] = circuit.units.get(s, "")
    return names, units, states


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
        physical states, inputs, ``events`` (:class:`SwitchEvent`) and ``modes`` (the
        :class:`ModeInterval` sequence between them).
    """
    circuit = switched_circuit(model)
    if circuit is None:
        raise SimulationError("invalid_field", "the model has no switches or diodes")
    x0 = start_state(model, circuit, x0)
    grid, input_set, fine = run_setup(
        circuit, until, step, inputs, use_defaults, base, fine_step, fine_window
    )
    run = _Run(circuit, grid, step, input_set, fine, x0, max_changes)
    return run.execute(progress)


def start_state(model: Any, circuit: Any, x0: np.ndarray | None) -> np.ndarray | None:
    """``x0``, or else the start a compiled block carries (``wirestate.simulate.start_from``
    sets it: ``--initial zero``, ``steady_state``, ``--initial-value``); ``None`` leaves
    the parts' ``initial`` values of ``circuit``."""
    if x0 is not None or model is circuit or getattr(model, "x0", None) is None:
        return x0
    if list(getattr(model, "states", [])) != list(circuit.states):
        return None
    return np.array(model.x0, dtype=float)


def run_setup(
    model: Any,
    until: float,
    step: float,
    inputs: Any,
    use_defaults: bool,
    base: Path | None,
    fine_step: float | None = None,
    fine_window: float | None = None,
) -> tuple[np.ndarray, InputSet, tuple[float, float] | None]:
    """The output grid, the input waveforms and the fine sampling of a switched run (a
    circuit or a system: anything with ``inputs``, ``units``, ``input_defaults``)."""
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
        model.inputs,
        model.units,
        defaults=model.input_defaults if use_defaults else None,
        base=base,
    )
    return grid, input_set, ((fine_step, fine_window) if fine_step else None)


#: boundaries and samples closer than this fraction of the output step are one instant
SNAP = 1e-9


class SampleClock:
    """Where a switched run records: the output steps, and every ``fine_step`` for
    ``fine_window`` after the latest event of ``engine``.

    Times within ``snap`` (``1e-9`` of the output step) of each other are one instant.
    """

    def __init__(
        self, grid: np.ndarray, step: float, engine: SwitchedEngine, fine: tuple | None
    ) -> None:
        self.grid = grid
        self.step = step
        self.snap = SNAP * step
        self._grid = grid.tolist()  # for bisect: a search per stretch of the run
        #: the grid for the event kernel's sampler (``ws_sample_stretch``), kept alive here
        self._grid_array = np.ascontiguousarray(grid, dtype=float)
        self.grid_address = self._grid_array.ctypes.data
        self.grid_count = len(self._grid_array)
        self.until = float(grid[-1])
        self.engine = engine
        self.fine = fine

    def merge(self, times: np.ndarray) -> np.ndarray:
        """Sorted times with those within ``snap`` of an output step moved onto it and
        near-duplicates dropped."""
        times = np.asarray(times, dtype=float)
        if not len(times):
            return times
        k = np.clip(np.rint(times / self.step).astype(int), 0, len(self.grid) - 1)
        near = np.abs(times - self.grid[k]) <= self.snap
        times = np.sort(np.where(near, self.grid[k], times))
        return times[np.concatenate([[True], np.diff(times) > self.snap])]

    def index(self, t: float) -> int:
        """The output step holding ``t`` (inputs are held over output steps)."""
        return min(len(self.grid) - 1, int(math.floor(t / self.step + SNAP)))

    def _fine_times(self, t0: float, t1: float) -> np.ndarray:
        events = self.engine.events
        if not self.fine or not events:
            return np.zeros(0)
        fs, window = self.fine
        last = events[-1].time
        first = max(1, math.floor((t0 - last) / fs))
        stop = min(t1, last + window)
        count = math.floor((stop - last) / fs) + 1 - first
        if count <= 0:
            return np.zeros(0)
        times = last + fs * np.arange(first, first + count)
        return times[times < last + window]

    def _fine_range(self, t0: float, t1: float, low: float, high: float) -> tuple[float, int, int]:
        """``(last, k0, k1)``: the fine samples ``last + fine_step * k``, ``k0 <= k < k1``,
        of :meth:`_fine_times` that lie in ``[low, high)`` (the same floating-point
        expressions, in plain arithmetic: this runs once per stretch of a run)."""
        events = self.engine.events
        if not self.fine or not events:
            return 0.0, 0, 0
        fs, window = self.fine
        last = events[-1].time
        first = max(1, math.floor((t0 - last) / fs))
        stop = min(t1, last + window)
        end = first + math.floor((stop - last) / fs) + 1 - first
        top = min(last + window, high)
        k0, k1 = first, end
        while k0 < k1 and last + fs * k0 < low:
            k0 += 1
        while k1 > k0 and not last + fs * (k1 - 1) < top:
            k1 -= 1
        return last, k0, k1

    def sample(self, t0: float, t1: float, include_start: bool) -> np.ndarray:
        """Output steps and fine samples in ``(t0, t1)`` (``[t0, t1)`` with
        ``include_start``), each at most once (a :data:`Sampler`)."""
        low = t0 - self.snap if include_start else t0 + self.snap
        high = t1 - self.snap
        lo = bisect.bisect_left(self._grid, low)
        hi = bisect.bisect_left(self._grid, high)
        times = self.grid[lo:hi]
        last, k0, k1 = self._fine_range(t0, t1, low, high)
        if k1 > k0:
            fine = last + self.fine[0] * np.arange(k0, k1)
            if hi == lo and self.fine[0] > self.snap:
                return fine  # sorted, and no two within snap of each other
            times = np.sort(np.concatenate([times, fine]))
            times = times[np.concatenate([[True], np.diff(times) > self.snap])]
        return times

    def is_sample(self, t: float) -> bool:
        """True when ``t`` is an output step or a fine sample."""
        k = min(len(self.grid) - 1, round(t / self.step))
        if abs(self.grid[k] - t) <= self.snap:
            return True
        fine = self._fine_times(t - self.snap, t + 2 * self.snap)
        return bool(len(fine) and np.min(np.abs(fine - t)) <= self.snap)


class HeldInputs:
    """Input values of a switched run: waveforms held over each output step, and gate
    waveforms exact between their edges (they are evaluated in the middle of a stretch
    that no edge cuts).

    Parameters
    ----------
    names
        Input names, in order.
    input_set
        Their waveforms.
    gates
        The names among them that drive switch gates.
    clock
        The run's :class:`SampleClock`.
    """

    def __init__(
        self, names: list[str], input_set: InputSet, gates: list[str], clock: SampleClock
    ) -> None:
        self.clock = clock
        self.U = input_set.matrix(names, clock.grid)
        waves = input_set.waveforms
        self.gate_rows = [(names.index(g), waves[g]) for g in sorted(set(gates)) if g in waves]
        pwm_rows = [row for row, wave in self.gate_rows if isinstance(wave, PulseWidth)]
        held = np.delete(self.U, pwm_rows, axis=0)
        changes = np.flatnonzero(np.any(held[:, 1:] != held[:, :-1], axis=0)) + 1
        edges = _gate_edges(waves, gates, clock.until)
        #: times where an input may change: gate edges and output steps where a held input
        #: changes, merged onto the output steps (see :meth:`SampleClock.merge`)
        self.boundaries = clock.merge(np.concatenate([edges, clock.grid[changes]]))

    def next_boundary(self, t: float) -> float:
        """The first input boundary later than ``t`` (infinity if none)."""
        j = int(np.searchsorted(self.boundaries, t + self.clock.snap, side="right"))
        return float(self.boundaries[j]) if j < len(self.boundaries) else math.inf

    def over(self, a: float, b: float) -> np.ndarray:
        """Inputs held over ``[a, b)``, a stretch that no input boundary cuts."""
        u = self.U[:, self.clock.index(a)].copy()
        mid = 0.5 * (a + b)
        for row, wave in self.gate_rows:
            if isinstance(wave, PulseWidth):
                u[row] = wave.value_at(mid)
            else:
                u[row] = float(wave.values(np.array([mid]))[0])
        return u


class _Run:
    """One run of :func:`simulate_switched`: boundaries, sampling and recording.

    The run is cut at *boundaries* only: gate edges (closed form), the output steps where a
    held input changes, and the horizon. Between boundaries the inputs are constant, and
    the engine advances in one go, splitting only at located diode events; output samples
    inside are evaluated together on the exact in-mode solution.
    """

    def __init__(self, circuit, grid, step, input_set, fine, x0, max_changes):
        self.circuit = circuit
        self.until = float(grid[-1])
        self.engine = SwitchedEngine(circuit, x0, max_changes=max_changes)
        self.clock = SampleClock(grid, step, self.engine, fine)
        gates = [d.gate for d in circuit.devices if d.gate is not None]
        self.inputs = HeldInputs(circuit.inputs, input_set, gates, self.clock)
        self.boundaries = np.append(
            self.inputs.boundaries[self.inputs.boundaries < self.until - self.clock.snap],
            self.until,
        )
        self.extra = device_output_names(circuit)
        self.chunks: list[Chunk] = []

    def record_now(self) -> None:
        e = self.engine
        self.chunks.append(Chunk(np.array([e.time]), e.x[:, None].copy(), tuple(e.on), e._u))

    # -- the loop --------------------------------------------------------------------------
    def execute(self, progress) -> SimulationResult:
        e = self.engine
        bounds = self.boundaries
        e.apply(self.inputs.over(0.0, float(bounds[0])), record=False)
        self.initial_on = tuple(e.on)
        self.record_now()
        next_report = 0.05
        for i, b in enumerate(bounds):
            b = float(b)
            self.chunks.extend(e.advance_to(b, self.clock.sample))
            after = float(bounds[i + 1]) if i + 1 < len(bounds) else b
            e.apply(self.inputs.over(b, after))
            if self.clock.is_sample(b):
                self.record_now()
            if progress is not None and b >= next_report * self.until:
                progress(b / self.until)
                next_report = b / self.until + 0.05
        return self.result()

    def result(self) -> SimulationResult:
        c = self.circuit
        e = self.engine
        names, units, states = result_labels(c, self.extra)
        rows = [i for _, what, i in self.extra if what == "row"]
        on_rows = [i for _, what, i in self.extra if what == "on"]
        slots = [len(c.outputs) + j for j, (_, w, _) in enumerate(self.extra) if w == "row"]
        on_slots = [len(c.outputs) + j for j, (_, w, _) in enumerate(self.extra) if w == "on"]
        time = np.concatenate([chunk.times for chunk in self.chunks])
        sizes = [len(chunk.times) for chunk in self.chunks]
        # the chunks of one mode with one set of inputs share every product: their columns
        # are gathered into one block per such group (hundreds of chunks, a few groups)
        groups: dict[tuple, int] = {}
        members = [groups.setdefault((ch.on, ch.u.tobytes()), len(groups)) for ch in self.chunks]
        column_group = np.repeat(members, sizes)
        order = np.argsort(column_group, kind="stable")
        bounds = np.searchsorted(column_group[order], np.arange(len(groups) + 1)).tolist()
        X_sorted = np.hstack([chunk.states for chunk in self.chunks])[:, order]
        Y = np.empty((len(names), len(time)))
        X = np.empty_like(X_sorted)
        n_y = len(c.outputs)
        for g, i in {g: i for i, g in reversed(list(enumerate(members)))}.items():
            chunk = self.chunks[i]
            m = e.data(chunk.on).mode
            block = slice(bounds[g], bounds[g + 1])
            Xg = X_sorted[:, block]
            Y[:n_y, block] = m.C @ Xg + (m.D @ chunk.u + m.g)[:, None]
            Y[slots, block] = (m.P @ Xg + (m.Q @ chunk.u + m.p)[:, None])[rows]
            Y[on_slots, block] = np.array(chunk.on, dtype=float)[on_rows][:, None]
            X[:, block] = Xg + (m.state_offset @ chunk.u)[:, None]
        back = np.empty_like(order)
        back[order] = np.arange(len(order))
        Y, X = Y[:, back], X[:, back]
        U = np.repeat(np.array([chunk.u for chunk in self.chunks]).T, sizes, axis=1)
        return SimulationResult(
            name=c.name,
            time=time,
            output_names=names,
            outputs=Y,
            state_names=states,
            states=X,
            input_names=list(c.inputs),
            inputs=U,
            units=units,
            method=(
                f"exact piecewise-linear: ZOH within each mode, {len(e.events)} switching "
                f"events ({sum(ev.located for ev in e.events)} located on the exact "
                f"solution), {len(c.visited_modes)} modes compiled"
            ),
            events=list(e.events),
            modes=mode_sequence(self.initial_on, e.events, [d.name for d in c.devices], self.until),
        )
