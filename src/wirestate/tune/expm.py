"""Matrix exponential and zero-order hold written in CasADi operations (exact derivatives).

``exp(X)`` is computed by scaling and squaring with a truncated Taylor series (Moler and
Van Loan, "Nineteen dubious ways to compute the exponential of a matrix, twenty-five years
later", SIAM Review 45(1), 2003, method 3 with squaring; Higham, SIAM J. Matrix Anal. Appl.
26(4), 2005, for the error analysis of scaling and squaring).

Error bound. With ``Y = X / 2**s`` and ``||Y||_1 <= theta``, the Taylor polynomial of
degree ``K`` leaves a remainder

    ||exp(Y) - T_K(Y)|| <= theta**(K+1) / (K+1)! * (K+2) / (K+2-theta)  =: eps_T

(the tail of the exponential series bounded by a geometric series). Squaring ``s`` times
multiplies a relative error by at most about ``2**s`` to first order, so the relative error
of the result is about ``2**s * eps_T`` plus rounding. With the defaults ``theta = 0.5``,
``K = 12`` we have ``eps_T = 2.0e-14``; a step with ``||A h||_1 = 8`` needs ``s = 4`` and
is accurate to about ``3e-13``. :func:`truncation_bound` returns the figure for a given
``s`` and ``K``.

The number of squarings must be fixed when the expression is built, so the caller passes an
upper bound of ``||A h||_1`` over the design-variable box (see
:func:`squarings_for_norm`); the bound then holds at every point the optimiser visits.

The zero-order hold uses Van Loan's block matrix (C. F. Van Loan, "Computing integrals
involving the matrix exponential", IEEE Trans. Automatic Control 23(3), 1978):
``exp([[A, B], [0, 0]] h) = [[Ad, Bd], [0, I]]``.
"""

from __future__ import annotations

import math
from typing import Any

THETA = 0.5
ORDER = 12


def truncation_bound(squarings: int, order: int = ORDER, theta: float = THETA) -> float:
    """First-order relative error bound ``2**s * eps_T`` of :func:`expm` (see module doc)."""
    eps_t = theta ** (order + 1) / math.factorial(order + 1) * (order + 2) / (order + 2 - theta)
    return 2.0**squarings * eps_t


def squarings_for_norm(norm_bound: float, theta: float = THETA) -> int:
    """Smallest ``s >= 0`` with ``norm_bound / 2**s <= theta``."""
    if not math.isfinite(norm_bound) or norm_bound <= theta:
        return 0
    return max(0, math.ceil(math.log2(norm_bound / theta)))


def expm(X: Any, squarings: int, order: int = ORDER) -> Any:
    """``exp(X)`` of a square CasADi matrix (SX or MX) by Taylor scaling and squaring.

    The Taylor polynomial is evaluated by the Paterson-Stockmeyer scheme (M. S. Paterson
    and L. J. Stockmeyer, "On the number of nonscalar multiplications necessary to evaluate
    polynomials", SIAM J. Comput. 2(1), 1973; Higham, Functions of Matrices, SIAM 2008,
    sec. 4.2): with the powers ``Y**2 .. Y**c``, ``c = ceil(sqrt(K))``, the polynomial is a
    polynomial in ``Y**c`` with matrix coefficients, which takes about ``2 sqrt(K)`` matrix
    products instead of Horner's ``K - 1`` (5 instead of 11 for ``K = 12``). It is the same
    polynomial, so the truncation bound of the module docstring holds unchanged; the
    smaller expression graph makes the derivatives cheaper to generate and to evaluate.

    Parameters
    ----------
    X
        Square CasADi matrix.
    squarings
        Number of squarings ``s``; the caller guarantees ``||X||_1 / 2**s <= 0.5``.
    order
        Degree ``K`` of the Taylor polynomial.
    """
    import casadi

    T = _taylor(X / (2.0**squarings), order, with_identity=True)
    for _ in range(squarings):
        T = casadi.mtimes(T, T)
    return T


def expm_minus_identity(X: Any, squarings: int, order: int = ORDER) -> Any:
    """``exp(X) - I`` of a square CasADi matrix, by the same polynomial as :func:`expm`.

    The squarings run on ``W = E - I`` as ``W <- 2 W + W W`` (since ``(I + W)**2 =
    I + 2 W + W**2``), the same one product per squaring. Stored as ``E``, a step whose
    norm is set by a stiff mode (rates near -7e14 /s beside rates near 1e4 /s) holds the
    slow rates as differences from 1 at the 1e-10 level, so every squaring rounds away
    most of their digits and 30 squarings amplify that; stored as ``W`` they keep full
    relative precision (the idea of ``expm1`` for scalars; Higham, Functions of
    Matrices, SIAM 2008, sec. 10.3 on the rounding of the squaring phase). The
    polynomial is unchanged, so is the truncation bound. The switched sequence model
    uses it; the linear tuning keeps :func:`expm` (its optima were checked with it).
    """
    import casadi

    W = _taylor(X / (2.0**squarings), order, with_identity=False)
    for _ in range(squarings):
        W = 2 * W + casadi.mtimes(W, W)
    return W


def _taylor(Y: Any, order: int, *, with_identity: bool) -> Any:
    """The Taylor polynomial of degree ``order`` of ``exp(Y)`` by Paterson-Stockmeyer
    (see :func:`expm`); without its constant term ``I`` unless ``with_identity``."""
    import casadi

    coefficients = [1.0 / math.factorial(k) for k in range(order + 1)]
    chunk = max(1, math.ceil(math.sqrt(order)))
    powers = [casadi.DM.eye(Y.shape[0]), Y]
    for _ in range(2, chunk + 1):
        powers.append(casadi.mtimes(powers[-1], Y))
    top = powers[chunk]
    first = 0 if with_identity else 1

    def block(j: int) -> Any:
        # sum_{i < chunk} c[j chunk + i] Y**i: the j-th coefficient of the polynomial in Y**c
        terms = [
            coefficients[j * chunk + i] * powers[i]
            for i in range(chunk)
            if first <= j * chunk + i <= order
        ]
        return sum(terms[1:], terms[0]) if terms else 0 * Y

    last = order // chunk
    T = block(last)
    for j in range(last - 1, -1, -1):
        T = block(j) + casadi.mtimes(top, T)
    return T


def zoh(
    A: Any, B: Any, dt: float, squarings: int, order: int = ORDER, exponential: Any = None
) -> tuple[Any, Any]:
    """Zero-order-hold ``(Ad, Bd)`` of CasADi matrices ``A`` (n x n) and ``B`` (n x m).

    ``squarings`` must satisfy ``||[[A, B], [0, 0]] dt||_1 / 2**s <= 0.5`` (module doc).
    ``exponential(X)``, when given, replaces :func:`expm` (the same polynomial as one
    function: :func:`wirestate.tune.exponential.held_exponential`).
    """
    import casadi

    n = A.shape[0]
    m = B.shape[1]
    top = casadi.horzcat(A, B)
    bottom = casadi.DM.zeros(m, n + m)
    X = casadi.vertcat(top, bottom) * dt
    E = expm(X, squarings, order) if exponential is None else exponential(X)
    return E[:n, :n], E[:n, n:]
