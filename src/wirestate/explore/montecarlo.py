"""Tolerance Monte Carlo: the fraction of built units that meets every limit.

Every part with a tolerance is drawn (:mod:`wirestate.explore.sampling`), every limit of
the tuning file is evaluated at every sample (:mod:`wirestate.explore.evaluate`, on Dask:
:mod:`wirestate.explore.cluster`), and the result gives the yield with its Wilson score
interval, the failures per limit, the parts that drive each limit (Spearman rank
correlation of each part's value with the limit's margin) and each margin's distribution.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from wirestate.errors import WirestateError
from wirestate.explore.cluster import ClusterInfo, evaluate_batches
from wirestate.explore.evaluate import KIND_UNITS, MarginEvaluator
from wirestate.explore.parts import resolve_values, toleranced_parts
from wirestate.explore.sampling import ASSUMPTIONS, CHUNK_SAMPLES, DISTRIBUTIONS, draw_chunks
from wirestate.explore.statistics import (
    distribution,
    drivers,
    rank_correlations,
    wilson_interval,
)
from wirestate.spec.tuning import TuningSpec
from wirestate.tune import CAUTIONS
from wirestate.tune.problem import Problem

#: cautions printed with every yield (the tuning's, and what a modelled yield cannot know)
YIELD_CAUTIONS = (
    *CAUTIONS,
    "A modelled yield is only as good as the assumed distributions: real lots can be "
    "skewed, binned or drift with temperature and age; confirm on built units before "
    "relying on it.",
)


@dataclass
class YieldResult:
    """Outcome of :func:`tolerance_yield`; :meth:`to_dict` gives the JSON report (SI units).

    ``values`` (samples x :attr:`parts`) and ``margins`` (samples x limits) hold every
    sample; they stay out of the JSON.
    """

    name: str
    samples: int
    passed: int
    yield_fraction: float
    interval: tuple[float, float]
    confidence: float
    failures: dict[str, int]
    seed: int
    distribution: str
    assumption: str
    parts: dict[str, dict[str, Any]]
    fixed: dict[str, float]
    limits: list[dict[str, Any]]
    drivers: dict[str, list[dict[str, Any]]]
    margins_summary: dict[str, dict[str, Any]]
    not_evaluated: int
    cluster: ClusterInfo
    chunk_samples: int
    values_source: str = ""
    notes: list[str] = field(default_factory=list)
    cautions: tuple[str, ...] = YIELD_CAUTIONS
    values: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)), repr=False)
    margins: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)), repr=False)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready report; every number in SI base units, margins in the limits' units."""
        return {
            "name": self.name,
            "samples": self.samples,
            "passed": self.passed,
            "yield": self.yield_fraction,
            "interval": [self.interval[0], self.interval[1]],
            "confidence": self.confidence,
            "interval_method": "Wilson score interval (Wilson 1927)",
            "failures": dict(self.failures),
            "seed": self.seed,
            "distribution": self.distribution,
            "assumption": self.assumption,
            "parts": {k: dict(v) for k, v in self.parts.items()},
            "fixed_values": dict(self.fixed),
            "values_source": self.values_source,
            "limits": [dict(x) for x in self.limits],
            "drivers": {k: [dict(x) for x in v] for k, v in self.drivers.items()},
            "margins": {k: dict(v) for k, v in self.margins_summary.items()},
            "not_evaluated": self.not_evaluated,
            "chunk_samples": self.chunk_samples,
            "cluster": self.cluster.to_dict(),
            "notes": list(self.notes),
            "cautions": list(self.cautions),
        }


def _check_run(samples: int, kind: str) -> None:
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer) or samples < 1:
        raise WirestateError(
            "out_of_range", f"at least one sample is needed, got {samples!r}", location=("samples",)
        )
    if kind not in DISTRIBUTIONS:
        raise WirestateError(
            "invalid_field",
            f"distribution must be one of {', '.join(DISTRIBUTIONS)}, got {kind!r}",
            location=("distribution",),
        )


