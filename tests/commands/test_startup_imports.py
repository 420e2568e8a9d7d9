"""`wirestate --help`, `wirestate schema` and tuning must not import what they do not use.

A behaviour check (which modules get loaded), not a timing: python-control, scipy.signal,
CasADi and matplotlib take seconds to import and neither command uses them; tuning uses
CasADi but neither python-control nor its plotting.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

HEAVY = ("control", "casadi", "matplotlib", "scipy.signal")
MODELS = Path(__file__).resolve().parents[2] / "models"
BUS_FILTER = str(MODELS / "drive_bus_filter.toml")

SCRIPT = """
import contextlib, io, sys
from wirestate.cli import main
with contextlib.redirect_stdout(io.StringIO()):
    try:
        main({argv!r})
    except SystemExit:
        pass
print(",".join(sorted(m for m in {heavy!r} if m in sys.modules)))
"""


@pytest.mark.parametrize(
    "argv", [["--help"], ["schema"], ["schema", "system"], ["inspect", "--help"]]
)
def test_no_heavy_import(argv):
    code = SCRIPT.format(argv=argv, heavy=HEAVY)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"{argv} imported {out.stdout.strip()}"


@pytest.mark.parametrize("argv", [["inspect", BUS_FILTER], ["inspect", BUS_FILTER, "--json"]])
def test_inspect_of_a_small_circuit_imports_no_scipy(argv):
    # a small circuit compiles by the plain-Python elimination and its poles and DC gain
    # come from numpy: SciPy (0.2-0.3 s to import) is not needed at all
    code = SCRIPT.format(argv=argv, heavy=(*HEAVY, "scipy"))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"{argv} imported {out.stdout.strip()}"


@pytest.mark.parametrize("tuning", ["drive_bus_damping.toml", "drive_bus_loop_damping.toml"])
def test_tuning_imports_no_python_control(tuning):
    # a circuit's tuning and a system file's tuning (a sampled PI loop and a sensor filter
    # around the circuit) read the blocks' matrices directly: python-control (about a
    # second of start-up), scipy.signal and matplotlib are not needed
    code = SCRIPT.format(
        argv=["tune", str(MODELS / "tuning" / tuning)],
        heavy=("control", "matplotlib", "scipy.signal"),
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"tune {tuning} imported {out.stdout.strip()}"


def test_a_system_file_builds_without_python_control():
    # composing a system file and reading its blocks' matrices needs no python-control; a
    # block's control.StateSpace, when asked for, holds the same numbers
    code = """
import sys
import numpy as np
from wirestate.compose import load_system
system = load_system({path!r})
matrices = {{n: b.matrices() for n, b in system.blocks.items() if n != "current_loop"}}
print("control" in sys.modules)
for name, (A, B, C, D) in matrices.items():
    s = system.blocks[name].system
    assert all(np.array_equal(np.asarray(x).reshape(y.shape), y) for x, y in zip(
        (s.A, s.B, s.C, s.D), (A, B, C, D))), name
print("control" in sys.modules)
"""
    code = code.format(path=str(MODELS / "tuning" / "drive_bus_loop.toml"))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "True"]


def test_command_help_still_lists_options(capsys):
    from wirestate.cli import main

    with pytest.raises(SystemExit):
        main(["simulate", "--help"])
    assert "--until" in capsys.readouterr().out
