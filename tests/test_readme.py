"""Every example in README.md works as written, so the README and the code cannot drift.

* TOML blocks: a complete file (a ``[circuit]``, ``[system]`` or ``[tuning]`` table) is
  written beside the bundled models of its kind (``models/``, ``models/systems/``,
  ``models/tuning/``, so its relative paths resolve as they would for a user) and must load
  and compile through ``wirestate inspect``; a block whose first line reads ``# excerpt of
  models/...`` must agree, key by key, with that bundled file.
* Shell blocks: every ``wirestate`` command runs through the command-line entry point in a
  copy of ``models/`` and must exit 0. Commands that take a minute or need a C compiler
  (yield, sweep, regress, a compiled export) are run in full only with
  ``WIRESTATE_README_FULL=1`` (``make readme``); otherwise they are skipped with that
  reason, and a separate test still parses their options and checks that the files they
  name exist.
* Python blocks run as they are, in the same copy.
* The block-signal table lists what each block kind really offers.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import tomllib
from pathlib import Path

import pytest

from tests.conftest import MODELS, ROOT
from wirestate.cli import COMMANDS, build_parser, main

README = ROOT / "README.md"
FULL = os.environ.get("WIRESTATE_README_FULL") == "1"
#: where a complete file of each kind is placed, so that its relative paths resolve
PLACE = {
    "circuit": Path("."),
    "system": Path("systems"),
    "tuning": Path("tuning"),
    "state_space": Path("."),
}


def code_blocks(language: str) -> list[tuple[int, str]]:
    """``(line number, text)`` of every fenced block in the README in ``language``."""
    blocks, lines = [], README.read_text("utf-8").splitlines()
    k = 0
    while k < len(lines):
        if lines[k].strip() == f"```{language}":
            start, body = k + 1, []
            k += 1
            while lines[k].strip() != "```":
                body.append(lines[k])
                k += 1
            blocks.append((start + 1, "\n".join(body)))
        k += 1
    return blocks


def shell_commands() -> list[tuple[int, list[str]]]:
    """``(line, argv)`` of every ``wirestate`` command in the shell blocks (``make`` lines
    name the project's own targets and are left to the Makefile)."""
    found = []
    for start, text in code_blocks("sh"):
        pending, first = "", 0
        for offset, line in enumerate(text.splitlines()):
            if not pending:
                first = start + offset
            pending += line.rstrip().removesuffix("\\") + " "
            if line.rstrip().endswith("\\"):
                continue
            words = shlex.split(pending, comments=True)
            pending = ""
            if words and words[0] == "wirestate":
                found.append((first, words[1:]))
    return found


def is_long(argv: list[str]) -> bool:
    """Commands that take about a minute (every tuning file solved, thousands of
    samples) or a C compiler."""
    if argv[0] in ("yield", "sweep"):
        return True
    if argv[0] == "regress":
        return not [a for a in argv[1:] if a.endswith(".toml")]
    return argv[0] == "export" and "--sources-only" not in argv


@pytest.fixture
def models_copy(tmp_path, monkeypatch) -> Path:
    """A working folder holding a copy of models/ (golden files included), made the
    current directory, as a user who cloned the project and runs the README."""
    shutil.copytree(MODELS, tmp_path / "models")
    monkeypatch.chdir(tmp_path)
    return tmp_path


def test_the_readme_has_examples_of_every_kind():
    # a README that lost its examples would make the tests below vacuous
    assert len(code_blocks("toml")) >= 5
    assert len(shell_commands()) >= 10
    assert len(code_blocks("python")) >= 2


def _file_kind(data: dict) -> str | None:
    return next((kind for kind in PLACE if isinstance(data.get(kind), dict)), None)


TOML = code_blocks("toml")


@pytest.mark.parametrize(("line", "text"), TOML, ids=[f"line{n}" for n, _ in TOML])
def test_toml_examples_load_and_compile(line, text, models_copy, capsys):
    data = tomllib.loads(text)
    first = text.splitlines()[0]
    if first.startswith("# excerpt of "):
        named = ROOT / first.removeprefix("# excerpt of ").strip()
        _assert_subset(data, tomllib.loads(named.read_text("utf-8")), named.name)
        return
    kind = _file_kind(data)
    assert kind is not None, (
        f"README line {line}: a TOML example is a complete file ([circuit], [system] or "
        "[tuning], [state_space]) or starts with '# excerpt of models/...'"
    )
    path = models_copy / "models" / PLACE[kind] / f"readme_example_{line}.toml"
    path.write_text(text, "utf-8")
    assert main(["inspect", str(path)]) == 0, capsys.readouterr().err
    out = capsys.readouterr().out
    assert f"{kind if kind not in ('circuit', 'state_space') else 'block'} " in out


def _assert_subset(excerpt, full, where: str) -> None:
    if isinstance(excerpt, dict):
        assert isinstance(full, dict), where
        for key, value in excerpt.items():
            assert key in full, f"{where}: {key!r} is not in the bundled file"
            _assert_subset(value, full[key], f"{where}.{key}")
    elif isinstance(excerpt, list) and excerpt and isinstance(excerpt[0], dict):
        for item in excerpt:
            assert any(_is_subset(item, other) for other in full), f"{where}: {item} not found"
    else:
        assert excerpt == full, f"{where}: README has {excerpt!r}, the file {full!r}"


def _is_subset(excerpt, full) -> bool:
    try:
        _assert_subset(excerpt, full, "")
    except AssertionError:
        return False
    return True


COMMANDS_IN_README = shell_commands()


@pytest.mark.parametrize(
    ("line", "argv"), COMMANDS_IN_README, ids=[f"line{n}-{a[0]}" for n, a in COMMANDS_IN_README]
)
def test_shell_examples_run_as_written(line, argv, models_copy, capsys):
    if not FULL and is_long(argv):
        pytest.skip(
            f"README line {line}: 'wirestate {argv[0]}' takes about a minute or needs a C "
            "compiler; run with WIRESTATE_README_FULL=1 (make readme). Its options and files "
            "are still checked by test_long_shell_examples_name_real_options_and_files"
        )
    compiled = argv[0] == "export" and "--sources-only" not in argv
    if compiled and not (os.environ.get("CC") or shutil.which("cc")):
        pytest.skip("no C compiler ($CC or cc) to build the FMU binary")
    status = main(argv)
    err = capsys.readouterr().err
    assert status == 0, f"README line {line}: wirestate {' '.join(argv)} -> {status}: {err}"


@pytest.mark.parametrize(
    ("line", "argv"), COMMANDS_IN_README, ids=[f"line{n}-{a[0]}" for n, a in COMMANDS_IN_README]
)
def test_long_shell_examples_name_real_options_and_files(line, argv):
    # the argument parser of the command itself: an option the command does not have fails
    assert argv[0] in COMMANDS, f"README line {line}: no command {argv[0]!r}"
    import importlib

    module = importlib.import_module(COMMANDS[argv[0]][0])
    parser = build_parser({argv[0]: module}, argv[0])
    parser.parse_args(argv)
    for word in argv:
        if word.startswith("models/"):
            assert (ROOT / word).is_file(), f"README line {line}: {word} does not exist"


PYTHON = code_blocks("python")


@pytest.mark.parametrize(("line", "text"), PYTHON, ids=[f"line{n}" for n, _ in PYTHON])
def test_python_examples_run(line, text, models_copy, capsys):
    exec(compile(text, f"README.md:{line}", "exec"), {})


# -- the block-signal table ----------------------------------------------------------------

_ITEM = re.compile(r"`([A-Za-z_]+)` \(([^)]+)\)")


def signal_table() -> dict[str, dict[str, list[tuple[str, str]]]]:
    """README's block-signal table: kind -> role -> [(signal, unit text)]."""
    text = README.read_text("utf-8")
    section = text[text.index("### Block signals") :]
    rows = {}
    for line in section.splitlines():
        cells = [c.strip() for c in line.strip().strip("|").split("|")]
        if len(cells) != 4 or not cells[0].startswith("`"):
            continue
        kind = cells[0].strip("`")
        rows[kind] = {
            role: _ITEM.findall(cell)
            for role, cell in zip(("inputs", "outputs", "states"), cells[1:], strict=True)
        }
    return rows


#: one block table per kind, with every variant whose signals differ (sampled, delayed)
_VARIANTS = {
    "rotary_inertia": [{"inertia": "1e-3 kg*m^2"}],
    "gear": [{"ratio": 5}],
    "torsional_shaft": [
        {"inertia_drive": "1e-4 kg*m^2", "inertia_load": "2e-4 kg*m^2", "stiffness": "40 N*m/rad"}
    ],
    "mass_spring_damper": [{"mass": "1 kg"}],
    "pi": [
        {"kp": 1.0, "ki": 2.0, "unit": "V"},
        {"kp": 1.0, "ki": 2.0, "unit": "V", "sample_time": "1ms", "delay": True},
    ],
    "pid": [
        {"kp": 1.0, "ki": 2.0, "kd": 0.1, "derivative_filter": "1ms", "unit": "V"},
        {
            "kp": 1.0,
            "ki": 2.0,
            "kd": 0.1,
            "derivative_filter": "1ms",
            "unit": "V",
            "sample_time": "1ms",
            "delay": True,
        },
    ],  # fmt: skip
    "sensor_filter": [{"time_constant": "1ms", "unit": "V"}],
    "gain": [{"gain": 2.0, "unit": "V"}],
    "modulator": [{"frequency": "100kHz"}, {"frequency": "100kHz", "complementary": True}],
}


def _built(kind: str, table: dict):
    from wirestate.compose import build_block, view
    from wirestate.spec.system import parse_system

    spec = parse_system({"system": {"name": "s"}, "blocks": {"b": {"kind": kind, **table}}})
    return view(build_block("b", spec.blocks["b"]), "b")


def test_the_signal_table_covers_every_block_kind():
    from wirestate.spec.system import BLOCK_KINDS

    assert set(signal_table()) == set(BLOCK_KINDS)


@pytest.mark.parametrize("kind", sorted(_VARIANTS))
def test_the_signal_table_lists_what_each_block_offers(kind):
    listed = signal_table()[kind]
    built = [_built(kind, table) for table in _VARIANTS[kind]]
    for role in ("inputs", "outputs", "states"):
        names = {name for b in built for name in getattr(b, role)}
        assert {name for name, _ in listed[role]} == names, (kind, role)
        for name, unit in listed[role]:
            if unit == "measured":
                continue  # the unit of whatever is wired to the input
            expected = "V" if unit == "`unit`" else unit  # the variants' unit is V
            got = {b.units.get(name, "") for b in built if name in getattr(b, role)}
            assert got == {expected}, (kind, role, name, got)


def test_the_schema_names_each_block_kinds_signals():
    # the system schema an editor shows carries the same signals as the README table
    from wirestate.spec.system import SystemSpec

    defs = SystemSpec.model_json_schema()["$defs"]
    described = {
        d["properties"]["kind"].get("const"): d.get("description", "") for d in defs.values()
        if "kind" in d.get("properties", {})
    }  # fmt: skip
    for kind, roles in signal_table().items():
        for role in roles.values():
            for name, _ in role:
                if not name.startswith(("v_", "i_")) and kind != "state_feedback":
                    assert name in described[kind], (kind, name)
