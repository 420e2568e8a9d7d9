"""wirestate: circuit model files compiled to named state-space blocks.

The public surface, imported lazily so that ``import wirestate`` stays cheap:

* :func:`load_block`, :func:`compile_circuit` - circuit files to :class:`CircuitBlock`
* :func:`symbolic_state_space` - the same matrices as CasADi expressions of part values
* :class:`Stepper` - exact fixed-step stepping for co-simulation masters
* :class:`WirestateError` - every user-facing error
"""

from __future__ import annotations

import importlib
from typing import Any

from wirestate.errors import WirestateError

__version__ = "0.1.0"

_LAZY = {
    "load_block": "wirestate.reduce",
    "compile_circuit": "wirestate.reduce",
    "symbolic_state_space": "wirestate.reduce",
    "CircuitBlock": "wirestate.lti",
    "load_circuit": "wirestate.spec",
    "Stepper": "wirestate.simulate",
}

__all__ = ["WirestateError", "__version__", *_LAZY]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'wirestate' has no attribute {name!r}")
