"""The state-space file kind: writing, reading, systems, the command line, stale sources."""

from __future__ import annotations

import shutil
import tomllib
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.conftest import MODELS
from wirestate.balanced import reduce_block, reduction_spec
from wirestate.cli import main
from wirestate.compose import load_system, system_from_spec
from wirestate.errors import WirestateError, WirestateWarning
from wirestate.lti import load_state_space_block
from wirestate.reduce import load_block
from wirestate.spec.state_space import dumps_state_space, parse_state_space
from wirestate.spec.system import parse_system

CABLE = MODELS / "feeder_cable.toml"
REDUCED = MODELS / "feeder_cable_reduced.toml"
MONITOR = MODELS / "systems" / "feeder_monitor.toml"


@pytest.fixture
def workdir(tmp_path):
    shutil.copy(CABLE, tmp_path / "cable.toml")
    return tmp_path


def test_written_file_reads_back_the_same_block_exactly(workdir):
    result = reduce_block(load_block(workdir / "cable.toml"), order=8, match_dc=True)
    out = workdir / "cable_8.toml"
    out.write_text(dumps_state_space(reduction_spec(result, workdir / "cable.toml", out)))
    block = load_block(out)
    # floats are written with repr, which round-trips exactly (Python language reference)
    for name in "ABCD":
        assert np.array_equal(getattr(block, name), getattr(result.block, name))
    assert block.states == [f"bal{i}" for i in range(1, 9)]
    assert block.units == {"Vinv": "V", "v_motor": "V", "i_inverter": "A"}
    record = tomllib.loads(out.read_text())["reduction"]
    assert record["method"] == "singular_perturbation"
    assert record["source"]["file"] == "cable.toml" and record["source"]["states"] == 13
    assert record["error_bound"] == result.error_bound


def test_the_bundled_reduced_block_is_current_and_matches_its_record():
    block = load_state_space_block(REDUCED, on_stale="error")  # the digest still matches
    spec = block.spec.reduction
    fresh = reduce_block(load_block(CABLE), order=block.n_states, match_dc=True)
    assert spec.error_bound == pytest.approx(fresh.error_bound, rel=1e-9)
    # same input-output map: the DC gains agree (singular perturbation, Liu and Anderson
    # 1989); the realisation itself may differ by signs of the balanced coordinates
    np.testing.assert_allclose(block.dc_gain(), load_block(CABLE).dc_gain(), rtol=1e-9)


def _full_monitor():
    data = tomllib.loads(MONITOR.read_text())
    data["blocks"]["feeder"] = {"kind": "circuit", "file": "../feeder_cable.toml"}
    return system_from_spec(parse_system(data, file=str(MONITOR)), file=MONITOR)


def test_a_system_with_the_reduced_block_stays_within_the_bound_of_the_full_one():
    from wirestate.simulate import simulate
    from wirestate.simulate.inputs import Step

    reduced, full = load_system(MONITOR), _full_monitor()
    assert reduced.blocks["feeder"].states[0] == "bal1"
    bound = load_state_space_block(REDUCED).spec.reduction.error_bound
    # The probes are first-order low-passes of unit gain (H-infinity norm 1), so the
    # system's error is at most the block's: ||F (G - G_r)||_inf <= ||G - G_r||_inf.
    # L2 gain = H-infinity norm (Zhou, Doyle and Glover, Robust and Optimal Control,
    # sec. 4.3): for a 1 V pulse of 20 us, ||y - y_r||_2 <= bound * ||u||_2. Exact ZOH
    # samples every 1 ns (the fastest mode, 83 Mrad/s, is sampled 12 times per period);
    # the rectangle rule then stays within 1 % of the integral, hence the 1.01.
    width, dt, until = 20e-6, 1e-9, 400e-6
    pulse = {"Vinv": Step(final=0.0, at=width, initial=1.0)}
    a = simulate(full, until, dt, pulse, use_defaults=False)
    b = simulate(reduced, until, dt, pulse, use_defaults=False)
    for name in ("v_motor_measured", "i_inverter_measured"):
        e = a.output(name) - b.output(name)
        assert np.sqrt(np.sum(e**2) * dt) <= 1.01 * bound * np.sqrt(width)
    # DC: equal to round-off with the singular-perturbation approximation (Liu and Anderson
    # 1989); the systems' DC gains come from their composed matrices
    gain_full = np.asarray(full.state_space().dcgain()).ravel()
    gain_reduced = np.asarray(reduced.state_space().dcgain()).ravel()
    np.testing.assert_allclose(gain_reduced, gain_full, rtol=1e-9)
    # a 1 V step: the peak difference over the run stays below the bound too. The
    # H-infinity norm does not bound peak-to-peak errors in general, so this is a
    # measured statement about this block (the difference is below a third of the bound)
    step = {"Vinv": Step(final=1.0)}
    a = simulate(full, 100e-6, dt, step, use_defaults=False)
    b = simulate(reduced, 100e-6, dt, step, use_defaults=False)
    for name in ("v_motor_measured", "i_inverter_measured"):
        assert np.max(np.abs(a.output(name) - b.output(name))) <= bound


