"""Helpers for the tuning tests: small circuit and tuning files written to a temp dir."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest


@pytest.fixture
def write(tmp_path: Path):
    """``write(name, text)`` writes a dedented file into the test's temp dir."""

    def _write(name: str, text: str) -> Path:
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return _write


RC_CIRCUIT = """
    [circuit]
    name = "rc"
    [parts.Vs]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "1V"
    [parts.R1]
    kind = "resistor"
    nodes = ["in", "out"]
    value = "1kohm"
    tolerance = "5%"
    [parts.C1]
    kind = "capacitor"
    nodes = ["out", "gnd"]
    value = "1uF"
    tolerance = "10%"
    [outputs.v_out]
    voltage = "out"
"""

RLC = """
    [circuit]
    name = "series_rlc"
    [parts.Vs]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "1V"
    [parts.R1]
    kind = "resistor"
    nodes = ["in", "a"]
    value = "10ohm"
    [parts.L1]
    kind = "inductor"
    nodes = ["a", "out"]
    value = "1mH"
    [parts.C1]
    kind = "capacitor"
    nodes = ["out", "gnd"]
    value = "10uF"
    [outputs.v_out]
    voltage = "out"
"""

RC_TUNING = """
    [tuning]
    name = "rc_rise"
    circuit = "rc.toml"
    [variables.C1]
    min = "0.1uF"
    max = "{c_max}"
    [scenario]
    until = "2ms"
    step = "10us"
    initial = "zero"
    [[limits]]
    name = "slow_rise"
    kind = "maximum"
    output = "v_out"
    window = ["0s", "1ms"]
    max = "0.5V"
    [objective]
    capacitance = 1.0
    parts = ["C1"]
"""


@pytest.fixture
def rc_case(write):
    """An RC charging case with a closed-form answer; ``rc_case(c_max)`` -> tuning path."""

    def _case(c_max: str = "10uF") -> Path:
        write("rc.toml", RC_CIRCUIT)
        return write("rc_tune.toml", RC_TUNING.format(c_max=c_max))

    return _case
