"""Balanced order reduction of finished blocks, with an a-priori H-infinity error bound.

Not to be confused with :mod:`wirestate.reduce`, which eliminates the algebraic unknowns of
the circuit equations. This module takes a compiled block (a :class:`CircuitBlock`) and
returns a smaller one:

* the stable part is split off exactly (ordered real Schur form and a Sylvester equation,
  Golub and Van Loan, Matrix Computations, 4th ed., sec. 7.6.3); modes with a damping ratio
  below :data:`KEPT_DAMPING` or at the origin, and unstable modes, are kept unchanged
  (additive decomposition ``G = G_stable + G_kept``);
* the Gramians of the stable part: dense (Bartels-Stewart, scipy) up to
  :data:`DENSE_GRAMIAN_MAX_STATES` states, low-rank factors above (see below);
* balanced truncation by the square-root method (Laub, Heath, Paige and Ward 1987), or the
  singular-perturbation approximation of the balanced realisation, which keeps the DC gain
  (Liu and Anderson 1989); both have the H-infinity error bound ``2 * sum`` of the discarded
  Hankel singular values (Enns 1984; Glover 1984).

Low-rank Gramians ``M X + X M^T + G G^T = 0`` are computed as factors ``X ~ Z Z^T`` by the
low-rank ADI iteration in residual form with real arithmetic for complex shift pairs
(Benner, Kuerschner and Saak 2013, "Efficient handling of complex shift parameters in the
low-rank ADI method", Numer. Algorithms 62) and projection shifts, the Ritz values of ``M``
on the columns added last (Benner, Kuerschner and Saak 2014, ETNA 43). Each shift costs one
sparse LU of ``M + p I`` (SuperLU). The iteration converges quickly for well-damped blocks;
for very lightly damped ones (damping ratios ~1e-4 and below, as in the bundled feeder
cable) the Gramians are not of low rank at all (every lightly damped mode carries its own
share), the projection shifts do not settle and the iteration stops with
``reduction_not_converged`` instead of returning a wrong factor.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from scipy.sparse.linalg import splu

from wirestate.errors import WirestateError


class ReductionError(WirestateError):
    """A reduction request that cannot be carried out."""


@dataclass
class Gramian:
    """Low-rank factor ``Z`` with ``X ~ Z Z^T`` and the relative residual reached."""

    factor: np.ndarray
    relative_residual: float
    iterations: int
    method: str = "low-rank ADI"


# -- low-rank Gramians -----------------------------------------------------------------------


#: a sparse matrix whose band (lower + upper) is at most this wide is solved as banded
BANDED_MAX_WIDTH = 16


class _ShiftedSolver:
    """Solves ``(M + p I) X = R`` for many shifts ``p``.

    Dense LU for a dense ``M``; for a sparse one, LAPACK's banded solver when the band is
    narrow (ladders in the compiler's state order are: a few microseconds per shift where
    a general sparse LU costs about a millisecond), SuperLU otherwise.
    """

    def __init__(self, M: np.ndarray | sp.spmatrix) -> None:
        self.sparse = sp.issparse(M)
        self.M = sp.csc_matrix(M) if self.sparse else np.asarray(M)
        self.n = self.M.shape[0]
        self.band: tuple[int, int, np.ndarray] | None = None
        if self.sparse and self.n:
            coo = self.M.tocoo()
            lower = int(max(0, (coo.row - coo.col).max(initial=0)))
            upper = int(max(0, (coo.col - coo.row).max(initial=0)))
            if lower + upper <= BANDED_MAX_WIDTH:
                ab = np.zeros((lower + upper + 1, self.n))
                ab[upper + coo.row - coo.col, coo.col] = coo.data
                self.band = (lower, upper, ab)

    def solve(self, p: complex, R: np.ndarray) -> np.ndarray:
        dtype = complex if np.iscomplex(p) else float
        p = p if dtype is complex else float(np.real(p))
        if self.band is not None:
            lower, upper, ab = self.band
            shifted = ab.astype(dtype)
            shifted[upper] += p
            return la.solve_banded((lower, upper), shifted, np.asarray(R, dtype=dtype))
        if self.sparse:
            K = (self.M + p * sp.identity(self.n, format="csc")).astype(dtype).tocsc()
            return splu(K, permc_spec="COLAMD").solve(np.asarray(R, dtype=dtype))
        K = self.M.astype(dtype) + p * np.eye(self.n)
        return la.solve(K, R.astype(dtype))

    def matmul(self, X: np.ndarray) -> np.ndarray:
        return self.M @ X


def _ritz_shifts(solver: _ShiftedSolver, basis: np.ndarray, count: int) -> list[complex]:
    """Stable Ritz values of ``M`` on ``span(basis)`` (one per conjugate pair).

    The basis is orthonormalised through its small Gram matrix (``T = U L^-1/2`` from
    ``basis^T basis = U L U^T`` of the unit-length columns, directions below 1e-10 of the
    largest dropped) rather than
    a QR of the tall basis: the shifts need only be approximate, and a threaded LAPACK QR
    of an ``n x 10`` matrix took 25 ms per call on a loaded 2-core machine against 0.1 ms
    for the Gram product.
    """
    norms = np.linalg.norm(basis, axis=0)
    basis = basis[:, norms > 0] / norms[norms > 0]
    gram = basis.T @ basis
    w, U = la.eigh(0.5 * (gram + gram.T))
    # Q = basis T is orthonormal up to eps / (smallest kept w): 1e-10 keeps that below 1e-6
    keep = w > 1e-10 * max(float(w.max(initial=0.0)), np.finfo(float).tiny)
    T = U[:, keep] / np.sqrt(w[keep])
    H = T.T @ (basis.T @ solver.matmul(basis)) @ T
    values = np.linalg.eigvals(H)
    values = values[values.imag >= 0]
    # a Ritz value in the right half-plane of a stable matrix is mirrored (common practice
    # in the cited shift strategies)
    values = np.where(values.real < 0, values, -np.abs(values.real) + 1j * values.imag)
    values = values[values.real < 0]
    values = values[np.argsort(-np.abs(values.real))][:count]
    return [complex(v) if abs(v.imag) > 1e-12 * abs(v) else complex(v.real) for v in values]


def low_rank_gramian(
    M: np.ndarray | sp.spmatrix,
    G: np.ndarray,
    *,
    residual_tolerance: float = 1e-11,
    max_columns: int | None = None,
) -> Gramian:
    """Low-rank factor of the solution of ``M X + X M^T + G G^T = 0`` (``M`` stable).

    Low-rank ADI in residual form (Benner, Kuerschner and Saak 2013, Algorithm 4: real
    arithmetic for a complex shift pair) with projection shifts: the Ritz values of ``M`` on
    the columns added last (Benner, Kuerschner and Saak 2014, sec. 4).

    Parameters
    ----------
    M
        ``(n, n)`` stable matrix, dense or sparse.
    G
        ``(n, m)`` right-hand-side factor.
    residual_tolerance
        Stop when ``||W^T W||_2 <= residual_tolerance * ||G^T G||_2`` (``W`` the residual
        factor; ``W W^T`` is the exact Lyapunov residual).
    max_columns
        Give up beyond this many columns (default ``n`` + a margin): raises
        ``ReductionError("reduction_not_converged")``.
    """
    solver = _ShiftedSolver(M)
    n, m = G.shape
    W = np.array(G, dtype=float)
    scale = float(np.linalg.norm(W.T @ W, 2)) or 1.0
    columns: list[np.ndarray] = []
    limit = max_columns or 2 * n + 4 * m
    shifts = _ritz_shifts(solver, np.hstack([W, solver.matmul(W)]), 2 * m + 2)
    residual, steps, used = 1.0, 0, 0
    while True:
        if not shifts:
            raise ReductionError(
                "reduction_not_converged",
                "no stable shift found for the Gramian iteration: the block has modes on or "
                "right of the imaginary axis; reduce a stable block or add damping",
            )
        block_start = len(columns)
        for p in shifts:
            V = solver.solve(p, W)
            if np.iscomplex(p) and p.imag != 0.0:
                gamma = 2.0 * np.sqrt(-p.real)
                delta = p.real / p.imag
                re = V.real + delta * V.imag
                W = W + gamma**2 * re
                columns += [gamma * re, gamma * np.sqrt(delta**2 + 1.0) * V.imag]
            else:
                p = p.real
                V = V.real
                W = W - 2.0 * p * V
                columns.append(np.sqrt(-2.0 * p) * V)
            steps += 1
            residual = float(np.linalg.norm(W.T @ W, 2)) / scale
            if residual <= residual_tolerance:
                break
        used = sum(c.shape[1] for c in columns)
        if residual <= residual_tolerance:
            break
        if used > limit or not np.isfinite(residual):
            raise ReductionError(
                "reduction_not_converged",
                f"the Gramian iteration did not converge (relative residual {residual:.1e} "
                f"after {used} columns): the block may have modes at or near the imaginary "
                "axis; add damping or reduce a smaller block",
            )
        recent = np.hstack(columns[block_start:])
        shifts = _ritz_shifts(solver, recent, max(2 * m + 2, 4))
    return Gramian(np.hstack(columns) if columns else np.zeros((n, 0)), residual, steps)


# -- balanced reduction ----------------------------------------------------------------------

#: blocks with more states than this get low-rank Gramians. Dense Bartels-Stewart costs
#: O(n^3) with a large constant: measured on the 2-core development machine (loaded), one
#: dense Gramian took 0.4 s at 200 states, 1.8 s at 400 and 14 s at 800, so a 2000-state
#: ladder would need minutes; the low-rank iteration costs a sparse LU per shift.
DENSE_GRAMIAN_MAX_STATES = 400
#: modes with a damping ratio below this (or at the origin, see lti.ZERO_POLE_TOLERANCE)
#: are kept exactly: their Gramians are unbounded or so large that balancing them is
#: meaningless (common practice, no source; the bundled feeder cable's lightest mode has
#: 1.8e-4 and is reduced)
KEPT_DAMPING = 1e-8
#: Hankel singular values below this fraction of the largest are numerically zero: their
#: states are dropped in every method (their share of the bound is still added)
HSV_FLOOR = 1e-13
#: most low-rank Gramian columns tried before giving up on a large block
LOW_RANK_MAX_COLUMNS = 1200

TRUNCATION = "balanced_truncation"
SINGULAR_PERTURBATION = "singular_perturbation"
METHOD_TEXT = {
    TRUNCATION: "balanced truncation, square-root method (Laub, Heath, Paige and Ward 1987)",
    SINGULAR_PERTURBATION: "singular-perturbation approximation of the balanced realisation "
    "(Liu and Anderson 1989)",
}


@dataclass
class StableSplit:
    """``G = G_stable + G_kept`` with decoupled state-space realisations (see
    :func:`split_stable`)."""

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    A_kept: np.ndarray
    B_kept: np.ndarray
    C_kept: np.ndarray
    #: maps the original state to the stable part's state: ``x_stable = to_stable @ x``
    to_stable: np.ndarray
    to_kept: np.ndarray
    kept_poles: np.ndarray


def is_kept_pole(poles: np.ndarray, scale: float) -> np.ndarray:
    """True for poles kept exactly: unstable, at the origin, or damped below
    :data:`KEPT_DAMPING`."""
    from wirestate.lti import ZERO_POLE_TOLERANCE

    poles = np.asarray(poles, dtype=complex)
    return (np.abs(poles) <= ZERO_POLE_TOLERANCE * scale) | (
        poles.real >= -KEPT_DAMPING * np.abs(poles)
    )


def split_stable(A: np.ndarray, B: np.ndarray, C: np.ndarray) -> StableSplit:
    """Split ``(A, B, C)`` into a stable part and the modes kept exactly.

    Ordered real Schur form ``A = Z T Z^T`` (stable eigenvalues first), then the Sylvester
    equation ``T11 X - X T22 + T12 = 0`` block-diagonalises ``T`` (Golub and Van Loan,
    Matrix Computations, 4th ed., sec. 7.6.3), so the transfer function is the sum of the
    two parts exactly.
    """
    n = A.shape[0]
    scale = float(np.abs(A).sum(axis=0).max(initial=0.0)) or 1.0
    if n == 0:
        T, Z, k = A, np.eye(0), 0
    else:

        def stable(re: float, im: float) -> bool:
            return not bool(is_kept_pole(np.array([complex(re, im)]), scale)[0])

        T, Z, k = la.schur(A, output="real", sort=stable)
        _restore_origin_poles(T, k, scale)
    T11, T12, T22 = T[:k, :k], T[:k, k:], T[k:, k:]
    X = la.solve_sylvester(T11, -T22, -T12) if 0 < k < n else np.zeros((k, n - k))
    Bz, Cz = Z.T @ B, C @ Z
    # x = Z S xt with S = [[I, X], [0, I]]: xt = S^-1 Z^T x
    to_stable = Z[:, :k].T - X @ Z[:, k:].T
    return StableSplit(
        A=T11,
        B=Bz[:k] - X @ Bz[k:],
        C=Cz[:, :k],
        A_kept=T22,
        B_kept=Bz[k:],
        C_kept=Cz[:, :k] @ X + Cz[:, k:],
        to_stable=to_stable,
        to_kept=Z[:, k:].T,
        kept_poles=np.linalg.eigvals(T22) if n > k else np.zeros(0, dtype=complex),
    )


def _restore_origin_poles(T: np.ndarray, k: int, scale: float) -> None:
    """Put the kept real poles that round-off moved off the origin back at ``s = 0``.

    A capacitor charged by a current source has a structural pole at the origin; the Schur
    form returns it as a few 1e-12 (about eps times the norm). Kept as it is, the reduced
    block would leak where the circuit integrates, and its response would part from the
    full block's by ``r * |p| / w^2`` at low frequency (2e6 V/A at 1e-6 rad/s on a charged
    RC ladder, against a bound of 0.015). The tolerance is the one that called the pole
    kept (:func:`is_kept_pole`), so only such poles move; 1x1 diagonal blocks only.
    """
    from wirestate.lti import ZERO_POLE_TOLERANCE

    n = T.shape[0]
    for i in range(k, n):
        alone = (i == k or T[i, i - 1] == 0.0) and (i + 1 == n or T[i + 1, i] == 0.0)
        if alone and abs(T[i, i]) <= ZERO_POLE_TOLERANCE * scale:
            T[i, i] = 0.0


def dense_gramian_factor(A: np.ndarray, G: np.ndarray) -> np.ndarray:
    """A factor ``Z`` with ``Z Z^T = X``, ``A X + X A^T + G G^T = 0`` (``A`` stable).

    Bartels-Stewart (scipy.linalg.solve_continuous_lyapunov), then a symmetric eigen-
    decomposition; eigenvalues below round-off (including small negative ones) are dropped.
    """
    X = la.solve_continuous_lyapunov(A, -G @ G.T)
    X = 0.5 * (X + X.T)
    w, U = la.eigh(X)
    keep = w > np.finfo(float).eps * max(float(w.max(initial=0.0)), 0.0) * max(len(w), 1)
    return U[:, keep] * np.sqrt(w[keep])


@dataclass
class BalancedFactors:
    """The square-root method's pieces: Hankel singular values and the balancing
    projections ``V = Zc Vh^T S^-1/2``, ``W = Zo U S^-1/2`` (``W^T V = I``)."""

    hankel_singular_values: np.ndarray
    V: np.ndarray
    W: np.ndarray


def balance_factors(Zc: np.ndarray, Zo: np.ndarray) -> BalancedFactors:
    """Square-root balancing (Laub, Heath, Paige and Ward 1987): the SVD
    ``Zo^T Zc = U S Vh`` gives the Hankel singular values ``S``; the projections keep the
    states whose value is above :data:`HSV_FLOOR` times the largest."""
    if Zc.shape[1] == 0 or Zo.shape[1] == 0:
        n = Zc.shape[0]
        return BalancedFactors(np.zeros(0), np.zeros((n, 0)), np.zeros((n, 0)))
    U, s, Vh = la.svd(Zo.T @ Zc, full_matrices=False)
    r = int(np.sum(s > HSV_FLOOR * s[0])) if s.size and s[0] > 0 else 0
    root = 1.0 / np.sqrt(s[:r])
    return BalancedFactors(s, Zc @ Vh[:r].T * root, Zo @ U[:, :r] * root)


def peak_gain(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray) -> tuple[float, float]:
    """A lower bound of the H-infinity norm ``sup_w sigma_max(C (jwI - A)^-1 B + D)``
    and the frequency (rad/s) where it was found.

    A frequency sweep (40 points per decade from a tenth of the slowest to ten times the
    fastest mode, plus every mode's damped frequency, DC and infinity), each local maximum
    refined by bounded Brent search between its neighbours. Sampling can only miss a peak,
    never overstate one, so the result is a lower bound of the norm (the bisection of
    Boyd, Balakrishnan and Bruinsma 1989 would give it to a tolerance; the sweep is enough
    for the uses here, which only need a lower bound).
    """
    from scipy.optimize import minimize_scalar

    A, B, C, D = (np.asarray(M, dtype=float) for M in (A, B, C, D))
    n = A.shape[0]
    best = (float(la.norm(D, 2)) if D.size else 0.0, float("inf"))
    if n == 0 or B.shape[1] == 0 or C.shape[0] == 0:
        return best
    lam, V = la.eig(A)
    if np.linalg.cond(V) < 1e8:
        CV, VB = C @ V, la.solve(V, B)

        def gain(w: float) -> float:
            return float(la.norm((CV / (1j * w - lam)) @ VB + D, 2))
    else:  # pragma: no cover - defective balanced realisations are rare

        def gain(w: float) -> float:
            return float(la.norm(C @ la.solve(1j * w * np.eye(n) - A, B) + D, 2))

    mags = np.abs(lam)
    mags = mags[mags > 0]
    lo, hi = (float(mags.min()) / 10, float(mags.max()) * 10) if mags.size else (1e-3, 1e3)
    decades = max(np.log10(hi / lo), 1.0)
    grid = np.concatenate([np.geomspace(lo, hi, int(40 * decades) + 1), np.abs(lam.imag)])
    grid = np.unique(grid[grid > 0])
    values = np.array([gain(w) for w in grid])
    dc = gain(0.0)
    best = max(best, (dc, 0.0))
    for i in np.flatnonzero((values >= np.roll(values, 1)) & (values >= np.roll(values, -1))):
        left = grid[max(i - 1, 0)]
        right = grid[min(i + 1, grid.size - 1)]
        found = (float(values[i]), float(grid[i]))
        if right > left:
            res = minimize_scalar(
                lambda t: -gain(np.exp(t)),
                bounds=(np.log(left), np.log(right)),
                method="bounded",
                options={"xatol": 1e-10},
            )
            if -res.fun > found[0]:
                found = (float(-res.fun), float(np.exp(res.x)))
        best = max(best, found)
    return best


@dataclass
class Reduction:
    """A reduced block and the record of how it was made.

    Attributes
    ----------
    block
        The reduced block (states ``bal1..balk``, then ``kept1..`` for modes kept exactly).
    method
        :data:`TRUNCATION` or :data:`SINGULAR_PERTURBATION`.
    gramians
        ``"dense"`` or ``"low_rank"``.
    hankel_singular_values
        Of the stable part, largest first (every one computed).
    kept
        Balanced states kept (``len(hankel_singular_values)`` minus the discarded).
    error_bound
        ``2 * sum`` of the discarded Hankel singular values (plus the low-rank tail
        estimate), an upper bound of ``||G - G_r||_inf`` in the block's SI units.
    reference_norm
        The stable part's H-infinity norm (a lower bound, see :func:`peak_gain`; at least
        the largest Hankel singular value), to which ``relative_error_bound`` refers.
    kept_poles
        Poles kept exactly (unstable, marginal or at the origin), rad/s.
    measured_error
        The peak of ``|G - G_r|`` found by :func:`peak_gain` against the balanced
        realisation of every computed state (a lower bound of the true error).
    notes
        Remarks for the user.
    """

    block: Any
    method: str
    gramians: str
    hankel_singular_values: np.ndarray
    kept: int
    error_bound: float
    reference_norm: float
    kept_poles: np.ndarray
    measured_error: float
    source_states: int
    tail_estimate: float = 0.0
    residual: float = 0.0
    notes: list[str] = field(default_factory=list)

    @property
    def relative_error_bound(self) -> float:
        return self.error_bound / self.reference_norm if self.reference_norm > 0 else 0.0


def _discarded_bound(s: np.ndarray, k: int, tail: float) -> float:
    return 2.0 * float(np.sum(s[k:])) + 2.0 * tail


def _project(A, B, C, D, V, W, k: int, method: str):
    """Reduced matrices of order ``k`` from the balancing projections (all ``r`` columns
    of ``V``/``W``; the singular-perturbation form needs the discarded ones too)."""
    Ab = W.T @ np.asarray(A @ V)
    Bb, Cb = W.T @ B, C @ V
    if method == TRUNCATION or k == V.shape[1]:
        return Ab[:k, :k], Bb[:k], Cb[:, :k], D.copy()
    A11, A12, A21, A22 = Ab[:k, :k], Ab[:k, k:], Ab[k:, :k], Ab[k:, k:]
    # dx2/dt = 0 (Liu and Anderson 1989): x2 = -A22^-1 (A21 x1 + B2 u)
    solved = la.solve(A22, np.hstack([A21, Bb[k:]]))
    S_A, S_B = solved[:, :k], solved[:, k:]
    return (
        A11 - A12 @ S_A,
        Bb[:k] - A12 @ S_B,
        Cb[:, :k] - Cb[:, k:] @ S_A,
        D - Cb[:, k:] @ S_B,
    )


def reduce_block(
    block: Any,
    *,
    order: int | None = None,
    error: float | None = None,
    match_dc: bool = False,
    gramians: str = "auto",
) -> Reduction:
    """Reduce a block by balanced truncation (or, with ``match_dc``, by the
    singular-perturbation approximation) to a given order or relative error bound.

    Parameters
    ----------
    block
        A :class:`wirestate.lti.CircuitBlock`.
    order
        States of the reduced block, the modes kept exactly included.
    error
        Relative H-infinity bound instead of an order: the smallest order whose bound
        ``2 * sum(discarded sigma_i)`` is at most ``error`` times the stable part's
        H-infinity norm (:func:`peak_gain`, a lower bound, so the relative figure is
        conservative).
    match_dc
        Singular-perturbation approximation (Liu and Anderson 1989): same bound, and the
        DC gain of the balanced realisation is kept exactly.
    gramians
        ``"auto"`` (dense up to :data:`DENSE_GRAMIAN_MAX_STATES` states, low-rank ADI
        above), ``"dense"`` or ``"low_rank"``.

    Raises
    ------
    ReductionError
        ``invalid_order``, ``error_unreachable``, ``no_stable_part``, ``unstable_block``
        (a large block with kept modes on the low-rank path), ``reduction_not_converged``.
    """
    from wirestate.lti import CircuitBlock

    n = block.n_states
    _check_request(block, order, error, gramians)
    method = SINGULAR_PERTURBATION if match_dc else TRUNCATION
    low_rank = gramians == "low_rank" or (gramians == "auto" and n > DENSE_GRAMIAN_MAX_STATES)
    # a diagonal similarity (powers of 2, exact) evens out rows and columns: capacitor
    # voltages and inductor currents differ by many decades in A
    if low_rank:
        A_sparse = sp.csc_matrix(block.A)
        scaling = sparse_balance_scaling(A_sparse)
        A = sp.csc_matrix(sp.diags(1.0 / scaling) @ A_sparse @ sp.diags(scaling))
    else:
        A, (scaling, _) = la.matrix_balance(block.A, permute=False, separate=True)
    B, C, D = block.B / scaling[:, None], block.C * scaling[None, :], block.D.copy()
    notes: list[str] = []
    tail, residual = 0.0, 0.0
    if low_rank:
        _refuse_kept_modes_large(block.name, A_sparse)
        split = StableSplit(
            A, B, C, np.zeros((0, 0)), np.zeros((0, B.shape[1])), np.zeros((C.shape[0], 0)),
            sp.identity(n, format="csr"), np.zeros((0, n)), np.zeros(0, dtype=complex),
        )  # fmt: skip
        As = A
        try:
            gc = low_rank_gramian(As, B, max_columns=LOW_RANK_MAX_COLUMNS)
            go = low_rank_gramian(As.T.tocsc(), C.T, max_columns=LOW_RANK_MAX_COLUMNS)
        except ReductionError as exc:
            # lightly damped blocks: every such mode carries its own share of the Gramian,
            # which is then not of low rank and no shift choice helps
            raise ReductionError(
                exc.code,
                f"{block.name}: {exc.message}. Lightly damped blocks have Gramians of high "
                "rank: pass --gramians dense (O(n^3) time, minutes at 2000 states)",
            ) from None
        Zc, Zo, residual = gc.factor, go.factor, max(gc.relative_residual, go.relative_residual)
    else:
        split = split_stable(A, B, C)
        if split.A.shape[0] == 0:
            raise ReductionError(
                "no_stable_part",
                f"{block.name}: every one of its {n} modes is unstable, marginal or at the "
                "origin, and such modes are kept exactly: there is nothing to reduce",
            )
        Zc = dense_gramian_factor(split.A, split.B)
        Zo = dense_gramian_factor(split.A.T, split.C.T)
    factors = balance_factors(Zc, Zo)
    s = factors.hankel_singular_values
    n_stable, n_kept = split.A.shape[0], split.A_kept.shape[0]
    r = factors.V.shape[1]
    if low_rank and s.size < n_stable and s.size:
        # Hankel singular values beyond the factors' rank are not computed; the
        # approximate ones are below the exact ones (the ADI iterate is below the
        # Gramian in the Loewner order), and the tail is taken as the smallest computed
        # value for every missing one, which assumes they keep decreasing
        tail = float((n_stable - s.size) * s[-1])
        notes.append(
            f"low-rank Gramians (residual {residual:.1e}): {s.size} of {n_stable} Hankel "
            f"singular values computed; the bound adds {2 * tail:.3g} for the others "
            "(each taken as the smallest computed one)"
        )
    # the low-rank path projects with the sparse matrix (A @ V costs O(nnz r), not O(n^2 r))
    A_stable = split.A
    Ar_full, Br_full, Cr_full, _ = _project(A_stable, split.B, split.C, D, factors.V,
                                            factors.W, r, TRUNCATION)  # fmt: skip
    full_peak, _ = peak_gain(Ar_full, Br_full, Cr_full, D)
    reference = max(full_peak - _discarded_bound(s, r, tail), float(s[0]) if s.size else 0.0)
    if order is not None:
        k = order - n_kept
        if k < 0:
            raise ReductionError(
                "invalid_order",
                f"{block.name}: {n_kept} mode(s) are unstable, marginal or at the origin "
                f"and kept exactly, so --order must be at least {n_kept}",
            )
        if k > r:
            notes.append(
                f"only {r} balanced states are controllable and observable above round-off; "
                f"the reduced block has {r + n_kept} states, not {order}"
            )
            k = r
    else:
        target = float(error) * reference
        k = next((j for j in range(r + 1) if _discarded_bound(s, j, tail) <= target), None)
        if k is None or k + n_kept >= n:
            smallest = _discarded_bound(s, min(r, n - n_kept - 1), tail) if n > 1 else 0.0
            raise ReductionError(
                "error_unreachable",
                f"{block.name}: no order below the block's {n} states meets a relative "
                f"bound of {error:g} (the best, at order {n - 1}, is "
                f"{smallest / reference if reference else 0.0:.3g}); ask for a larger "
                "--error or keep the full block",
            )
    Ar, Br, Cr, Dr = _project(A_stable, split.B, split.C, D, factors.V, factors.W, k, method)
    if k and np.any(np.linalg.eigvals(Ar).real >= 0):
        raise ReductionError(
            "invalid_order",
            f"{block.name}: the reduced block of order {k + n_kept} is not stable (the cut "
            f"falls between nearly equal Hankel singular values {s[k - 1]:.6g} and "
            f"{s[k]:.6g}); ask for order {k + n_kept - 1} or {k + n_kept + 1}",
        )
    bound = _discarded_bound(s, k, tail)
    if k < s.size and k > 0 and s[k] > (1 - 1e-3) * s[k - 1]:
        notes.append(
            f"the cut falls between nearly equal Hankel singular values ({s[k - 1]:.6g}, "
            f"{s[k]:.6g}), a lightly damped pair split in two; order {k + n_kept + 1} "
            "keeps the pair"
        )
    if n_kept:
        notes.append(
            f"{n_kept} mode(s) kept exactly (unstable, marginal or at the origin): "
            + ", ".join(f"{p.real:.6g}{p.imag:+.6g}j" for p in split.kept_poles)
        )
    err_A = la.block_diag(Ar_full, Ar)
    err_B = np.vstack([Br_full, Br])
    err_C = np.hstack([Cr_full, -Cr])
    measured, _ = peak_gain(err_A, err_B, err_C, D - Dr)
    A_red = la.block_diag(Ar, split.A_kept)
    B_red = np.vstack([Br, split.B_kept])
    C_red = np.hstack([Cr, split.C_kept])
    x0 = block.x0 / scaling
    if np.any(x0):
        notes.append(
            "the initial state is projected onto the kept balanced states (exact only when "
            "it lies in their span)"
        )
    x0_red = np.concatenate([factors.W[:, :k].T @ (split.to_stable @ x0), split.to_kept @ x0])
    states = [f"bal{i + 1}" for i in range(k)] + [f"kept{i + 1}" for i in range(n_kept)]
    units = {name: block.units[name] for name in (*block.inputs, *block.outputs)
             if name in block.units}  # fmt: skip
    reduced = CircuitBlock(
        name=block.name,
        A=A_red,
        B=B_red,
        C=C_red,
        D=Dr,
        states=states,
        inputs=list(block.inputs),
        outputs=list(block.outputs),
        x0=x0_red,
        input_defaults=dict(block.input_defaults),
        units=units,
        notes=list(notes),
    )
    return Reduction(
        block=reduced,
        method=method,
        gramians="low_rank" if low_rank else "dense",
        hankel_singular_values=s,
        kept=k,
        error_bound=bound,
        reference_norm=reference,
        kept_poles=split.kept_poles,
        measured_error=measured,
        source_states=n,
        tail_estimate=tail,
        residual=residual,
        notes=notes,
    )


def _check_request(block: Any, order: int | None, error: float | None, gramians: str) -> None:
    n = block.n_states
    if n == 0:
        raise ReductionError("invalid_order", f"{block.name}: the block has no states to reduce")
    if (order is None) == (error is None):
        raise ReductionError("invalid_order", "give either an order or an error bound")
    if gramians not in ("auto", "dense", "low_rank"):
        raise ReductionError(
            "invalid_field", f"gramians {gramians!r}: expected auto, dense or low_rank"
        )
    if not block.inputs or not block.outputs:
        raise ReductionError(
            "no_stable_part",
            f"{block.name}: a block without inputs or outputs has no input-output map to reduce",
        )
    if order is not None:
        if order < 0 or order >= n:
            states = f"{n} state" + ("" if n == 1 else "s")
            problem = "is negative" if order < 0 else f"is not below the block's {states}"
            raise ReductionError(
                "invalid_order",
                f"{block.name}: --order {order} {problem}; ask for an order from 0 to {n - 1}",
            )
    elif not (np.isfinite(error) and error > 0):
        raise ReductionError(
            "error_unreachable",
            f"--error {error!r}: give a positive relative bound such as 1e-3",
        )
    elif error >= 1:
        # a bound of the whole norm or more allows an error as large as the block itself
        # (order 0 may meet it); most likely a percentage typed as a number
        raise ReductionError(
            "error_unreachable",
            f"--error {error!r}: the bound is a fraction of the block's H-infinity norm, so "
            "1 or more allows an error as large as the block; give a fraction below 1, "
            "e.g. 0.05 for 5 %",
        )


def sparse_balance_scaling(A: sp.spmatrix, sweeps: int = 20) -> np.ndarray:
    """Powers of 2 ``d`` such that ``diag(d)^-1 A diag(d)`` has off-diagonal row and column
    1-norms of similar size: the balancing of Parlett and Reinsch (1969, Numer. Math. 13),
    all rows at once, on a sparse matrix (LAPACK's dense balancing costs O(n^2) per sweep)."""
    M = abs(sp.csr_matrix(A))
    M = sp.csr_matrix(M - sp.diags(M.diagonal()))
    d = np.ones(M.shape[0])
    for _ in range(sweeps):
        scaled = sp.diags(1.0 / d) @ M @ sp.diags(d)
        rows = np.asarray(scaled.sum(axis=1)).ravel()
        cols = np.asarray(scaled.sum(axis=0)).ravel()
        ok = (rows > 0) & (cols > 0)
        f = np.ones_like(d)
        f[ok] = 2.0 ** np.round(0.5 * np.log2(rows[ok] / cols[ok]))
        if np.all(f == 1.0):
            break
        d = d * f
    return d


def _refuse_kept_modes_large(name: str, As: sp.spmatrix) -> None:
    """Large blocks: the modes nearest the origin (sparse shift-invert Arnoldi, ARPACK;
    Lehoucq, Sorensen and Yang 1998) must be stable. Unstable modes far from the origin
    are not looked for here; the ADI iteration then fails to converge and says so."""
    from scipy.sparse.linalg import ArpackNoConvergence, eigs

    scale = float(abs(As).sum(axis=0).max()) or 1.0
    if As.shape[0] <= 50:  # ARPACK needs k < n - 1; a small block is cheap in full
        slowest = np.linalg.eigvals(As.toarray())
    else:
        # sigma a hair left of the origin: A - sigma I is regular with a pole at s = 0
        try:
            slowest = eigs(As, k=6, sigma=-1e-9 * scale, which="LM",
                           return_eigenvectors=False, tol=1e-10)  # fmt: skip
        except ArpackNoConvergence as exc:  # pragma: no cover - shift-invert converges fast
            slowest = exc.eigenvalues
    kept = slowest[is_kept_pole(slowest, scale)]
    if kept.size:
        raise ReductionError(
            "unstable_block",
            f"{name}: modes at or right of the imaginary axis "
            f"({', '.join(f'{p.real:.3g}{p.imag:+.3g}j' for p in kept[:4])}); the low-rank "
            f"Gramians of blocks above {DENSE_GRAMIAN_MAX_STATES} states need a stable "
            "block: pass --gramians dense to keep such modes exactly (O(n^3) time), or add "
            "damping",
        )


def reduction_spec(reduction: Reduction, source: str | Path, out: str | Path) -> Any:
    """The state-space file model (:class:`wirestate.spec.state_space.StateSpaceSpec`) of a
    reduction, recording the source file relative to the output file and its digest."""
    import os

    from wirestate.spec.state_space import (
        Matrices,
        ReductionRecord,
        ReductionSource,
        StateSpaceHeader,
        StateSpaceSpec,
        file_digest,
    )

    block = reduction.block
    relative = os.path.relpath(Path(source).resolve(), Path(out).resolve().parent)

    def rows(M: np.ndarray) -> list[list[float]]:
        return [[float(v) for v in row] for row in np.asarray(M)]

    return StateSpaceSpec(
        state_space=StateSpaceHeader(
            name=block.name,
            description=f"{reduction.source_states}-state {block.name} reduced to "
            f"{block.n_states} states",
            inputs=list(block.inputs),
            outputs=list(block.outputs),
            states=list(block.states),
            units=dict(block.units),
            input_defaults={k: float(v) for k, v in block.input_defaults.items()},
        ),
        matrices=Matrices(
            A=rows(block.A),
            B=rows(block.B),
            C=rows(block.C),
            D=rows(block.D),
            initial=[float(v) for v in block.x0] if np.any(block.x0) else None,
        ),  # fmt: skip
        reduction=ReductionRecord(
            method=reduction.method,
            gramians=reduction.gramians,
            error_bound=float(reduction.error_bound),
            relative_error_bound=float(reduction.relative_error_bound),
            reference_norm=float(reduction.reference_norm),
            hankel_singular_values=[float(v) for v in reduction.hankel_singular_values],
            kept_modes=int(reduction.kept_poles.size),
            source=ReductionSource(
                file=Path(relative).as_posix(),
                sha256=file_digest(source),
                states=reduction.source_states,
            ),
        ),
    )
