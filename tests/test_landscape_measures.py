"""Tests for preyscape.landscape.measures: measures and zones on cells and faces."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import shapely
from pyproj import Transformer
from rasterio.crs import CRS
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.landscape.io import write_geotiff
from preyscape.landscape.measures import (
    Shape,
    cells_covered,
    cells_from_raster,
    fence_faces,
    geometry_crs_note,
    outline_faces,
    read_geometry,
    zones_from_polygons,
)

X0, Y0 = 500_000.0, 5_000_000.0  # m, EPSG:32633 (UTM 33N)
DX = 100.0  # m
UTM_WKT = CRS.from_epsg(32633).to_wkt()


def grid(shape: tuple[int, int] = (20, 30), mask: np.ndarray | None = None) -> Grid:
    return Grid(shape, X0, Y0, DX, DX, UTM_WKT, mask)


def xy(u: float, v: float) -> tuple[float, float]:
    """Map point (m) at column coordinate u, row coordinate v (cell corners at integers)."""
    return X0 + u * DX, Y0 - v * DX


def line(*uv: tuple[float, float]) -> shapely.LineString:
    return shapely.LineString([xy(u, v) for u, v in uv])


def components(fx: np.ndarray, fy: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Component label per cell of the 4-neighbour graph without the blocked faces."""
    rows, cols = shape
    idx = np.arange(rows * cols).reshape(shape)
    ox, oy = ~fx[:, 1:-1], ~fy[1:-1, :]
    a = np.concatenate([idx[:, :-1][ox], idx[:-1, :][oy]])
    b = np.concatenate([idx[:, 1:][ox], idx[1:, :][oy]])
    m = coo_matrix((np.ones(a.size), (a, b)), shape=(rows * cols, rows * cols))
    return connected_components(m, directed=False)[1].reshape(shape)


def centres(g: Grid) -> tuple[np.ndarray, np.ndarray]:
    return np.meshgrid(g.x, g.y)


def side_of(g: Grid, p: tuple[float, float], q: tuple[float, float]) -> np.ndarray:
    """Sign of the cross product (q - p) x (centre - p) for every cell."""
    x, y = centres(g)
    return np.sign((q[0] - p[0]) * (y - p[1]) - (q[1] - p[1]) * (x - p[0]))


def crossed_links(g: Grid, fence: shapely.Geometry) -> tuple[np.ndarray, np.ndarray]:
    """Brute force: links (centre-to-centre segments) the fence intersects, with shapely."""
    rows, cols = g.shape
    fx = np.zeros((rows, cols + 1), bool)
    fy = np.zeros((rows + 1, cols), bool)
    for i in range(rows):
        for k in range(1, cols):
            fx[i, k] = shapely.LineString([(g.x[k - 1], g.y[i]), (g.x[k], g.y[i])]).intersects(
                fence)
    for k in range(1, rows):
        for j in range(cols):
            fy[k, j] = shapely.LineString([(g.x[j], g.y[k - 1]), (g.x[j], g.y[k])]).intersects(
                fence)
    return fx, fy


def link_segments(g: Grid, fx: np.ndarray, fy: np.ndarray) -> list[shapely.LineString]:
    out = [shapely.LineString([(g.x[k - 1], g.y[i]), (g.x[k], g.y[i])])
           for i, k in zip(*np.nonzero(fx), strict=True)]
    out += [shapely.LineString([(g.x[j], g.y[k - 1]), (g.x[j], g.y[k])])
            for k, j in zip(*np.nonzero(fy), strict=True)]
    return out


def assert_separates(lab: np.ndarray, a: np.ndarray, b: np.ndarray) -> None:
    """No component holds cells of both ``a`` and ``b``."""
    assert a.any() and b.any()
    assert not set(lab[a].tolist()) & set(lab[b].tolist())


def write_json(path: Path, obj: object) -> Path:
    path.write_text(json.dumps(obj))
    return path


def feature(geom: shapely.Geometry, **props: object) -> dict:
    return {"type": "Feature", "geometry": shapely.geometry.mapping(geom), "properties": props}


