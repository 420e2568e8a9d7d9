"""Limits as rows that hold when ``lower <= e <= upper``: one code for numbers and CasADi.

Each limit turns an :class:`~wirestate.tune.evaluation.Evaluation` into ``(e, lower,
upper)`` triples (:func:`ranges`): in the optimiser they are path constraints (one per
sample or frequency, or only the samples the exchange has chosen), in the verification
the margin is the least distance to the bounds over every sample, in the limit's own unit
(V, A, J, ohm, 1/s, or a fraction for overshoot, settling and damping ratio). Numeric
evaluations may be batches (``e`` then has a leading row axis).

Definitions (``y_f`` the steady state at the final inputs, ``y_b`` the steady state at the
inputs just before ``after``, ``s`` the sign of ``y_f - y_b`` at the starting point):

* overshoot, ``percent_of = "change"``: ``s (y - y_f) / |y_f - y_b|`` for ``t >= after``
  (the usual percent overshoot of a step response, Ogata, Modern Control Engineering,
  5th ed., sec. 5-3); ``"final"``: ``|y - y_f| / |y_f|`` (bus-voltage deviation);
* settling: ``|y - y_f| / ref <= band`` for every ``t >= settled_by``;
* energy: ``R * integral(i^2 dt)`` of the exact piecewise solution (the quadratic forms of
  :func:`wirestate.tune.evaluation.energy_gramian`, Van Loan 1978);
* poles: in the optimiser the Routh-Hurwitz conditions (first column of the Routh array
  positive; Routh 1877, see Ogata sec. 5-6) on ``A - sigma I`` for a real-part limit and on
  the rotated matrix ``[[cos p A, -sin p A], [sin p A, cos p A]]``, ``p = asin(zeta_min)``,
  for a damping-ratio limit (its eigenvalues are the poles turned by ``+-p``, which are all
  in the left half-plane exactly when every pole has damping ratio ``>= zeta_min``); for a
  sampled loop the exact disc test of :func:`pole_test_matrix` for a real part, and the
  poles themselves for a damping ratio (:mod:`wirestate.tune.poles`, the verification's
  definition ``s = ln(z) / T``); in the verification the eigenvalues themselves;
* output impedance: ``|C (j w I - A)^-1 b + d|`` on a logarithmic grid over the band,
  through the real system ``[[-A, -w I], [w I, -A]] [xr; xi] = [b; 0]``.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

import numpy as np

from wirestate.spec.tuning import Limit
from wirestate.tune.evaluation import Evaluation
from wirestate.tune.problem import CURRENT_PREFIX

if TYPE_CHECKING:
    from wirestate.tune.problem import Problem

#: limit kinds whose rows are samples of the scenario
PATH_KINDS = ("maximum", "minimum", "overshoot", "settling", "peak_current")
POLE_KINDS = ("damping_ratio", "pole_real_part")


def _cas():
    import casadi

    return casadi


def _single(ev: Evaluation) -> tuple[Evaluation, bool]:
    """``ev`` as a batch, and whether it was a single numeric point."""
    if ev.symbolic or ev.rows is not None:
        return ev, False
    return ev.batch(), True


def _column(value: Any, ev: Evaluation) -> Any:
    """A per-row quantity shaped to broadcast against ``(rows, K)`` rows."""
    return value if ev.symbolic else np.asarray(value)[:, None]


def limit_samples(limit: Limit, problem: Problem) -> np.ndarray | None:
    """Output-sample indices a path limit constrains (``None`` for other kinds)."""
    times = problem.times
    kind = limit.kind
    if kind in ("maximum", "minimum"):
        lo, hi = limit.window if limit.window is not None else (0.0, times[-1])
        return np.flatnonzero((times >= lo - 1e-12) & (times <= hi + 1e-12))
    if kind in ("overshoot", "settling"):
        t_from = limit.by if kind == "settling" else limit.after
        return np.flatnonzero(times >= t_from - 1e-12)
    if kind == "peak_current":
        return np.arange(len(times))
    return None


def row_count(limit: Limit, problem: Problem) -> int | None:
    """Number of rows of a limit the exchange can choose from (samples of a path limit,
    frequencies of an impedance limit); ``None`` for limits imposed whole."""
    samples = limit_samples(limit, problem)
    if samples is not None:
        return len(samples)
    if limit.kind == "output_impedance":
        return len(frequency_grid(limit))
    return None


def _steady_output(problem: Problem, ev: Evaluation, index: int, k: int) -> Any:
    steady = ev.extra["steady"][k]
    if ev.symbolic:
        return steady[index]
    return np.asarray(steady)[..., index]


def _sign(value: float) -> float:
    return 1.0 if value >= 0 else -1.0


def frequency_grid(limit: Limit, factor: int = 1) -> np.ndarray:
    """Angular frequencies (rad/s) of an impedance limit's band, log-spaced."""
    f_low, f_high = limit.band  # type: ignore[misc]
    return 2 * math.pi * np.geomspace(f_low, f_high, limit.points * factor)


