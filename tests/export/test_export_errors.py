"""Bad exports: one-line errors with stable codes, exit status 2, no half-written FMU."""

from __future__ import annotations

import pytest

from tests.export.conftest import MODELS, needs_compiler
from wirestate.cli import main
from wirestate.errors import WirestateError
from wirestate.export import export_fmu
from wirestate.export.build import find_compiler


def run_cli(capsys, *args):
    status = main(["export", *args])
    err = capsys.readouterr().err
    return status, err


@pytest.mark.parametrize(
    ("model", "code_text"),
    [
        ("no_such_model.toml", "no such file"),
        (str(MODELS / "systems" / "focus_stage.toml"), "position_loop"),
        # issue 12: no switching inside the FMU runtime yet
        (str(MODELS / "aux_buck.toml"), "switches or diodes"),
        (
            str(MODELS / "systems" / "aux_buck_loop.toml"),
            "stage (a switched circuit: switches or diodes Q1 (switch), D1 (diode))",
        ),
    ],
)
def test_bad_models_give_one_line_and_leave_the_old_fmu(tmp_path, capsys, model, code_text):
    target = tmp_path / "old.fmu"
    target.write_bytes(b"previous contents")
    status, err = run_cli(capsys, model, "--fmu", str(target), "--sources-only")
    assert status == 2
    assert err.startswith("error: ") and err.count("\n") == 1 and code_text in err
    assert target.read_bytes() == b"previous contents"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["old.fmu"]  # no temporary left


def test_nonlinear_block_is_refused_with_its_code():
    with pytest.raises(WirestateError) as info:
        export_fmu(MODELS / "systems" / "focus_stage.toml", "/tmp/never.fmu", sources_only=True)
    assert info.value.code == "not_exportable"
    assert info.value.location == ("blocks", "position_loop")


def test_unwritable_output_path(tmp_path, capsys):
    blocker = tmp_path / "a_file"
    blocker.write_text("x")
    status, err = run_cli(
        capsys, str(MODELS / "servo_armature.toml"), "--fmu", str(blocker / "x.fmu"),
        "--sources-only",
    )  # fmt: skip
    # checked before the compile and the C build, naming the option
    assert status == 2 and "--fmu" in err and "is a file, not a folder" in err
    assert err.count("\n") == 1
    with pytest.raises(WirestateError) as info:
        export_fmu(MODELS / "servo_armature.toml", blocker / "x.fmu", sources_only=True)
    assert info.value.code == "unwritable_output"


def test_missing_compiler_is_one_error_and_sources_only_needs_none(tmp_path):
    with pytest.raises(WirestateError) as info:
        find_compiler({"PATH": str(tmp_path)})
    assert info.value.code == "no_c_compiler"
    with pytest.raises(WirestateError) as info:
        find_compiler({"PATH": str(tmp_path), "CC": "no-such-compiler"})
    assert info.value.code == "no_c_compiler" and "no-such-compiler" in info.value.message
    result = export_fmu(MODELS / "servo_armature.toml", tmp_path / "s.fmu", sources_only=True)
    assert not result.has_binary and "sources/wirestate_fmu.c" in result.members


@needs_compiler
def test_build_failure_is_reported(tmp_path):
    with pytest.raises(WirestateError) as info:
        export_fmu(
            MODELS / "servo_armature.toml",
            tmp_path / "b.fmu",
            compiler=[find_compiler()[0], "-include", "/nonexistent/header.h"],
        )
    assert info.value.code == "build_failed"
    assert not (tmp_path / "b.fmu").exists()


def test_missing_fmi_headers_are_one_error(tmp_path, monkeypatch):
    # the headers come only from fmpy's c-code folder (wirestate keeps no copy): without
    # fmpy, the export names the package instead of failing inside the C build
    import importlib.util

    real = importlib.util.find_spec
    monkeypatch.setattr(
        importlib.util, "find_spec", lambda name, *a: None if name == "fmpy" else real(name, *a)
    )
    with pytest.raises(WirestateError) as info:
        export_fmu(MODELS / "servo_armature.toml", tmp_path / "h.fmu", sources_only=True)
    assert info.value.code == "no_fmi_headers" and info.value.location == ("fmpy",)
    assert not (tmp_path / "h.fmu").exists()
