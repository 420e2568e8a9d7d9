"""`wirestate --help` and `wirestate schema` must not import the heavy libraries.

A behaviour check (which modules get loaded), not a timing: python-control, scipy.signal,
CasADi and matplotlib take seconds to import and neither command uses them.
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

HEAVY = ("control", "casadi", "matplotlib", "scipy.signal")
BUS_FILTER = str(Path(__file__).resolve().parents[2] / "models" / "drive_bus_filter.toml")

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


def test_command_help_still_lists_options(capsys):
    from wirestate.cli import main

    with pytest.raises(SystemExit):
        main(["simulate", "--help"])
    assert "--until" in capsys.readouterr().out