def impedance_magnitude(ev: Evaluation, problem: Problem, limit: Limit, omegas) -> Any:
    """``|Z(j w)|`` from input ``limit.input`` to output ``limit.output``, continuous loop
    (numeric: rows x frequencies for a batch, frequencies for a point)."""
    j = problem.inputs.index(limit.input)
    m = problem.outputs.index(limit.output)
    if ev.symbolic:
        cas = _cas()
        A = ev.A
        n = A.shape[0]
        b, c, d = ev.B[:, j], ev.extra["Cc"][m, :], ev.extra["Dc"][m, j]
        eye = cas.DM.eye(n)
        out = []
        for w in omegas:
            M = cas.blockcat([[-A, -w * eye], [w * eye, -A]])
            sol = cas.solve(M, cas.vertcat(b, cas.DM.zeros(n, 1)))
            re = cas.mtimes(c, sol[:n]) + d
            im = cas.mtimes(c, sol[n:])
            out.append(cas.sqrt(re**2 + im**2))
        return cas.vertcat(*out)
    batch, single = _single(ev)
    A = np.asarray(batch.A)
    n = A.shape[-1]
    b = np.asarray(batch.B)[:, :, j]
    c = np.asarray(batch.extra["Cc"])[:, m, :]
    d = np.asarray(batch.extra["Dc"])[:, m, j]
    s = 1j * np.asarray(omegas)
    # one batched complex solve: rows x frequencies systems (s I - A) x = b
    M = s[None, :, None, None] * np.eye(n) - A[:, None, :, :]
    with np.errstate(all="ignore"):
        x = np.linalg.solve(M, np.broadcast_to(b[:, None, :, None], M.shape[:-1] + (1,)))
    z = np.abs(np.einsum("rj,rfj->rf", c, x[..., 0]) + d[:, None])
    return z[0] if single else z


def excess(
    limit: Limit, problem: Problem, ev: Evaluation, start: Evaluation | None = None
) -> list[Any]:
    """Vectors that are ``<= 0`` where ``limit`` holds (see the module docstring), from
    :func:`ranges`: each ``lower <= e <= upper`` gives ``e - upper`` and ``lower - e``."""
    out = []
    for expr, lower, upper in ranges(limit, problem, ev, start):
        if upper is not None:
            out.append(expr - upper)
        if lower is not None:
            out.append(lower - expr)
    return out


def ranges(
    limit: Limit,
    problem: Problem,
    ev: Evaluation,
    start: Evaluation | None = None,
    positions: Any = None,
) -> list[tuple[Any, float | None, float | None]]:
    """``(e, lower, upper)`` triples, ``lower <= e <= upper`` entrywise where ``limit``
    holds (``None``: no bound on that side).

    A two-sided band (``|y - y_f| / scale <= band``, ``|i| <= i_max``) is one triple, so
    an optimiser that takes two-sided constraints sees one row per sample. ``positions``
    picks rows of a path or impedance limit (indices into :func:`row_count`'s rows);
    ``start`` (numeric) fixes the direction of steps and the scaling of pole tests.
    Numeric ``e`` is rows x K for a batch, K for a single point.
    """
    batch, single = _single(ev)
    out = _ranges(limit, problem, batch, start, positions)
    if single:
        out = [(np.asarray(e)[0], lo, hi) for e, lo, hi in out]
    return out