def collection(*feats: dict, **extra: object) -> dict:
    return {"type": "FeatureCollection", "features": list(feats), **extra}


# ---------------------------------------------------------------------------
# fences
# ---------------------------------------------------------------------------
def test_diagonal_fence_blocks_exactly_the_crossed_links_and_splits_the_grid_in_two():
    g = grid()
    p, q = xy(-0.3, -0.27), xy(30.2, 20.83)  # a generic line from edge to edge
    fence = shapely.LineString([p, q])
    fx, fy = fence_faces([fence], g)
    # reference library: shapely, every link tested for intersection one by one
    ex, ey = crossed_links(g, fence)
    np.testing.assert_array_equal(fx, ex)
    np.testing.assert_array_equal(fy, ey)
    assert fx.sum() + fy.sum() == ex.sum() + ey.sum() > 40
    # design requirement: no diagonal leak (4-neighbour stencil): exactly two
    # components, one per side of the line
    lab = components(fx, fy, g.shape)
    s = side_of(g, p, q)
    assert len(np.unique(lab)) == 2
    assert len(np.unique(lab[s > 0])) == 1 and len(np.unique(lab[s < 0])) == 1
    assert_separates(lab, s > 0, s < 0)
    # design requirement: grid-edge faces are never fence faces
    assert not (fx[:, 0].any() or fx[:, -1].any() or fy[0].any() or fy[-1].any())


def test_fence_along_a_face_line_blocks_that_line_only():
    g = grid()
    fx, fy = fence_faces([line((5, 0), (5, 20))], g)  # x = x0 + 5 dx, top to bottom
    # design requirement: exactly the faces of that line
    expected = np.zeros_like(fx)
    expected[:, 5] = True
    np.testing.assert_array_equal(fx, expected)
    assert not fy.any()
    # within its extent only: from row boundary 4 to 11 it blocks rows 4..10
    fx, fy = fence_faces([line((5, 4), (5, 11))], g)
    assert np.array_equal(np.nonzero(fx[:, 5])[0], np.arange(4, 11)) and fx.sum() == 7
    assert not fy.any()


def test_fence_through_a_row_of_cell_centres_still_separates():
    g = grid()
    fx, fy = fence_faces([line((-1, 7.5), (31, 7.5))], g)  # through the centres of row 7
    lab = components(fx, fy, g.shape)
    # design requirement: deterministic and leak-free (symbolic shift puts row 7 north)
    assert len(np.unique(lab)) == 2
    assert len(np.unique(lab[:8])) == 1 and len(np.unique(lab[8:])) == 1
    assert not fx.any() and fy.sum() == g.nx and fy[8].all()


def test_diagonal_fence_exactly_through_cell_centres_still_separates():
    g = grid()
    p, q = xy(0.5, 0.5), xy(19.5, 19.5)  # through the centres (k, k); ends on centres
    fence = shapely.LineString([xy(-1.5, -1.5), p, q, xy(21.5, 21.5)])
    lab = components(*fence_faces([fence], g), g.shape)
    s = side_of(g, p, q)
    # design requirement: centres on the line go to one side or the other, no leak
    assert len(np.unique(lab)) == 2
    assert_separates(lab, s > 0, s < 0)


def test_fence_partly_outside_the_grid_blocks_interior_faces_and_separates():
    g = grid()
    p, q = xy(-4.3, 6.1), xy(12.7, 27.9)  # starts west of the grid, ends south of it
    fence = shapely.LineString([p, q])
    fx, fy = fence_faces([fence], g)
    assert not (fx[:, 0].any() or fx[:, -1].any() or fy[0].any() or fy[-1].any())
    ex, ey = crossed_links(g, fence)  # reference library: shapely
    np.testing.assert_array_equal(fx, ex)
    np.testing.assert_array_equal(fy, ey)
    lab = components(fx, fy, g.shape)
    s = side_of(g, p, q)
    assert len(np.unique(lab)) == 2  # design requirement: still separates
    assert_separates(lab, s > 0, s < 0)


