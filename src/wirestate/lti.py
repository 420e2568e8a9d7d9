"""The named state-space block a circuit compiles to, and its python-control form."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:  # python-control costs about 1.5 s to import: only where it is used
    import control


@dataclass
class CircuitBlock:
    """An explicit LTI block ``dx/dt = A x + B u, y = C x + D u`` with named signals.

    Attributes
    ----------
    name
        Block (circuit) name.
    A, B, C, D
        Dense matrices in SI base units.
    states, inputs, outputs
        Signal names. States are ``v_<capacitor>`` and ``i_<inductor>``; a state that had
        to absorb an input derivative (a capacitor in a loop with a voltage source, an
        inductor in a cutset with a current source) is named ``<name>_shifted`` and
        equals the physical quantity minus ``state_offset @ u``.
    x0
        Initial state from the parts' ``initial`` fields (zero elsewhere).
    state_offset
        ``(n_states, n_inputs)``: physical state = ``x + state_offset @ u``.
    input_defaults
        Default input values (the sources' ``value`` fields), by input name.
    units
        Unit of every state, input and output name (``"V"``, ``"A"``, ``"rad/s"``, ...).
    spec
        The validated circuit model this block was compiled from (``None`` if built by hand).
    notes
        Remarks from the compiler (for example excess elements whose initial value was
        ignored).
    """

    name: str
    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    states: list[str]
    inputs: list[str]
    outputs: list[str]
    x0: np.ndarray = None  # type: ignore[assignment]
    state_offset: np.ndarray = None  # type: ignore[assignment]
    input_defaults: dict[str, float] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)
    spec: Any = None
    notes: list[str] = field(default_factory=list)

    def __post_init__(self) -> None:
        n, m = len(self.states), len(self.inputs)
        self.A = np.asarray(self.A, dtype=float).reshape(n, n)
        self.B = np.asarray(self.B, dtype=float).reshape(n, m)
        self.C = np.asarray(self.C, dtype=float).reshape(len(self.outputs), n)
        self.D = np.asarray(self.D, dtype=float).reshape(len(self.outputs), m)
        self.x0 = np.zeros(n) if self.x0 is None else np.asarray(self.x0, dtype=float)
        if self.state_offset is None:
            self.state_offset = np.zeros((n, m))

    @property
    def n_states(self) -> int:
        return len(self.states)

    def state_space(self) -> control.StateSpace:
        """The block as a named ``control.StateSpace`` (continuous time)."""
        import control

        return control.ss(
            self.A,
            self.B,
            self.C,
            self.D,
            name=self.name,
            inputs=list(self.inputs),
            outputs=list(self.outputs),
            states=list(self.states),
        )

    def poles(self) -> np.ndarray:
        """Eigenvalues of ``A`` (rad/s), sorted by imaginary part then real part."""
        if self.n_states == 0:
            return np.zeros(0, dtype=complex)
        p = np.linalg.eigvals(self.A)
        return p[np.lexsort((p.real, p.imag))]

    def dc_gain(self) -> np.ndarray:
        """``D - C A^-1 B``; entries are ``inf`` / ``nan`` where a pole sits at s = 0."""
        if self.n_states == 0:
            return self.D.copy()
        try:
            return self.D - self.C @ np.linalg.solve(self.A, self.B)
        except np.linalg.LinAlgError:
            import control

            with np.errstate(all="ignore"):
                return np.asarray(
                    control.ss(self.A, self.B, self.C, self.D).dcgain(), dtype=float
                ).reshape(self.D.shape)

    def physical_state(self, x: np.ndarray, u: np.ndarray) -> np.ndarray:
        """Capacitor voltages and inductor currents from the block state and inputs."""
        return np.asarray(x) + self.state_offset @ np.asarray(u)


def modes(poles: np.ndarray) -> list[dict[str, float]]:
    """Natural frequency (rad/s) and damping ratio of each pole.

    For ``p = sigma + j omega``: ``omega_n = |p|``, ``zeta = -sigma / |p|`` (standard
    second-order definitions, e.g. Ogata, Modern Control Engineering, 5th ed., sec. 5-3).
    A pole at the origin has ``omega_n = 0`` and ``zeta = nan``.
    """
    rows = []
    for p in poles:
        wn = abs(p)
        zeta = float(-p.real / wn) if wn > 0 else float("nan")
        rows.append({"real": float(p.real), "imag": float(p.imag), "wn": wn, "zeta": zeta})
    return rows
