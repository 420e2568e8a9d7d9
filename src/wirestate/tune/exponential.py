"""The Taylor exponential of :mod:`wirestate.tune.expm` as one CasADi function whose
derivatives run in numpy, every direction at once.

``held_exponential(size, squarings)`` is the CasADi function ``X -> exp(X)`` computed by
the same polynomial as :func:`wirestate.tune.expm.expm` (Taylor degree
:data:`~wirestate.tune.expm.ORDER` by Paterson-Stockmeyer, ``squarings`` squarings), so
its value and its truncation bound are those of the expression graph it replaces. Its
derivatives are those of that polynomial, exactly:

* forward: for ``m`` directions ``dX``, the product rule through the polynomial and the
  squarings (``d(T T) = dT T + T dT``), each product carried out for all directions at
  once as one matrix product of a stacked array (the Frechet derivative of a scaling and
  squaring algorithm, Al-Mohy and Higham, "Computing the Frechet derivative of the matrix
  exponential, with an application to condition number estimation", SIAM J. Matrix
  Anal. Appl. 30(4), 2009, Algorithm 6.4, here with the Taylor polynomial);
* reverse: the result is a polynomial ``q`` in ``X`` with real coefficients, whose
  Frechet derivative has the adjoint ``L_q(X, .)^* = L_q(X^T, .)`` in the trace inner
  product (Higham, Functions of Matrices, SIAM 2008, sec. 3.2 and problem 3.2), so an
  adjoint seed ``Xbar`` is the forward derivative at ``X^T`` in direction ``Ebar``.

CasADi's forward mode through the expression graph sweeps its virtual machine once per
direction; at 32 directions on a 26 x 26 hold that was 5.9 ms a call, most of the
constraint Jacobian of a tuning NLP (see ``benchmarks/bench_tune.py``).
"""

from __future__ import annotations

import math
import threading
from functools import lru_cache
from typing import Any

import numpy as np

from wirestate.tune.callback import bases, dense
from wirestate.tune.expm import ORDER


class _Workspace(threading.local):
    """Arrays reused between calls (per thread): a fresh m x n x n array for every
    intermediate result cost more in page faults than the products themselves (measured:
    0.27 ms to form ``0.3 a + 0.2 b`` of 32 x 26 x 26 arrays, 0.05 ms for a product)."""

    def __init__(self) -> None:
        self.arrays: dict[tuple, np.ndarray] = {}

    def get(self, name: str, shape: tuple[int, ...]) -> np.ndarray:
        key = (name, shape)
        if key not in self.arrays:
            self.arrays[key] = np.empty(shape)
        return self.arrays[key]


_workspace = _Workspace()


@lru_cache(maxsize=4)
def _blocks(order: int) -> tuple[int, np.ndarray]:
    """Paterson-Stockmeyer's chunk ``c`` and the coefficients of the polynomial in
    ``Y**c``: row j holds the Taylor coefficients ``1 / (j c + i)!``, ``i < c``."""
    chunk = max(1, math.ceil(math.sqrt(order)))
    last = order // chunk
    table = np.zeros((last + 1, chunk + 1))
    for j in range(last + 1):
        for i in range(chunk):
            if j * chunk + i <= order:
                table[j, i] = 1.0 / math.factorial(j * chunk + i)
    return chunk, table


def taylor_exponential(
    X: np.ndarray, dX: np.ndarray | None, squarings: int, order: int = ORDER
) -> tuple[np.ndarray, np.ndarray | None]:
    """``exp(X)`` by the polynomial of :func:`wirestate.tune.expm.expm` and, for the
    directions ``dX`` (m x n x n, or None), its derivative in each: ``(E, dE)``. The
    derivative is a view of a work array that the next call overwrites."""
    n = X.shape[0]
    scale = 2.0**squarings
    Y = X / scale
    chunk, table = _blocks(order)
    last = table.shape[0] - 1
    powers = np.empty((chunk + 1, n, n))
    powers[0], powers[1] = np.eye(n), Y
    for i in range(2, chunk + 1):
        np.matmul(powers[i - 1], Y, out=powers[i])
    top = powers[chunk]
    flat = powers.reshape(chunk + 1, n * n)
    T = (table[last] @ flat).reshape(n, n)
    if dX is None:
        for j in range(last - 1, -1, -1):
            T = (table[j] @ flat).reshape(n, n) + top @ T
        for _ in range(squarings):
            T = T @ T
        return T, None
    m = dX.shape[0]
    work = _workspace
    dP = work.get("powers", (chunk + 1, m, n, n))
    dT, one, two = (work.get(k, (m, n, n)) for k in ("dT", "one", "two"))
    dP[0] = 0.0
    np.multiply(dX, 1.0 / scale, out=dP[1])
    for i in range(2, chunk + 1):
        # d(Y**i) = d(Y**(i-1)) Y + Y**(i-1) dY
        np.matmul(dP[i - 1].reshape(m * n, n), Y, out=dP[i].reshape(m * n, n))
        np.matmul(powers[i - 1], dP[1], out=one)
        dP[i] += one
    dflat = dP.reshape(chunk + 1, m * n * n)
    np.dot(table[last], dflat, out=dT.reshape(m * n * n))
    for j in range(last - 1, -1, -1):
        # T <- block_j + top T, so dT <- dblock_j + dtop T + top dT
        np.matmul(top, dT, out=two)
        np.matmul(dP[chunk].reshape(m * n, n), T, out=one.reshape(m * n, n))
        np.dot(table[j], dflat, out=dT.reshape(m * n * n))
        dT += one
        dT += two
        T = (table[j] @ flat).reshape(n, n) + top @ T
    for _ in range(squarings):
        # d(T T) = dT T + T dT
        np.matmul(dT.reshape(m * n, n), T, out=one.reshape(m * n, n))
        np.matmul(T, dT, out=two)
        np.add(one, two, out=dT)
        T = T @ T
    return T, dT


