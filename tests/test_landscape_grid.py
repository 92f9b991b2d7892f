"""Grid geometry: cell centres, containment and areas in metres."""

from __future__ import annotations

import numpy as np
import pytest

from preyscape.landscape.grid import Grid


def test_cell_centres_rows_north_first():
    g = Grid((3, 4), x0=1000.0, y0=5000.0, dx=30.0, dy=20.0)
    np.testing.assert_allclose(g.x, [1015, 1045, 1075, 1105])
    np.testing.assert_allclose(g.y, [4990, 4970, 4950])
    assert g.bounds == (1000.0, 4940.0, 1120.0, 5000.0)
    assert g.cell_area_km2 == pytest.approx(30 * 20 / 1e6)


def test_rowcol_and_contains_respect_the_mask():
    mask = np.ones((3, 4), bool)
    mask[1, 2] = False
    g = Grid((3, 4), 0.0, 60.0, 10.0, 20.0, mask=mask)
    assert g.rowcol(25.0, 30.0) == (1, 2)
    assert not g.contains(25.0, 30.0)
    assert g.contains(5.0, 59.0)
    assert not g.contains(-1.0, 30.0) and not g.contains(5.0, 61.0)
    assert g.n_cells == 11


def test_bad_grids_are_refused():
    with pytest.raises(ValueError):
        Grid((2, 2), 0, 0, -1.0, 1.0)
    with pytest.raises(ValueError):
        Grid((2, 2), 0, 0, 1.0, 1.0, mask=np.ones((3, 2), bool))
