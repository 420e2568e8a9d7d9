"""Figures an engineer reads at a glance: checked on the figure objects, not the files.

Colours stay apart for colour-blind readers, slow and fast modes are both visible, labels
never overlap, one unit per magnitude axis, legends outside the curves, every axis label
names a quantity and its unit in one style, and the tuning figure labels each limit, draws
the tolerance envelope and shows each limit's margin.
"""

from __future__ import annotations

import itertools
import math
import re
from types import SimpleNamespace

import numpy as np
import pytest

from tests.conftest import MODELS
from wirestate.lti import CircuitBlock

pytest.importorskip("matplotlib", reason="matplotlib is a test extra; figures need it")

from wirestate.report import figure as style  # noqa: E402
from wirestate.report.inspect_plot import inspect_figure  # noqa: E402
from wirestate.report.tuning_plot import tuning_figure  # noqa: E402

# -- colours --------------------------------------------------------------------------------

# simulation of dichromacy at full severity in linear RGB: Machado, Oliveira and Fernandes,
# "A physiologically-based model for simulation of color vision deficiency", IEEE TVCG 15
# (2009), table of severity 1.0 (values from memory; each row sums to 1, checked below)
DICHROMACY = {
    "protanopia": [[0.152286, 1.052583, -0.204868], [0.114503, 0.786281, 0.099216],
                   [-0.003882, -0.048116, 1.051998]],
    "deuteranopia": [[0.367322, 0.860646, -0.227968], [0.280085, 0.672501, 0.047413],
                     [-0.011820, 0.042940, 0.968881]],
    "tritanopia": [[1.255528, -0.076749, -0.178779], [-0.078411, 0.930809, 0.147602],
                   [0.004733, 0.691367, 0.303900]],
}  # fmt: skip
#: least CIE76 colour difference between any two line colours: about 2.3 is just
#: noticeable (Sharma, Digital Color Imaging Handbook, 2003, ch. 1); lines on a plot
#: need far more (common practice, no source)
LEAST_DIFFERENCE = 25.0


