"""Which existing files an output option may not replace (simulate.guards.model_file_kind)."""

from __future__ import annotations

import pytest

from wirestate.errors import WirestateError
from wirestate.simulate.guards import check_output_path, model_file_kind


def test_model_files_are_recognised_by_their_kind_table(tmp_path):
    circuit = tmp_path / "c.toml"
    circuit.write_text('# a comment first\n\n[circuit]\nname = "c"\n')
    dotted = tmp_path / "d.toml"
    dotted.write_text('state_space.name = "s"\nstate_space.inputs = []\n')
    assert model_file_kind(circuit) == "circuit"
    assert model_file_kind(dotted) == "state_space"


def test_other_files_are_not_models_and_may_be_replaced(tmp_path):
    old_run = tmp_path / "run.csv"
    old_run.write_text("time,v\n" + "0.0,1.0\n" * 200_000)  # 1.6 MB, read only at its head
    figure = tmp_path / "f.png"
    figure.write_bytes(b"\x89PNG\r\n\x1a\n" + bytes(1000))
    report = tmp_path / "r.json"
    report.write_text('{"circuit": {"name": "c"}}')  # JSON that mentions a circuit
    for path in (old_run, figure, report, tmp_path / "new.csv"):
        assert model_file_kind(path) is None
        assert check_output_path(path, "--csv") == path


def test_a_model_file_is_refused_and_a_state_space_file_may_be_replaceable(tmp_path):
    reduced = tmp_path / "r.toml"
    reduced.write_text('[state_space]\nname = "r"\n')
    with pytest.raises(WirestateError) as info:
        check_output_path(reduced, "--csv")
    assert info.value.code == "output_is_input" and "state-space file" in info.value.message
    assert check_output_path(reduced, "--out", replaceable=("state_space",)) == reduced
