"""The L-BFGS Hessian of the Lagrangian formed here and handed to IPOPT as a dense matrix.

IPOPT's own limited-memory quasi-Newton Hessian (``hessian_approximation =
limited-memory``) enters its linear systems as a low-rank update of a diagonal, which
costs further solves with the KKT matrix at every iteration: measured here, IPOPT's own
time per iteration is about twice that with a plain matrix (4 variables and 200 rows: 2.3
against 1.1 ms; 32 variables and 1000 rows: 35 against 17 ms). With a few dozen design
variables the matrix itself is small, so it is formed here, from the same limited-memory
BFGS update (Nocedal and Wright, Numerical Optimization, 2nd ed., Springer 2006, sec. 7.2,
with the initial matrix ``(s^T y / s^T s) I`` of the latest pair, IPOPT's default, and an
update skipped when ``s^T y`` is not positive), and given to IPOPT as its Hessian.

The pairs are the steps between IPOPT's iterates and the differences of the gradient of
the Lagrangian, ``y = sigma (grad f(x+) - grad f(x)) + (J(x+) - J(x))^T lambda+``. The
gradients and Jacobians are the ones IPOPT asked for at each iterate (recorded by wrappers
of CasADi's derivative functions), so forming the matrix costs no further derivative.
The design variables are the same in every round of the exchange (only the rows imposed
change), so the pairs are carried from one round to the next, where IPOPT's own memory
would start empty.
"""

from __future__ import annotations

from collections import deque
from functools import lru_cache
from typing import Any

import numpy as np

#: pairs kept (IPOPT's default ``limited_memory_max_history``)
HISTORY = 6


class LimitedMemoryHessian:
    """The L-BFGS matrix of the module docstring over ``n`` unknowns."""

    def __init__(self, n: int, history: int = HISTORY) -> None:
        self.n = n
        self.pairs: deque[tuple[np.ndarray, np.ndarray]] = deque(maxlen=history)
        self.previous: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None
        self.seen: dict[bytes, dict[str, np.ndarray]] = {}
        #: the matrix of the pairs kept (formed again only when a pair is added)
        self.formed: np.ndarray | None = None

    def start_round(self) -> None:
        """Forget the last iterate (the next round's rows differ); keep the pairs."""
        self.previous = None
        self.seen = {}

    def record(self, x: np.ndarray, what: str, value: np.ndarray) -> None:
        """A derivative IPOPT evaluated at ``x`` (``"grad_f"`` or ``"jac_g"``)."""
        entry = self.seen.setdefault(np.asarray(x, dtype=float).tobytes(), {})
        entry[what] = value
        while len(self.seen) > 8:
            self.seen.pop(next(iter(self.seen)))

    def matrix(self, x: np.ndarray, sigma: float, lam: np.ndarray) -> np.ndarray:
        """The matrix at IPOPT's iterate ``(x, lam)``, after the pair from the last one."""
        x = np.array(x, dtype=float)  # a copy: the caller's buffer is reused
        entry = self.seen.get(x.tobytes(), {})
        grad_f, J = entry.get("grad_f"), entry.get("jac_g")
        if grad_f is not None and J is not None and sigma > 0.0:
            if self.previous is not None:
                x0, grad0, J0 = self.previous
                y = sigma * (grad_f - grad0) + (J - J0).T @ lam
                self.add(x - x0, y)
            self.previous = (x, grad_f, J)
        if self.formed is None:
            self.formed = self.dense()
        return self.formed

    def add(self, s: np.ndarray, y: np.ndarray) -> None:
        """Keep the pair ``(s, y)`` unless its curvature ``s^T y`` is not positive."""
        sy = float(s @ y)
        if np.all(np.isfinite(y)) and sy > 1e-12 * float(np.linalg.norm(s) * np.linalg.norm(y)):
            self.pairs.append((s, y))
            self.formed = None

    def dense(self) -> np.ndarray:
        """``B``: the BFGS updates by the kept pairs of ``(s^T y / s^T s) I``."""
        if not self.pairs:
            return np.eye(self.n)
        s, y = self.pairs[-1]
        B = np.eye(self.n) * float(s @ y) / float(s @ s)
        for s, y in self.pairs:
            Bs = B @ s
            B = B - np.outer(Bs, Bs) / float(s @ Bs) + np.outer(y, y) / float(s @ y)
        return 0.5 * (B + B.T)


