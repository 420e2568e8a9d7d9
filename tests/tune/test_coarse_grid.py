"""The coarse grid the exchange imposes at first (wirestate.tune.optimise.coarse_grid):
evenly spaced rows, both ends included, never closer than COARSE_SPACING samples."""

from __future__ import annotations

import numpy as np
import pytest

from wirestate.tune.optimise import COARSE_ROWS, COARSE_SPACING, coarse_grid


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
