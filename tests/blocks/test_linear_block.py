"""A block built as named matrices (``as_state_space=False``) is the same block as its
``control.StateSpace``: the same numbers, signal names, units and time base."""

from __future__ import annotations

import numpy as np
import pytest

from wirestate.blocks import (
    gear,
    mass_spring_damper,
    rotary_inertia,
    sensor_filter,
    state_feedback,
    static_gain,
    torsional_shaft,
)
from wirestate.compose import compose, view
from wirestate.lti import LinearBlock

BUILDERS = {
    "rotary_inertia": lambda **o: rotary_inertia("m", 0.02, 1e-3, **o),
    "gear": lambda **o: gear("g", 5.0, **o),
    "torsional_shaft": lambda **o: torsional_shaft("s", 0.01, 0.05, 300.0, 0.2, 1e-3, 2e-3, **o),
    "mass_spring_damper": lambda **o: mass_spring_damper("x", 2.0, 50.0, 3.0, **o),
    "state_feedback": lambda **o: state_feedback(
        "k", np.array([[1.5, -0.5]]), ["a", "b"], reference_gain=2.0, **o
    ),
    "sensor_filter": lambda **o: sensor_filter("f", 5e-6, 2.0, "A", **o),
    "static_gain": lambda **o: static_gain("d", 0.8, "V", **o),
}


@pytest.mark.parametrize("kind", sorted(BUILDERS))
def test_matrices_form_equals_the_state_space(kind):
    block = BUILDERS[kind](as_state_space=False)
    system = BUILDERS[kind]()
    assert isinstance(block, LinearBlock)
    rebuilt = block.state_space()
    for sys in (system, rebuilt):
        assert list(sys.input_labels) == block.inputs
        assert list(sys.output_labels) == block.outputs
        assert sys.nstates == len(block.states)
        assert sys.dt == 0  # continuous time, also for a static gain
        assert sys.units == block.units
    # the view reads the matrices without python-control; they equal the StateSpace's
    # bit for bit (the same numbers, only reshaped)
    for ours, theirs in zip(view(block).matrices(), view(system).matrices(), strict=True):
        assert ours.shape == theirs.shape
        assert np.array_equal(ours, theirs)


def test_a_linear_block_composes_like_its_state_space():
    # a sensor filter on a static gain, wired by name: the composed matrices are the same
    # whichever form the blocks are given in
    def system(**options):
        return compose(
            [static_gain("d", 0.8, **options), sensor_filter("f", 1e-3, 2.0, **options)],
            {"f.signal": "d.output"},
            {"u": "d.input"},
            {"y": "f.measured"},
        ).state_space()

    ours, theirs = system(as_state_space=False), system()
    for name in ("A", "B", "C", "D"):
        a, b = getattr(ours, name), getattr(theirs, name)
        assert np.array_equal(np.asarray(a), np.asarray(b))
    assert ours.nstates == 1 and np.asarray(ours.D).shape == (1, 1)
