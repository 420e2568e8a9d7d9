"""The figure's data: the response envelope over the tolerance corners at the preferred
values (``responses["corner_low"]`` and ``["corner_high"]``).

Reference: the RC step response v(t) = 1 - exp(-t / (R C)) (Nilsson and Riedel, Electric
Circuits, sec. 7.4) rises fastest with R and C both low and slowest with both high, so the
envelope over the four corners of R1 (5 %) and C1 (10 %) is that closed form at those two
corners; 1e-9 absolute: exact zero-order hold at the samples.
"""

from __future__ import annotations

import numpy as np

from tests.tune.conftest import RC_CIRCUIT
from wirestate.tune import load_tuning, solve


def test_the_envelope_over_the_corners_matches_the_closed_form(rc_case):
    result = solve(load_tuning(rc_case()))
    responses = result.responses
    c = result.variables["C1"]["preferred"]
    t = responses["times"]
    i = responses["index"]["v_out"]
    assert responses["corner_low"].shape == responses["preferred"].shape
    assert responses["corner_high"].shape == responses["preferred"].shape
    slow = 1.0 - np.exp(-t / (1050.0 * 1.1 * c))
    fast = 1.0 - np.exp(-t / (950.0 * 0.9 * c))
    np.testing.assert_allclose(responses["corner_low"][i], slow, atol=1e-9)
    np.testing.assert_allclose(responses["corner_high"][i], fast, atol=1e-9)


def test_no_envelope_without_toleranced_parts(write):
    write("rc.toml", "\n".join(l for l in RC_CIRCUIT.splitlines() if "tolerance" not in l))
    from tests.tune.conftest import RC_TUNING

    result = solve(load_tuning(write("rc_tune.toml", RC_TUNING.format(c_max="10uF"))))
    assert "corner_low" not in result.responses and "corner_high" not in result.responses
