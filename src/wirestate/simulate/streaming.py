"""Long LTI runs streamed to a CSV file in blocks, so memory stays at one block.

Each block of samples is stepped by the same exact discretisation as
:func:`~wirestate.simulate.linear.simulate_linear` (the block starts from the last state of
the one before, so the sums are those of one long run), written, checked for non-finite
values and reduced to the final, smallest and largest value of each output.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import SimulationError
from wirestate.simulate import guards
from wirestate.simulate.exponential_action import SparseHold, is_cheaper_than_dense
from wirestate.simulate.inputs import build_inputs
from wirestate.simulate.linear import (
    _discretization,
    apply,
    as_linear_model,
    refuse_switched,
    simulate_arrays,
)
from wirestate.simulate.results import write_csv_header, write_csv_rows

#: samples per streamed block (about 8 MB per signal; common practice, no source)
BLOCK_SAMPLES = 1_000_000


@dataclass
class StreamSummary:
    """What a streamed run leaves besides its CSV: per output the last, least and largest
    value, and the run's name, sample count and method."""

    name: str
    output_names: list[str]
    units: dict[str, str]
    final: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    samples: int
    method: str


def stream_linear_to_csv(
    system: Any,
    until: float,
    step: float,
    path: str | Path,
    inputs: Mapping[str, Any] | None = None,
    *,
    hold: str = "zoh",
    use_defaults: bool = True,
    base: Path | None = None,
    progress: Callable[[float], None] | None = None,
    block_samples: int | None = None,
) -> StreamSummary:
    """Simulate an LTI model and write ``time`` and every output to ``path`` block by block.

    The file appears (atomically) only when the whole run has succeeded. Parameters as for
    :func:`~wirestate.simulate.linear.simulate_linear`; ``block_samples`` sets the samples
    held in memory at once.
    """
    from wirestate.atomic import open_atomic

    block_samples = block_samples or BLOCK_SAMPLES

    refuse_switched(system, "stream_linear_to_csv")
    model = as_linear_model(system, keep_sparse=True)
    n = guards.step_count(until, step)
    guards.check_csv_space(path, n + 1, len(model.outputs))
    input_set = build_inputs(
        inputs or {}, model.inputs, model.units,
        defaults=model.input_defaults if use_defaults else None, base=base,
    )  # fmt: skip
    if hasattr(model.A, "tocsr") and not is_cheaper_than_dense(model.A, step, n):
        model.A = model.A.toarray()  # a long run of a mid-sized block: the dense hold
    if hasattr(model.A, "tocsr"):  # a large sparse block: the exponential action
        disc = SparseHold(model.A, model.B, step, hold)
    else:
        disc = _discretization(model.A, model.B)

    def poles() -> np.ndarray:  # only needed to explain a non-finite result
        return guards.model_poles(system)

    p = len(model.outputs)
    final, low, high = np.zeros(p), np.full(p, np.inf), np.full(p, -np.inf)
    x = np.asarray(model.x0, dtype=float)
    try:
        with open_atomic(path) as handle:
            write_csv_header(handle, model.outputs)
            for k0 in range(0, n + 1, block_samples):
                # each block repeats the previous block's last sample as its first
                first = max(0, k0 - 1)
                k1 = min(n, k0 + block_samples - 1)
                t = np.arange(first, k1 + 1) * step
                U = input_set.matrix(model.inputs, t)
                with np.errstate(over="ignore", invalid="ignore"):  # checked just below
                    X = simulate_arrays(
                        model.A, model.B, x, U, step, hold=hold, discretization=disc
                    )
                    Y = apply(model.C, X) + apply(model.D, U)
                guards.check_finite_result(model.name, t, [X, Y], poles, step)
                keep = slice(k0 - first, None)
                write_csv_rows(handle, t[keep], Y[:, keep])
                if p:
                    final = Y[:, -1]
                    low = np.minimum(low, Y[:, keep].min(axis=1))
                    high = np.maximum(high, Y[:, keep].max(axis=1))
                x = X[:, -1]
                if progress is not None:
                    progress(k1 / n)
    except OSError as exc:
        raise SimulationError(
            "file_not_found", f"cannot write the CSV file: {exc.strerror or exc}", file=str(path)
        ) from None
    hold_name = "zero" if hold == "zoh" else "first"
    return StreamSummary(
        model.name, list(model.outputs), dict(model.units), final, low, high, n + 1,
        f"exact {hold_name}-order hold (Van Loan 1978), streamed to the CSV in blocks of "
        f"{block_samples:,} samples",
    )  # fmt: skip
