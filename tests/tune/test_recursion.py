"""The condensed trajectory's hand-written derivatives (wirestate.tune.recursion).

References: the closed form of a scalar first-order recursion (a geometric series) and its
derivative; CasADi's own algorithmic differentiation of the same recursion written out
step by step (a general-purpose AD library); central finite differences. The C kernel and
the numpy loop are checked against each other.
"""

from __future__ import annotations

import casadi
import numpy as np
import pytest

from wirestate.tune import recursion


@pytest.fixture(params=["native", "numpy"])
def path(request, monkeypatch):
    """Run each test on the C kernel and on the numpy loop (the fallback)."""
    if request.param == "numpy":
        monkeypatch.setattr(recursion, "_kernel", lambda: None)
    elif recursion._kernel() is None:
        pytest.skip("no C compiler here (or WIRESTATE_NO_NATIVE set): the kernel is not built")
    return request.param


def _random_loop(n: int, inputs: int, seed: int):
    rng = np.random.default_rng(seed)
    p = casadi.MX.sym("p", 3)
    base = rng.standard_normal((n, n))
    base *= 0.9 / max(abs(np.linalg.eigvals(base)))
    Phi = casadi.DM(base) + p[0] * casadi.DM(rng.standard_normal((n, n))) * 0.05
    Phi = Phi + p[1] ** 2 * casadi.DM(np.eye(n)) * 0.02
    Gamma = casadi.DM(rng.standard_normal((n, inputs))) * p[2]
    x0 = casadi.DM(rng.standard_normal(n)) * p[0]
    return p, Phi, Gamma, x0, rng.standard_normal((inputs, 41))


def _unrolled(Phi, Gamma, x0, V):
    """The same recursion written out step by step, for CasADi's own AD."""
    columns, x = [x0], x0
    for k in range(V.shape[1] - 1):
        x = casadi.mtimes(Phi, x) + casadi.mtimes(Gamma, casadi.DM(V[:, k]))
        columns.append(x)
    return casadi.horzcat(*columns)


@pytest.mark.parametrize("columns", [None, [0, 3, 7, 20, 39, 40], [40], [5, 6]])
def test_forward_and_reverse_match_casadi_ad_of_the_unrolled_recursion(path, columns):
    # reference: CasADi's forward (jacobian) and reverse (gradient) AD of the unrolled
    # recursion; tolerance 1e-12 relative: both are exact up to round-off in ~40 products
    p, Phi, Gamma, x0, V = _random_loop(5, 2, seed=3)
    f = recursion.state_samples(5, V, columns)
    X = f(Phi, Gamma, x0)
    ref = _unrolled(Phi, Gamma, x0, V)
    if columns is not None:
        ref = ref[:, columns]
    weight = casadi.DM(np.random.default_rng(1).standard_normal(X.shape))
    outputs = [
        X,
        casadi.jacobian(casadi.vec(X), p),
        casadi.gradient(casadi.sum1(casadi.sum2(weight * casadi.sin(X))), p),
    ]
    expected = [
        ref,
        casadi.jacobian(casadi.vec(ref), p),
        casadi.gradient(casadi.sum1(casadi.sum2(weight * casadi.sin(ref))), p),
    ]
    got = casadi.Function("got", [p], outputs)([0.3, 0.7, 1.1])
    want = casadi.Function("want", [p], expected)([0.3, 0.7, 1.1])
    for g, w in zip(got, want, strict=True):
        g, w = np.array(g), np.array(w)
        assert np.abs(g - w).max() <= 1e-12 * max(1.0, np.abs(w).max())


def test_scalar_recursion_and_its_derivative_match_the_geometric_series(path):
    # x[k+1] = a x[k] + b, x[0] = x0: x[k] = a^k x0 + b (1 - a^k) / (1 - a) (geometric
    # series, any algebra text); d x[k] / d a differentiated by hand:
    # k a^(k-1) x0 + b (-k a^(k-1) (1 - a) + (1 - a^k)) / (1 - a)^2
    a_value, b, x0, steps = 0.93, 0.4, 2.0, 60
    a = casadi.MX.sym("a")
    V = np.ones((1, steps + 1))
    # CasADi holds no reference to a Python callback: keep it while it is used
    states = recursion.state_samples(1, V)
    X = states(casadi.reshape(a, 1, 1), casadi.DM([[b]]), casadi.DM([x0]))
    values, slopes = casadi.Function("x", [a], [X, casadi.jacobian(casadi.vec(X), a)])(a_value)
    k = np.arange(steps + 1)
    closed = a_value**k * x0 + b * (1 - a_value**k) / (1 - a_value)
    slope = (
        k * a_value ** np.maximum(k - 1, 0) * x0
        + b
        * (-k * a_value ** np.maximum(k - 1, 0) * (1 - a_value) + (1 - a_value**k))
        / (1 - a_value) ** 2
    )
    # tolerance: 1e-13 relative, round-off of 60 products
    assert np.allclose(np.array(values).ravel(), closed, rtol=1e-13, atol=0)
    assert np.allclose(np.array(slopes).ravel(), slope, rtol=1e-12, atol=1e-14)


def test_gradient_matches_central_differences(path):
    # reference: central differences, step 1e-6; tolerance 1e-7 relative (truncation
    # error of order h^2 times the third derivative, plus round-off / h)
    p, Phi, Gamma, x0, V = _random_loop(4, 1, seed=11)
    states = recursion.state_samples(4, V, [10, 25, 40])
    X = states(Phi, Gamma, x0)
    value = casadi.sum1(casadi.sum2(X**2))
    f = casadi.Function("f", [p], [value, casadi.gradient(value, p)])
    point = np.array([0.2, 0.5, 0.9])
    grad = np.array(f(point)[1]).ravel()
    h = 1e-6
    numeric = [
        (float(f(point + h * e)[0]) - float(f(point - h * e)[0])) / (2 * h) for e in np.eye(3)
    ]
    assert np.allclose(grad, numeric, rtol=1e-7, atol=1e-9)


@pytest.mark.parametrize("n", [24, 7])
@pytest.mark.parametrize("m", [1, 3, 4, 7, 16, recursion.NATIVE_COLUMNS])
def test_kernel_and_numpy_loop_agree(m, n):
    # the C kernel against the numpy loop: the same recursion, summed in another order,
    # so agreement to round-off (1e-13 relative), not bit for bit
    if recursion._kernel() is None:
        pytest.skip("no C compiler here (or WIRESTATE_NO_NATIVE set): the kernel is not built")
    rng = np.random.default_rng(5)
    # both of the kernel's loops: dot products below 4 columns, blocks of 4 (and the rest);
    # rows two or four at a time, and (n = 7) the rows left over one at a time
    steps = 300
    P = rng.standard_normal((n, n))
    P *= 0.95 / max(abs(np.linalg.eigvals(P)))
    R = rng.standard_normal((steps, n, m))
    S0 = rng.standard_normal((n, m))
    native = recursion.recur(P, R, S0)
    kernel = recursion._native["function"]
    recursion._native["function"] = None
    try:
        reference = recursion.recur(P, R, S0)
    finally:
        recursion._native["function"] = kernel
    assert np.abs(native - reference).max() <= 1e-13 * np.abs(reference).max()
