"""Tolerance Monte Carlo against closed forms: the yield of an RC time-constant limit,
the Wilson interval by its definition, and the batched evaluator against the plain one."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy
from scipy.optimize import brentq
from scipy.stats import norm

from tests.conftest import MODELS
from tests.explore.conftest import C0, R0, TAU_MAX, TOL_C, TOL_R
from wirestate.explore import MarginEvaluator, tolerance_yield, wilson_interval
from wirestate.explore.sampling import unit_deviates
from wirestate.tune import load_tuning
from wirestate.tune.problem import Problem


def product_of_uniforms_cdf(k: float, x0: float, x1: float, y0: float, y1: float) -> float:
    """P(X Y <= k) for independent X ~ U[x0, x1], Y ~ U[y0, y1] (positive ranges).

    Derived here with sympy: P = (1 / (x1 - x0)) * integral over x of P(Y <= k / x), where
    P(Y <= k / x) is 1 for x <= k / y1, (k / x - y0) / (y1 - y0) up to x = k / y0, then 0
    (the distribution of a product of two uniforms; e.g. Glen, Leemis and Drew, Computing
    the distribution of the product of two continuous random variables, CSDA 44, 2004).
    """
    x, kk = sympy.symbols("x k", positive=True)
    a = max(x0, k / y1)
    b = min(x1, k / y0)
    if b <= x0:
        return 0.0
    if a >= x1:
        return 1.0
    middle = sympy.integrate((kk / x - y0) / (y1 - y0), (x, a, b))
    total = (sympy.Float(a) - x0 + middle) / (x1 - x0)
    return float(total.subs(kk, k))


@pytest.fixture
def exact_yield() -> float:
    return product_of_uniforms_cdf(
        TAU_MAX, R0 * (1 - TOL_R), R0 * (1 + TOL_R), C0 * (1 - TOL_C), C0 * (1 + TOL_C)
    )


def test_closed_form_yield_inside_the_interval_and_width_shrinks_as_root_n(rc_spread, exact_yield):
    spec = load_tuning(rc_spread)
    assert 0.2 < exact_yield < 0.9  # a case where both outcomes are common
    widths = {}
    for n in (2000, 18000):
        result = tolerance_yield(spec, samples=n, seed=7, confidence=0.999, workers=1)
        low, high = result.interval
        # the Monte Carlo yield's 99.9 % Wilson interval contains the closed form
        assert low <= exact_yield <= high, (n, result.interval, exact_yield)
        widths[n] = high - low
        assert result.failures["fast_rise"] == n - result.passed
    # 9x the samples -> one third of the width (1/sqrt(N)); 10 % for the p-hat change
    assert widths[2000] / widths[18000] == pytest.approx(3.0, rel=0.1)


def test_normal_draws_are_truncated_at_the_tolerance_with_three_sigma():
    d = unit_deviates(200_000, 1, "normal", np.random.SeedSequence(3))[:, 0]
    assert d.min() >= -1.0 and d.max() <= 1.0
    # truncated normal, sigma = 1/3 before truncation at +-3 sigma: the variance is
    # (1/9)(1 - 6 phi(3) / (2 Phi(3) - 1)) (Johnson, Kotz and Balakrishnan, Continuous
    # Univariate Distributions vol. 1, ch. 13 sec. 10.1); 200 000 draws: ~0.3 % statistical
    # error of the variance, so 2 % tolerance
    variance = (1 / 9) * (1 - 6 * norm.pdf(3) / (2 * norm.cdf(3) - 1))
    assert d.var() == pytest.approx(variance, rel=0.02)
    u = unit_deviates(200_000, 1, "uniform", np.random.SeedSequence(3))[:, 0]
    assert u.var() == pytest.approx(1 / 3, rel=0.02)  # uniform on [-1, 1]


@pytest.mark.parametrize(("passed", "n"), [(0, 10), (7, 10), (10, 10), (9987, 10000)])
def test_wilson_interval_solves_its_defining_equation(passed, n):
    # Wilson (1927): the interval is the set of p with |p_hat - p| <= z sqrt(p (1 - p) / n);
    # its ends are found here by a root finder on that equation (tolerance 1e-12)
    z = norm.ppf(0.975)
    p_hat = passed / n

    def g(p):
        return (p_hat - p) ** 2 - z * z * p * (1 - p) / n

    low, high = wilson_interval(passed, n, 0.95)
    expected_low = 0.0 if passed == 0 else brentq(g, 1e-15, p_hat - 1e-12, xtol=1e-15)
    expected_high = 1.0 if passed == n else brentq(g, p_hat + 1e-12, 1 - 1e-15, xtol=1e-15)
    assert low == pytest.approx(expected_low, abs=1e-12)
    assert high == pytest.approx(expected_high, abs=1e-12)


def test_batched_evaluator_gives_the_tuning_verification_margins():
    # the compiled, batched evaluation against the plain numeric verification (one compile,
    # one scipy-expm simulation per row); same limit code, so the difference is the
    # Taylor zero-order hold (truncation bound ~1e-12) and summation order: 1e-9 of bounds
    model = Problem(load_tuning(MODELS / "tuning" / "drive_bus_damping.toml"))
    parts = ["Rd", "Cd", "Lf"]
    base = np.array([0.22, 240e-6, 22e-6])
    ranges = {p: (v * 0.8, v * 1.2) for p, v in zip(parts, base, strict=True)}
    evaluator = MarginEvaluator(model, parts, ranges)
    rows = base * (1 + 0.2 * (2 * np.random.default_rng(5).random((12, 3)) - 1))
    fast, plain = evaluator.evaluate(rows), evaluator.evaluate_plain(rows)
    bounds = np.array([abs(lim.bound) for lim in evaluator.limits])
    assert np.max(np.abs(fast.margin - plain.margin) / bounds) < 1e-9


def test_rank_correlation_names_the_part_that_drives_the_limit(rc_spread):
    result = tolerance_yield(load_tuning(rc_spread), samples=1000, workers=1)
    drivers = result.drivers["fast_rise"]
    # margin = v(1 ms) - 0.6 falls with R and C alike (equal tolerances): both strongly
    # negative (scipy's spearmanr computes them)
    assert {d["part"] for d in drivers} == {"R1", "C1"}
    assert all(d["rank_correlation"] < -0.5 for d in drivers)
    report = result.to_dict()
    for key in ("samples", "yield", "interval", "failures", "seed", "distribution"):
        assert key in report
    assert math.isclose(report["yield"], result.passed / 1000)
