"""Errors as data: every user-facing failure has a stable code, a location and a message.

One base class, :class:`WirestateError`, carries

* ``code`` - a stable snake_case identifier from :data:`ERROR_CODES` (tests assert on it),
* ``file`` - the model, system or tuning file involved, if any,
* ``location`` - a path inside that file, e.g. ``("parts", "Lf", "value")``,
* ``message`` - one readable sentence naming what was expected and what was given.

``str(error)`` renders as ``file: parts.Lf.value: message`` so the command line can print
``error: <where>: <what>`` in one line. Subclasses only group the codes by pipeline stage.
"""

from __future__ import annotations

from collections.abc import Sequence

#: The catalogue of error codes. A test checks that every code raised anywhere in the
#: package is listed here, and that every listed code is raised by at least one test.
ERROR_CODES: dict[str, str] = {
    # reading files
    "file_not_found": "the named file does not exist or cannot be read",
    "malformed_toml": "the file is not valid TOML",
    "invalid_field": "a field has the wrong type or shape",
    "missing_field": "a required field is absent",
    "unknown_field": "a field the format does not define",
    "unknown_kind": "a part or block kind the format does not define",
    "invalid_name": "a circuit, part, node, block or signal name that is not an identifier",
    # quantities
    "invalid_quantity": "a value that is not a number with an optional SI prefix and unit",
    "wrong_unit": "a value whose unit does not fit the field",
    "out_of_range": "a value outside its physical range (for example a negative resistance)",
    # topology
    "no_ground": "the ground node is not used by any part",
    "floating_node": "a node or sub-network has no path to ground",
    "voltage_source_loop": "voltage sources (or voltage-type parts) form a loop",
    "current_source_cutset": "current sources (or current-type parts) form a cutset",
    "shorted_part": "both terminals of a part are on the same node",
    "unknown_node": "a node named in an output or control that no part uses",
    "unknown_part": "a part named in an output, control or coupling that does not exist",
    "unsupported_topology": "a loop or cutset through a controlled source that needs a derivative",
    "output_needs_derivative": "an output that would need the derivative of an input",
    "singular_equations": "the circuit equations have no unique solution at the given values",
    "unstable_elimination": "bounds of part values over which no elimination order of the "
    "circuit equations keeps its pivots",
    # composition and simulation
    "unknown_signal": "a signal named in wiring or inputs that no block provides",
    "unconnected_input": "a block input that nothing drives",
    "duplicate_signal": "two blocks drive the same signal",
    "algebraic_loop": "a loop of direct feedthrough with no state to break it",
    "invalid_input_signal": "an input waveform description that cannot be parsed",
    "invalid_step": "a step size or horizon that is not a positive time",
    "state_size_mismatch": "a state vector of the wrong length",
    # switched circuits (issue 12)
    "switch_resistance": "a switch or diode whose off_resistance is not larger than on_resistance",
    "invalid_gate": "a switch gate that is not an input of its own (a source, speed or output)",
    "switching_chatter": "switches or diodes that keep changing mode at one instant",
    "unsupported_switched_system": "a system with switched circuits and blocks the switched "
    "engine cannot run with them (continuous nonlinear blocks)",
    "switched_model": "a circuit with switches or diodes given to an entry point for linear "
    "time-invariant models only",
    # tuning
    "unknown_variable": "a design variable that names no part value",
    "invalid_limit": "a limit that names an unknown output or has inconsistent bounds",
    "infeasible_limits": "the optimiser found no point inside every limit",
    "solver_failed": "the optimiser stopped without converging",
    # switched tuning (issue 12)
    "switched_limit_on_linear": "a limit on switching events for a circuit without switches "
    "or diodes",
    "unsupported_switched_tuning": "a switched tuning whose system the mode-sequence optimiser "
    "does not handle (no modulator, no sampled PI setting its duty, a triangle carrier...)",
    "unknown_switching_event": "a switched limit naming a switch edge that no modulator drives",
    # tolerance Monte Carlo and design sweeps (wirestate yield, wirestate sweep)
    "no_tolerance": "a part asked to vary within its tolerance has none",
    "invalid_grid": "a sweep grid that cannot be read or has no points",
    "scheduler_unreachable": "no Dask scheduler answers at the given address",
    # regression and benchmarks
    "golden_missing": "no golden file for a model",
    "invalid_golden": "a golden file that cannot be read",
    "invalid_benchmark_file": "a benchmark result file that cannot be read",
    # robustness: physical checks, run-size limits, non-finite results (issue 10)
    "indefinite_inductance": "couplings that make the inductance matrix not positive definite",
    "duplicate_coupling": "two couplings between the same pair of inductors",
    "non_finite_value": "a NaN or infinite number where a finite value is needed",
    "non_finite_result": "a result that left the floating-point range (an unstable mode)",
    "run_too_large": "a run whose arrays or output file would not fit in memory or on disk",
    "unwritable_output": "an output file path whose folder is missing or not writable",
    "output_is_input": "an output file that names an input or a model file, which it would replace",
    "nesting_too_deep": "a file nested deeper than the reader accepts",
    "wrong_file_kind": "a file of a kind the command or option does not take",
    # order reduction and sensitivities (issue 15)
    "reduction_not_converged": "the Gramian iteration of a large block did not converge",
    "block_too_large": "a block with more states than sensitivities of every mode are computed for",
    "invalid_order": "a reduced order not below the block's order or below its kept modes",
    "error_unreachable": "a relative error bound that no order below the full one meets",
    "no_stable_part": "a block with no stable input-output part to reduce",
    "unstable_block": "a large block with modes at or right of the imaginary axis",
    "stale_source": "a reduced state-space file whose source model changed since the reduction",
    "not_reducible": "a circuit with switches or diodes, which has no single block to reduce",
    # FMU export (wirestate export)
    "not_exportable": "a model with blocks an FMU cannot reproduce (non-linear blocks)",
    "no_c_compiler": "no C compiler to build the FMU binary ($CC, then cc)",
    "build_failed": "the C compiler failed to build the FMU binary",
    "no_fmi_headers": "the FMI 2.0 headers are missing from the fmpy package (a dependency)",
}


