"""Shared fixtures: building circuits from small mappings."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg

from wirestate.reduce import compile_circuit
from wirestate.spec import parse_circuit

ROOT = Path(__file__).resolve().parents[1]
MODELS = ROOT / "models"
SHARED = ROOT.parent / "shared"


def circuit(parts: dict, outputs: dict | None = None, name: str = "dut", **header):
    """Compile a circuit given as the mapping a TOML file would hold."""
    data = {"circuit": {"name": name, **header}, "parts": parts, "outputs": outputs or {}}
    return compile_circuit(parse_circuit(data))


def step_response(block, times: np.ndarray, input_index: int = 0, amplitude: float = 1.0):
    """Exact step response from rest at ``times`` via the matrix exponential of
    ``[[A, B], [0, 0]]`` (Van Loan, IEEE TAC 1978); scipy's expm is the reference."""
    n, m = block.B.shape
    aug = np.zeros((n + 1, n + 1))
    aug[:n, :n] = block.A
    aug[:n, n] = block.B[:, input_index] * amplitude
    out = []
    for t in times:
        x = scipy.linalg.expm(aug * t)[:n, n]
        out.append(block.C @ x + block.D[:, input_index] * amplitude)
    return np.array(out).T


def frequency_response(block, omega: float) -> np.ndarray:
    """``C (jw I - A)^-1 B + D``."""
    n = block.A.shape[0]
    return block.C @ np.linalg.solve(1j * omega * np.eye(n) - block.A, block.B) + block.D


@pytest.fixture
def shared_reference() -> Path:
    path = SHARED / "reference"
    if not path.is_dir():
        pytest.skip(
            f"../shared/reference not found beside the checkout ({path}); "
            "it is only present on the project's own machines"
        )
    return path