def _transposed(buffer: Any, n: int, m: int) -> np.ndarray:
    """A CasADi buffer of ``m`` dense n x n matrices side by side (column-major) as an
    m x n x n array of their transposes; zeros for an input CasADi leaves out (None)."""
    if buffer is None:
        return np.zeros((m, n, n))
    return np.frombuffer(buffer, dtype=np.float64).reshape(m, n, n)


def _make_callback() -> type:
    Differentiated, Derivative = bases()

    class HeldExponential(Differentiated):
        def __init__(self, n: int, squarings: int, name: str) -> None:
            super().__init__()
            self.n, self.squarings = n, squarings
            self.last: tuple[bytes | None, np.ndarray | None] = (None, None)
            self.construct(name, {})

        def get_n_in(self) -> int:
            return 1

        def get_n_out(self) -> int:
            return 1

        def get_sparsity_in(self, i: int) -> Any:
            return dense(self.n, self.n)

        def get_sparsity_out(self, i: int) -> Any:
            return dense(self.n, self.n)

        def eval_buffer(self, arg: Any, res: Any) -> int:
            # the buffers hold transposes: exp(X^T) = exp(X)^T; an optimiser asks for the
            # same point again with each derivative, so the last value is kept
            XT = _transposed(arg[0], self.n, 1)[0]
            key = XT.tobytes()
            if key != self.last[0]:
                self.last = (key, taylor_exponential(XT, None, self.squarings)[0])
            _transposed(res[0], self.n, 1)[0][:] = self.last[1]
            return 0

    class _Seeded(Derivative):
        # inputs: X, E, seeds (n x n m); output: the derivatives (n x n m)
        def get_sparsity_in(self, i: int) -> Any:
            return dense(self.parent.n, self.parent.n * (self.m if i == 2 else 1))

        def get_sparsity_out(self, i: int) -> Any:
            return dense(self.parent.n, self.parent.n * self.m)

    class _Forward(_Seeded):
        def eval_buffer(self, arg: Any, res: Any) -> int:
            # L(X, dX)^T = L(X^T, dX^T): the transposed buffers need no transposing
            n, m = self.parent.n, self.m
            XT = _transposed(arg[0], n, 1)[0]
            _, dE = taylor_exponential(XT, _transposed(arg[2], n, m), self.parent.squarings)
            _transposed(res[0], n, m)[:] = dE
            return 0

    class _Reverse(_Seeded):
        def eval_buffer(self, arg: Any, res: Any) -> int:
            # Xbar = L(X^T, Ebar), so Xbar^T = L(X, Ebar^T)
            n, m = self.parent.n, self.m
            X = _transposed(arg[0], n, 1)[0].T
            _, XbarT = taylor_exponential(X, _transposed(arg[2], n, m), self.parent.squarings)
            _transposed(res[0], n, m)[:] = XbarT
            return 0

    HeldExponential.forward_class, HeldExponential.reverse_class = _Forward, _Reverse
    return HeldExponential


@lru_cache(maxsize=1)
def _callback_class() -> type:
    return _make_callback()


def held_exponential(n: int, squarings: int) -> Any:
    """The CasADi function ``X (n x n) -> exp(X)`` of the module docstring, by the
    polynomial of :func:`wirestate.tune.expm.expm` with ``squarings`` squarings (the
    caller guarantees ``||X||_1 / 2**squarings <= 0.5``). CasADi holds no reference to a
    Python callback: keep the returned function for as long as expressions use it."""
    return _callback_class()(n, int(squarings), f"held_exponential_{n}_{squarings}")
