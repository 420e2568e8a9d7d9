"""Exact discretisation of ``dx/dt = A x + B u`` for a held input.

Zero-order hold (input constant over the step) and first-order hold (input linear between
samples) are both read off one matrix exponential of an augmented, block upper-triangular
matrix (C. F. Van Loan, "Computing integrals involving the matrix exponential", IEEE Trans.
Automatic Control 23(3), 1978, pp. 395-404). The exponential itself is scipy's
scaling-and-squaring Padé algorithm (Al-Mohy and Higham, SIAM J. Matrix Anal. Appl. 31(3),
2009), which stays accurate when ``||A dt||`` is large, so a stiff block stepped at a coarse
``dt`` is still exact for a held input.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from scipy.linalg import expm

from wirestate.errors import SimulationError


class ZeroOrderHold(NamedTuple):
    """``x[k+1] = Ad x[k] + Bd u[k]`` for ``u`` held constant over the step."""

    Ad: np.ndarray
    Bd: np.ndarray


class FirstOrderHold(NamedTuple):
    """``x[k+1] = Ad x[k] + B0 u[k] + B1 u[k+1]`` for ``u`` linear between the samples."""

    Ad: np.ndarray
    B0: np.ndarray
    B1: np.ndarray


def _check(A: np.ndarray, B: np.ndarray, dt: float) -> tuple[np.ndarray, np.ndarray, float]:
    A = np.atleast_2d(np.asarray(A, dtype=float))
    n = A.shape[0]
    if A.shape != (n, n):
        raise SimulationError("state_size_mismatch", f"A must be square, got shape {A.shape}")
    B = np.asarray(B, dtype=float)
    if n:
        B = B.reshape(n, -1)
    else:  # a block without states (a resistive divider) keeps its input count
        B = B.reshape(0, B.shape[1] if B.ndim == 2 else 0)
    dt = float(dt)
    if not (math.isfinite(dt) and dt > 0):
        raise SimulationError("invalid_step", f"the step must be a positive time, got {dt!r} s")
    return A, B, dt


def zoh(A: np.ndarray, B: np.ndarray, dt: float) -> ZeroOrderHold:
    """Exact zero-order-hold discretisation.

    Parameters
    ----------
    A, B
        Continuous-time matrices, ``(n, n)`` and ``(n, m)``, SI units (1/s).
    dt
        Step in seconds.

    Returns
    -------
    ZeroOrderHold
        ``Ad = exp(A dt)`` and ``Bd = int_0^dt exp(A s) ds B``, both taken from
        ``exp([[A, B], [0, 0]] dt) = [[Ad, Bd], [0, I]]`` (Van Loan 1978, section 2).
        No inverse of ``A`` is needed, so integrators and singular ``A`` are fine.
    """
    A, B, dt = _check(A, B, dt)
    n, m = B.shape
    M = np.zeros((n + m, n + m))
    M[:n, :n] = A * dt
    M[:n, n:] = B * dt
    E = expm(M)
    return ZeroOrderHold(E[:n, :n].copy(), E[:n, n:].copy())


def foh(A: np.ndarray, B: np.ndarray, dt: float) -> FirstOrderHold:
    """Exact first-order-hold (triangle-hold) discretisation.

    The input is taken linear between samples, ``u(t_k + s) = u_k + (u_{k+1} - u_k) s/dt``
    (the non-causal "triangle hold" of Franklin, Powell and Workman, Digital Control of
    Dynamic Systems, 3rd ed., 1998, sec. 6.3.2). With

    ``exp([[A, B, 0], [0, 0, I], [0, 0, 0]] dt) = [[Ad, G1, G2], [0, I, I], [0, 0, I]]``

    (Van Loan 1978), ``G1 = int_0^dt exp(A s) ds B`` and
    ``G2 = (1/dt) int_0^dt exp(A (dt - s)) s ds B``, so
    ``x[k+1] = Ad x[k] + (G1 - G2) u[k] + G2 u[k+1]``.

    Parameters
    ----------
    A, B
        Continuous-time matrices, SI units.
    dt
        Step in seconds.

    Returns
    -------
    FirstOrderHold
        ``Ad``, ``B0 = G1 - G2`` and ``B1 = G2``.
    """
    A, B, dt = _check(A, B, dt)
    n, m = B.shape
    M = np.zeros((n + 2 * m, n + 2 * m))
    M[:n, :n] = A * dt
    M[:n, n : n + m] = B * dt
    M[n : n + m, n + m :] = np.eye(m)
    E = expm(M)
    G1 = E[:n, n : n + m]
    G2 = E[:n, n + m :]
    return FirstOrderHold(E[:n, :n].copy(), G1 - G2, G2.copy())


class Discretization:
    """Cached ZOH / FOH discretisations of one continuous block, keyed by the step size.

    A co-simulation master may change ``dt`` from call to call; each distinct step is
    computed once (the matrix exponential is the only costly part).

    Parameters
    ----------
    A, B
        Continuous-time matrices (SI units).
    max_entries
        Keep at most this many step sizes per hold type; the oldest is dropped first.
    """

    def __init__(self, A: np.ndarray, B: np.ndarray, *, max_entries: int = 64) -> None:
        self.A, self.B, _ = _check(A, B, 1.0)
        self.max_entries = max_entries
        self._zoh: dict[float, ZeroOrderHold] = {}
        self._foh: dict[float, FirstOrderHold] = {}

    def zoh(self, dt: float) -> ZeroOrderHold:
        """Zero-order hold at step ``dt`` (s), see :func:`zoh`."""
        found = self._zoh.get(dt)
        if found is None:
            found = zoh(self.A, self.B, dt)
            self._store(self._zoh, dt, found)
        return found

    def foh(self, dt: float) -> FirstOrderHold:
        """First-order hold at step ``dt`` (s), see :func:`foh`."""
        found = self._foh.get(dt)
        if found is None:
            found = foh(self.A, self.B, dt)
            self._store(self._foh, dt, found)
        return found

    def _store(self, cache: dict, dt: float, value: object) -> None:
        if len(cache) >= self.max_entries:
            cache.pop(next(iter(cache)))
        cache[float(dt)] = value
