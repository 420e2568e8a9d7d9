"""``modelDescription.xml`` of an exported FMU (FMI 2.0, co-simulation).

The layout follows the FMI 2.0.1 standard (2019), chapter 2.2
(``fmiModelDescription``, ``UnitDefinitions``, ``LogCategories``, ``DefaultExperiment``,
``ModelVariables``, ``ModelStructure``) and chapter 4.3.1 (the co-simulation capability
flags). Every flag says what the C runtime actually does.
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET

from wirestate import __version__
from wirestate.export.plan import ExportPlan

#: SI base-unit exponents (kg, m, s, A, K, mol, cd, rad) of the unit symbols wirestate uses
_BASE = ("kg", "m", "s", "A", "K", "mol", "cd", "rad")
_SYMBOLS: dict[str, dict[str, int]] = {
    "kg": {"kg": 1}, "g": {"kg": 1}, "m": {"m": 1}, "s": {"s": 1}, "A": {"A": 1},
    "K": {"K": 1}, "rad": {"rad": 1},
    "V": {"kg": 1, "m": 2, "s": -3, "A": -1},
    "ohm": {"kg": 1, "m": 2, "s": -3, "A": -2}, "Ω": {"kg": 1, "m": 2, "s": -3, "A": -2},
    "S": {"kg": -1, "m": -2, "s": 3, "A": 2},
    "H": {"kg": 1, "m": 2, "s": -2, "A": -2},
    "F": {"kg": -1, "m": -2, "s": 4, "A": 2},
    "W": {"kg": 1, "m": 2, "s": -3}, "J": {"kg": 1, "m": 2, "s": -2},
    "N": {"kg": 1, "m": 1, "s": -2}, "Hz": {"s": -1}, "C": {"s": 1, "A": 1},
}  # fmt: skip
_FACTORS = {"g": 1e-3}

LOG_CATEGORIES = {
    "logStatusError": "errors (always reported)",
    "logStatusWarning": "warnings",
    "logAll": "every message, e.g. zero-order-hold matrices computed for a new step size",
}


def base_units(unit: str) -> tuple[dict[str, int], float] | None:
    """SI base-unit exponents and factor of a unit such as ``"N*m*s/rad"``; ``None`` when a
    symbol is unknown (the unit is then declared without a base unit)."""
    exponents: dict[str, int] = {}
    factor = 1.0
    text = unit.replace(" ", "")
    if not text:
        return None
    numerator, *denominators = text.split("/")
    groups = [(numerator, 1)] + [(d, -1) for d in denominators]
    for group, sign in groups:
        for token in filter(None, group.split("*")):
            match = re.fullmatch(r"([A-Za-zΩ]+)(?:\^(-?\d+))?", token)
            if match is None or match.group(1) not in _SYMBOLS:
                return None
            power = sign * int(match.group(2) or 1)
            for base, exp in _SYMBOLS[match.group(1)].items():
                exponents[base] = exponents.get(base, 0) + exp * power
            factor *= _FACTORS.get(match.group(1), 1.0) ** power
    return {k: v for k, v in exponents.items() if v}, factor


def _real(value: float) -> str:
    return repr(float(value))


def _is_structured(name: str) -> bool:
    # FMI 2.0.1 sec. 2.2.9: structured names are dot-separated identifiers
    return re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)*", name) is not None


def model_description(plan: ExportPlan, guid: str, sources: list[str]) -> bytes:
    """The XML text (UTF-8) for ``plan``; ``sources`` are the C files to list."""
    variables = plan.variables
    naming = "structured" if all(_is_structured(v.name) for v in variables) else "flat"
    root = ET.Element(
        "fmiModelDescription",
        {
            "fmiVersion": "2.0",
            "modelName": plan.name,
            "guid": guid,
            "description": plan.description,
            "generationTool": f"wirestate {__version__}",
            "variableNamingConvention": naming,
            "numberOfEventIndicators": "0",
        },
    )
    cs = ET.SubElement(
        root,
        "CoSimulation",
        {
            "modelIdentifier": plan.name,
            "needsExecutionTool": "false",
            "canHandleVariableCommunicationStepSize": "true",
            "canInterpolateInputs": "false",
            "maxOutputDerivativeOrder": "0",
            "canRunAsynchronuously": "false",
            "canBeInstantiatedOnlyOncePerProcess": "false",
            "canNotUseMemoryManagementFunctions": "false",
            "canGetAndSetFMUstate": "true",
            "canSerializeFMUstate": "true",
            "providesDirectionalDerivative": "false",
        },
    )
    files = ET.SubElement(cs, "SourceFiles")
    for name in sources:
        ET.SubElement(files, "File", {"name": name})
    units = sorted({v.unit for v in variables if v.unit})
    if units:
        definitions = ET.SubElement(root, "UnitDefinitions")
        for unit in units:
            element = ET.SubElement(definitions, "Unit", {"name": unit})
            found = base_units(unit)
            if found is not None:
                exponents, factor = found
                attributes = {k: str(exponents[k]) for k in _BASE if k in exponents}
                if factor != 1.0:
                    attributes["factor"] = _real(factor)
                ET.SubElement(element, "BaseUnit", attributes)
    categories = ET.SubElement(root, "LogCategories")
    for name, text in LOG_CATEGORIES.items():
        ET.SubElement(categories, "Category", {"name": name, "description": text})
    ET.SubElement(root, "DefaultExperiment", {"startTime": "0.0", "stepSize": _real(plan.step)})
    model_variables = ET.SubElement(root, "ModelVariables")
    for reference, v in enumerate(variables):
        attributes = {
            "name": v.name,
            "valueReference": str(reference),
            "description": v.description,
            "causality": v.causality,
            "variability": v.variability,
        }
        real: dict[str, str] = {}
        if v.causality == "local":
            attributes["initial"] = "exact"
        if v.start is not None:
            real["start"] = _real(v.start)
        if v.unit:
            real["unit"] = v.unit
        element = ET.SubElement(model_variables, "ScalarVariable", attributes)
        ET.SubElement(element, "Real", real)
    structure = ET.SubElement(root, "ModelStructure")
    first_output = len(plan.inputs) + 1  # ModelVariables indices are 1-based
    outputs = ET.SubElement(structure, "Outputs")
    initial = ET.SubElement(structure, "InitialUnknowns")
    for i in range(len(plan.outputs)):
        ET.SubElement(outputs, "Unknown", {"index": str(first_output + i)})
        ET.SubElement(initial, "Unknown", {"index": str(first_output + i)})
    if not len(plan.outputs):
        structure.remove(outputs)
        structure.remove(initial)
    ET.indent(root)
    return (
        b'<?xml version="1.0" encoding="UTF-8"?>\n'
        + ET.tostring(root, encoding="unicode").encode("utf-8")
        + b"\n"
    )
