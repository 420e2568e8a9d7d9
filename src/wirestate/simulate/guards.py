"""Checks before and after a run: solver tolerances, run size, output paths, finite results.

A run that cannot fit is refused before any work with the estimate and the way out; a run
whose numbers leave the floating-point range stops with the unstable (or too fast) mode
named, instead of writing ``inf`` or ``nan`` (issue 10, items 8-10).
"""

from __future__ import annotations

import math
import os
import re
import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from wirestate.errors import SimulationError

#: bytes per stored sample of each signal in a run held in memory: the state, input and
#: output arrays plus the lifted stepping's temporaries (about 4 copies of the states;
#: counted from simulate.linear.propagate, no outside source)
_STATE_COPIES, _INPUT_COPIES, _OUTPUT_COPIES = 4, 3, 2
#: characters per number in the CSV (repr of a float and a comma; measured, no source)
CSV_BYTES_PER_VALUE = 22
#: fraction of the available memory a run may take (common practice, no source)
MEMORY_FRACTION = 0.5


def memory_budget() -> int:
    """Bytes a run may hold in memory: half of what the operating system reports as
    available (``MemAvailable`` on Linux, free physical pages elsewhere), 4 GiB if
    neither can be read."""
    available = None
    try:
        with open("/proc/meminfo", encoding="ascii") as handle:
            for line in handle:
                if line.startswith("MemAvailable:"):
                    available = int(line.split()[1]) * 1024
                    break
    except OSError:
        pass
    if available is None:
        try:
            available = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
        except (ValueError, OSError, AttributeError):
            available = 8 * 2**30
    return int(MEMORY_FRACTION * available)


