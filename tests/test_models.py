"""Every bundled circuit model loads, compiles and behaves like a passive network."""

from __future__ import annotations

import tomllib

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.reduce import load_block

CIRCUIT_FILES = sorted(
    p for p in MODELS.rglob("*.toml") if "circuit" in tomllib.loads(p.read_text("utf-8"))
)


def test_models_are_bundled():
    assert len(CIRCUIT_FILES) >= 4


@pytest.mark.parametrize("path", CIRCUIT_FILES, ids=lambda p: str(p.relative_to(MODELS)))
def test_model_compiles(path):
    block = load_block(path)
    assert block.n_states > 0
    ss = block.state_space()
    assert ss.nstates == block.n_states and ss.name == block.name
    # passive R, L, C networks with ideal sources (and no negative-resistance part) are
    # stable in the wide sense: no pole in the right half-plane
    kinds = {part.kind for part in block.spec.parts.values()}
    if not kinds & {"vcvs", "vccs", "ccvs", "cccs"}:
        assert np.all(block.poles().real <= 1e-9 * np.abs(block.poles()).max())


def test_bus_filter_matches_hand_values():
    # the undamped LC corner of the bus filter, 1/(2 pi sqrt(L C)), is 2.29 kHz; with the
    # damping leg the resonant pair must be better damped than 0.3 (Erickson-style leg,
    # n = Cd/C ~ 3) - a design check on the bundled example, closed form for the corner.
    block = load_block(MODELS / "drive_bus_filter.toml")
    f0 = 1 / (2 * np.pi * np.sqrt(22e-6 * 220e-6))
    assert f0 == pytest.approx(2288.0, rel=1e-3)
    pair = [p for p in block.poles() if p.imag > 0][0]
    assert -pair.real / abs(pair) > 0.3
    gain = block.dc_gain()
    assert gain[block.outputs.index("v_bus"), block.inputs.index("Vbat")] == pytest.approx(1.0)
    # DC drop across the cable for 1 A of inverter current: -Rcable (Ohm's law)
    assert gain[block.outputs.index("v_bus"), block.inputs.index("Iinv")] == pytest.approx(
        -12e-3, rel=1e-9
    )
