"""`wirestate simulate` on circuit and system files: CSV, plot, progress, errors."""

from __future__ import annotations

import csv

import numpy as np
import pytest

from tests.conftest import MODELS
from tests.simulate.test_switched_system import BUCK
from wirestate.cli import main


def test_circuit_file_to_csv_and_plot(tmp_path, capsys):
    out = tmp_path / "bus.csv"
    png = tmp_path / "bus.png"
    code = main(["simulate", str(MODELS / "drive_bus_filter.toml"), "--until", "2ms",
                 "--step", "1us", "--input", "Vbat=step:48V", "--csv", str(out),
                 "--plot", str(png)])  # fmt: skip
    assert code == 0
    text = capsys.readouterr().out
    assert "v_bus" in text and "caution" in text
    rows = list(csv.reader(out.open()))
    assert rows[0] == ["time", "v_bus", "i_choke", "i_damp"]
    assert len(rows) == 1 + 2001
    assert float(rows[1][0]) == 0.0 and float(rows[-1][0]) == pytest.approx(2e-3, rel=1e-12)
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_system_file_with_defaults_and_progress(tmp_path, capsys):
    out = tmp_path / "drive.csv"
    code = main(["simulate", str(MODELS / "systems" / "battery_drive.toml"), "--until",
                 "0.3s", "--step", "2us", "--input", "speed_ref=step:100", "--csv",
                 str(out)])  # fmt: skip
    assert code == 0
    captured = capsys.readouterr()
    assert "progress" in captured.err  # 150 000 steps: long run
    data = np.loadtxt(out, delimiter=",", skiprows=1)
    header = out.read_text().splitlines()[0].split(",")
    assert header == ["time", "speed", "motor_speed", "v_bus", "i_arm", "command"]
    # Vbat is driven by its source default (48 V): the bus charges
    assert data[-1, header.index("v_bus")] == pytest.approx(48.0, rel=1e-2)


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--until", "1ms", "--step", "3us"], "whole number"),
        (["--until", "1ms", "--step", "1us", "--input", "Vx=1V"], "Vx"),
        (["--until", "1ms", "--step", "1us", "--input", "Vbat=square:1V"], "square"),
        (["--until=-1ms", "--step", "1us"], "until"),
    ],
)
def test_user_mistakes_exit_2_with_one_line(args, fragment, capsys):
    code = main(["simulate", str(MODELS / "drive_bus_filter.toml"), *args])
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and fragment in err and "Traceback" not in err


def test_first_order_hold_on_a_sampled_system_is_refused(capsys):
    # battery_drive has a sampled speed controller: its outputs are held between samples,
    # so a first-order hold cannot apply; the option must not be ignored silently
    code = main(["simulate", str(MODELS / "systems" / "battery_drive.toml"), "--until",
                 "1ms", "--step", "2us", "--hold", "foh"])  # fmt: skip
    assert code == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and "foh" in err and "Traceback" not in err
    assert "linear time-invariant models only" in err


def test_switched_circuit_writes_every_output_and_marks_events(tmp_path, capsys):
    # issue 12: the switched run, not the all-off mode; the CSV has the file's outputs
    # and the current, voltage and conduction of every switch and diode; fine samples
    # after each event; the figure is drawn with the events marked
    model = tmp_path / "buck.toml"
    model.write_text(BUCK)
    out, png = tmp_path / "buck.csv", tmp_path / "buck.png"
    code = main(["simulate", str(model), "--until", "100us", "--step", "1us",
                 "--input", "g=pwm:100kHz,duty=0.4", "--fine-step", "10ns",
                 "--fine-window", "100ns", "--csv", str(out), "--plot", str(png)])  # fmt: skip
    assert code == 0
    text = capsys.readouterr().out
    assert "switching events" in text and "fine samples" in text
    rows = list(csv.reader(out.open()))
    assert rows[0] == ["time", "v_out", "i_L", "i_Q1", "v_Q1", "on_Q1", "i_D1", "v_D1", "on_D1"]
    data = np.array(rows[1:], dtype=float)
    assert len(data) > 101 and np.all(np.diff(data[:, 0]) > 0)
    on_q1 = data[:, 5]
    assert set(on_q1) == {0.0, 1.0}
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_switched_circuit_averaged_and_never_streamed(tmp_path, capsys):
    from wirestate.commands.simulate import _streams
    from wirestate.reduce import load_block

    model = tmp_path / "buck.toml"
    model.write_text(BUCK)
    assert not _streams(load_block(model), 1e3, 1e-9)  # too large, yet not the linear path
    code = main(["simulate", str(model), "--until", "1ms", "--step", "10us",
                 "--input", "g=pwm:100kHz,duty=0.4", "--averaged"])  # fmt: skip
    assert code == 0
    assert "state-space average" in capsys.readouterr().out
    code = main(["simulate", str(model), "--until", "1ms", "--step", "10us",
                 "--input", "g=pwm:100kHz,duty=0.4", "--fine-step", "1ns"])  # fmt: skip
    assert code == 2
    assert "--fine-window" in capsys.readouterr().err


def test_round_off_of_an_output_that_stays_at_zero_is_shown_as_zero(capsys):
    # from the steady state at 48 V the choke and damping currents are exactly 0 A (the
    # capacitors block DC: the bus is a divider of nothing); the exact-hold steps sum terms
    # of 48 V / 12 mohm scale, so they came out as -113.7 fA and were printed so: the
    # output's own largest value cannot tell that round-off from a signal
    code = main(["simulate", str(MODELS / "drive_bus_filter.toml"), "--until", "2ms",
                 "--step", "10us", "--initial", "steady_state"])  # fmt: skip
    assert code == 0
    rows = {line.split()[0]: line for line in capsys.readouterr().out.splitlines()}
    assert rows["i_choke"].split()[1:] == ["0", "A"] * 3, rows["i_choke"]
    assert rows["i_damp"].split()[1:] == ["0", "A"] * 3, rows["i_damp"]
    assert rows["v_bus"].split()[1:] == ["48", "V"] * 3