def _ranges(limit, problem, ev, start, positions):
    kind = limit.kind
    samples = limit_samples(limit, problem)
    if samples is not None and positions is not None:
        samples = samples[np.asarray(positions, dtype=int)]
    if kind in ("maximum", "minimum"):
        y = ev.output(problem.outputs.index(limit.output), samples)
        return [(y, None, limit.max)] if kind == "maximum" else [(y, limit.min, None)]
    if kind in ("overshoot", "settling"):
        return _step_ranges(limit, problem, ev, start, samples)
    if kind == "peak_current":
        y = ev.output(problem.outputs.index(CURRENT_PREFIX + limit.part), samples)
        return [(y, -limit.max, limit.max)]
    if kind == "energy":
        return [(resistor_energy(problem, ev, limit.part), None, limit.max)]
    if kind == "output_impedance":
        omegas = frequency_grid(limit)
        if positions is not None:
            omegas = omegas[np.asarray(positions, dtype=int)]
        return [(impedance_magnitude(ev, problem, limit, omegas), None, limit.max)]
    if kind in POLE_KINDS:
        return [(pole_excess(limit, ev, start, problem), None, 0.0)]
    raise ValueError(f"internal: unhandled limit kind {kind!r}")  # pragma: no cover


def _step_ranges(limit, problem, ev, start, samples):
    """Overshoot and settling rows (see the module docstring)."""
    ref = ev if start is None else _single(start)[0]
    kind = limit.kind
    index = problem.outputs.index(limit.output)
    k_after = int(round(limit.after / problem.step))
    before = max(k_after - 1, 0)
    y = ev.output(index, samples)
    y_f = _steady_output(problem, ev, index, problem.n_steps)
    bound = limit.max if kind == "overshoot" else limit.band
    yf_ref = float(np.ravel(_steady_output(problem, ref, index, problem.n_steps))[0])
    delta_ref = yf_ref - float(np.ravel(_steady_output(problem, ref, index, before))[0])
    # a change too small to measure against (a regulated output returning to its
    # setpoint) is measured against the final value instead
    by_change = limit.relative_to == "change" and abs(delta_ref) > 1e-9 * max(abs(yf_ref), 1e-30)
    if by_change:
        s = _sign(delta_ref)
        scale = s * (y_f - _steady_output(problem, ev, index, before))
    else:
        s = 1.0
        scale = _sign(yf_ref) * y_f
    expr = (y - _column(y_f, ev)) / _column(scale, ev)
    if kind == "overshoot" and by_change:
        return [(s * expr, None, bound)]
    return [(expr, -bound, bound)]


def resistor_energy(problem: Problem, ev: Evaluation, part: str) -> Any:
    """``R * integral(i^2 dt)`` over the horizon (J): exact for the piecewise solution,
    the sum over the samples of the quadratic form ``[x; v]^T Q [x; v]`` of
    :func:`wirestate.tune.evaluation.held_quadratic` (numeric: per row of a batch)."""
    steps = np.shape(ev.inputs)[1] - 1
    V = ev.inputs[:, :steps]
    if ev.symbolic:
        cas = _cas()
        Z = cas.vertcat(ev.X[:, :steps], cas.DM(V))
        Q = ev.extra["energy"][part]
        return ev.values[part] * cas.sum2(cas.sum1(Z * cas.mtimes(Q, Z)))
    batch, single = _single(ev)
    X = np.asarray(batch.X)[:, :, :steps]
    Z = np.concatenate([X, np.broadcast_to(V, (X.shape[0], *V.shape))], axis=1)
    with np.errstate(all="ignore"):
        QZ = np.asarray(batch.extra["energy"][part]) @ Z
        energy = np.asarray(batch.values[part]) * np.sum(Z * QZ, axis=(1, 2))
    return float(energy[0]) if single else energy