def format_bytes(count: float) -> str:
    """``1.5 GiB`` style."""
    for unit in ("B", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if count < 1024 or unit == "PiB":
            return f"{count:.3g} {unit}"
        count /= 1024
    return f"{count:.3g} PiB"  # pragma: no cover


def step_count(until: float, step: float) -> int:
    """Number of steps ``until / step`` (both positive, finite), which must be whole to
    within 1e-9 relative (the rounding of decimal prefixes only)."""
    for label, value in (("until", until), ("step", step)):
        if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
            raise SimulationError(
                "invalid_step", f"{label} must be a positive time, got {value!r} s"
            )
    count = until / step
    if not math.isfinite(count):
        raise SimulationError("invalid_step", f"until / step = {count!r} steps is not a number")
    n = round(count)
    if n < 1 or abs(count - n) > 1e-9 * max(1.0, count):
        raise SimulationError(
            "invalid_step",
            f"until ({until:g} s) must be a whole number of steps ({step:g} s)",
        )
    return n


def run_bytes(n_samples: int, n_states: int, n_inputs: int, n_outputs: int) -> int:
    """Estimated peak memory (bytes) of a run held in memory."""
    per_sample = (
        _STATE_COPIES * n_states + _INPUT_COPIES * n_inputs + _OUTPUT_COPIES * n_outputs + 2
    )
    return 8 * n_samples * per_sample


def signal_counts(model: Any) -> tuple[int, int, int]:
    """(states, inputs, outputs) of anything :func:`wirestate.simulate.simulate` runs."""
    counts = []
    for names, attr in (("states", "nstates"), ("inputs", "ninputs"), ("outputs", "noutputs")):
        value = getattr(model, attr, None)
        if value is None:
            value = len(getattr(model, names, ()) or ())
        counts.append(int(value))
    return counts[0], counts[1], counts[2]


def check_run_size(
    model: Any, until: float, step: float, *, streaming: bool = False, streamable: bool = True
) -> int:
    """Refuse a run that would not fit in memory, before any array is made.

    Returns the number of steps. ``streaming`` (a run written to a CSV in blocks) checks
    nothing here: its memory is one block; the disk is checked by :func:`check_csv_space`.
    """
    n = step_count(until, step)
    if streaming:
        return n
    needed = run_bytes(n + 1, *signal_counts(model))
    budget = memory_budget()
    if needed > budget:
        raise SimulationError(
            "run_too_large",
            f"{_count(n + 1)} samples of {step:g} s to {until:g} s would need about "
            f"{format_bytes(needed)} of memory ({format_bytes(budget)} may be used): take a "
            f"larger --step (for example {_fitting_step(until, step, needed, budget):g} s), "
            "a shorter --until, or write the run to --csv without --plot, which streams it "
            "in blocks",
        )
    return n


#: memory one switching event keeps in a result (its SwitchEvent and ModeInterval records
#: with their Python objects; about 0.5 KB measured, doubled for margin)
EVENT_BYTES = 1024


def check_switching_events(model: Any, until: float, inputs: Any) -> None:
    """Refuse a switched run whose gate edges alone would not fit in memory: two edges per
    carrier period of every ``pwm:`` input and modulator block over ``until`` (a 1 THz
    carrier typed for 1 MHz), before the first one is located."""
    from wirestate.simulate.pwm import PulseWidth, parse_pwm

    frequencies = []
    for value in (inputs or {}).values():
        if isinstance(value, PulseWidth):
            frequencies.append(value.frequency)
        elif isinstance(value, str) and value.strip().startswith("pwm:"):
            try:
                frequencies.append(parse_pwm(value.strip()[4:]).frequency)
            except ValueError:
                continue  # the waveform's own error is reported where it is read
    for block in (getattr(model, "blocks", None) or {}).values():
        frequency = getattr(block.source, "frequency", None)
        if block.category == "modulator" and frequency:
            frequencies.append(float(frequency))
    edges = sum(2.0 * f * until for f in frequencies)
    budget = memory_budget()
    if edges * EVENT_BYTES > budget:
        raise SimulationError(
            "run_too_large",
            f"about {_count(int(edges))} gate edges to {until:g} s (carriers of "
            f"{', '.join(f'{f:g} Hz' for f in sorted(set(frequencies)))}) would need about "
            f"{format_bytes(edges * EVENT_BYTES)} of memory for the switching events "
            f"({format_bytes(budget)} may be used): check the carrier frequency, or take a "
            "shorter --until",
        )


def check_grid_size(n_samples: int, until: float, step: float) -> None:
    """Refuse a time grid that alone would not fit in memory (8 bytes per sample)."""
    budget = memory_budget()
    if 8 * n_samples > budget:
        raise SimulationError(
            "run_too_large",
            f"{_count(n_samples)} samples of {step:g} s to {until:g} s would not fit in "
            f"memory ({format_bytes(budget)} may be used): take a larger step or a shorter "
            "horizon",
        )


def _count(n: int) -> str:
    """``1,000,000`` up to a trillion, ``1e+300`` style beyond (a count of hundreds of
    digits reads as noise)."""
    return f"{n:,}" if n < 10**12 else f"{float(n):.3g}"


def _fitting_step(until: float, step: float, needed: float, budget: float) -> float:
    factor = 10 ** math.ceil(math.log10(needed / budget))
    return step * factor


def check_csv_space(path: str | Path, n_samples: int, n_outputs: int) -> None:
    """Refuse a CSV that would not fit on its disk (estimate: 22 characters per value)."""
    path = Path(path)
    needed = n_samples * (n_outputs + 1) * CSV_BYTES_PER_VALUE
    free = shutil.disk_usage(path.parent if str(path.parent) else Path.cwd()).free
    if needed > free:
        raise SimulationError(
            "run_too_large",
            f"the CSV would take about {format_bytes(needed)} ({n_samples:,} rows), more "
            f"than the {format_bytes(free)} free on its disk: take a larger --step or a "
            "shorter --until",
            file=str(path),
        )


#: top-level tables of the model file kinds (circuit, system, tuning and state-space files)
MODEL_TABLES = ("circuit", "system", "tuning", "state_space")


#: bytes read from the start of an existing output file to tell whether it is a model: the
#: kind table opens every model file wirestate writes or shows (after a comment at most)
_HEAD_BYTES = 65536
#: a model file larger than this is taken as one without parsing it whole
_PARSE_MAX_BYTES = 64 * 2**20
_KIND_LINE = re.compile(
    rb"^[ \t]*(?:\[[ \t]*(circuit|system|tuning|state_space)[ \t]*\]|"
    rb"(circuit|system|tuning|state_space)\.)",
    re.MULTILINE,
)


def model_file_kind(path: str | Path) -> str | None:
    """The kind of model file at ``path`` (its top-level table), or ``None`` when it is no
    TOML model file (missing, binary, a CSV...).

    Only the head of the file is read first, so that checking an old multi-gigabyte CSV
    output costs nothing; a head naming a kind table is then parsed whole to confirm.
    """
    import tomllib

    path = Path(path)
    try:
        with path.open("rb") as handle:
            head = handle.read(_HEAD_BYTES)
        if _KIND_LINE.search(head) is None:
            return None
        if path.stat().st_size > _PARSE_MAX_BYTES:
            match = _KIND_LINE.search(head)
            return (match.group(1) or match.group(2)).decode()
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError, RecursionError):
        return None
    return next((kind for kind in MODEL_TABLES if isinstance(data.get(kind), dict)), None)


