"""Runs that must be checked before work and results that must not pass silently
(issue 10, items 8-10 and 15; issue 9 item 8)."""

from __future__ import annotations

import csv
import os
import subprocess
import sys

import numpy as np
import pytest

from tests.robustness.conftest import RC, buck, circuit, part, toml_text
from wirestate.cli import main
from wirestate.errors import WirestateError

# a non-inverting amplifier of gain 3.5 feeding its own RC: dv/dt = (3.5 - 1) v / (R C),
# a pole at +2500 1/s for R C = 1 ms (first-order closed form)
UNSTABLE = circuit(
    "unstable",
    {"R1": part("resistor", ["a", "b"], value="1kohm"),
     "C1": part("capacitor", ["b", "gnd"], value="1uF", initial="1V"),
     "E1": part("vcvs", ["a", "gnd"], control="b", gain=3.5)},
    {"v": {"voltage": "b"}},
)  # fmt: skip


@pytest.fixture
def rc_file(tmp_path):
    path = tmp_path / "rc.toml"
    path.write_text(toml_text(RC))
    return path


def _error(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: "), err
    return err[0]


@pytest.mark.parametrize("value", ["-1", "nan", "inf", "1.5"])
def test_rtol_is_checked(rc_file, capsys, value):
    assert (
        main(["simulate", str(rc_file), "--until", "1ms", "--step", "10us", "--rtol", value]) == 2
    )
    assert "--rtol" in _error(capsys)


@pytest.mark.parametrize("value", ["nan", "-5", "inf"])
def test_bench_compare_threshold_is_checked(tmp_path, capsys, value):
    for name in ("a.json", "b.json"):
        (tmp_path / name).write_text('{"results": []}')
    args = ["bench-compare", str(tmp_path / "a.json"), str(tmp_path / "b.json")]
    assert main([*args, "--threshold", value]) == 2
    assert "--threshold" in _error(capsys)


def test_output_into_a_missing_folder_fails_before_the_run(rc_file, capsys, monkeypatch):
    import wirestate.simulate as command  # the command imports simulate() when it runs

    def never(*args, **kwargs):
        raise AssertionError("the run started before the output path was checked")

    monkeypatch.setattr(command, "simulate", never)
    missing = rc_file.parent / "no_such_folder" / "out.csv"
    assert (
        main(["simulate", str(rc_file), "--until", "1ms", "--step", "10us", "--csv", str(missing)])
        == 2
    )
    assert "does not exist" in _error(capsys)
    assert (
        main(
            [
                "simulate",
                str(rc_file),
                "--until",
                "1ms",
                "--step",
                "10us",
                "--plot",
                str(missing.with_suffix(".png")),
            ]
        )
        == 2
    )


def test_a_run_too_large_is_refused_with_the_estimate(rc_file, capsys, monkeypatch):
    import wirestate.simulate.guards as guards

    monkeypatch.setattr(guards, "memory_budget", lambda: 2**30)
    # 1e10 samples x (4 states + 3 inputs + 2 outputs + 2) x 8 bytes = 596 GiB (issue 9.8)
    assert main(["simulate", str(rc_file), "--until", "10s", "--step", "1ns"]) == 2
    line = _error(capsys)
    assert "GiB" in line and "--step" in line and "--csv" in line


def test_a_csv_too_large_for_the_disk_is_refused(rc_file, capsys):
    csv_path = rc_file.parent / "out.csv"
    assert (
        main(["simulate", str(rc_file), "--until", "1Ms", "--step", "1ns", "--csv", str(csv_path)])
        == 2
    )
    assert "free on its disk" in _error(capsys)
    assert not csv_path.exists()


def test_long_runs_stream_to_the_csv_with_the_same_numbers(rc_file, capsys, monkeypatch):
    import wirestate.simulate.guards as guards
    import wirestate.simulate.streaming as streaming

    direct = rc_file.parent / "direct.csv"
    assert (
        main(["simulate", str(rc_file), "--until", "5ms", "--step", "1us", "--csv", str(direct)])
        == 0
    )
    monkeypatch.setattr(guards, "memory_budget", lambda: 10_000)  # forces streaming
    monkeypatch.setattr(streaming, "BLOCK_SAMPLES", 777)  # blocks that do not divide the run
    streamed = rc_file.parent / "streamed.csv"
    assert (
        main(["simulate", str(rc_file), "--until", "5ms", "--step", "1us", "--csv", str(streamed)])
        == 0
    )
    assert "streamed" in capsys.readouterr().out
    a = np.array(list(csv.reader(direct.open()))[1:], dtype=float)
    b = np.array(list(csv.reader(streamed.open()))[1:], dtype=float)
    assert a.shape == b.shape == (5001, 2)
    # same recurrence restarted at the block edges: equal to round-off (1e-12 relative)
    np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-15)
    # and the RC charging closed form v = 5 (1 - exp(-t / RC)) (1e-9: matrix exponential)
    np.testing.assert_allclose(b[:, 1], 5 * (1 - np.exp(-b[:, 0] / 1e-3)), atol=1e-9)