def integral_squared_error(problem: Problem, ev: Evaluation, output: str) -> Any:
    """``integral((y - y_f)^2 dt)`` over the horizon (trapezoidal rule on the samples)."""
    index = problem.outputs.index(output)
    if ev.symbolic:
        cas = _cas()
        y_f = _steady_output(problem, ev, index, problem.n_steps)
        e2 = (ev.output(index, slice(None)) - y_f) ** 2
        return problem.output_step * (cas.sum1(e2) - 0.5 * (e2[0] + e2[-1]))
    batch, single = _single(ev)
    y_f = _steady_output(problem, batch, index, problem.n_steps)
    e2 = (np.asarray(batch.Y)[:, index, :] - y_f[:, None]) ** 2
    value = problem.output_step * (e2.sum(axis=-1) - 0.5 * (e2[:, 0] + e2[:, -1]))
    return float(value[0]) if single else value


def _pole_matrix(limit: Limit, A: Any, symbolic: bool) -> Any:
    n = A.shape[0]
    if limit.kind == "pole_real_part":
        eye = _cas().DM.eye(n) if symbolic else np.eye(n)
        return A - limit.max * eye
    phi = math.asin(min(max(limit.min, 0.0), 1.0))
    c, s = math.cos(phi), math.sin(phi)
    if symbolic:
        return _cas().blockcat([[c * A, -s * A], [s * A, c * A]])
    return np.block([[c * A, -s * A], [s * A, c * A]])


def poles(ev: Evaluation, problem: Problem) -> np.ndarray:
    """Closed-loop poles (rad/s): eigenvalues of the continuous loop, or ``log(z)/T`` of
    the discrete one when the loop is sampled (numeric; rows x poles for a batch)."""
    return _poles(np.asarray(ev.Phi if problem.sampled else ev.A), problem)


def _damping(matrix: np.ndarray, problem: Problem) -> np.ndarray:
    """Damping ratio of every pole (rows x poles), the definition both the optimiser and
    the verification use."""
    if problem.sampled:
        from wirestate.tune.poles import pole_damping

        with np.errstate(all="ignore"):
            return pole_damping(np.linalg.eigvals(matrix), problem.step)
    p = np.linalg.eigvals(matrix)
    mag = np.abs(p)
    return np.where(mag > 0, -p.real / np.where(mag > 0, mag, 1.0), 1.0)


def _poles(matrix: np.ndarray, problem: Problem) -> np.ndarray:
    if problem.sampled:
        with np.errstate(all="ignore"):
            z = np.linalg.eigvals(matrix)
            return np.log(z.astype(complex)) / problem.step
    return np.linalg.eigvals(matrix)


def pole_margin(limit: Limit, ev: Evaluation, problem: Problem) -> tuple[Any, Any]:
    """(value, margin): the least damping ratio or the largest real part, and its margin
    (floats for a point, vectors for a batch; NaN where a row's matrix is not finite)."""
    batch, single = _single(ev)
    matrix = np.asarray(batch.Phi if problem.sampled else batch.A)
    good = np.all(np.isfinite(matrix), axis=(1, 2))
    value = np.full(matrix.shape[0], np.nan)
    if np.any(good):
        if limit.kind == "pole_real_part":
            value[good] = np.max(_poles(matrix[good], problem).real, axis=-1)
        else:
            value[good] = np.min(_damping(matrix[good], problem), axis=-1)
    margin = limit.max - value if limit.kind == "pole_real_part" else value - limit.min
    if single:
        return float(value[0]), float(margin[0])
    return value, margin


def pole_test_matrix(limit: Limit, ev: Evaluation, problem: Any, symbolic: bool) -> Any:
    """The matrix that is Hurwitz (every eigenvalue in the open left half-plane) exactly
    when ``limit`` holds for the loop of ``ev``.

    Continuous loop: :func:`_pole_matrix` of ``A``. Sampled loop (``Phi`` over the period
    ``T``), through the Cayley transform ``c(P) = (P - I)(P + I)^-1``, which maps the open
    unit disc onto the open left half-plane:

    * real part ``<= sigma``: ``c(exp(-sigma T) Phi)``; a pole ``s = ln(z) / T`` has
      ``Re s < sigma`` exactly when ``|z| < exp(sigma T)``, so this test is exact.

    A damping-ratio limit on a sampled loop has no such test (its region is a logarithmic
    spiral in the z-plane): :mod:`wirestate.tune.poles` imposes it on the poles.
    """
    if problem is None or not problem.sampled:
        return _pole_matrix(limit, ev.A, symbolic)
    if limit.kind != "pole_real_part":
        raise ValueError("internal: a sampled damping-ratio limit has no Hurwitz test")
    return _cayley(math.exp(-limit.max * problem.step) * ev.Phi, symbolic)