def check_output_path(
    path: str | Path,
    option: str,
    *,
    inputs: tuple[str | Path, ...] = (),
    replaceable: tuple[str, ...] = (),
) -> Path:
    """An output file path whose folder exists and is writable, checked before any work.

    The path must not be one of the run's ``inputs`` (the same file under any name, a
    link included), nor an existing model file unless its kind is in ``replaceable``
    (``wirestate reduce`` may rewrite a state-space file): a mistyped option must never
    overwrite the user's model.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise SimulationError(
            "unwritable_output", f"{option} names a folder, not a file", file=str(path)
        )
    for source in inputs:
        if path.exists() and Path(source).exists() and path.samefile(source):
            raise SimulationError(
                "output_is_input",
                f"{option} names {str(source)!r}, which this run reads; writing there would "
                "replace it: choose another file name",
                file=str(path),
            )
    kind = model_file_kind(path) if path.is_file() else None
    if kind is not None and kind not in replaceable:
        raise SimulationError(
            "output_is_input",
            f"{option} names an existing {kind.replace('_', '-')} file; writing there would "
            "replace the model: choose another file name",
            file=str(path),
        )
    if not folder.is_dir():
        problem = (
            "is a file, not a folder" if folder.exists() else "does not exist (create it first)"
        )
        raise SimulationError(
            "unwritable_output", f"{option}: the folder {str(folder)!r} {problem}", file=str(path)
        )
    if not os.access(folder, os.W_OK | os.X_OK):
        raise SimulationError(
            "unwritable_output", f"{option}: cannot write into {str(folder)!r}", file=str(path)
        )
    return path


def check_tolerances(options: dict[str, Any]) -> None:
    """``rtol`` and ``atol`` of the integrator: finite, positive, ``rtol`` below 1."""
    for name in ("rtol", "atol"):
        if name not in options:
            continue
        value = options[name]
        if not (isinstance(value, int | float) and math.isfinite(value) and value > 0):
            raise SimulationError(
                "out_of_range",
                f"must be a positive finite number, got {value!r}",
                location=(f"--{name}",),
            )
    if options.get("rtol", 0.0) >= 1.0:
        raise SimulationError(
            "out_of_range",
            f"must be below 1 (a relative error), got {options['rtol']!r}",
            location=("--rtol",),
        )


def check_finite_result(
    name: str,
    time: np.ndarray,
    arrays: list[np.ndarray],
    poles: np.ndarray | Callable[[], np.ndarray | None] | None,
    step: float,
) -> None:
    """Stop when a run left the floating-point range, naming the mode responsible.

    An unstable mode (pole with positive real part ``sigma``) grows as ``exp(sigma t)``; a
    stable mode faster than the double range allows at this step (``|lambda| dt`` beyond
    about 700, where ``exp`` overflows) breaks the matrix exponential instead. ``poles``
    may be a function: it is then called only when the result is not finite (the
    eigenvalues of a large block cost more than its whole run).
    """
    first = None
    for data in arrays:
        if data is None or data.size == 0:
            continue
        bad = ~np.isfinite(data)
        if bad.any():
            column = int(np.argmax(bad.any(axis=0)))
            first = column if first is None else min(first, column)
    if first is None:
        return
    if callable(poles):
        poles = poles()
    when = float(time[min(first, len(time) - 1)]) if len(time) else 0.0
    message = f"{name}: the result leaves the floating-point range at t = {when:g} s"
    if poles is not None and len(poles):
        worst = poles[int(np.argmax(poles.real))]
        fastest = poles[int(np.argmax(np.abs(poles)))]
        if worst.real > 0:
            message += (
                f": the mode at {_pole_text(worst)} 1/s is unstable (it grows by e every "
                f"{1 / worst.real:.3g} s, {worst.real * when / math.log(10):.3g} decades by "
                "then); check the gains and signs of controlled sources and controllers"
            )
        else:
            message += (
                f": the fastest mode, {_pole_text(fastest)} 1/s, is beyond double precision "
                f"at a step of {step:g} s; part values spread too far (a part much smaller "
                "than the rest)"
            )
    raise SimulationError("non_finite_result", message)


def _pole_text(p: complex) -> str:
    return f"{p.real:.4g}" if p.imag == 0 else f"{p.real:.4g} ± {abs(p.imag):.4g}j"


def model_poles(model: Any) -> np.ndarray | None:
    """Poles of a circuit block, ``StateSpace`` or LTI system; ``None`` when not linear.

    A large sparse block gives its fastest modes and those of largest real part (sparse
    Arnoldi), the candidates for a run that left the floating-point range.
    """
    sparse = getattr(model, "sparse_A", None)
    if sparse is not None:
        return _sparse_candidate_poles(sparse)
    try:
        poles = model.poles()
    except Exception:  # a nonlinear or sampled system has no single set of poles
        return None
    return np.asarray(poles, dtype=complex).ravel()


def _sparse_candidate_poles(A: Any) -> np.ndarray:
    from scipy.sparse.linalg import ArpackNoConvergence, eigs

    from wirestate.lti import extreme_poles, single_threaded_blas

    _, fastest = extreme_poles(A, 6)
    with single_threaded_blas():
        try:  # an error message needs the sign of the rightmost real part, not 8 digits
            rightmost = eigs(
                A.tocsc(), k=6, which="LR", return_eigenvectors=False, tol=1e-6, maxiter=300
            )
        except ArpackNoConvergence as exc:
            rightmost = exc.eigenvalues
    return np.concatenate([fastest, rightmost])
