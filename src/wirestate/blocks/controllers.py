"""PI / PID controllers (continuous or sampled), state feedback and a sensor filter.

The PID law is the parallel form with the derivative acting on the measurement through a
first-order filter and no derivative kick on reference steps,

``v = kp (r - y) + I + D``,  ``dI/dt = ki (r - y)``,  ``D = -kd s / (1 + s Tf) y``,

(K. J. Astrom and R. M. Murray, Feedback Systems, 2008, sec. 10.5 "Implementation"). The
sampled form uses forward differences for the integral and a backward difference for the
filtered derivative (K. J. Astrom and B. Wittenmark, Computer-Controlled Systems, 3rd ed.,
1997, sec. 8.6):

``I[k+1] = I[k] + ki Ts e[k]``,
``D[k] = Tf/(Tf+Ts) D[k-1] - kd/(Tf+Ts) (y[k] - y[k-1])``.

Output limits with anti-windup:

* ``"back_calculation"`` (default): the integral is driven back by the saturation excess,
  ``dI/dt = ki e + (u - v) / Tt`` (sampled: ``I[k+1] = I[k] + ki Ts e[k] + Ts/Tt (u[k] -
  v[k])``); the tracking time ``Tt`` defaults to ``sqrt(Ti Td)`` for PID and ``Ti`` for PI
  (K. J. Astrom and T. Hagglund, Advanced PID Control, ISA, 2006, sec. 3.5, where
  ``Ti = kp/ki``, ``Td = kd/kp``).
* ``"conditional"``: the integral is frozen while the output is saturated and the error
  would drive it further into saturation (conditional integration, same source).

An optional one-sample computation delay (common practice in digital drives: the command
computed from the samples at ``k`` is applied at ``k + 1``) is available for sampled
controllers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from wirestate.errors import ModelFileError
from wirestate.lti import LinearBlock

if TYPE_CHECKING:  # python-control costs about a second to import: only where it is used
    import control

ANTI_WINDUP_METHODS = ("back_calculation", "conditional", "none")


def _bad(name: str, field_name: str, message: str) -> ModelFileError:
    return ModelFileError("out_of_range", message, location=("blocks", name, field_name))


@dataclass
class PIDController:
    """A PI or PID controller with optional sampling, output limits and anti-windup.

    Parameters
    ----------
    name
        Block name.
    kp, ki, kd
        Proportional (command unit per measurement unit), integral (per s) and derivative
        (times s) gains.
    derivative_filter
        Time constant ``Tf`` (s) of the derivative filter; required when ``kd != 0``.
    sample_time
        ``Ts`` in s for a sampled controller; ``None`` for a continuous one.
    output_limits
        ``(low, high)`` on the command; ``None`` for no limit (either side may be ``None``).
    anti_windup
        ``"back_calculation"``, ``"conditional"`` or ``"none"`` (only used with limits).
    tracking_time
        ``Tt`` (s) for back-calculation; default as in the module docstring.
    delay
        One-sample computation delay (sampled controllers only).
    unit
        Unit of the command output (for results and plots).

    Signals: inputs ``reference`` and ``measurement``, output ``command``.
    """

    name: str
    kp: float
    ki: float = 0.0
    kd: float = 0.0
    derivative_filter: float | None = None
    sample_time: float | None = None
    output_limits: tuple[float | None, float | None] | None = None
    anti_windup: str = "back_calculation"
    tracking_time: float | None = None
    delay: bool = False
    unit: str = ""
    measurement_unit: str = ""
    inputs: list[str] = field(default_factory=lambda: ["reference", "measurement"])
    outputs: list[str] = field(default_factory=lambda: ["command"])

    def __post_init__(self) -> None:
        for label in ("kp", "ki", "kd"):
            value = float(getattr(self, label))
            if not math.isfinite(value):
                raise _bad(self.name, label, f"{label} must be finite, got {value!r}")
            setattr(self, label, value)
        if self.kd != 0.0:
            if self.derivative_filter is None or not self.derivative_filter > 0:
                raise _bad(
                    self.name,
                    "derivative_filter",
                    "a derivative gain needs a positive derivative_filter time constant",
                )
        if self.sample_time is not None and not (
            math.isfinite(self.sample_time) and self.sample_time > 0
        ):
            raise _bad(self.name, "sample_time", f"must be positive, got {self.sample_time!r}")
        if self.delay and self.sample_time is None:
            raise _bad(self.name, "delay", "a computation delay needs a sample_time")
        if self.anti_windup not in ANTI_WINDUP_METHODS:
            raise ModelFileError(
                "invalid_field",
                f"anti_windup must be one of {', '.join(ANTI_WINDUP_METHODS)}, "
                f"got {self.anti_windup!r}",
                location=("blocks", self.name, "anti_windup"),
            )
        if self.output_limits is not None:
            low, high = self.output_limits
            low = -math.inf if low is None else float(low)
            high = math.inf if high is None else float(high)
            if not low < high:
                raise _bad(self.name, "output_limits", f"need low < high, got [{low}, {high}]")
            self.output_limits = (low, high)
        if self.tracking_time is not None and not self.tracking_time > 0:
            raise _bad(self.name, "tracking_time", "must be positive")

    # -- classification used by composition and simulation ---------------------------------
    @property
    def is_sampled(self) -> bool:
        return self.sample_time is not None

    @property
    def is_limited(self) -> bool:
        return self.output_limits is not None and (
            math.isfinite(self.output_limits[0]) or math.isfinite(self.output_limits[1])
        )

    @property
    def limits(self) -> tuple[float, float]:
        """``(low, high)`` command limits; infinite when unlimited."""
        return self.output_limits if self.output_limits is not None else (-math.inf, math.inf)

    @property
    def tracking(self) -> float:
        """Back-calculation tracking time ``Tt`` (s)."""
        if self.tracking_time is not None:
            return float(self.tracking_time)
        if self.ki == 0.0 or self.kp == 0.0:
            return 1.0 if self.sample_time is None else self.sample_time
        Ti = self.kp / self.ki
        if self.kd != 0.0:
            return math.sqrt(Ti * abs(self.kd / self.kp))
        return Ti

    @property
    def units(self) -> dict[str, str]:
        """Unit of every signal and state: the integral, the derivative term and a delayed
        command carry the command's unit; the derivative filter and the last measurement
        the measured signal's."""
        measured = self.measurement_unit
        return {
            "command": self.unit,
            "reference": measured,
            "measurement": measured,
            "integral": self.unit,
            "derivative": self.unit,
            "delayed_command": self.unit,
            "derivative_filter": measured,
            "last_measurement": measured,
        }

    @property
    def states(self) -> list[str]:
        if self.sample_time is None:
            names = ["integral"]
            if self.kd != 0.0:
                names.append("derivative_filter")
            return names
        names = ["integral"]
        if self.kd != 0.0:
            names += ["derivative", "last_measurement"]
        if self.delay:
            names.append("delayed_command")
        return names

    # -- linear matrices (limits ignored) ------------------------------------------------
    def matrices(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """``(A, B, C, D)`` of the unsaturated controller, inputs ``[reference,
        measurement]``, output ``command``: continuous time, or discrete at ``Ts`` with
        ``x[k+1] = A x[k] + B u[k]`` for a sampled controller (see the module docstring
        for the discretisation). The same numbers the simulator uses."""
        kp, ki, kd = self.kp, self.ki, self.kd
        if self.sample_time is None:
            if kd == 0.0:
                return (np.zeros((1, 1)), np.array([[ki, -ki]]), np.ones((1, 1)),
                        np.array([[kp, -kp]]))  # fmt: skip
            Tf = float(self.derivative_filter)
            # states: integral I, filter f = y / (1 + s Tf); D-term = (kd/Tf) (f - y)
            A = np.array([[0.0, 0.0], [0.0, -1.0 / Tf]])
            B = np.array([[ki, -ki], [0.0, 1.0 / Tf]])
            C = np.array([[1.0, kd / Tf]])
            D = np.array([[kp, -kp - kd / Tf]])
            return A, B, C, D
        Ts = float(self.sample_time)
        rows_A: list[list[float]] = []
        rows_B: list[list[float]] = []
        # undelayed command v = Cv x + Dv [r, y]
        if kd == 0.0:
            Cv, Dv = [1.0], [kp, -kp]
            rows_A.append([1.0])
            rows_B.append([ki * Ts, -ki * Ts])
        else:
            Tf = float(self.derivative_filter)
            a, b = Tf / (Tf + Ts), kd / (Tf + Ts)
            # D[k] = a D[k-1] - b (y[k] - y[k-1]); states I, D[k-1], y[k-1]
            Cv, Dv = [1.0, a, b], [kp, -kp - b]
            rows_A += [[1.0, 0.0, 0.0], [0.0, a, b], [0.0, 0.0, 0.0]]
            rows_B += [[ki * Ts, -ki * Ts], [0.0, -b], [0.0, 1.0]]
        A = np.array(rows_A)
        B = np.array(rows_B)
        C = np.array([Cv])
        D = np.array([Dv])
        if self.delay:
            n = A.shape[0]
            A = np.block([[A, np.zeros((n, 1))], [C, np.zeros((1, 1))]])
            B = np.vstack([B, D])
            C = np.hstack([np.zeros((1, n)), np.ones((1, 1))])
            D = np.zeros((1, 2))
        return A, B, C, D

    def state_space(self) -> control.StateSpace:
        """The unsaturated controller as a named ``control.StateSpace`` (``dt = Ts`` when
        sampled)."""
        import control

        A, B, C, D = self.matrices()
        sys = control.ss(
            A, B, C, D, self.sample_time or 0,
            name=self.name, inputs=list(self.inputs), outputs=list(self.outputs),
            states=self.states,
        )  # fmt: skip
        sys.units = self.units
        return sys

    @property
    def has_feedthrough(self) -> bool:
        """True when the command depends directly on the present inputs."""
        return bool(np.any(self.matrices()[3] != 0.0))

    def initial_state(self) -> np.ndarray:
        return np.zeros(len(self.states))

    # -- sampled update with limits --------------------------------------------------------
    def sample(
        self, x: np.ndarray, reference: float, measurement: float
    ) -> tuple[float, np.ndarray]:
        """One sample of the sampled controller: the command to hold until the next sample
        and the next controller state. Limits and anti-windup as in the module docstring."""
        kp, ki, kd = self.kp, self.ki, self.kd
        Ts = float(self.sample_time)  # type: ignore[arg-type]
        low, high = self.limits
        e = reference - measurement
        integral = x[0]
        nxt = np.empty_like(x)
        v = kp * e + integral
        i = 1
        if kd != 0.0:
            Tf = float(self.derivative_filter)
            a, b = Tf / (Tf + Ts), kd / (Tf + Ts)
            d = a * x[1] - b * (measurement - x[2])
            v += d
            nxt[1] = d
            nxt[2] = measurement
            i = 3
        u = min(max(v, low), high)
        increment = ki * Ts * e
        if self.is_limited:
            if self.anti_windup == "back_calculation":
                increment += Ts / self.tracking * (u - v)
            elif self.anti_windup == "conditional" and u != v and (v - u) * e > 0:
                increment = 0.0
        nxt[0] = integral + increment
        if self.delay:
            nxt[i] = u
            return float(x[i]), nxt
        return float(u), nxt

    # -- continuous nonlinear right-hand side (CasADi) --------------------------------------
    def casadi_dynamics(self, x, u):
        """``(dx/dt, y)`` of the continuous controller with limits, as CasADi expressions
        of the state ``x`` and inputs ``u = [reference, measurement]``."""
        import casadi as ca

        kp, ki, kd = self.kp, self.ki, self.kd
        r, y = u[0], u[1]
        e = r - y
        v = kp * e + x[0]
        derivs = []
        if kd != 0.0:
            Tf = float(self.derivative_filter)
            v = v + kd / Tf * (x[1] - y)
            derivs.append((y - x[1]) / Tf)
        low, high = self.limits
        sat = v
        if math.isfinite(high):
            sat = ca.fmin(sat, high)
        if math.isfinite(low):
            sat = ca.fmax(sat, low)
        di = ki * e
        if self.is_limited:
            if self.anti_windup == "back_calculation":
                di = di + (sat - v) / self.tracking
            elif self.anti_windup == "conditional":
                di = ca.if_else(ca.logic_and(sat != v, (v - sat) * e > 0), 0.0, di)
        return ca.vertcat(di, *derivs), sat


def pi_controller(name: str, kp: float, ki: float, **options) -> PIDController:
    """A PI controller (a :class:`PIDController` with ``kd = 0``)."""
    return PIDController(name=name, kp=kp, ki=ki, **options)


def state_feedback(
    name: str,
    gain: np.ndarray,
    measured: list[str],
    *,
    reference_gain: float | None = None,
    command: str = "command",
    as_state_space: bool = True,
) -> control.StateSpace | LinearBlock:
    """Static state feedback ``u = -K x`` (plus ``kr r`` when ``reference_gain`` is given).

    Parameters
    ----------
    gain
        ``K``, shape ``(1, len(measured))`` or ``(len(measured),)``.
    measured
        Input names of the measured states, in the order of ``K``'s columns.
    reference_gain
        Optional feedforward gain ``kr`` on an extra input ``reference``.
    as_state_space
        False: the same block as a :class:`~wirestate.lti.LinearBlock` (its named
        matrices, python-control not imported), as a system file builds it.

    Returns
    -------
    control.StateSpace or LinearBlock
        Static gain, output ``command``.
    """
    K = np.atleast_2d(np.asarray(gain, dtype=float))
    if K.shape[1] != len(measured) or not np.all(np.isfinite(K)):
        raise ModelFileError(
            "invalid_field",
            f"gain has {K.shape[1]} columns but {len(measured)} measured signals are named",
            location=("blocks", name, "gain"),
        )
    inputs = list(measured)
    D = -K
    if reference_gain is not None:
        inputs.append("reference")
        D = np.hstack([D, [[float(reference_gain)]] * K.shape[0]])
    outputs = [command] if K.shape[0] == 1 else [f"{command}{i}" for i in range(K.shape[0])]
    block = LinearBlock(
        name, np.zeros((0, 0)), np.zeros((0, len(inputs))), np.zeros((len(outputs), 0)), D,
        inputs, outputs, [],
    )  # fmt: skip
    return block.state_space() if as_state_space else block


def sensor_filter(
    name: str,
    time_constant: float,
    gain: float = 1.0,
    unit: str = "",
    *,
    as_state_space: bool = True,
) -> control.StateSpace | LinearBlock:
    """First-order measurement filter ``measured = gain / (1 + s tau) * signal``.

    Input ``signal``, output and state ``measured`` (units of ``unit``); with
    ``as_state_space=False`` a :class:`~wirestate.lti.LinearBlock` (as in
    :func:`state_feedback`).
    """
    tau = float(time_constant)
    if not (math.isfinite(tau) and tau > 0):
        raise _bad(name, "time_constant", f"must be positive, got {time_constant!r}")
    block = LinearBlock(
        name, [[-1.0 / tau]], [[float(gain) / tau]], [[1.0]], [[0.0]], ["signal"], ["measured"],
        ["measured"], {"signal": unit, "measured": unit},
    )  # fmt: skip
    return block.state_space() if as_state_space else block


def static_gain(
    name: str, gain: float, unit: str = "", *, as_state_space: bool = True
) -> control.StateSpace | LinearBlock:
    """A static gain ``output = gain * input`` (no states), e.g. a fixed duty ratio or a
    sensor scale. Input ``input``, output ``output``; with ``as_state_space=False`` a
    :class:`~wirestate.lti.LinearBlock` (as in :func:`state_feedback`)."""
    k = float(gain)
    if not math.isfinite(k):
        raise _bad(name, "gain", f"must be finite, got {gain!r}")
    block = LinearBlock(
        name, np.zeros((0, 0)), np.zeros((0, 1)), np.zeros((1, 0)), [[k]], ["input"],
        ["output"], [], {"output": unit},
    )  # fmt: skip
    return block.state_space() if as_state_space else block
