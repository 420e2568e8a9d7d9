"""Limits as excess vectors (``<= 0`` when met), the same code for numpy and CasADi.

Each limit turns an :class:`~wirestate.tune.model.Evaluation` into one or more vectors
whose entries must all be ``<= 0``; in the optimiser they are path constraints (one per
sample or frequency), in the verification the margin is ``-max(excess)`` in the limit's own
unit (V, A, J, ohm, 1/s, or a fraction for overshoot, settling and damping ratio).

Definitions (``y_f`` the steady state at the final inputs, ``y_b`` the steady state at the
inputs just before ``after``, ``s`` the sign of ``y_f - y_b`` at the starting point):

* overshoot, ``relative_to = "change"``: ``s (y - y_f) / |y_f - y_b|`` for ``t >= after``
  (the usual percent overshoot of a step response, Ogata, Modern Control Engineering,
  5th ed., sec. 5-3); ``"final"``: ``|y - y_f| / |y_f|`` (bus-voltage deviation);
* settling: ``|y - y_f| / ref <= band`` for every ``t >= by``;
* energy: ``R * integral(i^2 dt)`` by the trapezoidal rule on the sample grid (error
  ``O(h^2)``; the states themselves are exact at the samples);
* poles: in the optimiser the Routh-Hurwitz conditions (first column of the Routh array
  positive; Routh 1877, see Ogata sec. 5-6) on ``A - sigma I`` for a real-part limit and on
  the rotated matrix ``[[cos p A, -sin p A], [sin p A, cos p A]]``, ``p = asin(zeta_min)``,
  for a damping-ratio limit (its eigenvalues are the poles turned by ``+-p``, which are all
  in the left half-plane exactly when every pole has damping ratio ``>= zeta_min``); for a
  sampled loop the same tests on Cayley transforms of its one-period matrix (see
  :func:`pole_test_matrix`); in the verification the eigenvalues themselves;
* output impedance: ``|C (j w I - A)^-1 b + d|`` on a logarithmic grid over the band,
  through the real system ``[[-A, -w I], [w I, -A]] [xr; xi] = [b; 0]``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from wirestate.spec.tuning import Limit
from wirestate.tune.model import CURRENT_PREFIX, Evaluation, TuningModel, steady_state


def _cas():
    import casadi

    return casadi


def _row(ev: Evaluation, index: int, ks: Any) -> Any:
    if ev.symbolic:
        return ev.Y[index, ks].T
    return ev.Y[index, ks]


def _steady_output(model: TuningModel, ev: Evaluation, index: int, k: int) -> Any:
    if ev.symbolic and "steady" in ev.extra:
        return ev.extra["steady"][k][index]
    v = model.schedule[:, k]
    x = steady_state(ev.Phi, ev.Gamma, v)
    if ev.symbolic:
        cas = _cas()
        return cas.mtimes(ev.C[index, :], x) + cas.mtimes(ev.D[index, :], cas.DM(v))
    return float(ev.C[index, :] @ x + ev.D[index, :] @ v)


def _sign(value: float) -> float:
    return 1.0 if value >= 0 else -1.0


def frequency_grid(limit: Limit, factor: int = 1) -> np.ndarray:
    """Angular frequencies (rad/s) of an impedance limit's band, log-spaced."""
    f_low, f_high = limit.band  # type: ignore[misc]
    return 2 * math.pi * np.geomspace(f_low, f_high, limit.points * factor)


def impedance_magnitude(ev: Evaluation, model: TuningModel, limit: Limit, omegas) -> Any:
    """``|Z(j w)|`` from input ``limit.input`` to output ``limit.output``, continuous loop."""
    j = model.inputs.index(limit.input)
    m = model.outputs.index(limit.output)
    A = ev.A
    n = A.shape[0]
    b = ev.B[:, j]
    c = ev.extra["Cc"][m, :]
    d = ev.extra["Dc"][m, j]
    if ev.symbolic:
        cas = _cas()
        eye = cas.DM.eye(n)
        out = []
        for w in omegas:
            M = cas.blockcat([[-A, -w * eye], [w * eye, -A]])
            sol = cas.solve(M, cas.vertcat(b, cas.DM.zeros(n, 1)))
            re = cas.mtimes(c, sol[:n]) + d
            im = cas.mtimes(c, sol[n:])
            out.append(cas.sqrt(re**2 + im**2))
        return cas.vertcat(*out)
    s = 1j * np.asarray(omegas)
    values = [c @ np.linalg.solve(si * np.eye(n) - A, b) + d for si in s]
    return np.abs(np.array(values))


