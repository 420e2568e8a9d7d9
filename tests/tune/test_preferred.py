"""IEC 60063 tables, neighbours across decades and snapping."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from wirestate.errors import TuningError
from wirestate.tune import preferred

# the shared reference directory sits beside the project checkout; users clone only the
# project, so the comparison is skipped (with its reason) when it is absent
REFERENCE = Path(__file__).resolve().parents[2] / ".." / "shared" / "reference"
REFERENCE_FILE = REFERENCE / "iec60063.json"


@pytest.mark.skipif(
    not REFERENCE_FILE.is_file(),
    reason=f"reference tables not found at {REFERENCE_FILE} (the shared/ directory beside "
    "the project checkout is not part of a plain clone)",
)
@pytest.mark.parametrize("series", preferred.SERIES_NAMES)
def test_tables_match_the_standard_reference(series):
    # source: IEC 60063:2015 tables as copied in ../shared/reference/iec60063.json;
    # exact integer equality (the tables are lists of integers)
    reference = json.loads(REFERENCE_FILE.read_text(encoding="utf-8"))
    assert list(preferred.series_mantissas(series)) == reference[series]


def test_e24_departs_from_the_rounded_formula_where_the_standard_says():
    # source: IEC 60063:2015, E24 values 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 are not
    # round(10 * 10**(i/24)); the table must carry the standard's values
    formula = [round(10 * 10 ** (i / 24)) for i in range(24)]
    table = list(preferred.series_mantissas("E24"))
    differing = sorted(t for t, f in zip(table, formula, strict=True) if t != f)
    assert differing == [27, 30, 33, 36, 39, 43, 47, 82]


def test_e96_is_the_rounded_geometric_series_and_e48_every_second_value():
    # source: IEC 60063:2015 (E96 = round(100 * 10**(i/96)); E48 is every second E96 value)
    e96 = list(preferred.series_mantissas("E96"))
    assert e96 == [round(100 * 10 ** (i / 96)) for i in range(96)]
    assert list(preferred.series_mantissas("E48")) == e96[::2]
    assert list(preferred.series_mantissas("E6")) == list(preferred.series_mantissas("E12"))[::2]


@pytest.mark.parametrize(
    ("value", "series", "expected"),
    [
        (9.5, "E24", (9.1, 10.0)),  # across the decade boundary
        (0.0095, "E24", (0.0091, 0.01)),
        (4.7e-6, "E12", (4.7e-6, 4.7e-6)),  # a preferred value is its own neighbour
        (1.0, "E96", (1.0, 1.0)),
        (0.999, "E96", (0.976, 1.0)),
        (12.5e3, "E6", (10e3, 15e3)),
        (70.0, "E12", (68.0, 82.0)),
    ],
)
def test_neighbours(value, series, expected):
    # source: the IEC 60063 tables above; floats compared to 1e-12 relative (decimal scaling)
    low, high = preferred.neighbours(value, series)
    assert math.isclose(low, expected[0], rel_tol=1e-12)
    assert math.isclose(high, expected[1], rel_tol=1e-12)


def test_snap_is_nearest_on_a_log_scale():
    # 2.9 lies between 2.7 and 3.0 in E24; log-nearest is 3.0 (|ln(3/2.9)| < |ln(2.9/2.7)|)
    assert preferred.snap(2.9, "E24") == pytest.approx(3.0, rel=1e-12)
    # sqrt(4.7 * 5.1) is the geometric midpoint: a tie goes to the lower value
    assert preferred.snap(math.sqrt(4.7 * 5.1) * 0.999, "E24") == pytest.approx(4.7)
    assert preferred.snap(math.sqrt(4.7 * 5.1) * 1.001, "E24") == pytest.approx(5.1)


def test_candidates_span_both_sides():
    assert preferred.candidates(4.7e-6, "E24", count=2) == pytest.approx(
        [3.9e-6, 4.3e-6, 4.7e-6, 5.1e-6, 5.6e-6], rel=1e-12
    )
    assert preferred.candidates(5.0e3, "E24") == pytest.approx([4.7e3, 5.1e3], rel=1e-12)


@pytest.mark.parametrize("bad", [0.0, -1.0, math.inf, math.nan])
def test_non_positive_values_are_refused(bad):
    with pytest.raises(TuningError) as info:
        preferred.neighbours(bad)
    assert info.value.code == "out_of_range"


def test_unknown_series_is_refused():
    with pytest.raises(TuningError) as info:
        preferred.snap(1.0, "E7")
    assert info.value.code == "invalid_field"
    assert "E7" in info.value.message
