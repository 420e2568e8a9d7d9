"""Where a run starts: the parts' ``initial`` fields, zero, or the steady state at the
operating point, with single states set by name on top.

The steady state is the equilibrium at the inputs' values at t = 0 (as a tuning
scenario's ``initial = "steady_state"``). For a block ``dx/dt = A x + B u`` it solves
``A x = -B u(0)``. For a composed system every block contributes its own equations and the
wiring closes them, in one linear system over all block states and block inputs:

* a continuous block: ``0 = A x + B u`` (a controller with output limits unsaturated);
* a sampled block: ``x = Ad x + Bd u`` (a fixed point of its update);
* each block input equals the output that drives it, ``C x + D u`` of its source block,
  or the external input's value.

With the sampled outputs held, the continuous part is then at rest and every sampled
block repeats its state, so a run from there stays put until an input changes. A
controller whose steady command lies outside its output limits has no such steady state
and is refused, as is a pole at s = 0 that the inputs drive (an integrator with a constant
input has no rest point). When the equilibrium is not unique (a pole at s = 0 that nothing
drives), the solution of least norm is taken and a note says so.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.compose import LINEAR, SAMPLED, ComposedSystem
from wirestate.errors import SimulationError, WirestateError
from wirestate.lti import LARGE_BLOCK_STATES, CircuitBlock, dc_gain_limit
from wirestate.simulate.inputs import Waveform, build_inputs, parse_waveform
from wirestate.simulate.linear import LinearModel, as_linear_model
from wirestate.switching import switched_circuit
from wirestate.units import parse_quantity

#: ways to start: the parts' (and blocks') own initial values, zero, the steady state
INITIAL_MODES = ("parts", "steady_state", "zero")
#: a residual of the steady-state equations above this fraction of the size of their terms
#: means there is no equilibrium (round-off of a backward-stable solve is near 1e-15;
#: common practice, no source)
_CONSISTENT = 1e-9


@dataclasses.dataclass
class InitialState:
    """The chosen start: ``model`` is a copy of the model that starts there."""

    model: Any
    x0: np.ndarray
    notes: list[str]


def start_from(
    model: Any,
    initial: str = "parts",
    values: Mapping[str, str | float] | None = None,
    inputs: Mapping[str, str | float | Waveform] | None = None,
    *,
    use_defaults: bool = True,
    base: Path | None = None,
) -> InitialState:
    """A copy of ``model`` starting from ``initial``, with ``values`` set on top.

    Parameters
    ----------
    model
        A ``CircuitBlock``, a continuous ``control.StateSpace``, a
        :class:`~wirestate.simulate.linear.LinearModel` or a composed system.
    initial
        ``"parts"`` (the parts' ``initial`` fields, zero elsewhere), ``"zero"`` or
        ``"steady_state"`` (the equilibrium at the inputs' values at t = 0).
    values
        States to set by name, in SI units or as text with a unit (``{"v_Cf": "42V"}``).
        A capacitor voltage or inductor current that the compiler shifted
        (``v_C1_shifted``) may be set by its physical name (``v_C1``); composed states are
        ``block.state``.
    inputs
        The run's input waveforms (as for :func:`wirestate.simulate.simulate`): they give
        the operating point.

    Returns
    -------
    InitialState
        The model copy, its initial state and notes (for example a steady state that is
        not unique).

    Raises
    ------
    SimulationError
        ``invalid_field`` for an unknown mode or no steady state; ``unknown_signal`` for a
        name that is no state; ``invalid_quantity`` or ``wrong_unit`` for a value.
    """
    if initial not in INITIAL_MODES:
        raise SimulationError(
            "invalid_field",
            f"initial must be one of {', '.join(INITIAL_MODES)}, got {initial!r}",
            location=("initial",),
        )
    system = isinstance(model, ComposedSystem)
    if not system and not isinstance(model, CircuitBlock):
        model = as_linear_model(model)
    units = dict(model.units)
    defaults = model.input_defaults if use_defaults else None
    input_set = build_inputs(inputs or {}, model.inputs, units, defaults=defaults, base=base)
    u0 = input_set.matrix(list(model.inputs), np.zeros(1))[:, 0]
    notes: list[str] = []
    if initial == "parts":
        x = model.x0() if system else np.array(model.x0, dtype=float)
    elif initial == "zero":
        x = np.zeros(len(model.states))
    elif system:
        _refuse_switched_system(model)
        x = _system_steady_state(model, u0, notes)
    elif switched_circuit(model) is not None:
        x = _switched_steady_state(model, input_set, u0, notes)
    else:
        x = _block_steady_state(model, u0, notes)
    if initial == "steady_state" and switched_circuit(model) is None:
        _note_unstable(model, notes)
    x = np.array(x, dtype=float)
    for name, value in (values or {}).items():
        index, offset = _state_index(model, name, u0)
        x[index] = _read(value, units.get(model.states[index], ""), name) - offset
    copy = _with_x0(model, x)
    return InitialState(copy, x, notes)


#: an equilibrated matrix whose condition number exceeds this is taken as singular (common
#: practice, no source)
_SINGULAR_CONDITION = 1e13


def _no_steady_state(what: str) -> SimulationError:
    return SimulationError(
        "invalid_field",
        f"{what} has no steady state at the inputs at t = 0: a pole at s = 0 (an "
        "integrator) is driven by them, so the response grows without limit; start from "
        "zero or from the parts' initial values instead",
        location=("initial",),
    )


def _not_unique(what: str) -> str:
    return (
        f"the steady state of {what} is not unique (a pole at s = 0 that the inputs do not "
        "drive); the regular part is taken, with nothing on that pole"
    )


def _solve(M: np.ndarray, rhs: np.ndarray, what: str, notes: list[str]) -> np.ndarray:
    """The solution of ``M z = rhs``; least norm when ``M`` is singular, which then
    must still satisfy every equation."""
    if M.shape[0] == 0:
        return np.zeros(M.shape[1])
    rows = np.abs(M).max(axis=1)
    rows[rows == 0] = 1.0
    singular = np.linalg.cond(M / rows[:, None]) > _SINGULAR_CONDITION
    if singular:
        z = np.linalg.lstsq(M, rhs, rcond=None)[0]
    else:
        z = np.linalg.solve(M, rhs)
    size = np.abs(M) @ np.abs(z) + np.abs(rhs)
    allowed = _CONSISTENT * (size + 1e-3 * size.max(initial=0.0))
    if (np.abs(M @ z - rhs) > allowed).any() or not np.isfinite(z).all():
        raise _no_steady_state(what)
    if singular:
        notes.append(_not_unique(what))
    return z


def _block_steady_state(model: Any, u0: np.ndarray, notes: list[str]) -> np.ndarray:
    """``x = -A^-1 B u(0)`` as the DC gain of the states (:func:`wirestate.lti.dc_gain_limit`,
    which also handles a singular ``A``: unbounded where a pole at s = 0 is driven)."""
    A, B = np.asarray(model.A, dtype=float), np.asarray(model.B, dtype=float)
    n = A.shape[0]
    used = u0 != 0.0
    if n == 0:
        return np.zeros(0)
    gain = dc_gain_limit(A, B[:, used], np.eye(n), np.zeros((n, int(used.sum()))))
    if not np.isfinite(gain).all():
        raise _no_steady_state(model.name)
    if n <= LARGE_BLOCK_STATES and np.linalg.matrix_rank(A) < n:
        notes.append(_not_unique(model.name))
    return gain @ u0[used]


#: rounds of "conduction pattern -> equilibrium -> its conduction pattern" (one mode) and
#: Newton steps (a pwm period) before a switched circuit's start is refused
_SWITCHED_ROUNDS = 20
#: the periodic state is taken when one period moves it by less than this fraction of its
#: largest entry (the events are located to ~1e-12 of the step; common practice, no source)
_PERIODIC = 1e-9
#: relative finite-difference step of the period map's Jacobian: within one event sequence
#: the map is affine, so the step only needs to stay clear of round-off
_DIFFERENCE = 1e-6
#: carrier periods run from rest before the Newton steps start
_WARM_UP_PERIODS = 3
#: above this many states the periodic start (one period per state per Newton step) is
#: refused rather than left to run for minutes (common practice, no source)
_PERIODIC_MAX_STATES = 200


def _refuse_switched_system(system: ComposedSystem) -> None:
    from wirestate.compose import MODULATOR, SWITCHED
    from wirestate.simulate.switched_system import has_switching

    if not has_switching(system):
        return
    named = [b.name for b in system.blocks.values() if b.category in (SWITCHED, MODULATOR)]
    modulated = any(system.blocks[name].category == MODULATOR for name in named)
    why = (
        "its steady state is periodic, at a duty cycle the loop itself sets"
        if modulated
        else "which mode its switches and diodes hold depends on the whole system"
    )
    which = (
        f"block {named[0]} switches" if len(named) == 1 else (f"blocks {', '.join(named)} switch")
    )
    raise SimulationError(
        "invalid_field",
        f"{system.name}: {which}, so the system has no equilibrium to start from ({why}); "
        "start from the parts' initial values (--initial parts) or from zero and set the "
        "states you know with --initial-value, or simulate the circuit alone (with a fixed "
        "pwm duty) and --initial steady_state",
        location=("initial",),
    )


def _switched_steady_state(
    model: Any, input_set: Any, u0: np.ndarray, notes: list[str]
) -> np.ndarray:
    """The start of a circuit with switches or diodes at the inputs' values at t = 0.

    With pwm gates: the periodic steady state, the state that one carrier period of the
    switched run (every event located) brings back to itself, found by Newton's method on
    the period map with a finite-difference Jacobian (the shooting method; Aprille and
    Trick, Proc. IEEE 60(1), 1972). Without: the steady state of the one mode the gates and
    diodes then hold, with the diodes consistent with it."""
    from wirestate.simulate.pwm import PulseWidth

    circuit = switched_circuit(model)
    waves = input_set.waveforms
    gates = sorted({d.gate for d in circuit.devices if d.gate is not None})
    pwm = [g for g in gates if isinstance(waves.get(g), PulseWidth)]
    if pwm:
        return _periodic_state(model, circuit, {g: waves[g] for g in pwm}, u0, notes)
    from wirestate.simulate.averaged import AveragedModel

    combinations = [(1.0, {g: float(u0[circuit.inputs.index(g)]) for g in gates})]
    one_mode = AveragedModel(circuit)
    u = np.append(u0, 1.0)
    x = np.zeros(len(circuit.states))
    pattern = None
    for _ in range(_SWITCHED_ROUNDS):
        A, Bf = one_mode.at(x, u0, combinations)[:2]
        if one_mode.last_pattern == pattern:
            break
        pattern = one_mode.last_pattern
        x = _solve(np.asarray(A, dtype=float), -np.asarray(Bf) @ u, model.name, notes)
    else:
        raise SimulationError(
            "invalid_field",
            f"{model.name}: the diodes find no conduction pattern consistent with its own "
            "steady state at the inputs at t = 0; start from zero or from the parts' "
            "initial values",
            location=("initial",),
        )
    on = [d.name for d, conducting in zip(circuit.devices, pattern[0], strict=True) if conducting]
    notes.append(
        f"the switches and diodes of {model.name} hold one mode at the inputs at t = 0 "
        f"({', '.join(on) or 'none'} conducting): the run starts from that mode's steady state"
    )
    return x


def _periodic_state(
    model: Any, circuit: Any, pwm: dict[str, Any], u0: np.ndarray, notes: list[str]
) -> np.ndarray:
    from wirestate.simulate.switched import simulate_switched

    frequencies = sorted({w.frequency for w in pwm.values()})
    n = len(circuit.states)
    refusal = None
    if len(frequencies) > 1:
        refusal = (
            f"its pwm gates run at different frequencies "
            f"({', '.join(f'{f:g} Hz' for f in frequencies)}), so no one period repeats"
        )
    elif any(s.endswith("_shifted") for s in circuit.states):
        refusal = "it has shifted states (a capacitor across a source), whose start is not set"
    elif n > _PERIODIC_MAX_STATES:
        refusal = f"it has {n} states (the search runs a period per state per step)"
    if refusal:
        raise SimulationError(
            "invalid_field",
            f"{model.name}: no periodic steady state is computed: {refusal}; start from zero "
            "or from the parts' initial values and let the run settle",
            location=("initial",),
        )
    period = 1.0 / frequencies[0]
    inputs: dict[str, Any] = {
        name: float(u0[i]) for i, name in enumerate(circuit.inputs) if name not in pwm
    }
    inputs.update(pwm)

    def after_a_period(x: np.ndarray) -> np.ndarray:
        run = simulate_switched(circuit, period, period, inputs, use_defaults=False, x0=x)
        return run.states[:, -1]

    # a few periods from rest first: at rest a diode sits exactly at its threshold, where
    # the differences of the period map would make it chatter
    x = np.zeros(n)
    for _ in range(_WARM_UP_PERIODS):
        x = after_a_period(x)
    for _ in range(_SWITCHED_ROUNDS):
        moved = after_a_period(x) - x
        size = max(float(np.abs(x).max(initial=0.0)), float(np.abs(moved).max()), 1e-12)
        if np.abs(moved).max() <= _PERIODIC * size:
            break
        J = np.empty((n, n))
        for j in range(n):
            h = _DIFFERENCE * max(abs(x[j]), 1e-3 * size, 1e-9)
            e = x.copy()
            e[j] += h
            J[:, j] = (after_a_period(e) - e - moved) / h
        try:
            x = x - np.linalg.solve(J, moved)
        except np.linalg.LinAlgError:
            raise _no_steady_state(model.name) from None
        if not np.isfinite(x).all():
            raise _no_steady_state(model.name)
    else:
        raise SimulationError(
            "invalid_field",
            f"{model.name}: the periodic steady state was not found in {_SWITCHED_ROUNDS} "
            "Newton steps (the event sequence keeps changing); start from zero or from the "
            "parts' initial values and let the run settle",
            location=("initial",),
        )
    duties = ", ".join(f"{g} duty {w.duty:g} at {w.frequency:g} Hz" for g, w in pwm.items())
    notes.append(
        f"{model.name} switches, so it has no equilibrium: the run starts from its periodic "
        f"steady state ({duties}; the state one carrier period brings back to itself, other "
        "inputs held at their values at t = 0)"
    )
    return x


def _note_unstable(model: Any, notes: list[str]) -> None:
    """A note when the steady state is an unstable equilibrium: the run starts there, but
    round-off and any change of the inputs grow from it. Only where the poles are cheap:
    continuous linear models of up to ``LARGE_BLOCK_STATES`` states."""
    if isinstance(model, ComposedSystem):
        if not model.is_linear or len(model.states) > LARGE_BLOCK_STATES:
            return
        poles = np.asarray(model.state_space().poles(), dtype=complex)
    else:
        A = np.asarray(model.A, dtype=float)
        if A.shape[0] == 0 or A.shape[0] > LARGE_BLOCK_STATES:
            return
        poles = np.linalg.eigvals(A)
    # a pole at the origin is the not-unique case, not an unstable one (a relative round-
    # off margin; common practice, no source)
    unstable = poles[poles.real > 1e-9 * max(float(np.abs(poles).max(initial=0.0)), 1.0)]
    if unstable.size:
        fastest = unstable[np.argmax(unstable.real)]
        notes.append(
            f"the steady state is unstable (a pole at {fastest.real:.4g}"
            f"{fastest.imag:+.4g}j 1/s): the run starts there, but round-off and any change "
            f"of the inputs grow from it like exp({fastest.real:.4g} t)"
        )


def _block_matrices(b: Any) -> tuple[np.ndarray, ...]:
    """``(A, B, C, D)`` of a block view: continuous, or discrete for a sampled block; a
    controller with output limits unsaturated."""
    from wirestate.blocks import PIDController

    if b.category in (LINEAR, SAMPLED) or isinstance(b.source, PIDController):
        return b.matrices()
    raise SimulationError(
        "invalid_field",
        f"block {b.name!r} is a nonlinear block; its steady state is not computed. "
        "Start from zero or from the parts' initial values and set single states",
        location=("initial",),
    )


def _system_steady_state(system: ComposedSystem, u0: np.ndarray, notes: list[str]) -> np.ndarray:
    from wirestate.blocks import PIDController

    blocks = list(system.blocks.values())
    matrices = {b.name: _block_matrices(b) for b in blocks}
    x_at, u_at, nx, nu = {}, {}, 0, 0
    for b in blocks:
        x_at[b.name], nx = nx, nx + len(b.states)
    for b in blocks:
        u_at[b.name], nu = nx + nu, nu + len(b.inputs)
    size = nx + nu
    M = np.zeros((size, size))
    rhs = np.zeros(size)
    external = {d: e for e, dests in system.external_inputs.items() for d in dests}
    row = 0
    for b in blocks:
        A, B, _, _ = matrices[b.name]
        n, m = len(b.states), len(b.inputs)
        xs, us = slice(x_at[b.name], x_at[b.name] + n), slice(u_at[b.name], u_at[b.name] + m)
        M[row : row + n, xs] = A - np.eye(n) if b.category == SAMPLED else A
        M[row : row + n, us] = B
        row += n
    for b in blocks:
        for j, name in enumerate(b.inputs):
            dest = f"{b.name}.{name}"
            M[row, u_at[b.name] + j] = 1.0
            if dest in external:
                rhs[row] = u0[system.inputs.index(external[dest])]
            else:
                block, signal = system.wiring[dest].split(".")
                src = system.blocks[block]
                _, _, C, D = matrices[block]
                i = src.outputs.index(signal)
                M[row, x_at[block] : x_at[block] + len(src.states)] -= C[i]
                M[row, u_at[block] : u_at[block] + len(src.inputs)] -= D[i]
            row += 1
    z = _solve(M, rhs, system.name, notes)
    for b in blocks:
        if isinstance(b.source, PIDController) and b.source.is_limited:
            _, _, C, D = matrices[b.name]
            x = z[x_at[b.name] : x_at[b.name] + len(b.states)]
            u = z[u_at[b.name] : u_at[b.name] + len(b.inputs)]
            command = float((C @ x + D @ u)[0])
            low, high = b.source.limits
            if not low <= command <= high:
                raise SimulationError(
                    "invalid_field",
                    f"{system.name}: the steady state needs {b.name}.command = {command:.6g} "
                    f"{b.source.unit}, outside its output limits [{low:g}, {high:g}]; the "
                    "loop cannot settle there. Start from zero or change the inputs",
                    location=("initial",),
                )
    return z[:nx]


def _state_index(model: Any, name: str, u0: np.ndarray) -> tuple[int, float]:
    """Index of the state ``name`` and the offset to subtract (a shifted state set by
    its physical name: state = physical value - offset @ u)."""
    states = list(model.states)
    if name in states:
        return states.index(name), 0.0
    shifted = f"{name}_shifted"
    if shifted in states:
        index = states.index(shifted)
        return index, float(_offset_row(model, index) @ u0)
    raise SimulationError(
        "unknown_signal",
        f"initial value for {name!r}, which is not a state (states: {', '.join(states)})",
        location=("initial_values", name),
    )


def _offset_row(model: Any, index: int) -> np.ndarray:
    if not isinstance(model, ComposedSystem):
        return np.asarray(model.state_offset, dtype=float)[index]
    # a composed state block.v_C1_shifted: the circuit block's own offset, mapped onto
    # the external inputs that drive that block's inputs directly
    block, state = model.states[index].split(".", 1)
    source = model.blocks[block].source
    row = np.zeros(len(model.inputs))
    own = np.asarray(source.state_offset, dtype=float)[source.states.index(state)]
    external = {d: e for e, dests in model.external_inputs.items() for d in dests}
    for j, name in enumerate(source.inputs):
        if own[j] == 0.0:
            continue
        dest = f"{block}.{name}"
        if dest not in external:
            raise SimulationError(
                "unknown_signal",
                f"{model.states[index]} is a shifted state whose offset depends on "
                f"{dest}, which another block drives; set {model.states[index]} itself",
                location=("initial_values", model.states[index]),
            )
        row[model.inputs.index(external[dest])] += own[j]
    return row


def _read(value: str | float, unit: str, name: str) -> float:
    if isinstance(value, int | float) and not isinstance(value, bool):
        return float(value)
    where = ("initial_values", name)
    if ":" in str(value):
        raise SimulationError(
            "invalid_quantity",
            f"an initial value is one number with its unit, such as '42V', got {value!r}",
            location=where,
        )
    if unit in ("", "1"):
        # a state without a unit (a balanced coordinate of a reduced block, a file without
        # units) or a dimensionless one takes a plain number: '3A' would be read as 3 of an
        # unknown unit without a word
        try:
            return parse_quantity(str(value), "1", field="")
        except WirestateError as exc:
            raise SimulationError(
                exc.code,
                f"{name} has no unit, so its initial value is a plain number (SI), got {value!r}",
                location=where,
            ) from None
    try:
        wave = parse_waveform(str(value), unit or None, name=name)
    except SimulationError as exc:
        exc.location = where
        exc.args = (str(exc),)
        raise
    return float(wave.values(np.zeros(1))[0])


def _with_x0(model: Any, x: np.ndarray) -> Any:
    if isinstance(model, ComposedSystem):
        blocks, at = {}, 0
        for name, b in model.blocks.items():
            n = len(b.states)
            blocks[name] = dataclasses.replace(b, x0=x[at : at + n].copy())
            at += n
        return dataclasses.replace(model, blocks=blocks)
    if isinstance(model, CircuitBlock | LinearModel):
        return dataclasses.replace(model, x0=x.copy())
    raise SimulationError("unknown_kind", f"cannot set the state of a {type(model).__name__}")
