"""Landscape metrics (landscape/metrics.py)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import ndimage

from preyscape.landscape.generate import cluster_field, habitat_classes, random_field
from preyscape.landscape.grid import Grid
from preyscape.landscape.metrics import class_metrics, format_metrics, landscape_metrics

FOUR = ndimage.generate_binary_structure(2, 1)
EIGHT = ndimage.generate_binary_structure(2, 2)


def by_code(rows):
    return {r["code"]: r for r in rows}


# --- patches ----------------------------------------------------------------------
@pytest.mark.parametrize("seed", range(4))
def test_patch_counts_and_sizes_match_scipy_label(seed):
    # reference library: scipy.ndimage.label with the 4-neighbour structure, class by class
    cl = habitat_classes(cluster_field((70, 90), 0.35, seed), [0.3, 0.5, 0.2])
    m = by_code(class_metrics(cl, 10.0, 20.0))
    for code in (1, 2, 3):
        labels, n = ndimage.label(cl == code, FOUR)
        sizes = np.bincount(labels.ravel())[1:]
        assert m[code]["patches"] == n
        assert m[code]["largest_patch_km2"] == pytest.approx(sizes.max() * 200 / 1e6)
        assert m[code]["mean_patch_km2"] == pytest.approx(sizes.mean() * 200 / 1e6)
        assert m[code]["cells"] == sizes.sum()


def test_patches_use_the_four_neighbour_rule():
    # a checkerboard: every cell its own patch with shared edges only (4-neighbour), one
    # patch per colour with corners too (8-neighbour, reference: scipy.ndimage.label)
    cl = (np.indices((6, 8)).sum(axis=0) % 2) + 1
    m = by_code(class_metrics(cl, 1.0, 1.0))
    assert m[1]["patches"] == 24 and m[2]["patches"] == 24
    assert ndimage.label(cl == 1, EIGHT)[1] == 1  # what the other rule would give


# --- edges ---------------------------------------------------------------------------------
def test_edge_of_a_square_block():
    # a 4 x 4 block of class 1 inside class 2, cells 30 m x 20 m: the block's outline is
    # 2 x 4 x 30 m (north and south faces) + 2 x 4 x 20 m (east and west) = 400 m
    cl = np.full((10, 12), 2)
    cl[3:7, 4:8] = 1
    m = by_code(class_metrics(cl, 30.0, 20.0))
    assert m[1]["edge_m"] == pytest.approx(400.0)
    assert m[2]["edge_m"] == pytest.approx(400.0)
    area_ha = 120 * 30 * 20 / 1e4
    assert m[1]["edge_density_m_per_ha"] == pytest.approx(400.0 / area_ha)


def test_edges_against_border_and_nodata_are_not_counted():
    # the same block touching the map's west border and a no-data cell on its east side
    cl = np.full((6, 6), 2)
    cl[1:3, 0:2] = 1
    cl[1, 2] = -1
    m = by_code(class_metrics(cl, 1.0, 1.0))
    # faces of the block: north 2, south 2, east 2 (one of them against no-data), west 2
    # (map border): counted are north, south and the one east face against class 2
    assert m[1]["edge_m"] == pytest.approx(5.0)


def test_edge_matches_a_direct_face_count_on_random_maps():
    # independent count: every pair of 4-neighbours with different classes is one face
    cl = habitat_classes(random_field((40, 50), 1), [0.5, 0.5])
    m = landscape_metrics(Grid((40, 50), 0.0, 0.0, 1.0, 1.0), cl, "classes")
    faces = sum(int(cl[r, c] != cl[r, c + 1]) for r in range(40) for c in range(49))
    faces += sum(int(cl[r, c] != cl[r + 1, c]) for r in range(39) for c in range(50))
    assert m["edge_m"] == faces
    # with two classes every boundary face belongs to both
    assert m["classes"][0]["edge_m"] == m["classes"][1]["edge_m"] == faces


# --- spanning -------------------------------------------------------------------------------
def test_spanning_of_stripes():
    cl = np.full((8, 9), 2)
    cl[:, 4] = 1  # a north-south stripe
    m = by_code(class_metrics(cl, 1.0, 1.0))
    assert m[1]["spans_north_south"] and not m[1]["spans_west_east"] and m[1]["spans"]
    # the stripe cuts class 2 in two: each half runs north to south, neither west to east
    assert m[2]["spans_north_south"] and not m[2]["spans_west_east"]
    assert m[2]["patches"] == 2


def test_spanning_counts_from_the_outermost_rows_with_data():
    # a no-data rim: habitat reaching the first and last rows that hold data spans
    cl = np.full((8, 8), -1)
    cl[2:6, 1:7] = 2
    cl[2:6, 3] = 1
    m = by_code(class_metrics(cl, 1.0, 1.0))
    assert m[1]["spans_north_south"]
    cl[4, 3] = 2
    assert not by_code(class_metrics(cl, 1.0, 1.0))[1]["spans_north_south"]


# --- whole landscapes ------------------------------------------------------------------------
def test_landscape_metrics_of_a_suitability_map():
    s = np.linspace(0.0, 1.0, 24 * 30).reshape(24, 30)
    mask = np.ones((24, 30), dtype=bool)
    mask[0, 0] = False
    g = Grid((24, 30), 500_000.0, 5_000_000.0, 100.0, 100.0, mask=mask)
    m = landscape_metrics(g, s, "suitability", threshold=0.75)
    c = by_code(m["classes"])
    assert c[1]["cells"] == int((s[mask] >= 0.75).sum())
    assert c[1]["fraction"] + c[0]["fraction"] == pytest.approx(1.0)
    assert m["nodata_cells"] == 1
    assert m["area_km2"] == pytest.approx(719 * 0.01)
    assert m["suitability"]["mean"] == pytest.approx(s[mask].mean())
    json.dumps(m)  # stored as JSON
    text = format_metrics(m)
    assert "suitability >= 0.75" in text and "patches" in text


def test_fractions_of_a_class_map_sum_to_one_and_names_are_kept():
    cl = habitat_classes(random_field((30, 30), 2), [0.2, 0.8])
    m = landscape_metrics(Grid((30, 30), 0.0, 0.0, 5.0, 5.0), cl, "classes",
                          names={1: "habitat", 2: "matrix"})
    assert [c["name"] for c in m["classes"]] == ["habitat", "matrix"]
    assert [c["cells"] for c in m["classes"]] == [180, 720]
    assert sum(c["fraction"] for c in m["classes"]) == pytest.approx(1.0)
