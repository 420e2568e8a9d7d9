"""The inspect figure: files are written in both formats, pairs are checked by name."""

from __future__ import annotations

import math
import xml.etree.ElementTree as ET

import numpy as np
import pytest

from wirestate.errors import WirestateError
from wirestate.lti import CircuitBlock
from wirestate.report.inspect_plot import bode_frequencies, parse_pair, plot_inspect
from wirestate.report.signature import as_linear_model, frequency_response

pytest.importorskip("matplotlib", reason="matplotlib is a test extra; figures need it")


def lightly_damped_rlc(zeta: float = 0.02) -> CircuitBlock:
    # series RLC, output the capacitor voltage: H = wn^2 / (s^2 + 2 zeta wn s + wn^2)
    L, C = 1e-3, 1e-6
    R = 2 * zeta * math.sqrt(L / C)
    return CircuitBlock(
        "lc_tank",
        [[-R / L, -1 / L], [1 / C, 0.0]],
        [[1 / L], [0.0]],
        [[0.0, 1.0], [1.0, 0.0]],
        [[0.0], [0.0]],
        ["i_L1", "v_C1"],
        ["Vs"],
        ["v_C1", "i_L1"],
        units={"Vs": "V", "v_C1": "V", "i_L1": "A"},
    )


@pytest.mark.parametrize("suffix", [".png", ".svg"])
def test_figure_is_written_in_the_format_of_the_suffix(tmp_path, suffix):
    path = plot_inspect(lightly_damped_rlc(), tmp_path / f"inspect{suffix}")
    data = path.read_bytes()
    assert len(data) > 10_000
    if suffix == ".png":
        assert data.startswith(b"\x89PNG\r\n\x1a\n")  # PNG signature (ISO/IEC 15948)
    else:
        assert ET.fromstring(data).tag.endswith("svg")
    assert [p.name for p in tmp_path.iterdir()] == [path.name]  # no temp file left


def test_chosen_pairs_and_a_static_block_are_drawn(tmp_path):
    block = lightly_damped_rlc()
    assert plot_inspect(block, tmp_path / "one.png", pairs=[("Vs", "i_L1")]).stat().st_size
    static = CircuitBlock(
        "divider",
        np.zeros((0, 0)),
        np.zeros((0, 1)),
        np.zeros((1, 0)),
        [[0.5]],
        [],
        ["Vs"],
        ["v_out"],
    )
    assert plot_inspect(static, tmp_path / "static.svg").stat().st_size > 0


@pytest.mark.parametrize(
    ("pairs", "code", "named"),
    [
        ([("Vx", "v_C1")], "unknown_signal", "Vx"),
        ([("Vs", "v_nowhere")], "unknown_signal", "v_nowhere"),
    ],
)
def test_unknown_pair_names_are_user_errors(tmp_path, pairs, code, named):
    with pytest.raises(WirestateError) as err:
        plot_inspect(lightly_damped_rlc(), tmp_path / "x.png", pairs=pairs)
    assert err.value.code == code and named in err.value.message
    assert not (tmp_path / "x.png").exists()


def test_other_suffixes_are_refused(tmp_path):
    with pytest.raises(WirestateError) as err:
        plot_inspect(lightly_damped_rlc(), tmp_path / "x.pdf")
    assert err.value.code == "invalid_field" and "x.pdf" in err.value.message


def test_bode_grid_resolves_a_sharp_resonance_peak():
    # source: second-order resonant peak Mr = 1 / (2 zeta sqrt(1 - zeta^2)) at
    # wr = wn sqrt(1 - 2 zeta^2) (Ogata, Modern Control Engineering, 5th ed., sec. 7-2);
    # the drawn peak must be within 0.1 % of it (grid spacing around the mode: zeta wn / 5)
    zeta = 0.02
    block = lightly_damped_rlc(zeta)
    model = as_linear_model(block)
    poles = np.linalg.eigvals(model.A)
    w = bode_frequencies(poles)
    peak = np.abs(frequency_response(model, w)[:, 0, 0]).max()
    assert peak == pytest.approx(1 / (2 * zeta * math.sqrt(1 - zeta**2)), rel=1e-3)


def test_pairs_are_read_from_text():
    assert parse_pair("Vs->v_bus") == ("Vs", "v_bus")
    assert parse_pair(" Iinv : i_choke ") == ("Iinv", "i_choke")
    with pytest.raises(WirestateError) as err:
        parse_pair("v_bus")
    assert err.value.code == "invalid_field" and "v_bus" in err.value.message


def test_a_linear_composed_system_can_be_drawn(tmp_path):
    # a composed system with only continuous LTI blocks offers state_space()
    class Composed:
        name = "pair"
        units = {"Vs": "V"}

        def state_space(self):
            return lightly_damped_rlc().state_space()

    assert plot_inspect(Composed(), tmp_path / "sys.png").stat().st_size > 10_000
