"""Large blocks are cheap to inspect (issue 10.12): the slowest and fastest modes by sparse
Arnoldi, checked against numpy's dense eigenvalues (LAPACK geev, the reference library),
and a summary instead of thousands of rows."""

from __future__ import annotations

import numpy as np

from wirestate.lti import extreme_poles
from wirestate.reduce import compile_circuit
from wirestate.report.tables import block_summary
from wirestate.spec.generate import ladder

KW = {"resistance": 0.01, "inductance": 1e-6, "capacitance": 1e-6}


def test_extreme_poles_match_dense_eigenvalues():
    block = compile_circuit(ladder(250, **KW))  # 500 states, above the summary threshold
    slowest, fastest = extreme_poles(block.A, 10)
    dense = np.linalg.eigvals(block.A)
    order = np.argsort(np.abs(dense))
    # Arnoldi converged to tol 1e-10 against LAPACK: 1e-8 relative on the magnitudes
    np.testing.assert_allclose(np.abs(slowest), np.abs(dense[order[:10]]), rtol=1e-8)
    np.testing.assert_allclose(np.abs(fastest), np.abs(dense[order[::-1][:10]]), rtol=1e-8)


def test_large_block_summary_is_short():
    block = compile_circuit(ladder(250, **KW))
    text = block_summary(block)
    assert "10 slowest" in text and "... 480 more" in text
    assert len(text.splitlines()) < 80
