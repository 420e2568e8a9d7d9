"""``wirestate schema``: every bundled file validates against the printed JSON Schema.

Checked with the reference JSON Schema validator ``jsonschema`` (Draft 2020-12, the draft
pydantic writes), so an editor that validates with the printed schema accepts the files.
"""

from __future__ import annotations

import json
import tomllib

import pytest

from tests.conftest import MODELS
from wirestate.cli import main

jsonschema = pytest.importorskip("jsonschema")

FILES = sorted(p for p in MODELS.rglob("*.toml") if "golden" not in p.parts)


def _kind(data: dict) -> str:
    for kind in ("tuning", "system", "circuit", "state_space"):
        if kind in data:
            return kind
    raise AssertionError("a model file without [circuit], [system] or [tuning]")


def _schema(kind: str, capsys) -> dict:
    assert main(["schema", kind]) == 0
    return json.loads(capsys.readouterr().out)


@pytest.mark.parametrize("path", FILES, ids=lambda p: str(p.relative_to(MODELS)))
def test_every_model_file_validates_against_the_printed_schema(path, capsys):
    data = tomllib.loads(path.read_text("utf-8"))
    schema = _schema(_kind(data), capsys)
    validator = jsonschema.Draft202012Validator(schema)
    errors = [
        f"{'.'.join(map(str, e.absolute_path))}: {e.message}" for e in validator.iter_errors(data)
    ]
    assert not errors, "\n".join(errors[:10])


def test_schema_types_quantities_as_strings_with_units(capsys):
    schema = _schema("circuit", capsys)
    validator = jsonschema.Draft202012Validator(schema)
    good = {
        "circuit": {"name": "x"},
        "parts": {"R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": "4k7"}},
    }
    assert not list(validator.iter_errors(good))
    # a table where a value belongs is still refused by the schema
    bad = {
        "circuit": {"name": "x"},
        "parts": {"R1": {"kind": "resistor", "nodes": ["a", "gnd"], "value": {}}},
    }
    assert list(validator.iter_errors(bad))


def test_tuning_schema_holds_no_internal_fields(capsys):
    schema = _schema("tuning", capsys)
    assert "base_dir" not in schema["properties"]
    assert "written_units" not in schema["$defs"]["DesignVariable"]["properties"]
    # the file keys are the shared vocabulary (system pi block, simulate --until)
    assert {"measurement", "command", "kp", "ki"} <= set(
        schema["$defs"]["Controller"]["properties"]
    )
    assert "until" in schema["$defs"]["Scenario"]["properties"]
