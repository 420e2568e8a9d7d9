"""The sensitivity table and the "most sensitive parts" section."""

from __future__ import annotations

from wirestate.report.sensitivity_table import most_sensitive_parts, sensitivity_text
from wirestate.sensitivity import Quantity, Sensitivities


def test_most_sensitive_parts_orders_by_magnitude_and_names_where():
    table = {
        "overshoot v_bus": {"Rd": -1.4, "Cd": 0.3, "Lf": None},
        "peak i_Rd": {"Rd": 0.2, "Cd": 2.5, "Lf": -0.01},
    }
    text = most_sensitive_parts(table, count=2)
    lines = text.splitlines()
    assert lines[0].startswith("most sensitive parts")
    body = [line.split() for line in lines[3:]]
    assert [row[0] for row in body] == ["Cd", "Rd"]  # |2.5| before |-1.4|; Lf not listed
    assert body[0][1] == "2.5" and body[0][2:] == ["peak", "i_Rd"]
    assert body[1][1] == "-1.4"
    assert "(none)" in most_sensitive_parts({"x": {"R1": None}})


def test_round_off_is_shown_as_zero_and_notes_are_grouped():
    sens = Sensitivities(
        block="demo",
        parts=["R1", "C1"],
        values={"R1": 1.0, "C1": 1e-6},
        quantities=[
            Quantity("DC gain v/Vs", "dc_gain", 1.0, "V/V", {"R1": 3e-17, "C1": -2e-16}),
            Quantity("natural frequency, mode v_C1", "natural_frequency", 1e6, "rad/s",
                     {"R1": -1.0, "C1": -1.0000004}),
            Quantity("DC gain i/Vs", "dc_gain", 0.0, "A/V", None, "zero DC gain"),
            Quantity("DC gain i/Is", "dc_gain", 0.0, "A/A", None, "zero DC gain"),
        ],
    )  # fmt: skip
    text = sensitivity_text(sens)
    row = next(line for line in text.splitlines() if "DC gain v/Vs" in line).split()
    assert row[-2:] == ["0", "0"]
    row = next(line for line in text.splitlines() if "mode v_C1" in line).split()
    assert row[-2:] == ["-1", "-1"]  # three significant digits
    assert "DC gain i/Vs, DC gain i/Is: zero DC gain" in text
