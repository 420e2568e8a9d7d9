"""Data flows one way: a module imports only modules of earlier layers (or its own)."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "src" / "wirestate"

LAYERS = [
    {"errors", "units", "atomic", "native", "__init__"},
    {"spec"},
    {"topology"},
    {"equations"},
    {"lti"},
    {"elimination"},
    {"reduce"},
    {"parametric"},
    {"balanced"},
    {"switching"},
    {"sensitivity"},
    {"blocks"},
    {"compose"},
    {"simulate"},
    {"export"},
    {"tune"},
    {"explore"},
    {"report"},
    {"commands", "cli"},
]


def layer_of(module: str) -> int:
    head = module.split(".")[0]
    for index, names in enumerate(LAYERS):
        if head in names:
            return index
    raise AssertionError(f"module {module!r} is in no layer; add it to LAYERS")


def wirestate_imports(path: Path) -> list[str]:
    tree = ast.parse(path.read_text("utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            if node.module.startswith("wirestate."):
                found.append(node.module.removeprefix("wirestate."))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("wirestate."):
                    found.append(alias.name.removeprefix("wirestate."))
    return found


MODULES = sorted(p for p in PACKAGE.rglob("*.py"))


@pytest.mark.parametrize("path", MODULES, ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_point_to_earlier_layers(path):
    relative = path.relative_to(PACKAGE).with_suffix("")
    own = ".".join(relative.parts)
    if own == "__init__":
        return  # the package root re-exports the public surface
    mine = layer_of(own)
    for imported in wirestate_imports(path):
        assert layer_of(imported) <= mine, f"{own} imports wirestate.{imported} (a later layer)"
