"""CasADi callbacks whose forward and reverse functions are written by hand.

:mod:`wirestate.tune.recursion` (the trajectory) and :mod:`wirestate.tune.exponential`
(the hold's exponential) are CasADi functions computed in numpy whose derivatives are
numpy too. The plumbing they share is here: a callback class that hands CasADi its own
forward and reverse classes for ``m`` directions and keeps each instance alive (CasADi
holds no reference to a Python callback), and the base of those classes, which take
their names from CasADi and read their data from the callback that made them. Buffers
come in through ``eval_buffer`` (no ``DM`` copies).
"""

from __future__ import annotations

from functools import lru_cache
from typing import Any


@lru_cache(maxsize=1)
def bases() -> tuple[type, type]:
    """``(Differentiated, Derivative)``: the base of a callback whose class attributes
    ``forward_class`` and ``reverse_class`` (subclasses of ``Derivative``) are its
    derivative functions, and that base."""
    import casadi

    class Differentiated(casadi.Callback):
        forward_class: type
        reverse_class: type

        def __init__(self) -> None:
            casadi.Callback.__init__(self)
            self.children: list[Any] = []

        def has_eval_buffer(self) -> bool:
            return True

        def has_forward(self, nfwd: int) -> bool:
            return True

        def get_forward(self, nfwd: int, name: str, inames: Any, onames: Any, opts: Any) -> Any:
            return self._child(self.forward_class, nfwd, name, inames, onames, opts)

        def has_reverse(self, nadj: int) -> bool:
            return True

        def get_reverse(self, nadj: int, name: str, inames: Any, onames: Any, opts: Any) -> Any:
            return self._child(self.reverse_class, nadj, name, inames, onames, opts)

        def _child(self, kind: type, m: int, name, inames, onames, opts) -> Any:
            child = kind(self, m, name, list(inames), list(onames), opts)
            self.children.append(child)
            return child

    class Derivative(casadi.Callback):
        """A forward or reverse function for ``m`` directions of the callback ``parent``."""

        def __init__(self, parent: Any, m: int, name: str, inames: list, onames: list,
                     opts: Any) -> None:  # fmt: skip
            casadi.Callback.__init__(self)
            self.parent, self.m, self.inames, self.onames = parent, m, inames, onames
            self.construct(name, dict(opts))

        def get_n_in(self) -> int:
            return len(self.inames)

        def get_n_out(self) -> int:
            return len(self.onames)

        def get_name_in(self, i: int) -> str:
            return self.inames[i]

        def get_name_out(self, i: int) -> str:
            return self.onames[i]

        def has_eval_buffer(self) -> bool:
            return True

    return Differentiated, Derivative


def dense(rows: int, cols: int) -> Any:
    """A dense CasADi sparsity pattern."""
    import casadi

    return casadi.Sparsity.dense(rows, cols)