@pytest.mark.parametrize("angle", [7.0, 23.0, 41.5, 67.0, 113.0, 201.0])
def test_touching_features_and_closed_rings_do_not_leak(angle: float):
    g = grid()
    x, y = centres(g)
    pts = shapely.points(x, y)
    a = math.radians(angle)
    # A V of two features that meet at an apex inside the grid, arms past the edges
    apex = xy(14.5, 10.5) if angle < 50 else xy(13.37, 9.81)  # a cell centre, or not
    arm1 = (apex[0] + 6000 * math.cos(a), apex[1] + 6000 * math.sin(a))
    arm2 = (apex[0] + 6000 * math.cos(a + 1.1), apex[1] + 6000 * math.sin(a + 1.1))
    v1 = shapely.LineString([arm1, apex])
    v2 = shapely.LineString([apex, arm2])
    wedge = shapely.Polygon([apex, arm1, arm2])
    # a rotated square ring (polygon) and a closed line, vertices at odd angles
    c = xy(7.2, 5.3)
    ring = shapely.Polygon([(c[0] + 330 * math.cos(a + k * math.pi / 2),
                             c[1] + 330 * math.sin(a + k * math.pi / 2)) for k in range(4)])
    c2 = xy(22.6, 14.4)
    closed = shapely.LineString([(c2[0] + 300 * math.cos(-a + k * 2 * math.pi / 5),
                                  c2[1] + 300 * math.sin(-a + k * 2 * math.pi / 5))
                                 for k in range(6)])
    fences = [v1, v2, ring, closed]
    fx, fy = fence_faces([Shape(f, {}) for f in fences], g)
    lab = components(fx, fy, g.shape)

    def strictly(region: shapely.Geometry) -> tuple[np.ndarray, np.ndarray]:
        d = shapely.distance(pts, region.boundary)
        inside = shapely.contains(region, pts) & (d > 1e-6)
        outside = ~shapely.intersects(region, pts) & (d > 1e-6)
        return inside, outside

    # design requirement: no leak at the apex, the ring's closing vertex or elsewhere
    for region in (wedge, ring, shapely.Polygon(closed.coords)):
        inside, outside = strictly(region)
        assert_separates(lab, inside, outside)
    # design requirement: never a face whose link the fence does not cross
    union = shapely.union_all(fences)
    for seg in link_segments(g, fx, fy):
        assert seg.distance(union) < 1e-6


def test_random_rings_with_vertices_on_centres_and_corners_never_leak():
    g = grid()
    x, y = centres(g)
    pts = shapely.points(x, y)
    rng = np.random.default_rng(11)
    tested = 0
    for _ in range(60):
        n = int(rng.integers(3, 9))
        ang = np.sort(rng.uniform(0, 2 * np.pi, n))
        rad = rng.uniform(2, 9, n)
        cu, cv = rng.uniform(6, 24), rng.uniform(6, 14)
        # snapped to half cells: vertices on cell centres, corners and edge midpoints
        u = np.round((cu + rad * np.cos(ang)) * 2) / 2
        v = np.round((cv + rad * np.sin(ang)) * 2) / 2
        poly = shapely.Polygon([xy(a, b) for a, b in zip(u, v, strict=True)])
        if not poly.is_valid or poly.area == 0:
            continue
        tested += 1
        lab = components(*fence_faces([poly], g), g.shape)
        d = shapely.distance(pts, poly.exterior)
        inside = shapely.contains(poly, pts) & (d > 1e-6)
        outside = ~shapely.intersects(poly, pts) & (d > 1e-6)
        if inside.any():
            # design requirement: degenerate fences (through centres, along face lines)
            # are leak-free
            assert_separates(lab, inside, outside)
    assert tested > 30


