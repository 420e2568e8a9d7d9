"""``wirestate inspect`` on system and tuning files: blocks, signals with units, wiring and
the loop's poles, checked against closed forms of a PI current loop around an RL load."""

from __future__ import annotations

import cmath
import json
import math
from pathlib import Path

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.cli import main

R, L, KP, KI = 2.0, 10e-3, 5.0, 2000.0

COIL = """
[circuit]
name = "coil"
[parts.Va]
kind = "voltage_source"
nodes = ["a", "gnd"]
[parts.R1]
kind = "resistor"
nodes = ["a", "b"]
value = "2ohm"
tolerance = "5%"
[parts.L1]
kind = "inductor"
nodes = ["b", "gnd"]
value = "10mH"
[outputs.i_coil]
current = "L1"
"""

SYSTEM = """
[system]
name = "current_loop"
[blocks.coil]
kind = "circuit"
file = "coil.toml"
[blocks.loop]
kind = "pi"
kp = 5.0
ki = 2000.0
unit = "V"
{extra}
[wiring]
"coil.Va" = "loop.command"
"loop.measurement" = "coil.i_coil"
[inputs]
current_ref = "loop.reference"
[outputs]
current = "coil.i_coil"
"""

TUNING = """
[tuning]
name = "coil_loop"
circuit = "coil.toml"
[variables.R1]
min = "1ohm"
max = "4ohm"
start = "2ohm"
[controller]
measurement = "i_coil"
command = "Va"
kp = 5.0
ki = 2000.0
[scenario]
until = "10ms"
step = "10us"
[[scenario.steps]]
input = "reference"
at = "1ms"
to = "1A"
[[limits]]
name = "peak"
kind = "maximum"
output = "i_coil"
max = "1.2A"
[objective]
resistor_energy = 1.0
parts = ["R1"]
"""


def continuous_loop_poles() -> list[complex]:
    # PI around 1/(L s + R): L s^2 + (R + kp) s + ki = 0 (the characteristic polynomial of
    # unity feedback, e.g. Franklin, Powell and Emami-Naeini, Feedback Control of Dynamic
    # Systems, 7th ed., sec. 4.2)
    a, b, c = L, R + KP, KI
    root = cmath.sqrt(b * b - 4 * a * c)
    return [(-b + root) / (2 * a), (-b - root) / (2 * a)]


def sampled_loop_poles(T: float) -> list[complex]:
    # ZOH of 1/(L s + R): i[k+1] = a i[k] + (1 - a)/R u[k], a = exp(-R T / L) (Franklin,
    # Powell and Workman, Digital Control of Dynamic Systems, 3rd ed., sec. 4.3.3); sampled
    # PI u = kp e + I, I[k+1] = I[k] + ki T e: z = eig [[a - b kp, b], [-ki T, 1]]
    a = math.exp(-R * T / L)
    b = (1 - a) / R
    trace, det = a - b * KP + 1.0, (a - b * KP) + b * KI * T
    root = cmath.sqrt(trace * trace - 4 * det)
    return [cmath.log((trace + root) / 2) / T, cmath.log((trace - root) / 2) / T]


def write(tmp_path: Path, name: str, text: str) -> str:
    (tmp_path / "coil.toml").write_text(COIL)
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def listed_poles(data: dict) -> list[complex]:
    # JSON lists each complex pair once; put the conjugates back
    out = []
    for p in data["poles"]:
        out.append(complex(p["real"], p["imag"]))
        if p["conjugate_pair"]:
            out.append(complex(p["real"], -p["imag"]))
    return out


def assert_same_poles(got: list[complex], expected: list[complex]) -> None:
    # tolerance: eigenvalues of a 2x2 matrix against the quadratic formula, 1e-9 relative
    assert len(got) == len(expected)
    for p in expected:
        assert min(abs(g - p) for g in got) <= 1e-9 * abs(p)


