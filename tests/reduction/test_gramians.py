"""Low-rank ADI Gramians against scipy's dense Bartels-Stewart solver."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.linalg as la
import scipy.sparse as sp

from tests.conftest import MODELS
from wirestate.balanced import ReductionError, low_rank_gramian
from wirestate.reduce import compile_circuit, load_block
from wirestate.spec.generate import ladder


@pytest.mark.parametrize("sparse", [False, True])
def test_adi_gramians_match_dense_lyapunov(sparse):
    # a well-damped thin-conductor signal cable (invented scenario): 1 km, 2 ohm/m,
    # 0.1 uH/m, 100 pF/m in 60 sections -> 120 states
    block = compile_circuit(ladder(60, resistance=2000 / 60, inductance=1e-4 / 60,
                                   capacitance=1e-7 / 60))  # fmt: skip
    A = sp.csc_matrix(block.A) if sparse else block.A
    gc = low_rank_gramian(A, block.B)
    go = low_rank_gramian(A.T, block.C.T)
    # independent reference: scipy.linalg.solve_continuous_lyapunov (Bartels-Stewart)
    P = la.solve_continuous_lyapunov(block.A, -block.B @ block.B.T)
    Q = la.solve_continuous_lyapunov(block.A.T, -block.C.T @ block.C)
    assert gc.relative_residual < 1e-10 and go.relative_residual < 1e-10
    # Gramians agree to what the residual tolerance (1e-11) allows after amplification by
    # the Lyapunov operator's conditioning; 1e-7 relative leaves margin
    assert np.linalg.norm(gc.factor @ gc.factor.T - P) <= 1e-7 * np.linalg.norm(P)
    assert np.linalg.norm(go.factor @ go.factor.T - Q) <= 1e-7 * np.linalg.norm(Q)
    # Hankel singular values: sqrt(eig(P Q)) (Glover 1984) vs svd(Zo^T Zc) (Laub et al. 1987)
    hsv = la.svdvals(go.factor.T @ gc.factor)
    reference = np.sort(np.sqrt(np.abs(np.linalg.eigvals(P @ Q))))[::-1]
    k = 10
    assert np.allclose(hsv[:k], reference[:k], rtol=0, atol=1e-8 * reference[0])


def test_lightly_damped_block_is_refused_not_wrong():
    # the bundled feeder cable has damping ratios near 2e-4: the projection shifts do not
    # settle and the solver says so rather than return an inaccurate factor
    block = load_block(MODELS / "feeder_cable.toml")
    with pytest.raises(ReductionError) as info:
        low_rank_gramian(block.A, block.B, max_columns=40)
    assert info.value.code == "reduction_not_converged"