def _cayley(P: Any, symbolic: bool) -> Any:
    """``(P - I)(P + I)^-1``, solved as ``(P + I)^T X^T = (P - I)^T``."""
    n = P.shape[0]
    if symbolic:
        cas = _cas()
        eye = cas.DM.eye(n)
        return cas.solve((P + eye).T, (P - eye).T).T
    eye = np.eye(n)
    return np.linalg.solve((P + eye).T, (P - eye).T).T


def pole_excess(limit: Limit, ev: Evaluation, start: Evaluation | None, problem: Any = None) -> Any:
    """Rows that are ``<= 0`` where a pole limit holds: the Routh-Hurwitz first-column
    entries of :func:`pole_test_matrix`, negated, or for a damping-ratio limit on a
    sampled loop the damping shortfall of every pole (:mod:`wirestate.tune.poles`)."""
    if not ev.symbolic:
        raise ValueError("internal: numeric pole limits use pole_margin")
    if limit.kind == "damping_ratio" and problem is not None and problem.sampled:
        from wirestate.tune.poles import damping_rows

        return damping_rows(ev.Phi, problem.step, float(limit.min))
    # normalise the time scale so that the polynomial coefficients are of order one
    rho = 1.0
    if start is not None:
        ref = start.row(0) if start.rows is not None else start
        eig = np.linalg.eigvals(pole_test_matrix(limit, ref, problem, False))
        rho = float(max(np.max(np.abs(eig)), 1e-12))
    loop = ev.extra.get("loop")
    if loop is not None:
        # one SX function per limit and run, called with this point's part values
        return loop.pole_rows(limit, ev.extra["p"], rho)
    return routh_rows(limit, ev, problem, rho)


def routh_rows(limit: Limit, ev: Evaluation, problem: Any, rho: float) -> Any:
    """The negated Routh-Hurwitz entries of :func:`pole_test_matrix` divided by ``rho``."""
    M = pole_test_matrix(limit, ev, problem, True)
    column = _routh_first_column(_characteristic_polynomial(M / rho))
    return -_cas().vertcat(*column)


def _characteristic_polynomial(M: Any) -> list[Any]:
    """Coefficients ``[1, c_{n-1}, ..., c_0]`` of ``det(s I - M)`` (Faddeev-LeVerrier;
    e.g. Gantmacher, The Theory of Matrices, vol. 1, ch. IV sec. 4)."""
    cas = _cas()
    n = M.shape[0]
    eye = cas.DM.eye(n)
    coefficients = [1.0]
    Mk = cas.DM.zeros(n, n)
    c_prev = 1.0
    for k in range(1, n + 1):
        Mk = cas.mtimes(M, Mk) + c_prev * eye
        c_prev = -cas.trace(cas.mtimes(M, Mk)) / k
        coefficients.append(c_prev)
    return coefficients


def _routh_first_column(coefficients: list[Any]) -> list[Any]:
    """First column of the Routh array of ``a0 s^n + a1 s^(n-1) + ... + an`` (a0 = 1)."""
    rows = [coefficients[0::2], coefficients[1::2]]
    width = len(rows[0])
    rows = [r + [0.0] * (width - len(r)) for r in rows]
    n = len(coefficients) - 1
    for _ in range(n - 1):
        upper, lower = rows[-2], rows[-1]
        new = [
            (lower[0] * upper[i + 1] - upper[0] * lower[i + 1]) / lower[0] for i in range(width - 1)
        ] + [0.0]
        rows.append(new)
    return [r[0] for r in rows[1 : n + 1]]