def test_reduce_command_prints_the_values_and_the_bound_and_writes_atomically(workdir, capsys):
    out = workdir / "r.toml"
    assert main(["reduce", str(workdir / "cable.toml"), "--error", "0.05", "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert "13 -> 10 states" in text and "Hankel singular values" in text
    assert "discarded" in text and "H-infinity error bound" in text
    assert "of the full block's H-infinity norm" in text
    assert load_block(out).n_states == 10
    assert sorted(p.name for p in workdir.iterdir()) == ["cable.toml", "r.toml"]
    # inspect and simulate take the written file
    assert main(["inspect", str(out), "--json"]) == 0
    assert '"bal1"' in capsys.readouterr().out
    csv = workdir / "r.csv"
    args = ["simulate", str(out), "--until", "5us", "--step", "10ns", "--input", "Vinv=1V"]
    assert main([*args, "--csv", str(csv)]) == 0
    assert csv.read_text().splitlines()[0] == "time,v_motor,i_inverter"


@pytest.mark.parametrize(
    ("args", "named"),
    [
        (["--order", "13"], "not below the block's 13 states"),
        (["--order", "40"], "from 0 to 12"),
        (["--error", "1e-12"], "ask for a larger --error"),
        (["--error", "0"], "positive relative bound"),
    ],
)
def test_reduce_command_bad_requests_are_one_line_errors(workdir, capsys, args, named):
    out = workdir / "r.toml"
    out.write_text("kept\n")
    assert main(["reduce", str(workdir / "cable.toml"), *args, "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("error: ") and named in err[0]
    assert "cable.toml" in err[0]
    assert out.read_text() == "kept\n"  # nothing the user had is overwritten


def test_reduce_command_refuses_a_missing_output_folder_before_any_work(workdir, capsys):
    out = workdir / "no_such_folder" / "r.toml"
    assert main(["reduce", str(workdir / "cable.toml"), "--order", "4", "--out", str(out)]) == 2
    assert "does not exist" in capsys.readouterr().err


def test_a_stale_source_warns_on_load_and_fails_regress(workdir, capsys):
    from wirestate.report.golden import regress_file

    out = workdir / "r.toml"
    assert main(["reduce", str(workdir / "cable.toml"), "--order", "8", "--out", str(out)]) == 0
    capsys.readouterr()
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        load_block(out)  # not stale: no warning
    source = workdir / "cable.toml"
    source.write_text(source.read_text().replace('value = "0.6 ohm"', 'value = "0.7 ohm"'))
    with pytest.warns(WirestateWarning, match="changed since this block was reduced"):
        block = load_block(out)
    assert any(note.startswith("stale:") for note in block.notes)
    with pytest.raises(WirestateError) as info:
        load_state_space_block(out, on_stale="error")
    assert info.value.code == "stale_source"
    assert info.value.location == ("reduction", "source", "sha256")
    outcome = regress_file(out, workdir / "golden", update=True)
    assert outcome.status == "error" and "changed since this block was reduced" in outcome.message
    assert not (workdir / "golden").exists()  # no golden file for a stale block
    # the command line prints the warning as one line
    assert main(["inspect", str(out)]) == 0
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("warning: ") and "wirestate reduce" in err[0]


def _file(**changes):
    data = {
        "state_space": {"name": "lag", "inputs": ["u"], "outputs": ["y"], "states": ["x"]},
        "matrices": {"A": [[-1.0]], "B": [[1.0]], "C": [[1.0]], "D": [[0.0]]},
    }
    for key, value in changes.items():
        table, field = key.split("__")
        data[table][field] = value
    return data


@pytest.mark.parametrize(
    ("changes", "code", "location"),
    [
        ({"matrices__A": [[-1.0], [0.0]]}, "invalid_field", ("matrices", "A")),
        ({"matrices__B": [[1.0, 2.0]]}, "invalid_field", ("matrices", "B", 0)),
        ({"matrices__initial": [0.0, 1.0]}, "invalid_field", ("matrices", "initial")),
        ({"state_space__units": {"w": "V"}}, "unknown_signal", ("state_space", "units", "w")),
        ({"state_space__input_defaults": {"y": 1.0}}, "unknown_signal",
         ("state_space", "input_defaults", "y")),
        ({"state_space__states": ["x", "x"]}, "invalid_field", ("state_space", "states")),
        ({"state_space__name": "1lag"}, "invalid_name", ("state_space", "name")),
        ({"matrices__E": [[1.0]]}, "unknown_field", ("matrices", "E")),
        ({"matrices__A": [["a"]]}, "invalid_field", ("matrices", "A", 0, 0)),
    ],
)  # fmt: skip
def test_bad_state_space_files_name_the_field(changes, code, location):
    with pytest.raises(WirestateError) as info:
        parse_state_space(_file(**changes), file="lag.toml")
    assert info.value.code == code and info.value.location == location
    assert info.value.file == "lag.toml"


def test_a_hand_written_state_space_file_is_a_block(tmp_path):
    # a first-order lag 1/(s + 1): DC gain 1, pole at -1 (closed form)
    path = tmp_path / "lag.toml"
    path.write_text(dumps_state_space(parse_state_space(_file())))
    block = load_block(path)
    assert block.poles() == pytest.approx([-1.0]) and block.dc_gain()[0, 0] == pytest.approx(1.0)
    assert block.notes == []


_entries = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True), st.integers(-5, 5), st.text(max_size=3)
)


@settings(max_examples=60, deadline=None)
@given(
    rows=st.lists(st.lists(_entries, max_size=3), max_size=3),
    names=st.lists(st.sampled_from(["x", "y", "u", "1a", "x"]), max_size=3),
    table=st.sampled_from(["A", "B", "C", "D", "initial"]),
)
def test_random_state_space_files_load_or_raise_our_error(rows, names, table):
    # parser property (common practice, no source): a block or a WirestateError, never
    # another exception
    data = _file()
    data["matrices"][table] = rows if table != "initial" else [r[0] for r in rows if r]
    data["state_space"]["states"] = names
    try:
        spec = parse_state_space(data, file="random.toml")
    except WirestateError:
        return
    from wirestate.lti import block_from_state_space

    block = block_from_state_space(spec)
    assert block.A.shape == (len(names), len(names))
