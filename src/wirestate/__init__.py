"""wirestate: circuit model files compiled to named state-space blocks."""

from wirestate.errors import WirestateError

__version__ = "0.1.0"

__all__ = ["WirestateError", "__version__"]