def tolerance_yield(
    spec: TuningSpec,
    *,
    values: Mapping[str, str | float] | None = None,
    parts: Sequence[str] | None = None,
    samples: int = 10_000,
    distribution: str = "uniform",
    seed: int = 1,
    confidence: float = 0.95,
    scheduler: str | None = None,
    workers: int | None = None,
    progress: Callable[[int, int], None] | None = None,
    file: str | None = None,
    values_source: str = "",
) -> YieldResult:
    """Monte Carlo yield of a tuning file's limits over its parts' tolerances.

    Parameters
    ----------
    spec
        A tuning specification (:func:`wirestate.tune.load_tuning`).
    values
        Part values to centre on instead of the circuit file's (texts with units, or
        numbers in SI units), e.g. the preferred values of the last tuning.
    parts
        The parts to draw (default: every resistor, capacitor and inductor with a
        tolerance); each must have a tolerance.
    samples, distribution, seed
        Number of samples; ``"uniform"`` over ``value * (1 +- tolerance)`` or ``"normal"``
        with the tolerance as 3 standard deviations, truncated at it; the seed of
        ``numpy.random.SeedSequence`` (per-chunk streams, see
        :mod:`wirestate.explore.sampling`).
    confidence
        Level of the Wilson score interval of the yield.
    scheduler, workers, progress
        See :func:`wirestate.explore.cluster.evaluate_batches`.

    Returns
    -------
    YieldResult
        The same for any number of workers, for one seed.
    """
    _check_run(samples, distribution)
    model = Problem(spec, file=file)
    fixed = resolve_values(model, values)
    tolerances = toleranced_parts(model, None if parts is None else list(parts))
    names = list(tolerances)
    centre = {n: fixed.get(n, model.nominal[n]) for n in names}
    ranges = {n: (centre[n] * (1 - tolerances[n]), centre[n] * (1 + tolerances[n])) for n in names}
    evaluator = MarginEvaluator(model, names, ranges, fixed=fixed)
    chunks = draw_chunks(centre, tolerances, names, samples, distribution, seed)
    margins, info = evaluate_batches(
        evaluator, chunks, scheduler=scheduler, workers=workers, progress=progress
    )
    return _summarise(model, evaluator, np.vstack(chunks), margins, info, tolerances, centre,
                      dict(samples=samples, seed=seed, distribution=distribution,
                           confidence=confidence, values_source=values_source))  # fmt: skip


def _summarise(model, evaluator, drawn, margins, info, tolerances, centre, run) -> YieldResult:
    met = margins.met
    passed = int(met.all(axis=1).sum())
    samples = run["samples"]
    limit_names = [lim.name for lim in evaluator.limits]
    rho = rank_correlations(drawn, margins.margin)
    not_evaluated = int(np.isnan(margins.margin).any(axis=1).sum())
    notes = [
        f"distribution: {ASSUMPTIONS[run['distribution']]}",
        "a sample passes when every limit holds (margins as in the tuning's verification)",
        f"zero-order hold by Taylor scaling and squaring ({evaluator.squarings} squarings) "
        "over the whole tolerance box",
    ]
    if not_evaluated:
        notes.append(f"{not_evaluated} samples had no circuit solution; counted as failing")
    kinds = model.base_circuit.parts
    return YieldResult(
        name=model.spec.name,
        samples=samples,
        passed=passed,
        yield_fraction=passed / samples,
        interval=wilson_interval(passed, samples, run["confidence"]),
        confidence=run["confidence"],
        failures={n: int((~met[:, j]).sum()) for j, n in enumerate(limit_names)},
        seed=run["seed"],
        distribution=run["distribution"],
        assumption=ASSUMPTIONS[run["distribution"]],
        parts={
            n: {
                "value": centre[n],
                "tolerance": tolerances[n],
                "kind": kinds[n].kind,
                "unit": KIND_UNITS[kinds[n].kind],
            }
            for n in tolerances
        },  # fmt: skip
        fixed=dict(evaluator.fixed),
        limits=[asdict(lim) for lim in evaluator.limits],
        drivers={n: drivers(list(tolerances), rho, j) for j, n in enumerate(limit_names)},
        margins_summary={n: distribution(margins.margin[:, j]) for j, n in enumerate(limit_names)},
        not_evaluated=not_evaluated,
        cluster=info,
        chunk_samples=CHUNK_SAMPLES,
        values_source=run["values_source"],
        notes=notes,
        values=drawn,
        margins=margins.margin,
    )
