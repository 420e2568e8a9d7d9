"""The rows the exchange picks (wirestate.tune.optimise): the coarse grid it imposes at
first (evenly spaced rows, both ends included, never closer than COARSE_SPACING samples)
and the band of samples near a violated limit's bound it adds."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from wirestate.tune.optimise import (
    ADDED_BAND,
    COARSE_ROWS,
    COARSE_SPACING,
    coarse_grid,
    near_bound,
)


@pytest.mark.parametrize("size", [1, 5, 9, 100, 333, 1000, 44302])
@pytest.mark.parametrize("rows", [0, 8, 20])
def test_grid_is_even_bounded_and_spaced(size, rows):
    grid = coarse_grid(size, rows)
    wanted = rows or COARSE_ROWS
    assert grid[0] == 0
    assert np.all(np.diff(grid) > 0)
    assert grid[-1] <= size - 1
    assert len(grid) <= wanted
    if len(grid) > 1:
        assert grid[-1] == size - 1
        gaps = np.diff(grid)
        # evenly spaced: rounding moves a position by half a sample at most
        assert gaps.max() - gaps.min() <= 1
        assert gaps.min() >= COARSE_SPACING - 1
    if size >= wanted * COARSE_SPACING:
        assert len(grid) == wanted


def test_rows_near_the_bound_are_the_band_and_at_most_the_nearest():
    # a ringing excess (relative to the bound): the band takes every sample above -0.01,
    # and with a cap only the ones nearest the bound
    k = np.arange(400)
    r = 0.02 * np.exp(-k / 150.0) * np.cos(2 * np.pi * k / 34.0) - 0.015
    band = near_bound(r)
    assert np.array_equal(band, np.flatnonzero(r > -ADDED_BAND))
    assert band.size > 10
    capped = near_bound(r, most=5)
    assert capped.size == 5
    assert np.all(np.diff(capped) > 0)
    assert r[capped].min() >= np.sort(r)[-5]
    assert near_bound(np.full(7, -0.5)).size == 0


def test_a_round_restarts_at_the_first_step_back_where_the_rows_hold():
    # one row x <= 0.5 (a limit's excess over its bound): from the last optimum 0.6 back
    # towards the start 0: 0.57 and 0.54 violate it, 0.48 holds with the slack
    import casadi

    from wirestate.tune.formulation import Formulation
    from wirestate.tune.optimise import RESTART_SLACK, RESTART_STEPS, restart_on_rows

    x = casadi.MX.sym("x")
    nlp = Formulation(
        nlp={"x": x, "f": x, "g": x}, x0=np.array([0.0]), lbx=np.array([0.0]),
        ubx=np.array([1.0]), lbg=np.array([-np.inf]), ubg=np.array([0.5]), kind="condensed",
        variables=["R1"], bounds={"R1": (1.0, 10.0)}, keys=[((), 0, 0)],
    )  # fmt: skip
    limits = [SimpleNamespace(kind="maximum")]
    got = restart_on_rows(nlp, np.array([0.6]), limits)
    first = next(t for t in RESTART_STEPS if 0.6 * (1 - t) <= 0.5 - RESTART_SLACK)
    assert got == pytest.approx([0.6 * (1 - first)])
    assert first == 0.2
    # nothing holds on the way back: the start itself
    nlp.ubg = np.array([-1.0])
    assert restart_on_rows(nlp, np.array([0.6]), limits) == pytest.approx([0.0])