def test_gap_opens_the_faces_near_it_and_connects_the_sides():
    g = grid()
    p, q = xy(-0.3, -0.27), xy(30.2, 20.83)
    fence = shapely.LineString([p, q])
    gap = fence.interpolate(0.45, normalized=True)
    width = 260.0  # m
    closed = fence_faces([fence], g)
    fx, fy = fence_faces([fence], g, gaps=[(gap.x, gap.y, width)])
    opened_x, opened_y = closed[0] & ~fx, closed[1] & ~fy
    assert not (fx & ~closed[0]).any() and not (fy & ~closed[1]).any()
    # reference library: shapely crossing points; opened = links crossed within width/2
    near = [seg for seg in link_segments(g, *closed)
            if seg.intersection(fence).distance(gap) <= width / 2]
    opened = link_segments(g, opened_x, opened_y)
    assert len(opened) == len(near) >= 2
    assert {s.wkb for s in opened} == {s.wkb for s in near}
    # design requirement: the sides connect, and only through the opened faces
    lab = components(fx, fy, g.shape)
    assert len(np.unique(lab)) == 1
    s = side_of(g, p, q)
    x, y = centres(g)
    cross_x = ~fx[:, 1:-1] & (s[:, :-1] != s[:, 1:])
    cross_y = ~fy[1:-1, :] & (s[:-1, :] != s[1:, :])
    np.testing.assert_array_equal(cross_x, opened_x[:, 1:-1])
    np.testing.assert_array_equal(cross_y, opened_y[1:-1, :])


def test_gate_narrower_than_a_cell_opens_exactly_one_face():
    g = grid()
    fence = line((-0.3, -0.27), (30.2, 20.83))
    gap = fence.interpolate(0.61, normalized=True)
    closed = fence_faces([fence], g)
    fx, fy = fence_faces([fence], g, gaps=[(gap.x, gap.y, 1.0)])
    opened = link_segments(g, closed[0] & ~fx, closed[1] & ~fy)
    assert len(opened) == 1  # design requirement: a 1 m gate still opens one face
    # ... the face whose crossing point is nearest (reference library: shapely)
    nearest = min(link_segments(g, *closed), key=lambda s: s.intersection(fence).distance(gap))
    assert opened[0].equals(nearest)
    assert len(np.unique(components(fx, fy, g.shape))) == 1


def test_gap_far_from_the_fence_is_an_input_error():
    g = grid()
    with pytest.raises(InputError, match="gap 1"):
        fence_faces([line((5, 0), (5, 20))], g, gaps=[xy(20, 10) + (50.0,)],
                    source="fence.geojson")


def test_polygon_fence_with_a_hole_and_points_ignored():
    g = grid()
    outer = shapely.Polygon([xy(2.2, 2.3), xy(17.7, 2.1), xy(18.1, 17.6), xy(2.4, 17.9)],
                            [[xy(7.1, 7.3), xy(12.8, 7.2), xy(12.6, 12.9), xy(7.3, 12.7)]])
    fx, fy = fence_faces([outer, shapely.Point(xy(25.5, 5.5))], g)
    ex, ey = crossed_links(g, outer.boundary)  # reference library: shapely
    np.testing.assert_array_equal(fx, ex)
    np.testing.assert_array_equal(fy, ey)
    assert len(np.unique(components(fx, fy, g.shape))) == 3  # outside, ring band, hole


def test_outline_faces_isolate_a_blob():
    g = grid((12, 14))
    x, y = centres(g)
    blob = np.hypot(x - xy(4, 5)[0], y - xy(4, 5)[1]) < 330
    blob[0, :3] = True  # touching the grid edge: edge faces stay open
    fx, fy = outline_faces(blob)
    # textbook: faces between differing neighbours = |differences| along each axis
    assert fx.sum() + fy.sum() == np.abs(np.diff(blob.astype(int), axis=1)).sum() + np.abs(
        np.diff(blob.astype(int), axis=0)).sum()
    assert not (fx[:, 0].any() or fx[:, -1].any() or fy[0].any() or fy[-1].any())
    lab = components(fx, fy, g.shape)
    assert_separates(lab, blob, ~blob)  # design requirement: a closed refuge


# ---------------------------------------------------------------------------
# cells
# ---------------------------------------------------------------------------
def test_cells_covered_uses_the_centre_inside_rule():
    g = grid((6, 8))
    # corners between centres: columns 1..3 (centres 150..350 m), rows 2..3
    poly = shapely.Polygon([xy(1.2, 1.7), xy(3.8, 1.7), xy(3.8, 3.9), xy(1.2, 3.9)])
    expected = np.zeros(g.shape, bool)
    expected[2:4, 1:4] = True  # hand-computed
    np.testing.assert_array_equal(cells_covered([poly], g), expected)
    # a triangle, against shapely's point-in-polygon (reference library: shapely)
    tri = shapely.Polygon([xy(0.3, 0.2), xy(7.6, 1.1), xy(2.9, 5.8)])
    x, y = centres(g)
    np.testing.assert_array_equal(cells_covered([Shape(tri, {})], g),
                                  shapely.contains(tri, shapely.points(x, y)))


