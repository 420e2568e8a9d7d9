"""Export of circuit blocks and systems as FMI 2.0 co-simulation units in native C.

An exported FMU steps the continuous linear part by the exact zero-order hold over each
communication step (inputs held, outputs with feedthrough) and runs sampled PI/PID
controllers at their own period inside the step, with the sample-instant semantics of
:mod:`wirestate.simulate.hybrid`. The zero-order-hold matrices for the default step are
computed here (the same function as the simulator's); other step sizes are computed in the
C code by scaling and squaring and cached. Part values are fixed at export.

Standard: FMI 2.0.1 (2019), co-simulation interface.
"""

from __future__ import annotations

import hashlib
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from wirestate.atomic import write_atomic
from wirestate.compose import ComposedSystem, is_system_file, system_from_spec
from wirestate.errors import WirestateError
from wirestate.export.build import (
    MODEL_HEADER_NAME,
    RUNTIME_NAME,
    compile_shared,
    find_compiler,
    pack,
    runtime_source,
    shipped_headers,
)
from wirestate.export.csource import model_header
from wirestate.export.description import model_description
from wirestate.export.plan import ExportError, ExportPlan, check_names, plan_circuit, plan_system
from wirestate.lti import CircuitBlock, block_from_state_space
from wirestate.reduce import compile_circuit
from wirestate.spec import parse_circuit
from wirestate.spec.load import read_toml
from wirestate.spec.state_space import is_state_space_file, parse_state_space
from wirestate.spec.system import parse_system

#: default communication step (s) when none is given
DEFAULT_STEP = 1e-6
#: fixed name space of the GUIDs: a GUID is a hash of the FMU's content (same model, same
#: GUID), as FMI 2.0.1 sec. 2.2.1 only asks that it change when the model changes
GUID_NAMESPACE = uuid.UUID("5a0f6c1e-3b7d-4e2a-9c58-0d1f2e3a4b5c")

__all__ = [
    "DEFAULT_STEP",
    "ExportError",
    "ExportPlan",
    "ExportResult",
    "export_fmu",
    "load_model",
    "plan_model",
]


@dataclass
class ExportResult:
    """What :func:`export_fmu` wrote."""

    path: Path
    plan: ExportPlan
    guid: str
    members: list[str]
    has_binary: bool


def load_model(path: str | Path) -> tuple[Any, str | None]:
    """A compiled circuit block or a composed system from a file, and its description."""
    path = Path(path)
    data = read_toml(path)
    if is_system_file(data):
        spec = parse_system(data, file=str(path))
        return system_from_spec(spec, file=path), spec.system.description
    if is_state_space_file(data):
        # a reduced or hand-written block exports like the circuit block it stands for
        block = block_from_state_space(parse_state_space(data, file=str(path)), file=path)
        return block, block.spec.state_space.description
    try:
        circuit = parse_circuit(data, file=str(path))
        return compile_circuit(circuit), getattr(circuit, "description", None)
    except WirestateError as exc:
        raise exc.with_file(str(path)) from None


def plan_model(model: Any, step: float = DEFAULT_STEP, description: str | None = None):
    """The :class:`ExportPlan` of a ``CircuitBlock`` or a ``ComposedSystem``."""
    if isinstance(model, CircuitBlock):
        plan = plan_circuit(model, step)
    elif isinstance(model, ComposedSystem):
        plan = plan_system(model, step, description)
    else:
        raise ExportError(
            "not_exportable",
            f"cannot export a {type(model).__name__}; give a circuit block or a system",
        )
    check_names(plan)
    return plan


def _guid(plan: ExportPlan) -> str:
    digest = hashlib.sha256(model_header(plan, "").encode("utf-8"))
    digest.update(model_description(plan, "", [RUNTIME_NAME]))
    return "{" + str(uuid.uuid5(GUID_NAMESPACE, digest.hexdigest())) + "}"


def export_fmu(
    model: Any,
    out: str | Path,
    *,
    step: float = DEFAULT_STEP,
    sources_only: bool = False,
    description: str | None = None,
    compiler: list[str] | None = None,
) -> ExportResult:
    """Write an FMI 2.0 co-simulation FMU of a circuit block or a system.

    Parameters
    ----------
    model
        A compiled ``CircuitBlock``, a ``ComposedSystem``, or the path of a circuit or
        system file.
    out
        The ``.fmu`` file to write (atomically: a failure leaves any old file as it was).
    step
        Default communication step (s); its zero-order-hold matrices are computed here.
    sources_only
        Write no binary (``sources/`` only), so no C compiler is needed.
    compiler
        The compiler command (default: :func:`~wirestate.export.build.find_compiler`).

    Returns
    -------
    ExportResult

    Raises
    ------
    ExportError
        ``not_exportable`` (non-linear blocks, named), ``no_c_compiler``,
        ``build_failed`` or ``unwritable_output``.
    """
    if Path(out).suffix.lower() != ".fmu":
        # FMI 2.0 (sec. 2.3, from memory): an FMU is a zip archive with the extension .fmu
        raise ExportError(
            "unwritable_output",
            f"an FMU file name ends in .fmu, got {Path(out).name!r}",
            file=str(out),
        )
    file = None
    if isinstance(model, str | Path):
        file = str(model)
        model, found = load_model(model)
        description = description or found
    try:
        plan = plan_model(model, step, description)
    except WirestateError as exc:
        raise exc.with_file(file) if file else exc from None
    guid = _guid(plan)
    header = model_header(plan, guid)
    members: dict[str, bytes] = {
        "modelDescription.xml": model_description(plan, guid, [RUNTIME_NAME]),
    }
    if not sources_only:
        binary = compile_shared(plan.name, header, compiler or find_compiler())
        members[f"binaries/linux64/{plan.name}.so"] = binary
    members[f"sources/{RUNTIME_NAME}"] = runtime_source().encode("utf-8")
    members[f"sources/{MODEL_HEADER_NAME}"] = header.encode("utf-8")
    for name, data in shipped_headers().items():
        members[f"sources/{name}"] = data
    archive = pack(members)
    target = Path(out)
    try:
        write_atomic(target, archive)
    except OSError as exc:
        raise ExportError(
            "unwritable_output",
            f"cannot write the FMU: {exc.strerror or exc}",
            file=str(target),
        ) from None
    return ExportResult(target, plan, guid, list(members), not sources_only)