def linear_rgb(hex_colour: str) -> np.ndarray:
    # sRGB transfer function, IEC 61966-2-1
    c = np.array([int(hex_colour[i : i + 2], 16) / 255 for i in (1, 3, 5)])
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def cielab(rgb: np.ndarray) -> np.ndarray:
    # linear sRGB -> XYZ (D65, IEC 61966-2-1) -> CIELAB (CIE 15:2004)
    M = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722], [0.0193, 0.1192, 0.9505]])
    t = (M @ rgb) / np.array([0.95047, 1.0, 1.08883])
    f = np.where(t > (6 / 29) ** 3, np.cbrt(t), t / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_the_simulation_matrices_keep_white_white():
    for matrix in DICHROMACY.values():
        assert np.sum(matrix, axis=1) == pytest.approx([1, 1, 1], abs=2e-6)


@pytest.mark.parametrize("vision", ["normal", *DICHROMACY])
def test_line_colours_stay_apart_for_colour_blind_readers(vision):
    matrix = np.eye(3) if vision == "normal" else np.array(DICHROMACY[vision])
    labs = [cielab(np.clip(matrix @ linear_rgb(c), 0, 1)) for c in style.PALETTE]
    least = min(np.linalg.norm(a - b) for a, b in itertools.combinations(labs, 2))
    assert least >= LEAST_DIFFERENCE, (vision, least)


def test_line_colours_are_legible_on_white():
    # CIELAB lightness of every line colour well below white's 100 (common practice)
    assert all(cielab(linear_rgb(c))[0] <= 70 for c in style.PALETTE)


# -- one unit style ------------------------------------------------------------------------

UNIT_IN_PARENTHESES = re.compile(r"^.+ \([^()]+\)$")


def all_texts(fig) -> list[str]:
    texts = [t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text"))]
    return [t for t in texts if t]


def assert_one_unit_style(fig) -> None:
    for ax in fig.axes:
        for label in (ax.get_xlabel(), ax.get_ylabel()):
            if label and label not in ("damping ratio", "value"):
                assert UNIT_IN_PARENTHESES.match(label), label
    assert not [t for t in all_texts(fig) if re.search(r"\[[^\]]*\]", t)], "square brackets"


def test_axis_labels_name_the_quantity_and_its_unit():
    assert style.axis_label("voltage", "V") == "voltage (V)"
    assert style.axis_label("impedance", "ohm") == "impedance (Ω)"
    assert style.axis_label("torque", "N*m") == "torque (N·m)"
    assert style.axis_label("damping ratio", "1") == "damping ratio"
    assert style.quantity_of("A") == "current"


def assert_legends_outside(fig) -> None:
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    for ax in fig.axes:
        legend = ax.get_legend()
        if legend is None:
            continue
        box = legend.get_window_extent(renderer)
        frame = ax.get_window_extent(renderer)
        overlap = box.intersection(box, frame)
        assert overlap is None or overlap.width * overlap.height < 1.0, ax.get_title()


def assert_no_overlapping_texts(ax, texts) -> None:
    renderer = ax.figure.canvas.get_renderer()
    boxes = [t.get_window_extent(renderer) for t in texts]
    for a, b in itertools.combinations(boxes, 2):
        assert not a.overlaps(b), "labels overlap"


# -- the inspect figure ------------------------------------------------------------------------


def stiff_block() -> CircuitBlock:
    """A 1 Hz real mode, a lightly damped 50 Hz pair and a 20 kHz pair: poles spanning
    more than four decades, with voltage and current outputs per voltage input."""
    poles = []
    for f, zeta in ((50.0, 0.05), (20e3, 0.3)):
        wn = 2 * math.pi * f
        poles.append(np.array([[0.0, 1.0], [-(wn**2), -2 * zeta * wn]]))
    A = np.zeros((5, 5))
    A[0, 0] = -2 * math.pi * 1.0
    A[1:3, 1:3], A[3:5, 3:5] = poles
    B = np.ones((5, 1))
    C = np.array([[1.0, 1.0, 0, 1.0, 0], [0, 0, 1.0, 0, 1.0]])
    return CircuitBlock(
        "stiff", A, B, C, np.zeros((2, 1)), [f"x{k}" for k in range(5)], ["Vs"],
        ["v_out", "i_in"], units={"Vs": "V", "v_out": "V", "i_in": "A"},
    )  # fmt: skip


def mode_axis(fig):
    return next(ax for ax in fig.axes if ax.get_title() == "modes")


def test_slow_modes_are_not_collapsed_onto_the_fast_ones():
    fig = inspect_figure(stiff_block())
    ax = mode_axis(fig)
    fig.canvas.draw()
    points = np.vstack([c.get_offsets() for c in ax.collections if len(c.get_offsets())])
    x_display = ax.transData.transform(points)[:, 0]
    # 1 Hz, 50 Hz and 20 kHz: on a log axis each is far from the others (> 40 px apart)
    gaps = np.diff(np.sort(x_display))
    assert len(x_display) == 3 and gaps.min() > 40
    assert ax.get_xscale() == "log" and ax.get_xlabel() == "natural frequency (Hz)"
    # the damping ratios are read off directly: 1, 0.05, 0.3 (second-order
    # definitions, Ogata, Modern Control Engineering, 5th ed., sec. 5-3)
    assert sorted(np.round(points[:, 1], 6)) == [0.05, 0.3, 1.0]


def test_mode_labels_do_not_overlap():
    # twelve modes crowded into one decade
    n = 12
    A = np.zeros((2 * n, 2 * n))
    for k in range(n):
        wn, zeta = 2 * math.pi * (100 + 15 * k), 0.1 + 0.01 * k
        A[2 * k : 2 * k + 2, 2 * k : 2 * k + 2] = [[0, 1], [-(wn**2), -2 * zeta * wn]]
    states = [f"x{k}" for k in range(2 * n)]
    block = CircuitBlock(
        "crowd", A, np.ones((2 * n, 1)), np.ones((1, 2 * n)), np.zeros((1, 1)), states, ["Vs"],
        ["y"],
    )  # fmt: skip
    fig = inspect_figure(block)
    ax = mode_axis(fig)
    fig.canvas.draw()
    labels = [t for t in ax.texts if "Hz" in t.get_text()]
    assert len(labels) >= 6
    assert_no_overlapping_texts(ax, labels)


def test_each_magnitude_axis_holds_one_unit():
    block = stiff_block()
    fig = inspect_figure(block)
    magnitude_axes = [ax for ax in fig.axes if "dB re 1" in ax.get_ylabel()]
    # v_out/Vs is V/V, i_in/Vs is A/V: two axes
    assert len(magnitude_axes) == 2
    for ax in magnitude_axes:
        units = set()
        for line in ax.get_lines():
            inp, out = line.get_label().split(" → ")
            units.add((block.units[out], block.units[inp]))
        assert len(units) == 1
        out_unit, in_unit = units.pop()
        expected = "S" if (out_unit, in_unit) == ("A", "V") else f"{out_unit}/{in_unit}"
        assert ax.get_ylabel().endswith(f"(dB re 1 {expected})")
    assert_legends_outside(fig)
    assert_one_unit_style(fig)


def test_colours_within_an_axis_are_distinct():
    fig = inspect_figure(stiff_block())
    colours = [line.get_color() for ax in fig.axes if "dB re 1" in ax.get_ylabel()
               for line in ax.get_lines()]  # fmt: skip
    assert len(set(colours)) == len(colours)
    assert set(colours) <= set(style.PALETTE)


def test_a_sampled_loop_maps_its_delay_and_origin_poles_in_words():
    poles = np.array([-np.inf + 0j, 0j, -100 + 0j])
    fig = inspect_figure(None, poles=poles, name="loop")
    texts = " ".join(all_texts(fig))
    assert "1 pole at s = 0" in texts and "1 one-sample delay" in texts


def test_the_bundled_figures_follow_the_style(tmp_path):
    from wirestate.report.describe import inspect_file

    for name in ("drive_bus_filter.toml", "systems/battery_drive.toml",
                 "tuning/drive_bus_damping.toml"):  # fmt: skip
        found = inspect_file(MODELS / name)
        fig = inspect_figure(found.linear, poles=found.poles, name=found.name)
        assert_one_unit_style(fig)
        assert_legends_outside(fig)


# -- the simulation figure ----------------------------------------------------------------------


def test_the_simulation_figure_labels_quantities_and_keeps_legends_outside(tmp_path, monkeypatch):
    from wirestate.reduce import load_block
    from wirestate.report import simulation_plot
    from wirestate.simulate import simulate

    captured = []
    monkeypatch.setattr(simulation_plot, "save_figure", lambda fig, path, **_: captured.append(fig))
    result = simulate(load_block(MODELS / "drive_bus_filter.toml"), 0.02, 1e-5,
                      {"Vbat": "step:48V", "Iinv": "step:20A,at=5ms"})  # fmt: skip
    simulation_plot.plot_simulation(result, tmp_path / "run.png")
    fig = captured[0]
    labels = sorted(ax.get_ylabel() for ax in fig.axes)
    assert labels == ["current (A)", "voltage (V)"]
    assert fig.axes[-1].get_xlabel() == "time (ms)"
    assert_one_unit_style(fig)
    assert_legends_outside(fig)


# -- the tuning figure ------------------------------------------------------------------------


def tuning_result(with_corners: bool = True) -> SimpleNamespace:
    """A tuning result as :func:`wirestate.tune.solve` returns it, built by hand: a bus
    voltage dipping to 46.3 V and a resistor current peaking at 2.6 A."""
    t = np.linspace(0.0, 8e-3, 801)
    dip = np.where(t > 1e-3, np.exp(-(t - 1e-3) / 4e-4) * np.sin((t - 1e-3) * 6e3), 0.0)
    v = 47.6 - 1.4 * dip
    i = 2.6 * dip
    Y = np.vstack([v, i])
    responses = {
        "times": t, "outputs": ["v_bus", "i__Rd"], "index": {"v_bus": 0, "i__Rd": 1},
        "start": Y, "preferred": Y, "optimum": Y, "units": {"v_bus": "V"},
        "final": {"v_bus": {"preferred": 47.6, "start": 47.6},
                  "i__Rd": {"preferred": 0.0, "start": 0.0}},
        "impedance": [{"name": "port_impedance", "frequency": np.geomspace(100, 2e4, 50),
                       "start": np.full(50, 0.4), "preferred": np.linspace(0.2, 0.6, 50),
                       "max": 1.0}],
        "limits": [
            {"name": "bus_minimum", "kind": "minimum", "output": "v_bus", "min": 45.0,
             "window": None},
            {"name": "resistor_current", "kind": "peak_current", "part": "Rd", "max": 4.0},
            {"name": "bus_deviation", "kind": "overshoot", "output": "v_bus", "max": 0.03,
             "after": 1e-3, "percent_of": "final"},
            {"name": "port_impedance", "kind": "output_impedance", "output": "v_bus",
             "input": "Iport", "max": 1.0},
        ],
    }  # fmt: skip
    if with_corners:
        responses["corner_low"] = Y - 0.2
        responses["corner_high"] = Y + 0.2
    rows = [
        {"name": "bus_minimum", "margin": 1.3, "relative_margin": 0.029, "unit": "V",
         "relative_margin_worst_corner": 0.02},
        {"name": "resistor_current", "margin": 1.4, "relative_margin": 0.35, "unit": "A",
         "relative_margin_worst_corner": 0.30},
        {"name": "bus_deviation", "margin": 0.004, "relative_margin": 0.13, "unit": "1",
         "relative_margin_worst_corner": -0.05},
        {"name": "port_impedance", "margin": 0.4, "relative_margin": 0.4, "unit": "ohm",
         "relative_margin_worst_corner": 0.35},
    ]  # fmt: skip
    return SimpleNamespace(
        name="bus_damping", responses=responses, limits=rows,
        variables={"Rd": {"preferred": 0.22, "unit": "ohm"},
                   "Cd": {"preferred": 240e-6, "unit": "F"}},
    )  # fmt: skip


def test_the_tuning_figure_labels_every_limit_and_shows_its_margin():
    fig = tuning_figure(tuning_result())
    texts = all_texts(fig)
    for name in ("bus_minimum", "resistor_current", "bus_deviation", "port_impedance"):
        assert any(t.startswith(name + " ") for t in texts), name  # the bound, named
    margins = [t for t in texts if t.startswith("margin ")]
    assert "margin 1.3 V" in margins and "margin 1.4 A" in margins
    assert "margin 400 mΩ" in margins and "margin 0.4 %" in margins
    ledger = next(ax for ax in fig.axes if ax.get_title().startswith("margins"))
    # one row per limit, in the file's order from the top
    ticks = sorted(ledger.get_yticklabels(), key=lambda t: -t.get_position()[1])
    assert [t.get_text() for t in ticks] == [
        "bus_minimum", "resistor_current", "bus_deviation", "port_impedance"]  # fmt: skip
    bars = [p.get_width() for p in ledger.containers[0].patches]
    assert sorted(bars) == pytest.approx(sorted([2.9, 35.0, 13.0, 40.0]))
    for ax in fig.axes:
        if ax is not ledger:
            placed = [t for t in ax.texts if t.get_text()]
            assert_no_overlapping_texts(ax, placed)
    assert_one_unit_style(fig)
    assert_legends_outside(fig)


def test_the_tuning_figure_draws_the_tolerance_envelope_when_present():
    def envelopes(fig):
        return [c for ax in fig.axes for c in ax.collections
                if c.get_label() == "tolerance corners (envelope)"]  # fmt: skip

    result = tuning_result(True)
    drawn = envelopes(tuning_figure(result))
    assert len(drawn) == 2  # one per time panel
    # the band spans corner_low to corner_high of that output
    path = drawn[0].get_paths()[0].vertices
    assert path[:, 1].max() == pytest.approx(result.responses["corner_high"][0].max(), abs=1e-9)
    assert path[:, 1].min() == pytest.approx(result.responses["corner_low"][0].min(), abs=1e-9)
    assert envelopes(tuning_figure(tuning_result(False))) == []


# -- the figure of a tuning over switching transients ------------------------------------------


@pytest.fixture(scope="module")
def switched_result(tmp_path_factory):
    """The bundled snubber tuning, its tolerance corners verified but not imposed in the
    optimiser (a few seconds less than the example itself)."""
    from wirestate.tune import load_tuning
    from wirestate.tune.switched import solve_switched

    example = MODELS / "tuning" / "aux_buck_snubber.toml"
    text = example.read_text().replace("robust = true", "robust = false")
    text = text.replace('system = "../systems/', f'system = "{MODELS}/systems/')
    path = tmp_path_factory.mktemp("switched") / "snubber.toml"
    path.write_text(text)
    return solve_switched(load_tuning(path), "E24")


def style_margin(value: float) -> str:
    from wirestate.units import format_quantity

    return format_quantity(value, "V", 3)


def test_the_switched_tuning_figure_draws_the_edge_window_band_and_the_reports_peak(
    switched_result,
):
    result = switched_result
    fig = tuning_figure(result)
    texts = all_texts(fig)
    # the peak window's bound and the ring band's two edges, named on the figure
    assert "switch_peak (window 200 ns) ≤ 60 V" in texts
    assert any(t.startswith("ring_settled ≤ ") for t in texts)
    assert any(t.startswith("ring_settled ≥ ") for t in texts)
    # a margin arrow on the peak and one on the ring band, labelled with the report's margin
    arrows = [t.get_text() for ax in fig.axes for t in ax.texts
              if t.get_text().startswith("margin ")]  # fmt: skip
    shown = {r["name"]: f"margin {style_margin(r['margin'])}" for r in result.limits}
    assert sorted(arrows) == sorted([shown["switch_peak"], shown["ring_settled"]])
    # time in µs over the period, in ns around the turn-off; one quantity per axis
    labels = [(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes]
    assert ("time from the carrier start (µs)", "voltage v_Q1 (V)") in labels
    assert labels.count(("time after the Q1 turn-off (ns)", "voltage v_Q1 (V)")) == 2
    # the turn-off edge marked, the ring band and the corner envelope drawn
    legends = [t.get_text() for ax in fig.axes if ax.get_legend()
               for t in ax.get_legend().get_texts()]  # fmt: skip
    assert "Q1 turn-off" in legends and "ring_settled band" in legends
    envelope = [c for ax in fig.axes for c in ax.collections
                if c.get_label().startswith("tolerance corners (envelope")]  # fmt: skip
    assert len(envelope) == 1 and result.corners_checked == 16
    assert f"tolerance corners (envelope, {result.corners_checked})" in legends
    # the peak marked is the report's value (the same window samples: rounding only)
    marker = next(line for ax in fig.axes for line in ax.lines if line.get_gid() == "peak")
    report = next(r for r in result.limits if r["name"] == "switch_peak")
    assert float(marker.get_ydata()[0]) == pytest.approx(report["value"], rel=1e-9)
    # the envelope holds the preferred values' samples (the corners' band includes them)
    data = result.responses["switched"]()
    times, rows = data["peak"]["samples"]
    assert np.all(data["corner_low"] <= rows) and np.all(rows <= data["corner_high"])
    # the margin ledger lists every limit, as for the linear tuning
    ledger = next(ax for ax in fig.axes if ax.get_title().startswith("margins"))
    ticks = sorted(ledger.get_yticklabels(), key=lambda t: -t.get_position()[1])
    assert [t.get_text() for t in ticks] == [r["name"] for r in result.limits]
    assert_one_unit_style(fig)
    assert_legends_outside(fig)
    for ax in fig.axes:
        if ax is not ledger:
            assert_no_overlapping_texts(ax, [t for t in ax.texts if t.get_text()])


def test_the_tune_command_writes_the_switched_figure_atomically(switched_result, tmp_path,
                                                                monkeypatch):  # fmt: skip
    import argparse

    from wirestate.commands import tune as command
    from wirestate.report import figure

    written = []
    real = figure.write_atomic

    def spy(path, data):
        written.append(path)
        return real(path, data)

    monkeypatch.setattr(figure, "write_atomic", spy)
    target = tmp_path / "snubber.png"
    args = argparse.Namespace(json=None, plot=str(target))
    command._outputs(switched_result, args, None)
    assert written == [target]
    assert target.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [p for p in tmp_path.iterdir() if p != target]  # no temporary left behind
