"""Drawing part values within their tolerances, in chunks whose random streams do not
depend on how many workers evaluate them.

The samples are cut into chunks of a fixed size (:data:`CHUNK_SAMPLES`); chunk ``i`` draws
from its own generator, seeded by the ``i``-th child of ``numpy.random.SeedSequence(seed)``
(``SeedSequence.spawn``: independent, reproducible streams; O'Neill, PCG, 2014, and the
numpy documentation of ``SeedSequence``). The values of a sample therefore depend on the
seed and its index only, never on the number of workers or on the order in which chunks
finish.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from scipy.special import ndtr, ndtri

#: samples per chunk (one task); fixed, so the random streams and the results do not
#: depend on the number of workers
CHUNK_SAMPLES = 500
#: a normal tolerance is taken as this many standard deviations, truncated there
NORMAL_SIGMAS = 3.0
DISTRIBUTIONS = ("uniform", "normal")

ASSUMPTIONS = {
    "uniform": "each part value uniform over value * (1 +- tolerance), parts independent",
    "normal": (
        f"each part value normal around its value with the tolerance as {NORMAL_SIGMAS:g} "
        "standard deviations, truncated at +-tolerance (no part outside its tolerance), "
        "parts independent"
    ),
}


def chunk_sizes(samples: int, chunk: int = CHUNK_SAMPLES) -> list[int]:
    """Sizes of the chunks of ``samples`` (all ``chunk`` but the last)."""
    full, rest = divmod(samples, chunk)
    return [chunk] * full + ([rest] if rest else [])


def unit_deviates(size: int, parts: int, distribution: str, seed_sequence) -> np.ndarray:
    """Relative deviations in [-1, 1] (size x parts): the fraction of each tolerance used.

    ``uniform``: uniform on [-1, 1]. ``normal``: a standard normal scaled by
    1 / :data:`NORMAL_SIGMAS`, truncated to [-1, 1], drawn by inverting the normal CDF on
    the uniform interval ``[Phi(-3), Phi(3)]`` (exact truncation, no rejection loop).
    """
    u = np.random.default_rng(seed_sequence).random((size, parts))
    if distribution == "uniform":
        return 2.0 * u - 1.0
    low, high = ndtr(-NORMAL_SIGMAS), ndtr(NORMAL_SIGMAS)
    return ndtri(low + (high - low) * u) / NORMAL_SIGMAS


def draw_chunks(
    nominal: Mapping[str, float],
    tolerance: Mapping[str, float],
    parts: Sequence[str],
    samples: int,
    distribution: str,
    seed: int,
    chunk: int = CHUNK_SAMPLES,
) -> list[np.ndarray]:
    """Part values (SI) of every sample, chunk by chunk: ``value * (1 + t * d)`` with ``d``
    from :func:`unit_deviates` and the chunk's own child seed (see the module docstring)."""
    sizes = chunk_sizes(samples, chunk)
    children = np.random.SeedSequence(seed).spawn(len(sizes))
    centre = np.array([nominal[p] for p in parts], dtype=float)
    spread = np.array([tolerance[p] for p in parts], dtype=float)
    return [
        centre * (1.0 + spread * unit_deviates(size, len(parts), distribution, child))
        for size, child in zip(sizes, children, strict=True)
    ]