def test_buffered_line_covers_a_band_of_the_right_width():
    g = grid((10, 12))
    ln = line((-1, 5), (13, 5))  # along the boundary between rows 4 and 5
    # design requirement: centres within buffer_m of the line (50 m and 150 m away)
    cov = cells_covered([ln], g, buffer_m=120.0)
    assert np.array_equal(np.nonzero(cov.any(axis=1))[0], [4, 5]) and cov[4:6].all()
    cov = cells_covered([ln], g, buffer_m=160.0)
    assert np.array_equal(np.nonzero(cov.any(axis=1))[0], [3, 4, 5, 6]) and cov[3:7].all()
    # without buffer: every cell the line passes through (reference library: shapely)
    diag = line((0.3, 0.2), (11.7, 9.1))
    boxes = shapely.box(*np.meshgrid(g.x - 50, g.y - 50), *np.meshgrid(g.x + 50, g.y + 50))
    np.testing.assert_array_equal(cells_covered([diag], g), shapely.intersects(boxes, diag))
    pt = cells_covered([shapely.Point(xy(3.3, 7.6))], g)
    assert pt.sum() == 1 and pt[7, 3]
    with pytest.raises(ValueError):
        cells_covered([ln], g, buffer_m=-1.0)


def test_tiny_and_narrow_polygons_cover_at_least_one_cell():
    g = grid((6, 8))
    tiny = shapely.box(*xy(2.1, 3.9), *xy(2.15, 3.85))  # 5 m square, no centre inside
    cov = cells_covered([tiny], g)
    assert cov.sum() == 1 and cov[3, 2]  # design requirement: never silently lost
    sliver = shapely.Polygon([xy(0.1, 0.1), xy(7.9, 5.2), xy(7.9, 5.3)])
    assert cells_covered([sliver], g).sum() >= 1
    # hidden completely under a later polygon: no extra cell
    big = shapely.box(*xy(0, 6), *xy(8, 0))
    assert cells_covered([tiny, big], g).all()


def test_cells_covered_excludes_cells_without_data():
    mask = np.ones((6, 8), bool)
    mask[2, 2] = mask[3, 3] = False
    g = grid((6, 8), mask)
    cov = cells_covered([shapely.box(*xy(1, 5), *xy(5, 1))], g)
    expected = np.zeros((6, 8), bool)
    expected[1:5, 1:5] = True
    expected &= mask
    np.testing.assert_array_equal(cov, expected)


def test_cells_from_raster_same_grid_coarser_and_partial(tmp_path: Path):
    mask = np.ones((12, 16), bool)
    mask[0, 0] = False
    g = grid((12, 16), mask)
    rng = np.random.default_rng(5)
    marked = rng.random(g.shape) < 0.3
    marked[0, 0] = True
    write_geotiff(tmp_path / "same.tif", g, marked.astype(np.uint8), nodata=255)
    # design requirement: same grid, same cells (no-data cells excluded)
    np.testing.assert_array_equal(cells_from_raster(tmp_path / "same.tif", g), marked & mask)

    coarse_grid = Grid((6, 8), X0, Y0, 2 * DX, 2 * DX, UTM_WKT)
    coarse = rng.random((6, 8)) < 0.4
    write_geotiff(tmp_path / "coarse.tif", coarse_grid, coarse.astype(np.uint8), nodata=255)
    expected = np.kron(coarse, np.ones((2, 2), bool)) & mask  # textbook: block replication
    np.testing.assert_array_equal(cells_from_raster(tmp_path / "coarse.tif", g), expected)

    # float values: non-zero and finite marks, zero and NaN (no data) do not;
    # the raster covers only the western half of the grid
    half = Grid((12, 8), X0, Y0, DX, DX, UTM_WKT)
    vals = np.zeros((12, 8))
    vals[2, 3], vals[5, 1], vals[7, 7] = 2.5, -1.0, np.nan
    write_geotiff(tmp_path / "float.tif", half, vals)
    got = cells_from_raster(tmp_path / "float.tif", g, source="corridor.tif")
    assert got.sum() == 2 and got[2, 3] and got[5, 1]

    with pytest.raises(InputError, match="corridor.tif"):
        cells_from_raster(tmp_path / "missing.tif", g, source="corridor.tif")