def excess(
    limit: Limit, model: TuningModel, ev: Evaluation, start: Evaluation | None = None
) -> list[Any]:
    """Vectors that are ``<= 0`` where ``limit`` holds (see the module docstring).

    ``start`` is a numeric evaluation fixing the direction of steps (defaults to ``ev``,
    which must then be numeric). Pole limits are handled by :func:`pole_excess`. Built
    from :func:`ranges`: each ``lower <= e <= upper`` gives ``e - upper`` and ``lower - e``.
    """
    out = []
    for expr, lower, upper in ranges(limit, model, ev, start):
        if upper is not None:
            out.append(expr - upper)
        if lower is not None:
            out.append(lower - expr)
    return out


def ranges(
    limit: Limit, model: TuningModel, ev: Evaluation, start: Evaluation | None = None
) -> list[tuple[Any, float | None, float | None]]:
    """``(e, lower, upper)`` triples, ``lower <= e <= upper`` entrywise where ``limit``
    holds (``None``: no bound on that side).

    A two-sided band (``|y - y_f| / scale <= band``, ``|i| <= i_max``) is one triple, so
    an optimiser that takes two-sided constraints sees one row per sample instead of two
    (the feasible set is the same). Pole limits return their Routh-Hurwitz entries, which
    need ``start`` only for scaling (see :func:`pole_excess`).
    """
    ref = ev if start is None else start
    times = model.times
    kind = limit.kind
    if kind in ("maximum", "minimum"):
        lo, hi = limit.window if limit.window is not None else (0.0, times[-1])
        # index lists by one vectorised comparison (a Python loop over the samples cost
        # more than the rest of a numeric margin)
        ks = np.flatnonzero((times >= lo - 1e-12) & (times <= hi + 1e-12)).tolist()
        y = _row(ev, model.outputs.index(limit.output), ks)
        return [(y, None, limit.max)] if kind == "maximum" else [(y, limit.min, None)]
    if kind in ("overshoot", "settling"):
        index = model.outputs.index(limit.output)
        k_after = int(round(limit.after / model.step))
        t_from = limit.by if kind == "settling" else limit.after
        ks = np.flatnonzero(times >= t_from - 1e-12).tolist()
        y = _row(ev, index, ks)
        y_f = _steady_output(model, ev, index, model.n_steps)
        bound = limit.max if kind == "overshoot" else limit.band
        yf_ref = _steady_output(model, ref, index, model.n_steps)
        delta_ref = yf_ref - _steady_output(model, ref, index, max(k_after - 1, 0))
        # a change too small to measure against (a regulated output returning to its
        # setpoint) is measured against the final value instead
        by_change = limit.relative_to == "change" and abs(delta_ref) > 1e-9 * max(
            abs(yf_ref), 1e-30
        )
        if by_change:
            y_b = _steady_output(model, ev, index, max(k_after - 1, 0))
            s = _sign(delta_ref)
            scale = s * (y_f - y_b)
        else:
            s = 1.0
            scale = _sign(yf_ref) * y_f
        if kind == "overshoot" and by_change:
            return [(s * (y - y_f) / scale, None, bound)]
        return [((y - y_f) / scale, -bound, bound)]
    if kind == "peak_current":
        y = _row(ev, model.outputs.index(CURRENT_PREFIX + limit.part), slice(None))
        return [(y, -limit.max, limit.max)]
    if kind == "energy":
        return [(resistor_energy(model, ev, limit.part), None, limit.max)]
    if kind == "output_impedance":
        z = impedance_magnitude(ev, model, limit, frequency_grid(limit))
        return [(z, None, limit.max)]
    if kind in ("damping_ratio", "pole_real_part"):
        return [(pole_excess(limit, ev, start, model), None, 0.0)]
    raise ValueError(f"internal: unhandled limit kind {kind!r}")  # pragma: no cover


def resistor_energy(model: TuningModel, ev: Evaluation, part: str) -> Any:
    """``R * integral(i^2 dt)`` over the horizon, trapezoidal rule on the samples (J)."""
    i = _row(ev, model.outputs.index(CURRENT_PREFIX + part), slice(None))
    R = ev.values[part]
    h = model.output_step
    if ev.symbolic:
        cas = _cas()
        sq = i**2
        return R * h * (cas.sum1(sq) - 0.5 * (sq[0] + sq[-1]))
    sq = np.asarray(i) ** 2
    return R * h * (sq.sum() - 0.5 * (sq[0] + sq[-1]))