def hooked_options(nlp: dict[str, Any], model: LimitedMemoryHessian) -> tuple[dict, list]:
    """nlpsol options ``grad_f``, ``jac_g`` and ``hess_lag`` that record IPOPT's derivatives
    in ``model`` and give IPOPT ``model``'s matrix, and the callbacks to keep alive for
    as long as the solver is used."""
    import casadi

    x, g, f = nlp["x"], nlp["g"], nlp["f"]
    p = casadi.MX.sym("p", 0)
    jac = casadi.Function("nlp_jac_g", [x, p], [g, casadi.jacobian(g, x)], ["x", "p"],
                          ["g", "jac_g_x"])  # fmt: skip
    grad = casadi.Function("nlp_grad_f", [x, p], [f, casadi.gradient(f, x)], ["x", "p"],
                           ["f", "grad_f_x"])  # fmt: skip
    Recorder, Hessian = _classes()
    keep = [Recorder(jac, model, "jac_g"), Recorder(grad, model, "grad_f"),
            Hessian(x.numel(), g.numel(), model)]  # fmt: skip
    options = {
        "jac_g": keep[0], "grad_f": keep[1], "hess_lag": keep[2],
        "ipopt.hessian_approximation": "exact",
    }  # fmt: skip
    return options, keep


@lru_cache(maxsize=1)
def _classes() -> tuple[type, type]:
    import casadi

    class Recorder(casadi.Callback):
        """A derivative function of the NLP that tells the model what it computed (the
        inner function runs on CasADi's own buffers: no copies)."""

        def __init__(self, inner: Any, model: LimitedMemoryHessian, what: str) -> None:
            casadi.Callback.__init__(self)
            self.inner, self.model, self.what = inner, model, what
            self.buffer, self.run = inner.buffer()
            rows, cols = inner.sparsity_out(1).get_triplet()
            self.rows, self.cols = np.asarray(rows, dtype=int), np.asarray(cols, dtype=int)
            self.shape = inner.sparsity_out(1).shape
            self.scratch = np.empty(inner.nnz_out(0))
            self.construct(f"recorded_{what}", {})

        def get_n_in(self) -> int:
            return 2

        def get_n_out(self) -> int:
            return 2

        def get_name_in(self, i: int) -> str:
            return self.inner.name_in(i)

        def get_name_out(self, i: int) -> str:
            return self.inner.name_out(i)

        def get_sparsity_in(self, i: int) -> Any:
            return self.inner.sparsity_in(i)

        def get_sparsity_out(self, i: int) -> Any:
            return self.inner.sparsity_out(i)

        def has_eval_buffer(self) -> bool:
            return True

        def eval_buffer(self, arg: Any, res: Any) -> int:
            # the parameter vector is empty (CasADi passes None for it)
            self.buffer.set_arg(0, arg[0])
            value = np.empty(self.rows.size)
            first = res[0] if res[0] is not None else memoryview(self.scratch)
            self.buffer.set_res(0, first)
            self.buffer.set_res(1, memoryview(value))
            self.run()
            if res[1] is not None:
                np.frombuffer(res[1], dtype=np.float64)[:] = value
            dense = np.zeros(self.shape)
            dense[self.rows, self.cols] = value
            x = np.frombuffer(arg[0], dtype=np.float64)
            self.model.record(x, self.what, dense.ravel() if self.what == "grad_f" else dense)
            return 0

    class Hessian(casadi.Callback):
        """``(x, p, lam_f, lam_g) -> triu(B)``: the model's matrix as IPOPT's Hessian."""

        def __init__(self, n: int, m: int, model: LimitedMemoryHessian) -> None:
            casadi.Callback.__init__(self)
            self.n, self.m, self.model = n, m, model
            self.lower = np.tril_indices(n)
            self.construct("limited_memory_hessian", {})

        def get_n_in(self) -> int:
            return 4

        def get_n_out(self) -> int:
            return 1

        def get_name_in(self, i: int) -> str:
            return ("x", "p", "lam_f", "lam_g")[i]

        def get_name_out(self, i: int) -> str:
            return "triu_hess_gamma_x_x"

        def get_sparsity_in(self, i: int) -> Any:
            sizes = [(self.n, 1), (0, 1), (1, 1), (self.m, 1)]
            return casadi.Sparsity.dense(*sizes[i])

        def get_sparsity_out(self, i: int) -> Any:
            return casadi.Sparsity.upper(self.n)

        def has_eval_buffer(self) -> bool:
            return True

        def eval_buffer(self, arg: Any, res: Any) -> int:
            def vector(i: int, size: int) -> np.ndarray:
                # CasADi passes None for an input that is all zeros
                if arg[i] is None:
                    return np.zeros(size)
                return np.frombuffer(arg[i], dtype=np.float64)

            B = self.model.matrix(vector(0, self.n), float(vector(2, 1)[0]), vector(3, self.m))
            if res[0] is not None:
                # the upper triangle column by column (CasADi's compressed columns) is B.T's
                # lower triangle row by row
                np.frombuffer(res[0], dtype=np.float64)[:] = B.T[self.lower]
            return 0

    return Recorder, Hessian
