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


def test_sparse_and_dense_forms_give_the_same_extreme_poles_and_dc_gain():
    block = compile_circuit(ladder(300, **KW))  # 600 states: A is kept sparse
    assert block.sparse_A is not None
    sparse_slow, sparse_fast = extreme_poles(block.sparse_A, 10)
    dense = np.linalg.eigvals(block.A)
    order = np.argsort(np.abs(dense))
    # shift-invert Arnoldi at tol 1e-10 against LAPACK geev: 1e-8 relative magnitudes
    np.testing.assert_allclose(np.abs(sparse_slow), np.abs(dense[order[:10]]), rtol=1e-8)
    np.testing.assert_allclose(np.abs(sparse_fast), np.abs(dense[order[::-1][:10]]), rtol=1e-8)
    # DC gain from SuperLU against LAPACK's dense LU (dc_gain_limit on the dense A):
    # both backward stable on a well-conditioned A, 1e-12 absolute on gains of order 1
    from wirestate.lti import dc_gain_limit

    np.testing.assert_allclose(
        block.dc_gain(), dc_gain_limit(block.A, block.B, block.C, block.D), atol=1e-12
    )


def test_large_block_json_lists_a_summary_and_a_sparse_a():
    from wirestate.report.tables import block_json

    block = compile_circuit(ladder(300, **KW))
    data = block_json(block)
    # each complex pair is listed once with conjugate_pair stated: 20 poles in all
    listed = sum(2 if p["conjugate_pair"] else 1 for p in data["poles"])
    assert data["poles_listed"].startswith("the 10 slowest") and listed == 20
    A = data["A"]
    assert A["shape"] == [600, 600] and len(A["value"]) == block.sparse_A.nnz
    rebuilt = np.zeros((600, 600))
    rebuilt[A["row"], A["col"]] = A["value"]
    assert np.array_equal(rebuilt, block.A)


def test_the_inspect_command_never_solves_for_every_pole_of_a_large_block(
    tmp_path, monkeypatch, capsys
):
    # the command went through the file-kind inspection, which asked the block for every
    # pole (a dense eigenvalue solve: 20 s at 2000 states) besides the summary's Arnoldi
    from wirestate.cli import main
    from wirestate.lti import CircuitBlock

    path = tmp_path / "ladder.toml"
    path.write_text(_ladder_toml(250), encoding="utf-8")  # 500 states

    def refuse(self):
        raise AssertionError("every pole of a large block was computed")

    monkeypatch.setattr(CircuitBlock, "poles", refuse)
    assert main(["inspect", str(path)]) == 0
    assert "the 10 slowest" in capsys.readouterr().out
    assert main(["inspect", str(path), "--json"]) == 0
    assert '"pole_count": 500' in capsys.readouterr().out


def _ladder_toml(sections: int) -> str:
    lines = ["[circuit]", 'name = "ladder"', 'ground = "gnd"', "[parts.V1]",
             'kind = "voltage_source"', 'nodes = ["n0", "gnd"]', 'value = "1V"']  # fmt: skip
    for i in range(sections):
        lines += [
            f"[parts.R{i}]", 'kind = "resistor"', f'nodes = ["n{i}", "m{i}"]', "value = 0.01",
            f"[parts.L{i}]", 'kind = "inductor"', f'nodes = ["m{i}", "n{i + 1}"]', "value = 1e-6",
            f"[parts.C{i}]", 'kind = "capacitor"', f'nodes = ["n{i + 1}", "gnd"]', "value = 1e-6",
        ]  # fmt: skip
    lines += ["[outputs.v_end]", f'voltage = ["n{sections}", "gnd"]']
    return "\n".join(lines) + "\n"