class WirestateError(Exception):
    """Base class of every error wirestate raises for a user's mistake.

    Parameters
    ----------
    code
        A key of :data:`ERROR_CODES`.
    message
        One sentence: what was expected, what was given.
    file
        The file involved, if any.
    location
        Path inside the file or model, e.g. ``("parts", "Lf", "value")``.
    """

    def __init__(
        self,
        code: str,
        message: str,
        *,
        file: str | None = None,
        location: Sequence[str | int] = (),
    ) -> None:
        if code not in ERROR_CODES:
            raise ValueError(f"internal: error code {code!r} is not in the catalogue")
        self.code = code
        self.message = message
        self.file = None if file is None else str(file)
        self.location = tuple(location)
        super().__init__(str(self))

    @property
    def where(self) -> str:
        """``file: a.b.c`` (either part may be absent)."""
        parts = []
        if self.file:
            parts.append(self.file)
        if self.location:
            parts.append(".".join(str(p) for p in self.location))
        return ": ".join(parts)

    def with_file(self, file: str) -> WirestateError:
        """Return the same error with ``file`` filled in (if it was not already)."""
        if self.file is None:
            self.file = str(file)
            self.args = (str(self),)
        return self

    def __str__(self) -> str:
        where = self.where
        return f"{where}: {self.message}" if where else self.message

    def as_dict(self) -> dict[str, object]:
        return {
            "code": self.code,
            "file": self.file,
            "location": list(self.location),
            "message": self.message,
        }


class WirestateWarning(UserWarning):
    """Something the user should know that does not stop the work (a stale reduced file);
    the command line prints it as one line ``warning: <where>: <what>``."""


class ModelFileError(WirestateError):
    """Reading or validating a model, system or tuning file."""


class QuantityError(WirestateError, ValueError):
    """A value with a unit that cannot be read."""


class TopologyError(WirestateError):
    """The circuit graph violates a rule (ground, loops, cutsets, names)."""


class CompileError(WirestateError):
    """The equations cannot be reduced to an explicit state-space."""


class CompositionError(WirestateError):
    """Blocks cannot be wired together as asked."""


class SimulationError(WirestateError):
    """A simulation or stepping request that cannot be carried out."""


class TuningError(WirestateError):
    """A tuning specification or solve that failed."""


class RegressionError(WirestateError):
    """Golden files and benchmark results."""
