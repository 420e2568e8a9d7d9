"""The condensed trajectory as one CasADi function with hand-written derivatives.

``state_samples(n, V, columns)`` is the CasADi function ``(Phi, Gamma, x0) ->
X[:, columns]``, the states of ``x[k+1] = Phi x[k] + Gamma V[:, k]`` at the sample
``columns``. CasADi differentiates it through its own forward and reverse functions
(the recursion in ``recursion_kernel.c``, or in numpy):

* forward (tangent) sensitivities, every direction at once (Dickinson and Gelinas,
  "Sensitivity analysis of ordinary differential equation systems -- a direct method",
  J. Comput. Phys. 21, 1976, in its discrete-time form): with seeds ``dPhi``, ``dW``,
  ``dx0`` for ``m`` directions, ``S[k+1] = Phi S[k] + dPhi X[k] + dW[k]``, where ``S[k]``
  is states x directions: one small dense product per sample for all directions together
  (the terms ``dPhi X`` of every direction and sample in one product beforehand);
* reverse (adjoint) sensitivities (Cao, Li, Petzold and Serban, "Adjoint sensitivity
  analysis for differential-algebraic equations", SIAM J. Sci. Comput. 24(3), 2003, in
  discrete time): ``lam[k] = Xbar[k] + Phi^T lam[k+1]``, ``Phibar = sum lam[k+1] X[k]^T``,
  ``Wbar[k] = lam[k+1]``, ``x0bar = lam[0]``.

CasADi's own forward mode through a stepping loop costs one sweep of its virtual machine
through every sample per direction; here the cost per sample is one product whatever
the number of directions, which is what keeps the constraint Jacobians of the tuning NLP
cheap as the number of design variables grows.
"""

from __future__ import annotations

import ctypes
from functools import lru_cache
from typing import Any

import numpy as np

from wirestate.native import is_native_disabled, optional_kernel
from wirestate.tune.callback import bases, dense

_native: dict[str, Any] = {}
#: the C kernel runs recursions of up to this many columns; wider ones are faster as one
#: BLAS product per sample (measured on a 24-state loop, 500 steps: C 2.0 ms against numpy
#: 3.0 ms at 32 columns, 4.1 against 4.0 at 64)
NATIVE_COLUMNS = 48


def _kernel() -> Any:
    """``ws_linear_recursion`` of ``recursion_kernel.c`` (built once per user by
    :func:`wirestate.native.load_kernel`), or None: no compiler, a failed build or
    ``WIRESTATE_NO_NATIVE`` (numpy then runs the same recursion; a missing compiler or a
    failed build is said in a warning)."""
    if is_native_disabled():
        return None
    if "function" not in _native:
        library = optional_kernel(
            "wirestate.tune", "recursion_kernel.c",
            "tuning: the trajectory recursion runs in numpy (the same results to round-off, "
            "slower)",
        )  # fmt: skip
        _native["function"] = None
        if library is not None:
            function = library.ws_linear_recursion
            function.restype = None
            function.argtypes = [ctypes.c_int, ctypes.c_int, ctypes.c_long, *[ctypes.c_void_p] * 3]
            _native["function"] = function
    return _native["function"]


def recur(P: np.ndarray, R: np.ndarray, S0: np.ndarray) -> np.ndarray:
    """``S[k+1] = P S[k] + R[k]`` with ``S[0] = S0``: ``R`` steps x n x m, ``S0`` n x m;
    returns (steps + 1) x n x m. In C when the kernel is available, else in numpy."""
    steps, n, m = R.shape
    S = np.empty((steps + 1, n, m))
    S[0] = S0
    kernel = _kernel() if m <= NATIVE_COLUMNS else None
    if kernel is not None and steps:
        P = np.ascontiguousarray(P, dtype=np.float64)
        R = np.ascontiguousarray(R, dtype=np.float64)
        kernel(n, m, steps, P.ctypes.data, R.ctypes.data, S.ctypes.data)
        return S
    s = S[0]
    with np.errstate(over="ignore", invalid="ignore"):
        for k in range(steps):
            s = P @ s + R[k]
            S[k + 1] = s
    return S


def step(Phi: np.ndarray, W: np.ndarray, x0: np.ndarray) -> np.ndarray:
    """``[x0, ..., x_H]`` as samples x states (``W`` is steps x states, one row per
    sample)."""
    return recur(Phi, W[:, :, None], x0[:, None])[:, :, 0]


