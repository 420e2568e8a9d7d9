"""Bad command-line inputs found by a second review of every command (issue 10): each one
gave a traceback, was accepted silently, or failed only after the work was done. Each test
is one reproducer; every outcome must be one line ``error: ...`` and exit status 2."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from tests.robustness.conftest import RC, buck, toml_text
from wirestate.cli import main
from wirestate.errors import WirestateError

ROOT = Path(__file__).resolve().parents[2]
TUNING = str(ROOT / "models" / "tuning" / "drive_bus_damping.toml")
BUS_FILTER = str(ROOT / "models" / "drive_bus_filter.toml")


def _one_error_line(capsys) -> str:
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: "), err
    return err[0]


def _refused(argv, capsys) -> str:
    """Run the CLI; a mistake may end in argparse (SystemExit) or in run() (return 2)."""
    try:
        status = main(argv)
    except SystemExit as exc:
        status = exc.code
    assert status == 2
    return _one_error_line(capsys)


@pytest.mark.parametrize(
    "argv",
    [
        ["simulate", BUS_FILTER, "--until", "-1ms", "--step", "1us"],  # read as an option
        ["simulate", BUS_FILTER, "--until", "1ms", "--step", "1us", "--rtol", "abc"],
        ["simulate", BUS_FILTER, "--until", "1ms", "--step", "1us", "--hold", "xyz"],
        ["schema", "unknownformat"],
        ["schema", "circuit", "extra"],
        ["nonsense"],
    ],
)
def test_argument_mistakes_give_one_error_line(argv, capsys):
    # argparse printed its usage block and "PROG: error: ..." (several lines)
    line = _refused(argv, capsys)
    assert "--help" in line


def test_a_negative_seed_is_refused(capsys):
    # was a ValueError traceback from numpy's SeedSequence
    line = _refused(["yield", TUNING, "--samples", "10", "--seed", "-1"], capsys)
    assert "seed" in line


def test_a_part_given_twice_in_a_sweep_grid_is_refused(capsys):
    # was accepted: the second axis silently replaced the first, a 1-D sweep
    line = _refused(["sweep", TUNING, "--grid", "Rd=1:2:3,Rd=1:2:3"], capsys)
    assert "Rd appears twice" in line


@pytest.mark.parametrize(
    "argv",
    [
        ["tune", "absent.toml", "--json", "{folder}/missing/x.json"],
        ["yield", "absent.toml", "--json", "{folder}/missing/x.json"],
        ["sweep", "absent.toml", "--grid", "Rd=1:2:3", "--csv", "{folder}/missing/x.csv"],
        ["export", "absent.toml", "--fmu", "{folder}/missing/x.fmu"],
        ["tune", "absent.toml", "--plot", "{folder}/tune.txt"],
    ],
)
def test_output_paths_are_checked_before_any_work(argv, tmp_path, capsys):
    # a tuning or yield of minutes failed only at the end, on writing its result; the
    # absent spec file shows that the output is checked first
    argv = [a.format(folder=tmp_path) for a in argv]
    line = _refused(argv, capsys)
    assert "absent.toml" not in line and str(tmp_path) in line


def test_inspect_checks_pair_without_plot(capsys):
    # --pair was ignored unless --plot was given, a mistake accepted silently
    line = _refused(["inspect", BUS_FILTER, "--pair", "nonsense"], capsys)
    assert "--pair" in line


def test_benchmark_file_with_a_ratio_that_is_no_number_is_refused(tmp_path, capsys):
    # was accepted and reported as "no ratio"
    path = tmp_path / "bench.json"
    path.write_text(
        json.dumps(
            {
                "format": "wirestate-benchmarks",
                "version": 1,
                "results": [{"name": "x", "ratio": "abc"}],
            }
        )  # fmt: skip
    )
    line = _refused(["bench-compare", str(path), str(path)], capsys)
    assert "results.0.ratio" in line


def test_fmu_file_name_must_end_in_fmu(tmp_path, capsys):
    # FMI 2.0: an FMU is a zip archive with the extension .fmu (from memory, sec. 2.3)
    line = _refused(
        ["export", BUS_FILTER, "--fmu", str(tmp_path / "x.zip"), "--sources-only"], capsys
    )
    assert ".fmu" in line


def test_switched_circuit_is_not_exported_as_a_linear_fmu(tmp_path, capsys):
    # was exported with the switch's gate as an input that changed nothing
    model = tmp_path / "buck.toml"
    model.write_text(toml_text(buck()))
    line = _refused(
        ["export", str(model), "--fmu", str(tmp_path / "b.fmu"), "--sources-only"], capsys
    )
    assert "Q1 (switch), D1 (diode)" in line and "parts.Q1" in line


def test_a_subnormal_part_value_is_refused_at_its_field(tmp_path, capsys):
    # 1e-320 F was reported as singular equations through V1 and C1
    data = json.loads(json.dumps(RC))
    data["parts"]["C1"]["value"] = 1e-320
    model = tmp_path / "tiny.toml"
    model.write_text(toml_text(data))
    line = _refused(["inspect", str(model)], capsys)
    assert "parts.C1.value" in line and "smallest normal double" in line


def test_a_value_that_rounds_to_zero_is_refused():
    from wirestate.units import parse_quantity

    with pytest.raises(WirestateError) as err:
        parse_quantity("1e-400F", "F")
    assert err.value.code == "invalid_quantity"
    assert parse_quantity("0F", "F") == 0.0  # an exact zero stays a zero


def test_equations_that_overflow_name_the_part_values(tmp_path, capsys):
    # 1 / (R C) = 1e290 / 1e-10... beyond the double range: not "singular equations"
    data = json.loads(json.dumps(RC))
    data["parts"]["R1"]["value"] = 1e-10
    data["parts"]["C1"]["value"] = 1e-300
    model = tmp_path / "spread.toml"
    model.write_text(toml_text(data))
    line = _refused(["inspect", str(model)], capsys)
    assert "floating-point range" in line and "parts.C1" in line and "290 decades" in line


def test_the_run_size_message_stays_readable(tmp_path, capsys):
    # the sample count was printed with 300 digits
    model = tmp_path / "rc.toml"
    model.write_text(toml_text(RC))
    line = _refused(["simulate", str(model), "--until", "1s", "--step", "1e-300s"], capsys)
    assert "1e+300 samples" in line and len(line) < 400


def test_pwm_phase_must_be_finite(tmp_path, capsys):
    # phase=nan gave a gate that was never on, silently
    model = tmp_path / "rc.toml"
    model.write_text(toml_text(RC))
    argv = ["simulate", str(model), "--until", "1ms", "--step", "1us",
            "--input", "V1=pwm:10kHz,duty=0.5,phase=nan"]  # fmt: skip
    line = _refused(argv, capsys)
    assert "inputs.V1" in line and "phase" in line
