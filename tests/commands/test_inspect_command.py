"""``wirestate inspect`` and ``wirestate schema`` through the command-line entry point."""

from __future__ import annotations

import json

import pytest

from tests.conftest import MODELS
from wirestate.cli import main

MODEL = str(MODELS / "drive_bus_filter.toml")


def test_inspect_prints_signals_modes_and_dc_gain(capsys):
    assert main(["inspect", MODEL]) == 0
    out = capsys.readouterr().out
    for text in ("i_Lf", "v_Cbus", "v_Cd", "Vbat", "Iinv", "v_bus", "damping ratio", "DC gain"):
        assert text in out


def test_inspect_json(capsys):
    assert main(["inspect", MODEL, "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["name"] == "bus_filter"
    assert data["states"] == ["i_Lf", "v_Cbus", "v_Cd"]
    assert data["inputs"] == ["Vbat", "Iinv"]
    assert data["outputs"] == ["v_bus", "i_choke", "i_damp"]
    n, m, p = 3, 2, 3
    assert (len(data["A"]), len(data["A"][0])) == (n, n)
    assert (len(data["B"]), len(data["B"][0])) == (n, m)
    assert (len(data["C"]), len(data["C"][0])) == (p, n)
    assert (len(data["D"]), len(data["D"][0])) == (p, m)
    # one entry per real pole or complex pair; the count states the poles with multiplicity
    assert data["pole_count"] == n
    assert sum(2 if p["conjugate_pair"] else 1 for p in data["poles"]) == n


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("[circuit\nname = 'x'", "not valid TOML"),
        ("[circuit]\nname='x'\n[parts.Q1]\nkind='bjt'\nnodes=['a','gnd']\n", "parts.Q1"),
        (
            "[circuit]\nname='x'\n[parts.L1]\nkind='inductor'\nnodes=['a','gnd']\nvalue='3uF'\n",
            "parts.L1.value",
        ),
        (
            "[circuit]\nname='x'\n[parts.V1]\nkind='voltage_source'\nnodes=['a','gnd']\n"
            "[parts.V2]\nkind='voltage_source'\nnodes=['a','gnd']\n",
            "parts.V2",
        ),
    ],
)
def test_user_mistakes_give_one_line_and_exit_2(tmp_path, capsys, text, expected):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    assert main(["inspect", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and err.count("\n") == 1
    assert str(path) in err and expected in err
    assert "Traceback" not in err


def test_missing_file(capsys, tmp_path):
    assert main(["inspect", str(tmp_path / "absent.toml")]) == 2
    assert "no such file" in capsys.readouterr().err


def test_schema_is_json_schema(capsys):
    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert "parts" in schema["properties"] and "$defs" in schema


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_inspect_plot_writes_a_figure(tmp_path, capsys, suffix):
    target = tmp_path / f"poles{suffix}"
    assert main(["inspect", MODEL, "--plot", str(target), "--pair", "Vbat:v_bus"]) == 0
    data = target.read_bytes()
    assert len(data) > 1000
    assert data.startswith(b"\x89PNG") if suffix == ".png" else b"<svg" in data


def test_inspect_plot_refuses_an_unknown_format(tmp_path, capsys):
    assert main(["inspect", MODEL, "--plot", str(tmp_path / "poles.bmp")]) == 2
    assert "PNG or SVG" in capsys.readouterr().err
    assert not (tmp_path / "poles.bmp").exists()