# ---------------------------------------------------------------------------
# reading GeoJSON
# ---------------------------------------------------------------------------
def test_read_geometry_legacy_crs_member_in_the_grid_crs(tmp_path: Path):
    g = grid()
    ln = line((1.3, 2.2), (9.7, 8.1))
    path = write_json(tmp_path / "fence.geojson", collection(
        feature(ln, name="east fence"),
        crs={"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
    ))
    shapes = read_geometry(path, g)
    assert len(shapes) == 1 and shapes[0].properties == {"name": "east fence"}
    assert shapes[0].geometry.equals_exact(ln, 0.0)  # design requirement: read as is
    assert "'crs' member" in shapes.crs_note and shapes.crs_name == "EPSG:32633"
    assert geometry_crs_note(path, g) == shapes.crs_note


def test_read_geometry_wgs84_lands_on_the_expected_cells(tmp_path: Path):
    g = grid()
    to_ll = Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    corners = [xy(3, 2), xy(11, 2), xy(11, 9), xy(3, 9)]  # cell boundaries
    ll = [to_ll.transform(*c) for c in corners]
    far = [to_ll.transform(*xy(0.5, 15.5)), to_ll.transform(*xy(29.5, 15.5))]
    path = write_json(tmp_path / "refuge.geojson", collection(
        feature(shapely.Polygon(ll), name="refuge"),
        feature(shapely.LineString(far)),
    ))
    shapes = read_geometry(path, g)
    assert "EPSG:4326" in shapes.crs_note and "RFC 7946" in shapes.crs_note
    # reference library: pyproj round trip, millimetres
    got = shapely.get_coordinates(shapes[0].geometry)
    for c in corners:
        assert np.hypot(*(got - c).T).min() < 1e-3
    expected = np.zeros(g.shape, bool)
    expected[2:9, 3:11] = True
    np.testing.assert_array_equal(cells_covered(shapes[:1], g), expected)
    # densified to about a cell, and following the true path of the lon/lat line
    long_line = shapes[1].geometry
    seg = np.diff(shapely.get_coordinates(long_line), axis=0)
    assert len(seg) >= 25 and np.hypot(*seg.T).max() <= 1.01 * DX
    mid_ll = ((far[0][0] + far[1][0]) / 2, (far[0][1] + far[1][1]) / 2)
    mid = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True).transform(*mid_ll)
    assert long_line.distance(shapely.Point(mid)) < 0.5


def test_read_geometry_explicit_crs(tmp_path: Path):
    g = grid()
    to_32 = Transformer.from_crs("EPSG:32633", "EPSG:32632", always_xy=True)
    pts = [xy(2.5, 3.5), xy(20.5, 14.5)]
    path = write_json(tmp_path / "fence.json", feature(
        shapely.LineString([to_32.transform(*p) for p in pts]), kind="wire"))
    shapes = read_geometry(path, g, crs="EPSG:32632")
    got = shapely.get_coordinates(shapes[0].geometry)
    # reference library: pyproj round trip through UTM 32N, millimetres
    assert np.hypot(*(got[0] - pts[0])) < 1e-3 and np.hypot(*(got[-1] - pts[1])) < 1e-3
    assert shapes[0].properties == {"kind": "wire"} and shapes.crs_name == "EPSG:32632"
    # without the CRS the coordinates are taken to be in the grid's CRS: off the grid
    with pytest.raises(InputError, match="outside the habitat grid"):
        read_geometry(path, g)