def integral_squared_error(model: TuningModel, ev: Evaluation, output: str) -> Any:
    """``integral((y - y_f)^2 dt)`` over the horizon (trapezoidal rule)."""
    index = model.outputs.index(output)
    y = _row(ev, index, slice(None))
    y_f = _steady_output(model, ev, index, model.n_steps)
    e2 = (y - y_f) ** 2
    if ev.symbolic:
        cas = _cas()
        return model.output_step * (cas.sum1(e2) - 0.5 * (e2[0] + e2[-1]))
    return model.output_step * (e2.sum() - 0.5 * (e2[0] + e2[-1]))


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


def poles(ev: Evaluation, model: TuningModel) -> np.ndarray:
    """Closed-loop poles (rad/s): eigenvalues of the continuous loop, or ``log(z)/h`` of
    the discrete one when the PI is sampled."""
    if model.sampled:
        z = np.linalg.eigvals(ev.Phi)
        return np.log(z.astype(complex)) / model.step
    return np.linalg.eigvals(ev.A)


def pole_margin(limit: Limit, ev: Evaluation, model: TuningModel) -> tuple[float, float]:
    """(value, margin): the least damping ratio or the largest real part, and its margin."""
    p = poles(ev, model)
    if limit.kind == "pole_real_part":
        value = float(np.max(p.real))
        return value, float(limit.max - value)
    mag = np.abs(p)
    zeta = np.where(mag > 0, -p.real / np.where(mag > 0, mag, 1.0), 1.0)
    value = float(np.min(zeta))
    return value, float(value - limit.min)


def pole_test_matrix(
    limit: Limit, ev: Evaluation, model: TuningModel | None, symbolic: bool
) -> Any:
    """The matrix that is Hurwitz (every eigenvalue in the open left half-plane) exactly
    when ``limit`` holds for the loop of ``ev``.

    Continuous loop: :func:`_pole_matrix` of ``A``. Sampled loop (``Phi`` over the period
    ``T``), through the Cayley transform ``c(P) = (P - I)(P + I)^-1``, which maps the open
    unit disc onto the open left half-plane:

    * real part ``<= sigma``: ``c(exp(-sigma T) Phi)``; a pole ``s = ln(z) / T`` has
      ``Re s < sigma`` exactly when ``|z| < exp(sigma T)``, so this test is exact;
    * damping ratio ``>= zeta``: the rotated matrix of ``(2 / T) c(Phi)``, the Tustin
      (bilinear) equivalent of the loop, whose poles approach ``ln(z) / T`` well below
      the Nyquist frequency (Franklin, Powell and Workman, Digital Control of Dynamic
      Systems, 3rd ed., sec. 6.3); the verification uses ``ln(z) / T`` itself.
    """
    if model is None or not model.sampled:
        return _pole_matrix(limit, ev.A, symbolic)
    T = model.step
    if limit.kind == "pole_real_part":
        return _cayley(math.exp(-limit.max * T) * ev.Phi, symbolic)
    return _pole_matrix(limit, (2.0 / T) * _cayley(ev.Phi, symbolic), symbolic)


def _cayley(P: Any, symbolic: bool) -> Any:
    """``(P - I)(P + I)^-1``, solved as ``(P + I)^T X^T = (P - I)^T``."""
    n = P.shape[0]
    if symbolic:
        cas = _cas()
        eye = cas.DM.eye(n)
        return cas.solve((P + eye).T, (P - eye).T).T
    eye = np.eye(n)
    return np.linalg.solve((P + eye).T, (P - eye).T).T


def pole_excess(
    limit: Limit, ev: Evaluation, start: Evaluation | None, model: TuningModel | None = None
) -> Any:
    """Routh-Hurwitz first-column entries of :func:`pole_test_matrix`, negated (``<= 0``
    where the limit holds)."""
    if not ev.symbolic:
        raise ValueError("internal: numeric pole limits use pole_margin")
    cas = _cas()
    ref = start if start is not None else None
    M = pole_test_matrix(limit, ev, model, True)
    # normalise the time scale so that the polynomial coefficients are of order one
    rho = 1.0
    if ref is not None:
        eig = np.linalg.eigvals(pole_test_matrix(limit, ref, model, False))
        rho = float(max(np.max(np.abs(eig)), 1e-12))
    coefficients = _characteristic_polynomial(M / rho)
    column = _routh_first_column(coefficients)
    return -cas.vertcat(*column)


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
