"""The inspect figure as finally laid out: mode labels apart, zero responses named."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from wirestate.lti import CircuitBlock
from wirestate.report.inspect_plot import inspect_figure

pytest.importorskip("matplotlib", reason="matplotlib is a test extra; figures need it")


def cable_like_block() -> CircuitBlock:
    """Seven real modes from 8 kHz to 4 MHz and two fast pairs, as a reduced cable ladder
    has, with two outputs whose long names widen the legends beside the Bode axes."""
    real = [8.03e3, 24e3, 44.8e3, 52e3, 215e3, 839e3, 4.17e6]
    n = len(real) + 4
    A = np.zeros((n, n))
    for k, f in enumerate(real):
        A[k, k] = -2 * math.pi * f
    for k, (f, zeta) in enumerate(((23e6, 0.73), (30.5e6, 0.2))):
        wn, i = 2 * math.pi * f, len(real) + 2 * k
        A[i : i + 2, i : i + 2] = [[0.0, 1.0], [-(wn**2), -2 * zeta * wn]]
    return CircuitBlock(
        "cable", A, np.ones((n, 1)), np.ones((2, n)), np.zeros((2, 1)),
        [f"x{k}" for k in range(n)], ["Vdrive"], ["v_far_end_terminal", "i_sending_end"],
        units={"Vdrive": "V", "v_far_end_terminal": "V", "i_sending_end": "A"},
    )  # fmt: skip


def test_mode_labels_stay_apart_once_the_bode_axes_are_added():
    # the labels used to be placed before the Bode axes and their legends existed; the
    # layout then narrowed the mode map and pulled the labels of 8 and 24 kHz together
    fig = inspect_figure(cable_like_block())
    ax = next(a for a in fig.axes if a.get_title() == "modes")
    fig.canvas.draw()  # the final layout, as saving draws it
    renderer = fig.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in ax.texts if "Hz" in t.get_text()]
    assert len(boxes) == 9
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b), "mode labels overlap"


def test_a_response_that_is_zero_everywhere_gets_no_empty_axis():
    # two inputs; the second drives nothing (a zero column of B and D): its curves would be
    # -inf dB on an axis of their own, so they are named in a note instead
    A = np.array([[-100.0]])
    block = CircuitBlock(
        "lag", A, np.array([[100.0, 0.0]]), np.array([[1.0]]), np.zeros((1, 2)), ["x"],
        ["Vs", "Iidle"], ["v"], units={"Vs": "V", "Iidle": "A", "v": "V"},
    )  # fmt: skip
    fig = inspect_figure(block)
    labels = [ax.get_ylabel() for ax in fig.axes]
    assert "|gain| (dB re 1 V/V)" in labels
    assert not any("Ω" in label for label in labels)  # no V/A axis for Iidle -> v
    titles = " ".join(ax.get_title(loc="left") for ax in fig.axes)
    assert "zero at every frequency: Iidle → v" in titles
