"""Golden files, atomic result files and JUnit XML for the response regression.

A golden file is one JSON object per model (format ``wirestate-golden``, version 1)::

    {
      "format": "wirestate-golden", "version": 1,
      "model": "drive_bus_filter.toml", "kind": "circuit", "name": "drive_bus_filter",
      "tolerances": {"poles": {"rtol": ..., "atol": ..., "rule": "..."}, ...},
      "signature": {...}                       # see wirestate.report.signature
    }

Numbers that JSON cannot hold (``inf``, ``nan``: a DC gain through an integrator) are
written as the strings ``"inf"``, ``"-inf"`` and ``"nan"``.

Every file is written with :func:`wirestate.atomic.write_atomic` (a temporary file in the
same directory, then :func:`os.replace`), so an interrupted run leaves either the old file
or the new one, never a partial file.
"""

from __future__ import annotations

import json
import time
import xml.etree.ElementTree as ET
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from wirestate.atomic import write_atomic
from wirestate.errors import RegressionError

__all__ = ["write_atomic"]  # re-exported for the commands

GOLDEN_FORMAT = "wirestate-golden"
GOLDEN_VERSION = 1


def dumps_golden(document: dict[str, Any]) -> str:
    """Serialise a golden document: nested objects indented, each list of numbers on one
    line (one line per trace, so a version-control diff shows which trace changed)."""
    return _dump(document, 0) + "\n"


def _dump(value: Any, level: int) -> str:
    pad, inner = " " * level, " " * (level + 1)
    if isinstance(value, dict):
        if not value:
            return "{}"
        items = [f"{inner}{json.dumps(str(k))}: {_dump(v, level + 1)}" for k, v in value.items()]
        return "{\n" + ",\n".join(items) + "\n" + pad + "}"
    if isinstance(value, list) and any(isinstance(v, dict | list) for v in value):
        if (
            all(
                isinstance(v, list) and not any(isinstance(x, dict | list) for x in v)
                for v in value
            )
            and len(value) <= 8
            and sum(len(v) for v in value) <= 16
        ):
            return json.dumps(value, allow_nan=False)
        items = [inner + _dump(v, level + 1) for v in value]
        return "[\n" + ",\n".join(items) + "\n" + pad + "]"
    return json.dumps(value, allow_nan=False)


