"""Batch simulation of large sparse blocks: R-L-C ladders from 100 to 8000 states.

A ladder's batch run by the exponential-action path (``simulate_arrays`` with the
block's sparse ``A``, :mod:`wirestate.simulate.exponential_action`; exact zero-order hold,
200 steps of 20 ns, a sine on the source, then the outputs ``C x + D u``; ``|A dt|`` about
1.3 at every size, so the work per state is the same). ``simulate`` takes this path by
itself for blocks over 400 states when it is cheaper than the dense hold. The in-run
reference is SciPy's public implementation of the same published algorithm,
``scipy.sparse.linalg.expm_multiply``, called once per step on Van Loan's augmented matrix
(its parameters are chosen on every call; ours once per run). Up to 2000 states the dense
exact hold (scipy ``expm`` of the augmented matrix, then the stepped recurrence) is timed
too and reported in ``details``, with the largest difference between the two trajectories.
The scaling exponent is the least-squares slope of log(time) over log(states); target:
near-linear (<= 1.2). Figures are warm (a first run of each size is not timed); wirestate
and the reference are timed the same number of times, interleaved.

Run: ``python benchmarks/bench_large_blocks.py`` (prints JSON) or through ``make bench``.
"""

from __future__ import annotations

import json
import statistics
import time

import numpy as np

from scaling import scaling_result

SECTIONS = (50, 100, 250, 500, 1000, 2000, 4000)
STEPS, DT = 200, 20e-9
DENSE_MAX_STATES = 2000


def _timed(fn) -> float:
    start = time.perf_counter()
    fn()
    return time.perf_counter() - start


def _reference_loop(block, A, U):
    import scipy.sparse as sparse
    from scipy.sparse.linalg import expm_multiply

    n, m = block.B.shape
    M = sparse.bmat(
        [[A * DT, sparse.csr_matrix(block.B * DT)], [None, sparse.csr_matrix((m, m))]],
        format="csr",
    )

    def loop():
        X = np.empty((n, U.shape[1]))
        X[:, 0] = 0.0
        v = np.zeros(n + m)
        for k in range(U.shape[1] - 1):
            v[n:] = U[:, k]
            v = expm_multiply(M, v)
            X[:, k + 1] = v[:n]
        return X

    return loop


def _dense_hold(block, U):
    from wirestate.simulate.discretize import zoh
    from wirestate.simulate.linear import propagate

    Ad, Bd = zoh(block.A, block.B, DT)
    return propagate(Ad, Bd, np.zeros(block.n_states), U[:, :-1])


def run() -> list[dict]:
    import scipy.sparse as sparse

    from wirestate.lti import single_threaded_blas
    from wirestate.reduce import compile_circuit
    from wirestate.simulate.inputs import Sine
    from wirestate.simulate.linear import simulate_arrays, time_grid
    from wirestate.spec.generate import ladder

    results, medians = [], {}
    for sections in SECTIONS:
        spec = ladder(
            sections, resistance=0.05, inductance=1e-6, capacitance=1e-9, load_resistance=10.0
        )
        block = compile_circuit(spec)
        # small ladders compile to a dense A: the same path is timed at every size
        A = block.sparse_A if block.sparse_A is not None else sparse.csr_matrix(block.A)
        U = Sine(5.0, 3e6, offset=48.0).values(time_grid(STEPS * DT, DT))[None, :]

        def ours(A=A, block=block, U=U):
            X = simulate_arrays(A, block.B, block.x0, U, DT)
            return X, block.C @ X + block.D @ U

        states, _ = ours()  # warm-up
        reference = _reference_loop(block, A, U)
        with single_threaded_blas():
            reference()  # warm-up
        repeats = 5 if sections <= 1000 else 3
        ours_t, ref_t = [], []
        for _ in range(repeats):
            ours_t.append(_timed(ours))
            with single_threaded_blas():  # the same BLAS setting as ours
                ref_t.append(_timed(reference))
        median, ref = statistics.median(ours_t), statistics.median(ref_t)
        medians[block.n_states] = median
        details = {
            "sections": sections,
            "states": block.n_states,
            "steps": STEPS,
            "step_s": DT,
            "repeats_each": repeats,
            "reference": "scipy expm_multiply per step on the augmented matrix",
            "note": "per 200-step run; the dense exact hold in dense_exact_hold_s",
        }
        if block.n_states <= DENSE_MAX_STATES:
            start = time.perf_counter()
            dense = _dense_hold(block, U)
            details["dense_exact_hold_s"] = time.perf_counter() - start
            scale = np.abs(dense).max()
            details["max_rel_difference_to_dense"] = float(np.abs(states - dense).max() / scale)
        results.append(
            {
                "name": f"large_simulate_{block.n_states}",
                "median_s": median,
                "reference_median_s": ref,
                "ratio": median / ref,
                "higher_is_better": False,
                "target": None,
                "meets_target": None,
                "details": details,
            }
        )
    results.append(scaling_result("large_simulate_scaling", medians))
    return results


if __name__ == "__main__":
    print(json.dumps(run(), indent=2))