def forward(
    Phi: np.ndarray, X: np.ndarray, dPhi: np.ndarray, dW: np.ndarray, dx0: np.ndarray
) -> np.ndarray:
    """Tangents of ``X`` (samples x states) for ``m`` directions: ``dPhi`` m x n x n, ``dW``
    steps x n x m, ``dx0`` m x n; returns samples x n x m."""
    m, n = dx0.shape
    steps = dW.shape[0]
    # every direction's dPhi X[k] at once, in one product laid out as steps x n x m:
    # Q[j, i m + d] = dPhi[d, i, j]
    Q = dPhi.transpose(2, 1, 0).reshape(n, n * m)
    R = (X[:steps] @ Q).reshape(steps, n, m)
    R += dW
    return recur(Phi, R, dx0.T)


def reverse(
    Phi: np.ndarray, X: np.ndarray, Xbar: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Adjoints for ``m`` output seeds ``Xbar`` (samples x n x m), ``X`` samples x n:
    ``(Phibar m x n x n, Wbar steps x n x m, x0bar n x m)``."""
    # lam[k] = Xbar[k] + Phi^T lam[k+1], run backwards in time
    lam = recur(Phi.T, Xbar[-2::-1], Xbar[-1])[::-1]
    after = lam[1:]  # lam[k + 1], steps x n x m
    Phibar = np.einsum("kim,kj->mij", after, X[: after.shape[0]])
    return Phibar, after, lam[0]


def _view(buffer: Any, rows: int, cols: int, m: int = 1) -> np.ndarray:
    """A CasADi buffer of a dense rows x (cols * m) matrix (column-major, directions side
    by side) as an m x cols x rows array (the transpose of each direction's block). CasADi
    passes no buffer (None) for an input that is all zeros: zeros then."""
    if buffer is None:
        return np.zeros((m, cols, rows))
    return np.frombuffer(buffer, dtype=np.float64).reshape(m, cols, rows)


def _write(buffer: Any, rows: int, cols: int, m: int, value: np.ndarray) -> None:
    """Write ``value`` (m x cols x rows) into an output buffer (None: not asked for)."""
    if buffer is not None:
        _view(buffer, rows, cols, m)[:] = value


class _Cache:
    """The last trajectory computed, by its inputs (the forward and reverse functions are
    called at the point just evaluated)."""

    def __init__(self) -> None:
        self.key: bytes | None = None
        self.X: np.ndarray | None = None

    def states(self, Phi: np.ndarray, GammaT: np.ndarray, x0: np.ndarray, VT: np.ndarray):
        """``X`` (samples x states) of ``Phi``, ``Gamma^T`` and ``x0``, inputs ``V^T``."""
        key = Phi.tobytes() + GammaT.tobytes() + x0.tobytes()
        if key != self.key:
            self.X = step(Phi, VT @ GammaT, x0)
            self.key = key
        return self.X


def _make_callback() -> type:
    Differentiated, Derivative = bases()

    class StateSamples(Differentiated):
        def __init__(self, n: int, V: np.ndarray, columns: np.ndarray, name: str) -> None:
            super().__init__()
            self.n, self.V, self.columns, self.cache = n, V, columns, _Cache()
            self.steps = V.shape[1]
            self.VT = np.ascontiguousarray(V.T)
            self.construct(name, {})

        def loop_in(self) -> list[Any]:
            n = self.n
            return [dense(n, n), dense(n, self.V.shape[0]), dense(n, 1)]

        def loop(self, arg: Any) -> tuple[np.ndarray, np.ndarray]:
            """``(Phi, X)`` of the inputs (X computed or taken from the cache)."""
            n = self.n
            Phi = _view(arg[0], n, n)[0].T
            GammaT = _view(arg[1], n, self.V.shape[0])[0]
            x0 = _view(arg[2], n, 1)[0, 0]
            return Phi, self.cache.states(Phi, GammaT, x0, self.VT)

        def get_n_in(self) -> int:
            return 3

        def get_n_out(self) -> int:
            return 1

        def get_name_in(self, i: int) -> str:
            return ("Phi", "Gamma", "x0")[i]

        def get_name_out(self, i: int) -> str:
            return "X"

        def get_sparsity_in(self, i: int) -> Any:
            return self.loop_in()[i]

        def get_sparsity_out(self, i: int) -> Any:
            return dense(self.n, len(self.columns))

        def eval_buffer(self, arg: Any, res: Any) -> int:
            _, X = self.loop(arg)
            _write(res[0], self.n, len(self.columns), 1, X[self.columns])
            return 0

    class _Forward(Derivative):
        # inputs: Phi, Gamma, x0, X (selected), fwd_Phi, fwd_Gamma, fwd_x0; out: fwd_X
        def get_sparsity_in(self, i: int) -> Any:
            up = self.parent
            n, m, k = up.n, self.m, up.V.shape[0]
            sizes = [*up.loop_in(), dense(n, len(up.columns)), dense(n, n * m),
                     dense(n, k * m), dense(n, m)]  # fmt: skip
            return sizes[i]

        def get_sparsity_out(self, i: int) -> Any:
            return dense(self.parent.n, len(self.parent.columns) * self.m)

        def eval_buffer(self, arg: Any, res: Any) -> int:
            up = self.parent
            n, m, k = up.n, self.m, up.V.shape[0]
            Phi, X = up.loop(arg)
            dPhi = _view(arg[4], n, n, m).transpose(0, 2, 1)
            # dW[k, i, d] = sum_c V[c, k] dGamma[d, i, c], as steps x n x m
            dGamma = _view(arg[5], n, k, m).transpose(1, 2, 0).reshape(k, n * m)
            dW = (up.VT @ dGamma).reshape(up.steps, n, m)
            dx0 = _view(arg[6], n, 1, m)[:, 0, :]
            S = forward(Phi, X, dPhi, dW, dx0)
            _write(res[0], n, len(up.columns), m, S[up.columns].transpose(2, 0, 1))
            return 0

    class _Reverse(Derivative):
        # inputs: Phi, Gamma, x0, X (selected), adj_X; outputs: adj_Phi, adj_Gamma, adj_x0
        def get_sparsity_in(self, i: int) -> Any:
            up = self.parent
            columns = len(up.columns)
            return [*up.loop_in(), dense(up.n, columns), dense(up.n, columns * self.m)][i]

        def get_sparsity_out(self, i: int) -> Any:
            n, m = self.parent.n, self.m
            return [dense(n, n * m), dense(n, self.parent.V.shape[0] * m), dense(n, m)][i]

        def eval_buffer(self, arg: Any, res: Any) -> int:
            up = self.parent
            n, m, k = up.n, self.m, up.V.shape[0]
            Phi, X = up.loop(arg)
            Xbar = np.zeros((up.steps + 1, n, m))
            seeds = _view(arg[4], n, len(up.columns), m).transpose(1, 2, 0)
            np.add.at(Xbar, up.columns, seeds)
            Phibar, Wbar, x0bar = reverse(Phi, X, Xbar)
            _write(res[0], n, n, m, Phibar.transpose(0, 2, 1))
            # Gammabar^T = V Wbar, per direction: m x k x n
            _write(res[1], n, k, m, np.einsum("ks,sim->mki", up.V, Wbar))
            _write(res[2], n, 1, m, x0bar.T[:, None, :])
            return 0

    StateSamples.forward_class, StateSamples.reverse_class = _Forward, _Reverse
    return StateSamples


@lru_cache(maxsize=1)
def _callback_class() -> type:
    return _make_callback()


def state_samples(n: int, V: np.ndarray, columns: Any = None) -> Any:
    """The CasADi function ``(Phi n x n, Gamma n x inputs, x0 n) -> X[:, columns]``, the
    states of ``x[k+1] = Phi x[k] + Gamma V[:, k]`` at the sample ``columns`` (default:
    every sample ``0 .. V.shape[1] - 1``), with the derivatives of the module docstring.
    The steps run to the last column asked for only. CasADi holds no reference to a
    Python callback: keep the returned function for as long as expressions use it."""
    V = np.asarray(V, dtype=float)
    if columns is None:
        columns = np.arange(V.shape[1])
    columns = np.asarray(columns, dtype=int)
    last = int(columns.max(initial=0))
    return _callback_class()(n, np.ascontiguousarray(V[:, :last]), columns,
                             f"state_samples_{n}_{last}_{len(columns)}")  # fmt: skip
