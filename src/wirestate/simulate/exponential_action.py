"""Exact-hold stepping of large sparse blocks by the action of the matrix exponential.

For a block of thousands of states (a cable or winding ladder) the dense exponential
``exp(A dt)`` costs ``n^3`` operations and ``n^2`` memory, although ``A`` has a few
entries per row. The recurrence ``x[k+1] = exp(A dt) x[k] + Gamma u[k]`` needs only the
*action* ``v -> exp(A dt) v``, which a truncated Taylor series with scaling evaluates with
sparse products: Al-Mohy and Higham, "Computing the action of the matrix exponential, with
an application to exponential integrators", SIAM J. Sci. Comput. 33(2), 2011, Algorithm
3.2. Its degree ``m`` and scaling ``s`` come from the norms ``||A^p||_1^(1/p)`` (their
code fragment 3.1 and eq. 3.11), which for a sparse ``A`` are computed exactly from sparse
powers, and are fixed once per step size: the same step is repeated thousands of times.
The truncation is chosen for a backward error of the unit roundoff ``2^-53``, so the
result is the exact zero-order (or first-order) hold to the accuracy of a dense
exponential; each step costs ``s * m`` sparse products at most, linear in the number of
states for a fixed ``||A dt||``.

The input matrices ``Gamma`` (a few columns) are computed once by SciPy's implementation
of the same algorithm (``scipy.sparse.linalg.expm_multiply``) on Van Loan's augmented
matrix (Van Loan 1978), as for the dense hold in :mod:`wirestate.simulate.discretize`.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from wirestate.lti import single_threaded_blas

#: largest Taylor degree m with its theta_m: ||A dt / s|| <= theta_m gives a backward error
#: below 2^-53 (double precision). Al-Mohy and Higham 2011, Table 3.1 (m <= 30 from the
#: same authors' earlier table; values as printed there)
THETA = {
    1: 2.29e-16, 2: 2.58e-8, 3: 1.39e-5, 4: 3.40e-4, 5: 2.40e-3, 6: 9.07e-3, 7: 2.38e-2,
    8: 5.00e-2, 9: 8.96e-2, 10: 1.44e-1, 11: 2.14e-1, 12: 3.00e-1, 13: 4.00e-1,
    14: 5.14e-1, 15: 6.41e-1, 16: 7.81e-1, 17: 9.31e-1, 18: 1.09, 19: 1.26, 20: 1.44,
    21: 1.62, 22: 1.82, 23: 2.01, 24: 2.22, 25: 2.43, 26: 2.64, 27: 2.86, 28: 3.08,
    29: 3.31, 30: 3.54, 35: 4.7, 40: 6.0, 45: 7.2, 50: 8.5, 55: 9.9,
}  # fmt: skip
#: the unit roundoff: the series stops once two terms together fall below it (Algorithm 3.2)
UNIT_ROUNDOFF = 2.0**-53
#: largest power p of A whose norm enters the parameter choice (Al-Mohy and Higham: 8)
P_MAX = 8
#: sparse powers of A are stopped when they hold this many times A's entries (the norm of
#: a denser power would cost more than it saves; no source)
POWER_FILL = 40


def _one_norm(M: Any) -> float:
    return float(abs(M).sum(axis=0).max()) if M.nnz else 0.0


def taylor_parameters(M: Any) -> tuple[int, int]:
    """Degree ``m`` and scaling ``s`` for ``exp(M) v`` (Al-Mohy and Higham 2011, code
    fragment 3.1 and eq. 3.11): the pair with the least cost ``m * s`` such that
    ``alpha_p(M) / s <= theta_m``, with ``alpha_p = max(d_p, d_(p+1))`` and
    ``d_p = ||M^p||_1^(1/p)`` computed exactly from sparse powers."""
    norm = _one_norm(M)
    if norm == 0.0:
        return 0, 1
    best = min((m * math.ceil(norm / theta), m) for m, theta in THETA.items())
    d = {1: norm}
    power = M
    for p in range(2, P_MAX + 2):
        power = power @ M
        if power.nnz > POWER_FILL * max(M.nnz, 1):
            break
        d[p] = _one_norm(power) ** (1.0 / p)
    for p in range(2, P_MAX + 1):
        if p + 1 not in d:
            break
        alpha = max(d[p], d[p + 1])
        for m, theta in THETA.items():
            if m >= p * (p - 1) - 1:
                best = min(best, (m * max(1, math.ceil(alpha / theta)), m))
    cost, m = best
    return m, max(1, cost // m)


class ExponentialAction:
    """``v -> exp(A t) v`` for a SciPy sparse ``A`` and a fixed ``t``.

    Parameters
    ----------
    A
        Sparse ``(n, n)`` matrix (1/s).
    t
        Time (s).
    """

    def __init__(self, A: Any, t: float) -> None:
        import scipy.sparse as sparse

        M = sparse.csr_matrix(A, dtype=float) * float(t)
        n = M.shape[0]
        # shift by the mean eigenvalue when that lowers the norm (Algorithm 3.2's
        # preprocessing): exp(M) = exp(mu) exp(M - mu I)
        mu = float(M.diagonal().sum()) / n if n else 0.0
        shifted = (M - mu * sparse.identity(n, format="csr")).tocsr()
        if n and _one_norm(shifted) < _one_norm(M):
            M = shifted
        else:
            mu = 0.0
        self.M = M
        self.degree, self.scaling = taylor_parameters(M)
        self.eta = math.exp(mu / self.scaling)

    @property
    def products_per_step(self) -> int:
        """At most ``m * s`` sparse products per action (fewer when the series ends early)."""
        return self.degree * self.scaling

    def __call__(self, v: np.ndarray) -> np.ndarray:
        """``exp(A t) v`` for a vector or the columns of a matrix ``v``."""
        F = np.array(v, dtype=float)
        if self.degree == 0:
            return F * self.eta**self.scaling
        b = F.copy()
        M, s = self.M, self.scaling
        for _ in range(s):
            c1 = np.abs(b).max(initial=0.0)
            for j in range(1, self.degree + 1):
                b = M @ b
                b *= 1.0 / (s * j)
                c2 = np.abs(b).max(initial=0.0)
                F += b
                if c1 + c2 <= UNIT_ROUNDOFF * np.abs(F).max(initial=0.0):
                    break
                c1 = c2
            F *= self.eta
            b = F.copy()
        return F


def _input_maps(A: Any, B: np.ndarray, dt: float, hold: str) -> list[np.ndarray]:
    """``[Gamma]`` (ZOH) or ``[G1, G2]`` (FOH) of Van Loan's augmented matrix, by SciPy's
    ``expm_multiply`` on its input columns (see :func:`wirestate.simulate.discretize.foh`)."""
    import scipy.sparse as sparse
    from scipy.sparse.linalg import expm_multiply

    n, m = B.shape
    Bs = sparse.csr_matrix(B * dt)
    if hold == "zoh":
        M = sparse.bmat([[A * dt, Bs], [None, sparse.csr_matrix((m, m))]], format="csc")
        E = np.vstack([np.zeros((n, m)), np.eye(m)])
        return [expm_multiply(M, E)[:n]]
    Z = sparse.csr_matrix((m, m))
    M = sparse.bmat(
        [[A * dt, Bs, None], [None, Z, sparse.identity(m)], [None, None, Z]], format="csc"
    )
    E = np.vstack([np.zeros((n, 2 * m)), np.eye(2 * m)])
    out = expm_multiply(M, E)[:n]
    return [out[:, :m], out[:, m:]]


#: rough costs (s) on the development machine, single-threaded BLAS (measured, no source):
#: a dense exponential of n states ~ n^3 * DENSE_EXPM, a dense step ~ n^2 * DENSE_STEP plus
#: STEP_OVERHEAD, a sparse product ~ SPARSE_PRODUCT + nnz * SPARSE_ENTRY
DENSE_EXPM, DENSE_STEP, STEP_OVERHEAD = 1e-9, 5e-10, 2e-6
SPARSE_PRODUCT, SPARSE_ENTRY = 1.4e-5, 5e-9


def is_cheaper_than_dense(A: Any, dt: float, steps: int) -> bool:
    """Whether stepping by the exponential action beats the dense exact hold (one dense
    exponential, then a dense product per step) for ``steps`` steps of ``A`` (sparse).

    The dense hold pays ``n^3`` once and ``n^2`` per step; the action pays up to ``m * s``
    sparse products per step (:func:`taylor_parameters`). A 500-state ladder at
    ``|A dt|`` near 1 breaks even near 300 steps; from 2000 states the action always wins.
    """
    n = A.shape[0]
    action = ExponentialAction(A, dt)
    sparse = steps * action.products_per_step * (SPARSE_PRODUCT + SPARSE_ENTRY * A.nnz)
    dense = DENSE_EXPM * n**3 + steps * (DENSE_STEP * n**2 + STEP_OVERHEAD)
    return sparse < dense


#: steps between two progress reports
_PROGRESS_STEPS = 2000


class SparseHold:
    """Exact zero-order or first-order hold of a sparse block at one step ``dt``: the
    exponential action and the input maps, built once and used for any number of runs
    (a long run streamed to a file in blocks).

    Parameters
    ----------
    A, B
        SciPy sparse ``(n, n)`` and dense ``(n, m)`` continuous-time matrices (SI units).
    dt
        Step (s).
    hold
        ``"zoh"`` or ``"foh"`` (see :mod:`wirestate.simulate.discretize`).
    """

    def __init__(self, A: Any, B: np.ndarray, dt: float, hold: str = "zoh") -> None:
        self.hold = hold
        with single_threaded_blas():
            self.action = ExponentialAction(A, dt)
            maps = _input_maps(A, np.asarray(B, dtype=float), dt, hold)
            if hold == "zoh":
                self.forcing, self.direct = maps[0], None
            else:
                # xi = x - B1 u steps as xi[k+1] = Ad xi[k] + (Ad B1 + B0) u[k], the
                # dense FOH's own change of variable (Franklin, Powell and Workman 1998)
                G1, G2 = maps
                self.forcing, self.direct = self.action(G2) + G1 - G2, G2

    def propagate(
        self, x0: np.ndarray, U: np.ndarray, progress: Callable[[float], None] | None = None
    ) -> np.ndarray:
        """States ``(n, N)`` for the input samples ``U`` ``(m, N)``, column 0 is ``x0``."""
        n, N = self.forcing.shape[0], U.shape[1]
        X = np.empty((n, N))
        X[:, 0] = x0
        if N == 0 or n == 0:
            return X
        with single_threaded_blas():  # thousands of thin products (single_threaded_blas)
            forced = self.forcing @ U[:, : N - 1]
            x = np.asarray(x0, dtype=float)
            if self.direct is not None:
                x = x - self.direct @ U[:, 0]
            for k in range(N - 1):
                x = self.action(x) + forced[:, k]
                X[:, k + 1] = x
                if progress is not None and (k + 1) % _PROGRESS_STEPS == 0:
                    progress((k + 1) / (N - 1))
            if self.direct is not None:
                X[:, 1:] += self.direct @ U[:, 1:]
        return X


def propagate_sparse(
    A: Any,
    B: np.ndarray,
    x0: np.ndarray,
    U: np.ndarray,
    dt: float,
    *,
    hold: str = "zoh",
    progress: Callable[[float], None] | None = None,
) -> np.ndarray:
    """States ``(n, N)`` of a sparse block on a uniform grid for input samples ``U``
    ``(m, N)``: exact zero-order hold (``x[k+1] = Ad x[k] + Gamma u[k]``) or first-order
    hold, as :func:`wirestate.simulate.linear.simulate_arrays`, with ``Ad`` applied by
    :class:`ExponentialAction` (see :class:`SparseHold`)."""
    return SparseHold(A, B, dt, hold).propagate(x0, U, progress)
