"""Mechanical, controller and sensor blocks with named signals (SI units).

Linear continuous blocks are named-signal ``control.StateSpace`` systems; PI/PID controllers
are :class:`PIDController` objects (sampled and/or limited ones are simulated by
:mod:`wirestate.simulate`; their unsaturated matrices come from
:meth:`PIDController.matrices` / :meth:`PIDController.state_space`); user nonlinear
blocks are :class:`NonlinearBlock` objects; a pulse-width :class:`Modulator` turns a duty
cycle into switch gates.
"""

from wirestate.blocks.controllers import (
    ANTI_WINDUP_METHODS,
    PIDController,
    pi_controller,
    sensor_filter,
    state_feedback,
    static_gain,
)
from wirestate.blocks.mechanical import gear, mass_spring_damper, rotary_inertia, torsional_shaft
from wirestate.blocks.modulator import Modulator
from wirestate.blocks.nonlinear import NonlinearBlock

__all__ = [
    "ANTI_WINDUP_METHODS",
    "Modulator",
    "NonlinearBlock",
    "PIDController",
    "gear",
    "mass_spring_damper",
    "pi_controller",
    "rotary_inertia",
    "sensor_filter",
    "state_feedback",
    "static_gain",
    "torsional_shaft",
]
