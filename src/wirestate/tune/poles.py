"""The damping-ratio limit of a sampled loop, on its discrete poles themselves.

A pole ``z`` of the loop over one period ``T`` stands for ``s = ln(z) / T`` (principal
logarithm), and its damping ratio is ``zeta = -Re(s) / |s|``; the region ``zeta >=
zeta_min`` is a logarithmic spiral in the z-plane, which no polynomial test describes
exactly. So the optimiser imposes, per eigenvalue of ``Phi``, the shortfall
``zeta_min - zeta_i <= 0`` -- the verification's own definition -- through a CasADi
callback that takes the eigenvalues numerically and differentiates them exactly: for a
simple eigenvalue ``z`` with right and left eigenvectors ``v``, ``u``,
``dz = u^H dPhi v / (u^H v)`` (first-order eigenvalue perturbation, e.g. Golub and Van
Loan, Matrix Computations, 4th ed., sec. 7.2.2). The rows are sorted, largest shortfall
first, so each row keeps its meaning (the k-th least damped pole) as the poles move.
A pole at ``z = 0`` (a one-sample delay) is infinitely fast and real: its shortfall is
``zeta_min - 1``.
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any

import numpy as np

#: poles this close to ``z = 0`` count as infinitely fast (damping ratio 1)
_ZERO = 1e-300


def shortfall(Phi: np.ndarray, period: float, zeta_min: float) -> tuple[np.ndarray, np.ndarray]:
    """Per pole, sorted largest first: ``zeta_min - zeta`` and its derivative with
    respect to ``Phi`` (rows x ``n*n``, ``Phi`` flattened column by column)."""
    n = Phi.shape[0]
    z, right = np.linalg.eig(Phi)
    left = np.linalg.inv(right).conj().T  # columns: left eigenvectors, u_i^H v_i = 1
    values = np.empty(n)
    rows = np.zeros((n, n * n))
    for i in range(n):
        if abs(z[i]) < _ZERO:
            values[i] = zeta_min - 1.0
            continue
        s = np.log(complex(z[i])) / period
        size = abs(s)
        values[i] = zeta_min + s.real / size
        # d(Re s / |s|) = Re(w ds), w = 1/|s| - Re(s) conj(s) / |s|^3; ds = dz / (z T)
        w = 1.0 / size - s.real * np.conj(s) / size**3
        scale = w / (z[i] * period)
        # dz = sum_ab conj(u_a) v_b dPhi_ab; entry (a, b) sits at a + n b column-major
        rows[i] = np.real(scale * np.outer(np.conj(left[:, i]), right[:, i])).ravel(order="F")
    order = np.argsort(-values, kind="stable")
    return values[order], rows[order]


def damping_rows(Phi: Any, period: float, zeta_min: float) -> Any:
    """The shortfall rows of a CasADi matrix ``Phi`` (one row per pole, ``<= 0`` where the
    limit holds)."""
    return _callback(Phi.shape[0], float(period), float(zeta_min))(Phi)


@lru_cache(maxsize=64)
def _callback(n: int, period: float, zeta_min: float) -> Any:
    # one callback per size and limit, kept for the life of the process: CasADi needs the
    # Python object alive for as long as any expression calls it
    return _Shortfall(f"damping_shortfall_{_callback.cache_info().currsize}", n, period, zeta_min)


def _callback_base():
    import casadi

    return casadi.Callback


class _Shortfall(_callback_base()):  # type: ignore[misc]
    """``Phi -> zeta_min - zeta`` of every pole, with an exact Jacobian."""

    def __init__(self, name: str, n: int, period: float, zeta_min: float) -> None:
        import casadi

        casadi.Callback.__init__(self)
        self.n, self.period, self.zeta_min = n, float(period), float(zeta_min)
        self._jacobian = None
        self.construct(name, {})

    def get_n_in(self) -> int:
        return 1

    def get_n_out(self) -> int:
        return 1

    def get_sparsity_in(self, i: int) -> Any:
        import casadi

        return casadi.Sparsity.dense(self.n, self.n)

    def get_sparsity_out(self, i: int) -> Any:
        import casadi

        return casadi.Sparsity.dense(self.n, 1)

    def eval(self, arg: list) -> list:
        values, _ = shortfall(np.array(arg[0], dtype=float), self.period, self.zeta_min)
        return [values]

    def has_jacobian(self) -> bool:
        return True

    def get_jacobian(self, name: str, inames: list, onames: list, opts: dict) -> Any:
        self._jacobian = _ShortfallJacobian(name, self.n, self.period, self.zeta_min, opts)
        return self._jacobian


class _ShortfallJacobian(_callback_base()):  # type: ignore[misc]
    """``(Phi, shortfall) -> d shortfall / d Phi``; second derivatives by finite
    differences (only an exact Hessian asks for them)."""

    def __init__(self, name: str, n: int, period: float, zeta_min: float, opts: dict) -> None:
        import casadi

        casadi.Callback.__init__(self)
        self.n, self.period, self.zeta_min = n, period, zeta_min
        self.construct(name, {**opts, "enable_fd": True})

    def get_n_in(self) -> int:
        return 2

    def get_n_out(self) -> int:
        return 1

    def get_sparsity_in(self, i: int) -> Any:
        import casadi

        return casadi.Sparsity.dense(self.n, self.n) if i == 0 else casadi.Sparsity.dense(self.n, 1)

    def get_sparsity_out(self, i: int) -> Any:
        import casadi

        return casadi.Sparsity.dense(self.n, self.n * self.n)

    def eval(self, arg: list) -> list:
        _, rows = shortfall(np.array(arg[0], dtype=float), self.period, self.zeta_min)
        return [rows]


def pole_damping(z: np.ndarray, period: float) -> np.ndarray:
    """Damping ratio ``-Re(s) / |s|`` of discrete poles ``z`` (``s = ln(z) / T``; a pole at
    ``z = 0`` counts as 1), the verification's definition."""
    z = np.asarray(z, dtype=complex)
    out = np.ones(z.shape)
    live = np.abs(z) >= _ZERO
    s = np.log(z[live]) / period
    size = np.abs(s)
    out[live] = np.where(size > 0, -s.real / np.where(size > 0, size, 1.0), 1.0)
    return out
