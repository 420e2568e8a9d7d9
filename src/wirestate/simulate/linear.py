"""Batch simulation of LTI blocks by exact zero-order (or first-order) hold.

The recurrence ``x[k+1] = Ad x[k] + Bd u[k]`` is evaluated in blocks of ``K`` steps: inside
a block every state is a fixed linear map of the block's first state and its ``K`` inputs,

``x[bK + j] = Ad^j x[bK] + sum_{i<j} Ad^(j-1-i) Bd u[bK + i]``,

so the inputs of *all* blocks go through one matrix product with a precomputed block
lower-triangular Toeplitz matrix, the block start states follow from a short loop over
``N / K`` blocks, and the remaining states from a second matrix product. This is the same
arithmetic as stepping one sample at a time (the classic "lifting" of a discrete system,
e.g. Chen and Francis, Optimal Sampled-Data Control Systems, 1995, ch. 8), reordered so
that numpy's BLAS does the work instead of a Python loop.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import control
import numpy as np

from wirestate.compose import ComposedSystem
from wirestate.errors import SimulationError
from wirestate.lti import CircuitBlock
from wirestate.simulate.discretize import Discretization
from wirestate.simulate.exponential_action import SparseHold, is_cheaper_than_dense
from wirestate.simulate.guards import check_grid_size, step_count
from wirestate.simulate.inputs import InputSet, Waveform, build_inputs
from wirestate.simulate.results import SimulationResult

#: above this state count one step is already a large matrix product; lifting gains nothing
_LIFT_MAX_STATES = 48
#: long runs are stepped in chunks of this many steps so progress can be reported
_PROGRESS_CHUNK = 200_000


@dataclass
class LinearModel:
    """A continuous LTI model with names, the common form of everything the simulator runs."""

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    states: list[str]
    inputs: list[str]
    outputs: list[str]
    x0: np.ndarray
    units: dict[str, str] = field(default_factory=dict)
    input_defaults: dict[str, float] = field(default_factory=dict)
    #: ``(n_states, n_inputs)`` or None: physical state = ``x + state_offset @ u`` (a
    #: circuit's ``<name>_shifted`` states; see :class:`wirestate.lti.CircuitBlock`)
    state_offset: np.ndarray | None = None

    @property
    def n_states(self) -> int:
        return len(self.states)


def as_linear_model(system: Any, *, keep_sparse: bool = False) -> LinearModel:
    """A :class:`LinearModel` from a ``CircuitBlock``, a ``control.StateSpace`` (continuous
    time) or a composed LTI system (:class:`~wirestate.compose.ComposedSystem`).

    With ``keep_sparse``, a large circuit block that holds a sparse ``A``
    (:attr:`~wirestate.lti.CircuitBlock.sparse_A`) gives a model whose ``A`` is that SciPy
    sparse matrix (for :func:`simulate_arrays`); otherwise ``A`` is always dense.

    Raises
    ------
    SimulationError
        ``invalid_step`` for a discrete-time ``StateSpace`` (give the continuous model).
    """
    if isinstance(system, LinearModel):
        return system
    if isinstance(system, ComposedSystem):
        sys = system.state_space()
        return LinearModel(
            system.name,
            np.asarray(sys.A, dtype=float),
            np.asarray(sys.B, dtype=float),
            np.asarray(sys.C, dtype=float),
            np.asarray(sys.D, dtype=float),
            list(system.states),
            system.inputs,
            system.outputs,
            system.x0(),
            dict(system.units),
            dict(system.input_defaults),
        )
    if isinstance(system, CircuitBlock):
        sparse = system.sparse_A if keep_sparse else None
        return LinearModel(
            system.name,
            system.A if sparse is None else sparse,
            system.B,
            system.C,
            system.D,
            list(system.states),
            list(system.inputs),
            list(system.outputs),
            np.array(system.x0, dtype=float),
            dict(system.units),
            dict(system.input_defaults),
            state_offset=np.asarray(system.state_offset, dtype=float),
        )
    if isinstance(system, control.StateSpace):
        if system.isdtime(strict=True):
            raise SimulationError(
                "invalid_step",
                f"{system.name}: a discrete-time model cannot be re-discretised; "
                "give the continuous-time model",
            )
        return LinearModel(
            system.name,
            np.asarray(system.A, dtype=float),
            np.asarray(system.B, dtype=float),
            np.asarray(system.C, dtype=float),
            np.asarray(system.D, dtype=float),
            list(system.state_labels),
            list(system.input_labels),
            list(system.output_labels),
            np.zeros(system.nstates),
        )
    if callable(getattr(system, "state_space", None)):
        # any other object that can give its linear form (duck-typed, as python-control does)
        return as_linear_model(system.state_space())
    raise SimulationError(
        "unknown_kind",
        f"cannot simulate a {type(system).__name__}; expected a CircuitBlock, a composed "
        "system or a control.StateSpace",
    )


def refuse_switched(model: Any, entry: str) -> None:
    """Raise ``switched_model`` for the compiled block of a circuit with switches or diodes:
    ``entry`` runs linear time-invariant models only, and one mode's matrices would give a
    silently wrong response."""
    if not isinstance(model, CircuitBlock) or getattr(model, "spec", None) is None:
        return
    from wirestate.switching import is_switched

    if is_switched(model.spec):
        devices = [n for n, p in model.spec.parts.items() if p.kind in ("switch", "diode")]
        raise SimulationError(
            "switched_model",
            f"{model.name}: {entry} runs linear time-invariant models; this circuit switches "
            f"({', '.join(devices)}). Use wirestate.simulate.simulate (or simulate_switched), "
            "which locates every switching event",
            location=("parts", devices[0]),
        )


def time_grid(until: float, step: float) -> np.ndarray:
    """``0, step, 2 step, ...`` up to ``until`` (s); ``until`` must be a whole number of steps
    to within 1e-9 relative (common practice, no source: guards against rounding only)."""
    n = step_count(until, step)
    # every engine makes this grid first: a count beyond memory is refused here too (the
    # run-size check of wirestate.simulate.simulate covers only the runs it dispatches)
    check_grid_size(n + 1, until, step)
    return np.arange(n + 1) * step


#: sets the block length K ~ sqrt(BLOCK_COST / (n (m + 1))); tuned by timing, no source
BLOCK_COST = 3000.0


def _block_length(n: int, m: int) -> int:
    # lifting costs about K*m*n extra flops per step; the start states are lifted again, so
    # a short block keeps the flop count low without a long Python loop
    return int(min(256, max(8, round(math.sqrt(BLOCK_COST / (n * (m + 1) + 1))))))


#: rows per matrix product in _chunked_product
_ROWS = 32


def _chunked_product(left: np.ndarray, right: np.ndarray) -> np.ndarray:
    # many small products (a stacked matmul) instead of one tall one: each stays below
    # the size where OpenBLAS starts threads, which on a loaded machine costs more than the
    # arithmetic (measured: 10x on the 2-core CI box; common practice, no source)
    rows, inner = left.shape
    return np.matmul(left.reshape(rows // _ROWS, _ROWS, inner), right).reshape(rows, -1)


def apply(M: np.ndarray, X: np.ndarray) -> np.ndarray:
    """``M @ X`` for a small ``M`` and a long ``X`` (``(n, N)``): a sum of ``n`` scaled rows
    for short ``n`` (no BLAS threads started for a thin product), a matrix product
    otherwise."""
    M = np.asarray(M, dtype=float)
    p, n = M.shape
    if n == 0:
        return np.zeros((p, X.shape[1]))
    if n > 12 or p * n > 96:
        return M @ X
    out = M[:, :1] * X[0]
    for j in range(1, n):
        out += M[:, j : j + 1] * X[j]
    return out


def propagate(Ad: np.ndarray, Bd: np.ndarray, x0: np.ndarray, U: np.ndarray) -> np.ndarray:
    """States of ``x[k+1] = Ad x[k] + Bd u[k]`` for ``k = 0 .. N-1``.

    Parameters
    ----------
    Ad, Bd
        Discrete matrices ``(n, n)``, ``(n, m)``.
    x0
        Initial state ``(n,)``.
    U
        Inputs ``(m, N)``: column ``k`` drives the step from ``k`` to ``k + 1``.

    Returns
    -------
    numpy.ndarray
        ``(n, N + 1)`` states, column 0 is ``x0``.
    """
    n = Ad.shape[0]
    m, N = U.shape
    X = np.empty((n, N + 1))
    X[:, 0] = x0
    if n == 0 or N == 0:
        return X
    if n > _LIFT_MAX_STATES or N < 64:
        BU = apply(Bd, U)
        x = np.array(x0, dtype=float)
        for k in range(N):
            x = Ad @ x + BU[:, k]
            X[:, k + 1] = x
        return X
    K = min(_block_length(n, m), N)
    # a whole number of row chunks (see _chunked_product); the extra blocks see zero input
    needed = math.ceil(N / K)
    blocks = math.ceil(needed / _ROWS) * _ROWS
    # powers Ad^1 .. Ad^K and the lifted input map, built once per call
    powers = np.empty((K + 1, n, n))
    powers[0] = np.eye(n)
    for j in range(1, K + 1):
        powers[j] = Ad @ powers[j - 1]
    impulse = powers[:K] @ Bd  # impulse[i] = Ad^i Bd, (K, n, m)
    # lifted[j, :, i, :] = Ad^(j-i) Bd for i <= j (state after step j from input i), else 0
    padded_impulse = np.concatenate([impulse, np.zeros((1, n, m))])
    lag = np.subtract.outer(np.arange(K), np.arange(K))
    lag[lag < 0] = K
    lifted = padded_impulse[lag].transpose(0, 2, 1, 3).reshape(K * n, K * m)
    padded = np.zeros((m, blocks * K))
    padded[:, :N] = U
    stacked = padded.T.reshape(blocks, K * m)  # block b: [u_bK, u_bK+1, ...]
    forced = _chunked_product(stacked, lifted.T)  # (blocks, K*n): zero-state part per block
    # the block start states obey the same kind of recurrence, s[b+1] = Ad^K s[b] + f[b]
    # (f: zero-state end of block b), so they are lifted in turn instead of looped over
    last = forced[:, (K - 1) * n :].T
    starts = propagate(powers[K], np.eye(n), np.asarray(x0, dtype=float), last)[:, :blocks].T
    free = _chunked_product(starts, powers[1:].reshape(K * n, n).T)  # (blocks, K*n)
    states = (free + forced).reshape(blocks * K, n)
    X[:, 1:] = states[:N].T
    return X


def simulate_linear(
    system: Any,
    until: float,
    step: float,
    inputs: Mapping[str, str | float | Waveform] | InputSet | None = None,
    *,
    x0: np.ndarray | None = None,
    hold: str = "zoh",
    use_defaults: bool = True,
    base: Path | None = None,
    progress: Callable[[float], None] | None = None,
) -> SimulationResult:
    """Simulate an LTI model on a uniform grid by exact discretisation.

    Parameters
    ----------
    system
        ``CircuitBlock``, continuous ``control.StateSpace`` or a composed LTI system.
    until, step
        Horizon and step (s); the grid is ``0, step, ..., until``.
    inputs
        Waveforms by input name (text such as ``"step:48V"``, numbers, or
        :class:`~wirestate.simulate.inputs.Waveform`), or a ready :class:`InputSet`.
        Inputs not given are driven by the source's default ``value`` (when
        ``use_defaults``) or held at zero.
    x0
        Initial state (default: the block's ``x0``).
    hold
        ``"zoh"``: each input sample held over its step (exact for piecewise-constant
        inputs; Van Loan 1978). ``"foh"``: inputs linear between samples (exact for
        piecewise-linear inputs; Franklin, Powell and Workman 1998, sec. 6.3.2).
    progress
        Called with the completed fraction (0..1) during long runs.

    Returns
    -------
    SimulationResult
        Outputs ``y[k] = C x[k] + D u[k]`` at every grid point including ``t = 0``.
    """
    refuse_switched(system, "simulate_linear")
    model = as_linear_model(system, keep_sparse=True)
    t = time_grid(until, step)
    input_set = build_inputs(
        inputs or {},
        model.inputs,
        model.units,
        defaults=model.input_defaults if use_defaults else None,
        base=base,
    )
    U = input_set.matrix(model.inputs, t)
    if hasattr(model.A, "tocsr") and not is_cheaper_than_dense(model.A, step, len(t) - 1):
        model.A = model.A.toarray()  # a long run of a mid-sized block: the dense hold
    x_init = model.x0 if x0 is None else np.asarray(x0, dtype=float)
    if x_init.shape != (model.n_states,):
        raise SimulationError(
            "state_size_mismatch",
            f"{model.name}: initial state has {x_init.size} entries, the model "
            f"{model.n_states} states",
        )
    X = simulate_arrays(model.A, model.B, x_init, U, step, hold=hold, progress=progress)
    Y = apply(model.C, X) + apply(model.D, U)
    method = (
        "exact zero-order hold (Van Loan 1978)"
        if hold == "zoh"
        else "exact first-order hold (Van Loan 1978)"
    )
    return SimulationResult(
        name=model.name,
        time=t,
        output_names=list(model.outputs),
        outputs=Y,
        state_names=list(model.states),
        states=X,
        input_names=list(model.inputs),
        inputs=U,
        units=dict(model.units),
        method=method,
        state_offset=model.state_offset,
    )


_SHARED: dict[bytes, Discretization] = {}


def _discretization(A: np.ndarray, B: np.ndarray) -> Discretization:
    # repeated runs of the same block (parameter sweeps, benchmarks) reuse the matrix
    # exponentials; keyed by the matrices' bytes, a few entries only
    A = np.ascontiguousarray(A, dtype=float)
    B = np.ascontiguousarray(B, dtype=float)
    if A.shape[0] > 200:  # large blocks: keep no copies of their exponentials around
        return Discretization(A, B)
    key = A.shape[0].to_bytes(4, "little") + A.tobytes() + B.tobytes()
    found = _SHARED.get(key)
    if found is None:
        if len(_SHARED) >= 16:
            _SHARED.pop(next(iter(_SHARED)))
        found = _SHARED[key] = Discretization(A, B)
    return found


def simulate_arrays(
    A: np.ndarray,
    B: np.ndarray,
    x0: np.ndarray,
    U: np.ndarray,
    step: float,
    *,
    hold: str = "zoh",
    discretization: Discretization | SparseHold | None = None,
    progress: Callable[[float], None] | None = None,
) -> np.ndarray:
    """States ``(n, N)`` on a uniform grid for the input samples ``U`` ``(m, N)``.

    A SciPy sparse ``A`` (a large sparse circuit block) is stepped by the action of the
    matrix exponential (:mod:`wirestate.simulate.exponential_action`): the same exact hold,
    in time linear in the number of states, without ever forming ``exp(A dt)``.
    """
    if hasattr(A, "tocsr"):
        if hold not in ("zoh", "foh"):
            raise SimulationError("invalid_field", f"hold must be 'zoh' or 'foh', got {hold!r}")
        plan = discretization if isinstance(discretization, SparseHold) else None
        return (plan or SparseHold(A, B, step, hold)).propagate(x0, U, progress)
    disc = discretization or _discretization(A, B)
    N = U.shape[1]
    if hold == "zoh":
        Ad, Bd = disc.zoh(step)
        drive = U[:, : N - 1]
    elif hold == "foh":
        # with xi = x - B1 u the FOH recurrence x[k+1] = Ad x[k] + B0 u[k] + B1 u[k+1]
        # becomes xi[k+1] = Ad xi[k] + (Ad B1 + B0) u[k] (Franklin, Powell and Workman
        # 1998, sec. 6.3.2): the same lifted stepping with m inputs instead of 2 m
        Ad, B0, B1 = disc.foh(step)
        xi = _advance(Ad, Ad @ B1 + B0, np.asarray(x0) - B1 @ U[:, 0], U[:, : N - 1], progress)
        return xi + apply(B1, U)
    else:
        raise SimulationError("invalid_field", f"hold must be 'zoh' or 'foh', got {hold!r}")
    return _advance(Ad, Bd, x0, drive, progress)


def _advance(Ad, Bd, x0, drive, progress) -> np.ndarray:
    N = drive.shape[1] + 1
    if progress is None or N <= _PROGRESS_CHUNK:
        return propagate(Ad, Bd, x0, drive)
    X = np.empty((Ad.shape[0], N))
    X[:, 0] = x0
    for k0 in range(0, N - 1, _PROGRESS_CHUNK):
        k1 = min(N - 1, k0 + _PROGRESS_CHUNK)
        X[:, k0 : k1 + 1] = propagate(Ad, Bd, X[:, k0], drive[:, k0:k1])
        progress(k1 / (N - 1))
    return X