def test_a_system_file_lists_blocks_signals_wiring_and_loop_poles(tmp_path, capsys):
    path = write(tmp_path, "loop.toml", SYSTEM.format(extra=""))
    assert main(["inspect", path]) == 0
    out = capsys.readouterr().out
    assert "system current_loop: 2 blocks, 2 states, 1 input, 1 output" in out
    for text in ("coil", "circuit", "pi", "continuous, linear", "from loop.command",
                 "from external input current_ref", "loop poles"):  # fmt: skip
        assert text in out
    # every signal with its unit: the PI's reference takes the unit of what it measures
    assert any(line.split()[:4] == ["loop", "input", "reference", "A"] for line in out.splitlines())
    assert any(line.split()[:4] == ["loop", "output", "command", "V"] for line in out.splitlines())
    assert main(["inspect", path, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["kind"] == "system" and data["wiring"] == {
        "coil.Va": "loop.command",
        "loop.measurement": "coil.i_coil",
    }
    loop = next(b for b in data["blocks"] if b["name"] == "loop")
    assert {s["name"]: s["unit"] for s in loop["inputs"]} == {"reference": "A", "measurement": "A"}
    assert data["loop"]["sample_time"] is None
    assert_same_poles(listed_poles(data["loop"]), continuous_loop_poles())


def test_a_sampled_loop_is_shown_through_ln_z_over_t(tmp_path, capsys):
    T = 1e-3
    path = write(tmp_path, "loop.toml", SYSTEM.format(extra='sample_time = "1ms"'))
    assert main(["inspect", path, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["loop"]["sample_time"] == pytest.approx(T)
    assert_same_poles(listed_poles(data["loop"]), sampled_loop_poles(T))
    assert main(["inspect", path]) == 0
    assert "s = ln(z) / T" in capsys.readouterr().out


def test_a_limited_controller_is_taken_unsaturated(tmp_path, capsys):
    extra = 'output_limits = ["-50V", "50V"]'
    path = write(tmp_path, "loop.toml", SYSTEM.format(extra=extra))
    assert main(["inspect", path, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert_same_poles(listed_poles(data["loop"]), continuous_loop_poles())
    assert "unsaturated" in data["loop"]["note"]


def test_a_tuning_file_shows_what_it_sizes_and_the_loop(tmp_path, capsys):
    path = write(tmp_path, "tune.toml", TUNING)
    assert main(["inspect", path]) == 0
    out = capsys.readouterr().out
    for text in ("tuning coil_loop: sizes R1 of circuit coil", "design variables", "1 Ω",
                 "4 Ω", "PI measuring i_coil, driving Va", "reference steps to 1 A at 1 ms",
                 "peak", "<= 1.2 A", "least energy in R1", "loop poles at the starting values",
                 "block coil: 1 state, 1 input, 1 output"):  # fmt: skip
        assert text in out, text
    assert main(["inspect", path, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["kind"] == "tuning" and data["model"]["kind"] == "circuit"
    assert data["variables"]["R1"]["start"] == pytest.approx(2.0)
    assert_same_poles(listed_poles(data["loop"]), continuous_loop_poles())


@pytest.mark.parametrize(
    "name",
    ["systems/battery_drive.toml", "systems/focus_stage.toml", "tuning/drive_bus_loop.toml",
     "tuning/drive_bus_damping.toml", "tuning/drive_bus_loop_damping.toml"],
)  # fmt: skip
def test_every_bundled_system_and_tuning_file_can_be_inspected(name, capsys):
    assert main(["inspect", str(MODELS / name), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["loop"]["poles"], name
    assert all(np.isfinite(p["natural_frequency"]) or p["real"] == "-inf"
               for p in data["loop"]["poles"])  # fmt: skip


def test_a_file_of_no_known_kind_names_what_a_circuit_lacks(tmp_path, capsys):
    path = tmp_path / "x.toml"
    path.write_text("[something]\nname = 'x'\n")
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and str(path) in err
