"""An RC case whose limit holds exactly when R*C <= tau_max, and a real Dask cluster."""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import pytest

#: v_out(t) = 1 - exp(-t / RC) after a 1 V step from rest; the limit v_out(1 ms) >= 0.6 V
#: (a minimum over [1 ms, 2 ms] of a rising response) holds exactly when
#: R C <= 1 ms / ln(1 / (1 - 0.6)) (first-order step response, e.g. Nilsson and Riedel,
#: Electric Circuits, ch. 7)
T1, V_MIN = 1e-3, 0.6
TAU_MAX = T1 / math.log(1.0 / (1.0 - V_MIN))
R0, C0, TOL_R, TOL_C = 1e3, 1e-6, 0.2, 0.2

RC_CIRCUIT = """
    [circuit]
    name = "rc_spread"
    [parts.Vs]
    kind = "voltage_source"
    nodes = ["in", "gnd"]
    value = "1V"
    [parts.R1]
    kind = "resistor"
    nodes = ["in", "out"]
    value = "1kohm"
    tolerance = "20%"
    [parts.C1]
    kind = "capacitor"
    nodes = ["out", "gnd"]
    value = "1uF"
    tolerance = "20%"
    [outputs.v_out]
    voltage = "out"
"""

RC_TUNING = """
    [tuning]
    name = "rc_time_constant"
    circuit = "rc.toml"
    [variables.C1]
    min = "0.1uF"
    max = "10uF"
    [scenario]
    until = "2ms"
    step = "10us"
    initial = "zero"
    [[limits]]
    name = "fast_rise"
    kind = "minimum"
    output = "v_out"
    window = ["1ms", "2ms"]
    min = "0.6V"
    [objective]
    capacitance = 1.0
    parts = ["C1"]
"""


@pytest.fixture
def rc_spread(tmp_path: Path) -> Path:
    """The RC tuning file (R1 and C1 +-20 %)."""
    (tmp_path / "rc.toml").write_text(textwrap.dedent(RC_CIRCUIT), encoding="utf-8")
    path = tmp_path / "rc_tune.toml"
    path.write_text(textwrap.dedent(RC_TUNING), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def dask_cluster():
    """A real dask.distributed LocalCluster with two worker processes (no mocks)."""
    import logging

    from dask.distributed import LocalCluster

    with LocalCluster(
        n_workers=2,
        threads_per_worker=1,
        processes=True,
        dashboard_address=None,
        silence_logs=logging.ERROR,
    ) as cluster:
        yield cluster
