"""Golden files: atomic writes, reading errors, path mirroring and JUnit XML."""

from __future__ import annotations

import json
import os
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from wirestate.errors import RegressionError
from wirestate.report import golden
from wirestate.report.signature import Drift


def test_write_atomic_replaces_the_file(tmp_path):
    target = tmp_path / "sub" / "a.json"
    with pytest.raises(FileNotFoundError):
        golden.write_atomic(target, "zero\n")  # a missing folder is not created silently
    golden.write_atomic(target, "one\n", make_parents=True)
    golden.write_atomic(target, "two\n")
    assert target.read_text() == "two\n"
    assert sorted(p.name for p in target.parent.iterdir()) == ["a.json"]


@pytest.mark.parametrize("failing", ["os.replace", "os.fsync"])
def test_interrupted_write_keeps_the_original_and_leaves_no_temp_file(
    tmp_path, monkeypatch, failing
):
    # an interruption after the temporary file holds data (fsync) or just before the rename
    target = tmp_path / "a.json"
    target.write_text("original\n")

    def interrupt(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(os, failing.removeprefix("os."), interrupt)
    with pytest.raises(KeyboardInterrupt):
        golden.write_atomic(target, "new content that must not appear\n")
    assert target.read_text() == "original\n"
    assert [p.name for p in tmp_path.iterdir()] == ["a.json"]


def test_missing_and_invalid_golden_files_raise_coded_errors(tmp_path):
    with pytest.raises(RegressionError) as missing:
        golden.read_golden(tmp_path / "none.json")
    assert missing.value.code == "golden_missing"
    assert "none.json" in str(missing.value)

    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(RegressionError) as invalid:
        golden.read_golden(bad)
    assert invalid.value.code == "invalid_golden"

    other = tmp_path / "other.json"
    other.write_text(json.dumps({"format": "something-else"}))
    with pytest.raises(RegressionError) as wrong:
        golden.read_golden(other)
    assert wrong.value.code == "invalid_golden" and wrong.value.location == ("format",)


def test_golden_path_mirrors_the_model_path(tmp_path):
    models = tmp_path / "models"
    gold = models / "golden"
    assert (
        golden.golden_path(models / "filters" / "bus.toml", gold) == gold / "filters" / "bus.json"
    )
    # a model outside the golden directory's parent maps to its file name
    assert golden.golden_path(tmp_path / "elsewhere" / "x.toml", gold) == gold / "x.json"


def test_discovery_is_recursive_and_skips_the_golden_directory(tmp_path):
    models = tmp_path / "models"
    (models / "a").mkdir(parents=True)
    (models / "golden").mkdir()
    for path in (models / "z.toml", models / "a" / "b.toml", models / "golden" / "g.toml"):
        path.write_text("")
    found = golden.discover_models(models, models / "golden")
    assert [p.relative_to(models).as_posix() for p in found] == ["a/b.toml", "z.toml"]
    with pytest.raises(RegressionError) as err:
        golden.discover_models(tmp_path / "missing")
    assert err.value.code == "file_not_found"


def test_junit_xml_is_valid_and_marks_failures_errors_and_skips():
    results = [
        golden.CaseResult("m/a.toml", "circuit", "pass", 0.1),
        golden.CaseResult(
            "m/b.toml", "circuit", "drift", 0.2, [Drift("poles", "p1", -1.0, -2.0, 1.0, 1e-6)]
        ),
        golden.CaseResult("m/c.toml", "circuit", "error", message="m/c.toml: no such file"),
        golden.CaseResult("m/d.toml", "system", "skipped", message="not supported"),
    ]
    root = ET.fromstring(golden.junit_xml(results))
    assert root.tag == "testsuite"
    assert (root.get("tests"), root.get("failures"), root.get("errors"), root.get("skipped")) == (
        "4",
        "1",
        "1",
        "1",
    )
    cases = {case.get("name"): case for case in root.iter("testcase")}
    assert list(cases["m/a.toml"]) == []
    failure = cases["m/b.toml"].find("failure")
    assert failure is not None and "poles" in failure.get("message")
    assert cases["m/c.toml"].find("error") is not None
    assert cases["m/d.toml"].find("skipped") is not None


def test_golden_text_round_trips_and_keeps_non_finite_numbers():
    document = {"format": golden.GOLDEN_FORMAT, "a": [[1.0, "inf"], [0.5, "nan"]], "b": {}}
    text = golden.dumps_golden(document)
    assert json.loads(text) == document
    # short numeric lists stay on one line so a diff shows which trace changed
    assert ' "a": [[1.0, "inf"], [0.5, "nan"]],' in text.splitlines()


def test_table_aligns_columns():
    table = golden.format_table(["a", "bb", "c"], [["x", "y", "1"], ["long", "z", "22"]])
    lines = table.splitlines()
    assert len({len(line) for line in lines[:2]}) == 1
    assert lines[3].endswith("22") and lines[2].endswith(" 1")


def test_file_kind_comes_from_the_top_level_table(tmp_path: Path):
    circuit = tmp_path / "c.toml"
    circuit.write_text('[circuit]\nname = "x"\n')
    other = tmp_path / "o.toml"
    other.write_text('[something]\nname = "x"\n')
    assert golden.detect_kind(circuit) == "circuit"
    assert golden.detect_kind(other) == ""
