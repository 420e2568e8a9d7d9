"""Statistics of a tolerance Monte Carlo: the yield's confidence interval, which parts
drive each limit, and the distribution of each margin."""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
from scipy.stats import norm, spearmanr

#: margin percentiles reported per limit (percent)
PERCENTILES = (0.1, 1.0, 5.0, 50.0, 95.0, 99.0, 99.9)
HISTOGRAM_BINS = 40


def wilson_interval(passed: int, samples: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval of a binomial proportion.

    The set of ``p`` with ``|k/n - p| <= z sqrt(p (1 - p) / n)`` (E. B. Wilson, "Probable
    inference, the law of succession, and statistical inference", JASA 22, 1927), solved:
    ``(p_hat + z^2/2n +- z sqrt(p_hat (1 - p_hat)/n + z^2/4n^2)) / (1 + z^2/n)``, with ``z``
    the two-sided normal quantile of ``confidence``. Unlike the normal approximation it
    stays inside [0, 1] and is not empty when every sample passes.
    """
    if samples <= 0:
        raise ValueError("internal: the interval needs at least one sample")
    z = float(norm.ppf(0.5 + confidence / 2.0))
    p = passed / samples
    z2n = z * z / samples
    centre = (p + z2n / 2.0) / (1.0 + z2n)
    half = z / (1.0 + z2n) * math.sqrt(p * (1.0 - p) / samples + z2n / (4.0 * samples))
    return max(0.0, centre - half), min(1.0, centre + half)


def rank_correlations(values: np.ndarray, margins: np.ndarray) -> np.ndarray:
    """Spearman's rank correlation (Spearman 1904) of each part's value (columns of
    ``values``) with each limit's margin (columns of ``margins``): parts x limits, NaN
    where a margin does not vary. Rows with a NaN margin are left out."""
    out = np.full((values.shape[1], margins.shape[1]), np.nan)
    for j in range(margins.shape[1]):
        ok = np.isfinite(margins[:, j])
        if ok.sum() < 3 or np.ptp(margins[ok, j]) == 0:
            continue
        for i in range(values.shape[1]):
            if np.ptp(values[ok, i]) == 0:
                continue
            out[i, j] = spearmanr(values[ok, i], margins[ok, j]).statistic
    return out


def drivers(parts: Sequence[str], rho: np.ndarray, limit: int) -> list[dict[str, Any]]:
    """Parts ordered by ``|rho|`` with one limit's margin, strongest first. A negative
    ``rho``: a larger value of the part lowers that margin."""
    column = [(p, float(rho[i, limit])) for i, p in enumerate(parts) if np.isfinite(rho[i, limit])]
    column.sort(key=lambda item: -abs(item[1]))
    return [{"part": p, "rank_correlation": r} for p, r in column]


def distribution(margins: np.ndarray) -> dict[str, Any]:
    """Summary of one limit's margins: min, max, mean, standard deviation, percentiles and
    a histogram (NaN rows, where the circuit had no solution, left out and counted)."""
    finite = margins[np.isfinite(margins)]
    if finite.size == 0:
        return {"evaluated": 0, "not_evaluated": int(margins.size)}
    counts, edges = np.histogram(finite, bins=HISTOGRAM_BINS)
    return {
        "evaluated": int(finite.size),
        "not_evaluated": int(margins.size - finite.size),
        "min": float(finite.min()),
        "max": float(finite.max()),
        "mean": float(finite.mean()),
        "std": float(finite.std(ddof=1)) if finite.size > 1 else 0.0,
        "percentiles": {f"{q:g}": float(np.percentile(finite, q)) for q in PERCENTILES},
        "histogram": {"edges": edges.tolist(), "counts": counts.tolist()},
    }