def test_an_unstable_circuit_stops_naming_the_mode(tmp_path, capsys):
    path = tmp_path / "unstable.toml"
    path.write_text(toml_text(UNSTABLE))
    out = tmp_path / "u.csv"
    assert main(["simulate", str(path), "--until", "1s", "--step", "10us", "--csv", str(out)]) == 2
    line = _error(capsys)
    assert "2500 1/s" in line and "unstable" in line
    # overflow near exp(2500 t) = 1.8e308: t = ln(1.8e308) / 2500 = 0.2839 s
    assert "t = 0.28" in line
    assert not out.exists()


def test_a_nan_phase_is_refused(rc_file, capsys):
    args = ["simulate", str(rc_file), "--until", "1ms", "--step", "10us"]
    assert main([*args, "--input", "V1=sinusoid:1V,1kHz,phase=nan"]) == 2
    assert "inputs.V1" in _error(capsys)


def test_a_part_far_below_the_rest_is_reported_not_written_as_nan(tmp_path):
    from wirestate.reduce import compile_circuit
    from wirestate.simulate import simulate
    from wirestate.spec import parse_circuit

    data = circuit(
        "tiny",
        {"V1": part("voltage_source", ["a", "gnd"], value="5V"),
         "R1": part("resistor", ["a", "b"], value="1kohm"),
         "C1": part("capacitor", ["b", "gnd"], value=1e-300),
         "L1": part("inductor", ["b", "gnd"], value="1mH")},
        {"i": {"current": "L1"}},
    )  # fmt: skip
    block = compile_circuit(parse_circuit(data))
    # the DC gain is still exact: i_L / V = 1 / R (the inductor shorts the capacitor at DC)
    assert block.dc_gain()[0, 0] == pytest.approx(1e-3, rel=1e-12)
    try:
        result = simulate(block, 1e-3, 1e-6)
    except WirestateError as exc:
        assert exc.code == "non_finite_result" and "fastest mode" in exc.message
    else:
        assert np.all(np.isfinite(result.outputs))


def test_a_killed_write_leaves_an_obviously_disposable_file_that_the_next_write_removes(tmp_path):
    from wirestate.atomic import PARTIAL_MARK, write_atomic

    target = tmp_path / "result.csv"
    # a child process that starts an atomic write and is killed in the middle of it
    code = (
        "import os, sys\n"
        "from wirestate.atomic import open_atomic\n"
        f"with open_atomic({str(target)!r}) as h:\n"
        "    h.write('partial'); h.flush(); os.kill(os.getpid(), 9)\n"
    )
    subprocess.run([sys.executable, "-c", code], check=False)
    left = [p for p in tmp_path.iterdir() if p.name != "result.csv"]
    assert len(left) == 1 and PARTIAL_MARK in left[0].name and left[0].suffix == ".tmp"
    # one from a process that is still running (ours, standing for another writer) is kept
    alive = tmp_path / f".result.csv{PARTIAL_MARK}{os.getpid()}-x.tmp"
    alive.write_text("")
    write_atomic(target, "complete\n")
    assert target.read_text() == "complete\n"
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(["result.csv", alive.name])


def test_a_switched_run_beyond_memory_is_refused_before_its_grid():
    # found by make fuzz: a 1e-300 s step gave numpy's "Maximum allowed size exceeded"
    # from the time grid of the switched engine, which the run-size check did not cover
    from wirestate.reduce import compile_circuit
    from wirestate.simulate.switched import simulate_switched
    from wirestate.spec import parse_circuit

    block = compile_circuit(parse_circuit(buck()))
    with pytest.raises(WirestateError) as err:
        simulate_switched(block, 4e-5, 1e-300, {"Q1": "pwm:100kHz,duty=0.5"})
    assert err.value.code == "run_too_large"
