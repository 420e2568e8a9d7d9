"""Mechanical blocks as named-signal ``control.StateSpace`` systems (SI units).

Sign conventions: a positive drive torque (force) accelerates in the positive direction,
a positive load torque (force) opposes it. The equations are Newton's second law for a
rigid body with linear viscous friction (e.g. Ogata, Modern Control Engineering, 5th ed.,
sec. 3-3 and 3-4). Every returned system carries a ``units`` attribute mapping its signal
and state names to units; composition reads it. ``as_state_space=False`` gives the same
block as a :class:`~wirestate.lti.LinearBlock` (its named matrices, python-control not
imported), the form in which a system file's blocks are built.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from wirestate.errors import ModelFileError
from wirestate.lti import LinearBlock

if TYPE_CHECKING:  # python-control costs about a second to import: only where it is used
    import control


def _positive(name: str, field: str, value: float, *, allow_zero: bool = False) -> float:
    value = float(value)
    ok = value >= 0 if allow_zero else value > 0
    if not (np.isfinite(value) and ok):
        bound = ">= 0" if allow_zero else "> 0"
        raise ModelFileError(
            "out_of_range",
            f"{field} must be {bound}, got {value!r}",
            location=("blocks", name, field),
        )
    return value


def _system(
    name, A, B, C, D, inputs, outputs, states, units, as_state_space
) -> control.StateSpace | LinearBlock:
    block = LinearBlock(name, A, B, C, D, list(inputs), list(outputs), list(states), units)
    return block.state_space() if as_state_space else block


def rotary_inertia(
    name: str, inertia: float, friction: float = 0.0, *, as_state_space: bool = True
) -> control.StateSpace | LinearBlock:
    """Rigid rotor ``J dw/dt = torque - load_torque - b w``, with its angle.

    Parameters
    ----------
    name
        Block name.
    inertia
        ``J`` in kg*m^2 (> 0).
    friction
        Viscous friction ``b`` in N*m*s/rad (>= 0).
    as_state_space
        False: a :class:`~wirestate.lti.LinearBlock` instead (see the module docstring).

    Returns
    -------
    control.StateSpace or LinearBlock
        Inputs ``torque``, ``load_torque`` (N*m); outputs ``speed`` (rad/s), ``angle``
        (rad); states ``speed``, ``angle``.
    """
    J = _positive(name, "inertia", inertia)
    b = _positive(name, "friction", friction, allow_zero=True)
    A = [[-b / J, 0.0], [1.0, 0.0]]
    B = [[1.0 / J, -1.0 / J], [0.0, 0.0]]
    units = {"torque": "N*m", "load_torque": "N*m", "speed": "rad/s", "angle": "rad"}
    return _system(
        name, A, B, np.eye(2), np.zeros((2, 2)),
        ["torque", "load_torque"], ["speed", "angle"], ["speed", "angle"], units, as_state_space,
    )  # fmt: skip


def gear(
    name: str, ratio: float, *, as_state_space: bool = True
) -> control.StateSpace | LinearBlock:
    """Ideal lossless gear with ratio ``n = motor speed / load speed``.

    Inputs ``motor_speed`` (rad/s) and ``load_torque`` (N*m, on the load side); outputs
    ``load_speed = motor_speed / n`` and ``motor_torque = load_torque / n`` (the load torque
    reflected to the motor side, power balance ``T_m w_m = T_l w_l``). No states.
    """
    n = _positive(name, "ratio", ratio)
    units = {
        "motor_speed": "rad/s",
        "load_torque": "N*m",
        "load_speed": "rad/s",
        "motor_torque": "N*m",
    }
    return _system(
        name, np.zeros((0, 0)), np.zeros((0, 2)), np.zeros((2, 0)),
        [[1.0 / n, 0.0], [0.0, 1.0 / n]],
        ["motor_speed", "load_torque"], ["load_speed", "motor_torque"], [], units, as_state_space,
    )  # fmt: skip


def torsional_shaft(
    name: str,
    inertia_drive: float,
    inertia_load: float,
    stiffness: float,
    damping: float = 0.0,
    friction_drive: float = 0.0,
    friction_load: float = 0.0,
    *,
    as_state_space: bool = True,
) -> control.StateSpace | LinearBlock:
    """Two inertias joined by a torsional spring and damper (two-mass drive train).

    ``J1 dw1/dt = torque - T_s - b1 w1``, ``J2 dw2/dt = T_s - load_torque - b2 w2``,
    ``T_s = k theta + c (w1 - w2)``, ``dtheta/dt = w1 - w2`` (the standard two-mass model,
    e.g. Ellis, Control System Design Guide, 4th ed., 2012, ch. 16).

    Parameters
    ----------
    inertia_drive, inertia_load
        ``J1``, ``J2`` in kg*m^2.
    stiffness
        ``k`` in N*m/rad.
    damping
        Shaft damping ``c`` in N*m*s/rad.
    friction_drive, friction_load
        Viscous friction on each side, N*m*s/rad.
    as_state_space
        False: a :class:`~wirestate.lti.LinearBlock` instead (see the module docstring).

    Returns
    -------
    control.StateSpace or LinearBlock
        Inputs ``torque``, ``load_torque``; outputs ``drive_speed``, ``load_speed``,
        ``shaft_torque``; states ``drive_speed``, ``load_speed``, ``twist`` (rad).
    """
    J1 = _positive(name, "inertia_drive", inertia_drive)
    J2 = _positive(name, "inertia_load", inertia_load)
    k = _positive(name, "stiffness", stiffness)
    c = _positive(name, "damping", damping, allow_zero=True)
    b1 = _positive(name, "friction_drive", friction_drive, allow_zero=True)
    b2 = _positive(name, "friction_load", friction_load, allow_zero=True)
    A = [
        [-(b1 + c) / J1, c / J1, -k / J1],
        [c / J2, -(b2 + c) / J2, k / J2],
        [1.0, -1.0, 0.0],
    ]
    B = [[1.0 / J1, 0.0], [0.0, -1.0 / J2], [0.0, 0.0]]
    C = [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [c, -c, k]]
    units = {
        "torque": "N*m",
        "load_torque": "N*m",
        "drive_speed": "rad/s",
        "load_speed": "rad/s",
        "shaft_torque": "N*m",
        "twist": "rad",
    }
    return _system(
        name, A, B, C, np.zeros((3, 2)),
        ["torque", "load_torque"], ["drive_speed", "load_speed", "shaft_torque"],
        ["drive_speed", "load_speed", "twist"], units, as_state_space,
    )  # fmt: skip


def mass_spring_damper(
    name: str,
    mass: float,
    stiffness: float = 0.0,
    damping: float = 0.0,
    *,
    as_state_space: bool = True,
) -> control.StateSpace | LinearBlock:
    """Translational ``m dv/dt = force - c v - k x``, ``dx/dt = v``.

    Parameters
    ----------
    mass
        ``m`` in kg.
    stiffness
        ``k`` in N/m (0: a free mass).
    damping
        ``c`` in N*s/m.
    as_state_space
        False: a :class:`~wirestate.lti.LinearBlock` instead (see the module docstring).

    Returns
    -------
    control.StateSpace or LinearBlock
        Input ``force`` (N); outputs and states ``position`` (m), ``velocity`` (m/s).
    """
    m = _positive(name, "mass", mass)
    k = _positive(name, "stiffness", stiffness, allow_zero=True)
    c = _positive(name, "damping", damping, allow_zero=True)
    A = [[0.0, 1.0], [-k / m, -c / m]]
    B = [[0.0], [1.0 / m]]
    units = {"force": "N", "position": "m", "velocity": "m/s"}
    return _system(
        name, A, B, np.eye(2), np.zeros((2, 1)),
        ["force"], ["position", "velocity"], ["position", "velocity"], units, as_state_space,
    )  # fmt: skip