def read_golden(path: str | Path) -> dict[str, Any]:
    """Read a golden file; ``golden_missing`` / ``invalid_golden`` errors on failure."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise RegressionError(
            "golden_missing",
            "no golden file; run `wirestate regress --update` to create it",
            file=str(path),
        ) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise RegressionError("invalid_golden", f"cannot read: {exc}", file=str(path)) from None
    try:
        document = json.loads(text)
    except json.JSONDecodeError as exc:
        raise RegressionError("invalid_golden", f"not valid JSON: {exc}", file=str(path)) from None
    if not isinstance(document, dict) or document.get("format") != GOLDEN_FORMAT:
        raise RegressionError(
            "invalid_golden",
            f'not a golden file (expected "format": "{GOLDEN_FORMAT}")',
            file=str(path),
            location=("format",),
        )
    if document.get("version") != GOLDEN_VERSION:
        raise RegressionError(
            "invalid_golden",
            f"golden file version {document.get('version')!r} is not supported "
            f"(expected {GOLDEN_VERSION})",
            file=str(path),
            location=("version",),
        )
    for key in ("kind", "tolerances", "signature"):
        if key not in document:
            raise RegressionError(
                "invalid_golden", f"missing field {key!r}", file=str(path), location=(key,)
            )
    return document


def golden_path(model: str | Path, golden_dir: str | Path) -> Path:
    """Where the golden file of ``model`` lives.

    The path mirrors the model's path below the golden directory's parent (``models/``
    for the default ``models/golden/``): ``models/filters/bus.toml`` ->
    ``models/golden/filters/bus.json``. A model outside that tree maps to its file name.
    """
    model = Path(model)
    golden_dir = Path(golden_dir)
    base = golden_dir.resolve().parent
    try:
        relative = model.resolve().relative_to(base)
    except ValueError:
        relative = Path(model.name)
    return golden_dir / relative.with_suffix(".json")


def discover_models(root: str | Path, golden_dir: str | Path | None = None) -> list[Path]:
    """Every ``*.toml`` below ``root`` (recursively, sorted), skipping the golden directory."""
    root = Path(root)
    if not root.is_dir():
        raise RegressionError(
            "file_not_found",
            "no such directory (give model files or run from the project)",
            file=str(root),
        )
    skip = Path(golden_dir).resolve() if golden_dir is not None else None
    found = []
    for path in sorted(root.rglob("*.toml")):
        if skip is not None and skip in path.resolve().parents:
            continue
        found.append(path)
    return found


@dataclass
class CaseResult:
    """Outcome of one model in a regression run (for the table and the JUnit file).

    ``status`` is ``"pass"``, ``"drift"``, ``"error"`` or ``"skipped"``; ``drifts`` holds
    :class:`wirestate.report.signature.Drift` records, ``message`` the error or skip reason.
    """

    model: str
    kind: str
    status: str
    seconds: float = 0.0
    drifts: list[Any] = field(default_factory=list)
    message: str = ""


def junit_xml(results: Sequence[CaseResult], *, suite: str = "wirestate-regress") -> str:
    """JUnit XML (the common ``testsuite``/``testcase`` schema read by CI servers).

    One ``testcase`` per model: a ``failure`` element lists the drifted quantities, an
    ``error`` element carries a user error, ``skipped`` a skip reason.
    """
    failures = sum(r.status == "drift" for r in results)
    errors = sum(r.status == "error" for r in results)
    skipped = sum(r.status == "skipped" for r in results)
    root = ET.Element(
        "testsuite",
        name=suite,
        tests=str(len(results)),
        failures=str(failures),
        errors=str(errors),
        skipped=str(skipped),
        time=f"{sum(r.seconds for r in results):.3f}",
    )
    for result in results:
        case = ET.SubElement(
            root,
            "testcase",
            classname=f"regress.{result.kind}",
            name=result.model,
            time=f"{result.seconds:.3f}",
        )
        if result.status == "drift":
            names = sorted({d.quantity for d in result.drifts})
            failure = ET.SubElement(
                case, "failure", message="drifted: " + ", ".join(names), type="drift"
            )
            failure.text = "\n".join(d.describe() for d in result.drifts)
        elif result.status == "error":
            ET.SubElement(case, "error", message=result.message, type="user_error")
        elif result.status == "skipped":
            ET.SubElement(case, "skipped", message=result.message)
    ET.indent(root)
    return '<?xml version="1.0" encoding="utf-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


def format_table(
    header: Sequence[str], rows: Iterable[Sequence[str]], *, left_columns: int = 2
) -> str:
    """A plain aligned text table: the first ``left_columns`` columns left-aligned (names),
    the rest right-aligned (numbers)."""
    rows = [list(map(str, row)) for row in rows]
    widths = [len(h) for h in header]
    for row in rows:
        widths = [max(w, len(c)) for w, c in zip(widths, row, strict=True)]

    def line(cells: Sequence[str]) -> str:
        out = []
        for index, (cell, width) in enumerate(zip(cells, widths, strict=True)):
            out.append(cell.ljust(width) if index < left_columns else cell.rjust(width))
        return "  ".join(out).rstrip()

    return "\n".join([line(header), line(["-" * w for w in widths])] + [line(r) for r in rows])


# ---------------------------------------------------------------------------------------
# regression of model files

#: top-level table -> file kind, checked in this order (a tuning file may also name a
#: circuit or system table inside it)
FILE_KINDS = ("tuning", "system", "circuit", "state_space")


#: preferred-value series used when regressing tuning files (the default of `wirestate tune`)
TUNING_SERIES = "E24"


class _Unsupported(Exception):
    """A TOML file that is not a circuit, system or tuning file (reported as skipped)."""


def detect_kind(path: str | Path) -> str:
    """``"circuit"``, ``"system"``, ``"tuning"``, ``"state_space"`` from the file's
    top-level table, else ``""``."""
    from wirestate.spec import load as spec_load

    data = spec_load.read_toml(path)
    for kind in FILE_KINDS:
        if isinstance(data.get(kind), dict):
            return kind
    return ""


def _check_supported(kind: str) -> None:
    # raise _Unsupported before any golden file is looked at
    if kind not in FILE_KINDS:
        raise _Unsupported(
            "not a circuit, system, tuning or state-space file (no [circuit], [system], "
            "[tuning] or [state_space] table)"
        )


def file_signature(path: str | Path, kind: str, grid: dict | None) -> dict[str, Any]:
    """Compute the signature of a model, system or tuning file.

    Circuits compile with :func:`wirestate.reduce.load_block`; systems are composed with
    ``wirestate.compose.load_system`` (LTI systems get the full linear signature, systems
    with sampled or nonlinear blocks simulated step responses) and tuning files solved with
    :func:`wirestate.tune.load_tuning` and :func:`wirestate.tune.solve` (series
    :data:`TUNING_SERIES`). Raises ``_Unsupported`` for any other ``kind``.
    """
    from wirestate.report import signature as sig

    _check_supported(kind)
    if kind == "circuit":
        from wirestate.reduce import load_block
        from wirestate.switching import switched_circuit

        block = load_block(path)
        if switched_circuit(block) is not None:  # issue 12: poles of every mode too
            return sig.switched_circuit_signature(block, grid)
        return sig.linear_signature(block, grid)
    if kind == "state_space":
        from wirestate.lti import load_state_space_block

        # a reduced block whose source changed no longer matches its stored bound: refused
        return sig.linear_signature(load_state_space_block(path, on_stale="error"), grid)
    if kind == "system":
        from wirestate.compose import load_system
        from wirestate.simulate.switched_system import has_switching

        system = load_system(path)
        if has_switching(system):  # issue 12: one exact switched run
            return sig.switched_signature(system, grid)
        if system.is_linear:
            return sig.linear_signature(system.state_space(), grid)
        return sig.simulated_signature(system, grid)
    from wirestate.tune import load_tuning, solve

    result = solve(load_tuning(path), TUNING_SERIES, file=str(path))
    return sig.tuned_signature(
        _tuned_values(result), series=TUNING_SERIES, feasible=bool(result.feasible)
    )


def _tuned_values(result: Any) -> dict[str, dict[str, float]]:
    # TuningResult.variables: part name -> {"optimum": ..., "preferred": ..., ...}
    return {
        name: {"optimum": entry["optimum"], "preferred": entry["preferred"]}
        for name, entry in result.variables.items()
    }


@dataclass
class RegressOutcome(CaseResult):
    """A :class:`CaseResult` plus what ``--update`` did (``created``/``updated``/``unchanged``)."""

    golden: str = ""
    action: str = ""


def regress_file(
    path: str | Path, golden_dir: str | Path, *, update: bool = False
) -> RegressOutcome:
    """Compare one model file with its golden file (or rewrite the golden file).

    Returns the outcome; a user error (unreadable model, missing or invalid golden file)
    is captured as status ``"error"`` so the remaining models are still checked.
    With ``update`` the golden file is rewritten atomically when anything changed; its
    tolerances and sample grid are kept; a grid that no longer fits the model (a changed
    sample time) is derived anew, with a message.
    """
    from wirestate.errors import WirestateError
    from wirestate.report import signature as sig

    start = time.perf_counter()
    path = Path(path)
    target = golden_path(path, golden_dir)
    outcome = RegressOutcome(model=str(path), kind="", status="pass", golden=str(target))
    try:
        outcome.kind = detect_kind(path)
        _check_supported(outcome.kind)
        existing_text = None
        golden = None
        try:
            golden = read_golden(target)
            existing_text = target.read_text(encoding="utf-8")
        except RegressionError as exc:
            if not update:
                if exc.code == "golden_missing":
                    exc.message = _create_hint(path, golden_dir)
                    exc.args = (str(exc),)
                raise
            if exc.code == "invalid_golden":
                outcome.message = f"replacing unreadable golden file ({exc.message})"
        if golden is not None and golden["kind"] != outcome.kind:
            if not update:
                outcome.drifts.append(
                    sig.Drift("signals", "file kind", golden["kind"], outcome.kind)
                )
            golden = None
        grid = sig.signature_grid(golden["signature"]) if golden else None
        try:
            current = file_signature(path, outcome.kind, grid)
        except WirestateError as exc:
            if grid is None:
                raise
            if not update:
                exc.message += (
                    " (the golden file's sample grid no longer fits the model; "
                    "'wirestate regress --update' derives a new one)"
                )
                exc.args = (str(exc),)
                raise
            # the model changed so that the kept grid no longer applies (a new sample
            # time, say): derive a new grid, keep the tolerances, compare nothing
            outcome.message = f"new sample grid: the kept one no longer fits ({exc.message})"
            current = file_signature(path, outcome.kind, None)
            golden = {**golden, "signature": None}
        if golden is not None and golden["signature"] is not None:
            outcome.drifts += sig.compare_signatures(
                golden["signature"], current, golden["tolerances"]
            )
        if update:
            tolerances = dict(sig.default_tolerances(current))
            if golden is not None:
                tolerances.update(golden["tolerances"])
            document = {
                "format": GOLDEN_FORMAT,
                "version": GOLDEN_VERSION,
                "model": _relative_name(path, golden_dir),
                "kind": outcome.kind,
                "name": current.get("name", path.stem),
                "tolerances": tolerances,
                "signature": current,
            }
            text = dumps_golden(document)
            if text == existing_text:
                outcome.action = "unchanged"
            else:
                write_atomic(target, text, make_parents=True)
                outcome.action = "created" if existing_text is None else "updated"
        elif outcome.drifts:
            outcome.status = "drift"
    except _Unsupported as exc:
        outcome.status, outcome.message = "skipped", str(exc)
    except WirestateError as exc:
        if exc.file is None:
            exc.with_file(str(path))
        outcome.status, outcome.message = "error", str(exc)
    outcome.seconds = time.perf_counter() - start
    return outcome


def _create_hint(model: Path, golden_dir: str | Path) -> str:
    """How to create the golden file of this one model, and only that one."""
    option = "" if Path(golden_dir) == Path("models/golden") else f" --golden {golden_dir}"
    return (
        f"no golden file; run `wirestate regress --update{option} {model}` to create it "
        "(only this file's golden file is written), then review and commit it"
    )


def _relative_name(model: Path, golden_dir: str | Path) -> str:
    relative = golden_path(model, golden_dir).relative_to(Path(golden_dir))
    return relative.with_suffix(model.suffix).as_posix()