def test_read_geometry_bare_geometry_and_collection(tmp_path: Path):
    g = grid()
    coll = shapely.GeometryCollection([line((1, 1), (4, 4)), shapely.Point(xy(6.5, 6.5))])
    path = write_json(tmp_path / "bare.geojson", shapely.geometry.mapping(coll))
    shapes = read_geometry(path, g)
    assert len(shapes) == 1 and shapes[0].properties == {}
    assert "grid's CRS" in shapes.crs_note
    assert cells_covered(shapes, g)[6, 6]


@pytest.mark.parametrize(
    ("content", "crs", "match"),
    [
        (None, None, "not found"),
        ("{ not json", None, "not valid JSON"),
        ({"type": "Topology", "objects": {}}, None, "not a GeoJSON"),
        (collection(), None, "no geometries"),
        (feature(line((1, 1), (2, 2))), "EPSG:99999999", "unknown coordinate reference"),
        (collection(feature(line((1, 1), (2, 2))),
                    crs={"type": "name", "properties": {"name": "urn:nonsense"}}),
         None, "unknown coordinate reference"),
    ],
)
def test_read_geometry_errors_name_the_file(tmp_path: Path, content, crs, match):
    g = grid()
    path = tmp_path / "measure.geojson"
    if isinstance(content, str):
        path.write_text(content)
    elif content is not None:
        write_json(path, content)
    with pytest.raises(InputError, match=match) as err:
        read_geometry(path, g, crs=crs)
    assert str(path) in str(err.value)  # design requirement: the message names the file
    with pytest.raises(InputError, match="fences.geojson"):
        read_geometry(path, g, crs=crs, source="fences.geojson")


def test_read_geometry_outside_the_grid_names_extent_and_crs(tmp_path: Path):
    g = grid()
    path = write_json(tmp_path / "far.geojson", collection(
        feature(line((1, 1), (2, 2))),
        feature(shapely.LineString([(800_000.0, 4_000_000.0), (800_100.0, 4_000_000.0)])),
    ))
    with pytest.raises(InputError) as err:
        read_geometry(path, g)
    msg = str(err.value)
    assert "feature 2" in msg and str(path) in msg
    assert "500000.0 to 503000.0 m" in msg and "4998000.0 to 5000000.0 m" in msg
    assert "EPSG:32633" in msg


# ---------------------------------------------------------------------------
# zones
# ---------------------------------------------------------------------------
def test_zones_from_polygons_labels_names_and_overlaps(tmp_path: Path):
    mask = np.ones((6, 8), bool)
    mask[5, 7] = False
    g = grid((6, 8), mask)
    a = shapely.box(*xy(0, 4), *xy(4, 0))  # rows 0-3, cols 0-3
    b = shapely.box(*xy(2, 6), *xy(8, 2))  # rows 2-5, cols 2-7, drawn later: wins
    c = shapely.box(*xy(6.1, 1.9), *xy(6.2, 1.8))  # tiny: the cell (1, 6)
    path = write_json(tmp_path / "zones.geojson", collection(
        feature(a, name="north meadow", kind="grass"),
        feature(b, name="reed bed", kind="wet"),
        feature(c, kind="wet"),
    ))
    labels, names = zones_from_polygons(path, g)
    assert names == ["north meadow", "reed bed", "zone 3"]
    expected = np.full((6, 8), -1, np.int32)  # hand-computed
    expected[0:4, 0:4] = 0
    expected[2:6, 2:8] = 1
    expected[1, 6] = 2
    expected[5, 7] = -1  # no data
    np.testing.assert_array_equal(labels, expected)
    assert labels.dtype == np.int32

    labels, names = zones_from_polygons(path, g, field="kind")
    assert names == ["grass", "wet"]  # features sharing a name share a zone
    assert labels[1, 6] == 1 and labels[0, 0] == 0

    with pytest.raises(InputError, match="no property 'owner'"):
        zones_from_polygons(path, g, field="owner", source="zones.geojson")
    lines = write_json(tmp_path / "lines.geojson", feature(line((1, 1), (3, 3))))
    with pytest.raises(InputError, match="zones need polygons"):
        zones_from_polygons(lines, g)
