"""Fence topology (preyscape.landscape.topology): separation, open ends, sides, length.

Grids are small and hand-made; lengths in metres, areas km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import ndimage
from shapely.geometry import LineString, Polygon

from preyscape.landscape.grid import Grid
from preyscape.landscape.measures import fence_faces
from preyscape.landscape.topology import (
    components,
    effective_faces,
    fence_sides,
    fence_topology,
    line_length_m,
    warning_text,
)

DX = 100.0  # m


def grid_of(shape, mask=None) -> Grid:
    return Grid(shape, 0.0, shape[0] * DX, DX, DX, mask=mask)


def no_faces(shape):
    rows, cols = shape
    return np.zeros((rows, cols + 1), bool), np.zeros((rows + 1, cols), bool)


def refined_labels(mask, fx, fy) -> np.ndarray:
    """Reference: the cell graph drawn as a raster twice as fine plus one.

    Cell (i, j) is pixel (2i+1, 2j+1); the face between it and its east neighbour is
    pixel (2i+1, 2j+2), open unless the face is blocked or a side has no data; corners
    (even, even) are never open. scipy.ndimage.label with 4-connectivity then finds the
    components of the cell graph (reference library).
    """
    rows, cols = mask.shape
    img = np.zeros((2 * rows + 1, 2 * cols + 1), bool)
    img[1::2, 1::2] = mask
    img[1::2, 2:-1:2] = mask[:, :-1] & mask[:, 1:] & ~fx[:, 1:-1]
    img[2:-1:2, 1::2] = mask[:-1, :] & mask[1:, :] & ~fy[1:-1, :]
    lab, _ = ndimage.label(img, structure=[[0, 1, 0], [1, 1, 1], [0, 1, 0]])
    return lab[1::2, 1::2]


def same_partition(a: np.ndarray, b: np.ndarray, mask: np.ndarray) -> bool:
    pairs = set(zip(a[mask].tolist(), b[mask].tolist(), strict=True))
    return len(pairs) == len(np.unique(a[mask])) == len(np.unique(b[mask]))


@pytest.mark.parametrize("seed", range(6))
def test_components_match_ndimage_label_on_a_refined_raster(seed):
    # reference library: scipy.ndimage.label on the cell graph drawn as a raster, with
    # random no-data blobs and random fence lines (through fence_faces) and loose faces
    rng = np.random.default_rng(seed)
    shape = (23, 31)
    mask = ndimage.gaussian_filter(rng.normal(size=shape), 2.0) > -0.4
    grid = grid_of(shape, mask)
    lines = [LineString(rng.uniform([0, 0], [shape[1] * DX, shape[0] * DX], (4, 2)))
             for _ in range(3)]
    fx, fy = fence_faces(lines, grid)
    fx |= rng.random(fx.shape) < 0.05
    fy |= rng.random(fy.shape) < 0.05
    labels, n = components(mask, (fx, fy))
    ref = refined_labels(mask, fx, fy)
    assert n == len(np.unique(ref[mask]))
    assert same_partition(labels, ref, mask)
    assert np.all(labels[~mask] == -1)


def column_fence(shape, col, rows):
    fx, fy = no_faces(shape)
    fx[rows, col] = True
    return fx, fy


def test_fence_ending_short_of_the_edge_has_one_open_end_and_separates_nothing():
    # design requirement: an end that stops k cells before the edge leaves a way round
    # exactly k cells wide (metres), and the fence adds no component
    shape = (12, 10)
    grid = grid_of(shape)
    topo = fence_topology(grid, column_fence(shape, 4, slice(0, 9)), name="short",
                          species="predator")
    assert not topo.separates and topo.sides_km2 == ()
    assert len(topo.open_ends) == 1
    end = topo.open_ends[0]
    assert (end.x, end.y) == (400.0, 300.0)  # corner (9, 4): 3 rows before the south edge
    assert end.width_m == pytest.approx(300.0) and end.to == "landscape edge"
    assert (end.to_x, end.to_y) == (400.0, 0.0)
    assert topo.length_m == pytest.approx(9 * DX) and topo.faces == 9
    text = warning_text(topo, "predators (stoat)")
    assert "Fence 'short'" in text and "300 m from the landscape edge" in text
    assert "does not separate" in text


@pytest.mark.parametrize("rows,beyond", [(slice(0, 12), False), (slice(0, 12), True)])
def test_fence_meeting_or_crossing_the_edge_separates(rows, beyond):
    # design requirement: a fence from edge to edge (or beyond it, drawn as a line)
    # has no open end and splits the landscape into two sides with their areas
    shape = (12, 10)
    grid = grid_of(shape)
    if beyond:
        faces = fence_faces([LineString([(400.0, 1500.0), (400.0, -300.0)])], grid)
    else:
        faces = column_fence(shape, 4, rows)
    topo = fence_topology(grid, faces)
    assert topo.open_ends == () and topo.separates
    assert topo.sides_km2 == pytest.approx((6 * 12 * 0.01, 4 * 12 * 0.01))
    assert warning_text(topo, "predators") is None


def test_fence_meeting_no_data_is_anchored():
    # design requirement: an end on no-data cells is closed off as at the edge
    shape = (12, 10)
    mask = np.ones(shape, bool)
    mask[9:, 3:6] = False  # a lake the fence ends on
    grid = grid_of(shape, mask)
    topo = fence_topology(grid, column_fence(shape, 4, slice(0, 9)))
    assert topo.open_ends == () and topo.separates


def test_fence_meeting_another_impassable_fence_is_anchored():
    # design requirement: a T-junction on another impassable line is not an open end;
    # without that line the same end is open
    shape = (12, 10)
    grid = grid_of(shape)
    stem = column_fence(shape, 4, slice(0, 6))
    fx, fy = no_faces(shape)
    fy[6, :] = True  # an east-west line along row face 6, edge to edge
    with_other = fence_topology(grid, stem, others=[("cross line", (fx, fy))])
    assert with_other.open_ends == () and with_other.separates
    alone = fence_topology(grid, stem)
    assert len(alone.open_ends) == 1 and not alone.separates
    # a fence ending one cell short of the other line: the way round is that line
    short = fence_topology(grid, column_fence(shape, 4, slice(0, 5)),
                           others=[("cross line", (fx, fy))])
    assert short.open_ends[0].to == "fence 'cross line'"
    assert short.open_ends[0].width_m == pytest.approx(DX)


def ring(shape, r0, r1, c0, c1):
    fx, fy = no_faces(shape)
    fx[r0:r1, c0] = fx[r0:r1, c1] = True
    fy[r0, c0:c1] = fy[r1, c0:c1] = True
    return fx, fy


def test_closed_ring_separates_its_inside():
    # design requirement: a closed ring has no end and encloses exactly its cells
    shape = (12, 14)
    grid = grid_of(shape)
    topo = fence_topology(grid, ring(shape, 3, 8, 4, 10))
    assert topo.open_ends == () and topo.separates
    assert topo.sides_km2 == pytest.approx((12 * 14 * 0.01 - 0.30, 5 * 6 * 0.01))
    assert topo.length_m == pytest.approx(2 * (5 + 6) * DX)
    labels, names = fence_sides(grid, ring(shape, 3, 8, 4, 10))
    assert len(names) == 2 and "inside" in names
    inside = names.index("inside")
    assert int((labels == inside).sum()) == 30


def test_ring_with_a_gate_is_measured_across_the_gate():
    # design requirement: the way round at a gate is the gate's width, not the distance
    # to the landscape edge; an end at a drawn gap is marked as such and not warned about
    shape = (12, 14)
    grid = grid_of(shape)
    fx, fy = ring(shape, 3, 8, 4, 10)
    fy[3, 6:8] = False  # a gate two cells wide in the northern side
    topo = fence_topology(grid, (fx, fy), gaps=[(700.0, 900.0, 200.0)])
    assert not topo.separates
    assert len(topo.open_ends) == 2
    assert all(e.width_m == pytest.approx(200.0) and e.to == "this fence"
               for e in topo.open_ends)
    assert all(e.at_gap for e in topo.open_ends) and topo.leaks == ()
    assert warning_text(topo, "predators") is None  # gates drawn on purpose are no warning


def test_mouth_of_a_u_is_the_way_round():
    shape = (14, 14)
    grid = grid_of(shape)
    fx, fy = no_faces(shape)
    fx[3:10, 4] = fx[3:10, 9] = True
    fy[10, 4:9] = True  # a U open to the north, 5 cells wide
    topo = fence_topology(grid, (fx, fy))
    assert len(topo.open_ends) == 2
    assert [e.width_m for e in topo.open_ends] == pytest.approx([300.0, 300.0])  # to the edge
    fx[1:3, 4] = fx[1:3, 9] = True  # arms nearer the edge than the mouth is wide
    topo = fence_topology(grid, (fx, fy))
    assert [e.width_m for e in topo.open_ends] == pytest.approx([100.0, 100.0])


def test_diagonal_fence_with_a_sharp_turn_has_no_false_ends():
    # design requirement: a line that turns back inside a cell leaves a short spur of
    # blocked faces; it is not an end, so an edge-to-edge zigzag has no open end
    shape = (30, 30)
    grid = grid_of(shape)
    line = LineString([(-50.0, 3050.0), (1490.0, 1530.0), (1010.0, 1470.0), (3050.0, -50.0)])
    topo = fence_topology(grid, fence_faces([line], grid), lines=[np.asarray(line.coords)])
    assert topo.separates and topo.open_ends == ()


def test_effective_faces_drop_faces_off_the_data():
    shape = (5, 5)
    mask = np.ones(shape, bool)
    mask[:, 0] = False
    fx, fy = column_fence(shape, 1, slice(0, 5))
    ex, _ = effective_faces(mask, (fx, fy))
    assert not ex.any()


def test_line_length_within_the_data_cells():
    # textbook: length of a straight segment; the part over no-data cells is left out
    shape = (10, 10)
    mask = np.ones(shape, bool)
    mask[:, 6:] = False
    grid = grid_of(shape, mask)
    line = np.array([[50.0, 450.0], [950.0, 450.0]])
    assert line_length_m([line], grid) == pytest.approx(550.0, abs=DX / 8)
    diag = np.array([[0.0, 1000.0], [500.0, 500.0]])
    assert line_length_m([diag], grid) == pytest.approx(500.0 * math.sqrt(2), rel=1e-9)


def test_sides_of_a_fence_ending_short_are_those_it_would_separate():
    # design requirement: the open end is closed along the way round, so a fence ending
    # short still has a west and an east side for the tables
    shape = (12, 10)
    grid = grid_of(shape)
    labels, names = fence_sides(grid, column_fence(shape, 4, slice(0, 9)))
    assert sorted(names) == ["east", "west"]
    west = names.index("west")
    assert np.all(labels[:, :4] == west)
    assert np.all(labels[:, 4:] == names.index("east"))


def test_refuge_outline_from_polygon_faces():
    # a closed outline drawn as a polygon: its boundary is a ring with no end
    shape = (12, 12)
    grid = grid_of(shape)
    poly = Polygon([(250, 950), (850, 950), (850, 250), (250, 250)])
    topo = fence_topology(grid, fence_faces([poly], grid))
    assert topo.open_ends == () and topo.separates
