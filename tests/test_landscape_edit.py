"""Edits of habitat rasters: corridor, road, lake and their GeoJSON (landscape/edit.py)."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import shapely
from conftest import X0, Y0, write_habitat

from preyscape.errors import InputError
from preyscape.landscape.edit import edit_raster, measure_snippet
from preyscape.landscape.io import read_habitat
from preyscape.landscape.make import make_landscape
from preyscape.landscape.measures import cells_covered, read_geometry

LINE = [f"{X0 + 250.0},{Y0 - 450.0}", f"{X0 + 2750.0},{Y0 - 1650.0}"]  # within the 24 x 30 map


def centres(grid):
    xx, yy = np.meshgrid(grid.x, grid.y)
    return xx, yy


def test_corridor_cells_are_those_within_half_the_width(tmp_path: Path):
    src = write_habitat(tmp_path / "h.tif")
    r = edit_raster(src, "corridor", out=tmp_path / "c.tif", line=LINE, width=260.0, value=2)
    grid0, before = read_habitat(src, "classes")
    grid, after = read_habitat(tmp_path / "c.tif", "classes")
    # reference library: shapely distance from each data cell's centre to the line
    line = shapely.LineString([tuple(map(float, p.split(","))) for p in LINE])
    xx, yy = centres(grid)
    dist = shapely.distance(shapely.points(xx, yy), line)
    covered = (dist <= 130.0) & grid0.mask
    assert np.array_equal(after[covered], np.full(covered.sum(), 2))
    assert np.array_equal(after[~covered], before[~covered])
    assert np.array_equal(grid.mask, grid0.mask)  # no-data stays no-data
    assert r["cells"] == int((covered & (before != 2)).sum())
    assert r["metrics_file"].is_file()


def test_corridor_measure_covers_the_painted_cells(tmp_path: Path):
    # design requirement: a corridor painted into the map and the same corridor as a
    # scenario measure (GeoJSON, buffer = width/2) cover the same cells
    src = write_habitat(tmp_path / "h.tif")
    r = edit_raster(src, "corridor", out=tmp_path / "c.tif", measure=tmp_path / "c.geojson",
                    line=LINE, width=300.0, value=2, name="meadow strip")
    grid, before = read_habitat(src, "classes")
    _, after = read_habitat(tmp_path / "c.tif", "classes")
    shapes = read_geometry(tmp_path / "c.geojson", grid)
    assert "EPSG" in shapes.crs_note or "32633" in shapes.crs_name
    cells = cells_covered(shapes, grid, 150.0)
    assert np.array_equal(cells, (after != before) | ((after == 2) & (before == 2) & cells))
    assert np.all(after[cells] == 2)
    doc = json.loads((tmp_path / "c.geojson").read_text())
    assert doc["crs"]["properties"]["name"] == "urn:ogc:def:crs:EPSG::32633"
    assert doc["features"][0]["properties"]["name"] == "meadow strip"
    assert "buffer = 150.0" in r["snippet"] and 'geometry = "c.geojson"' in r["snippet"]


def test_measure_snippet_is_a_valid_measure(write_scenario, tmp_path: Path):
    # design requirement: the printed table, pasted into a scenario with the GeoJSON beside
    # it, validates and passes `preyscape check`, and covers the cells the road would paint
    import tomllib

    from preyscape.cli import main
    from preyscape.scenario import load_scenario

    scenario = write_scenario()
    r = edit_raster(tmp_path / "habitat.tif", "road", measure=tmp_path / "road.geojson",
                    line=LINE, width=40.0)
    text = scenario.read_text() + "\n" + r["snippet"] + '\n[[variants]]\nname = "road"\n' \
        'add = ["road"]\n'
    scenario.write_text(text)
    tomllib.loads(text)
    sc = load_scenario(scenario)
    assert sc.measure("road").buffer == 20.0
    assert main(["check", str(scenario)]) == 0
    painted = edit_raster(tmp_path / "habitat.tif", "road", out=tmp_path / "r.tif", line=LINE,
                          width=40.0)
    grid, _ = read_habitat(tmp_path / "habitat.tif", "classes")
    cells = cells_covered(read_geometry(tmp_path / "road.geojson", grid), grid, 20.0)
    assert cells.sum() == painted["cells"] > 0


def test_road_gets_a_new_class_code(tmp_path: Path):
    src = write_habitat(tmp_path / "h.tif")
    r = edit_raster(src, "road", out=tmp_path / "r.tif", line=LINE, width=100.0)
    _, after = read_habitat(tmp_path / "r.tif", "classes")
    assert r["value"] == 3  # one above the largest code (2)
    assert (after == 3).sum() == r["cells"] > 0
    import rasterio

    with rasterio.open(tmp_path / "r.tif") as ds:
        assert ds.tags(1)["CLASS_3"] == "road"


def test_edits_of_a_suitability_map(tmp_path: Path):
    make_landscape(tmp_path / "s.tif", "fractal", rows=40, cols=40, suitability=True, seed=1)
    grid, s = read_habitat(tmp_path / "s.tif", "suitability")
    y = grid.y0 - 20.5 * grid.dy
    line = [f"{grid.x0},{y}", f"{grid.x0 + grid.width_m},{y}"]  # along the centres of row 20
    edit_raster(tmp_path / "s.tif", "road", out=tmp_path / "r.tif", line=line, width=10.0)
    edit_raster(tmp_path / "s.tif", "corridor", out=tmp_path / "c.tif", line=line, width=10.0)
    _, road = read_habitat(tmp_path / "r.tif", "suitability")
    _, corr = read_habitat(tmp_path / "c.tif", "suitability")
    assert np.all(road[20] == 0.0) and np.all(corr[20] == 1.0)
    assert np.array_equal(road[:20], s[:20])


def test_lake_is_a_disc_of_no_data(tmp_path: Path):
    make_landscape(tmp_path / "m.tif", "random", rows=60, cols=60, cell_size=10.0, seed=2)
    grid, before = read_habitat(tmp_path / "m.tif", "classes")
    cx, cy = grid.x0 + 300.0, grid.y0 - 300.0
    r = edit_raster(tmp_path / "m.tif", "lake", out=tmp_path / "l.tif", at=f"{cx},{cy}",
                    radius=155.0)
    g2, after = read_habitat(tmp_path / "l.tif", "classes")
    inside = grid.distance_to(cx, cy) <= 155.0
    assert np.array_equal(~g2.mask, inside)
    # area of the disc: pi r² / h² = 754.8 cells; the cell count of a lattice disc differs
    # by O(r/h) (Gauss circle problem), here by less than 2 %
    assert inside.sum() == pytest.approx(math.pi * 15.5**2, rel=0.02)
    assert r["cells"] == inside.sum()
    assert np.array_equal(after[g2.mask], before[g2.mask])


def test_lake_from_a_polygon_file(tmp_path: Path):
    src = write_habitat(tmp_path / "h.tif")
    poly = shapely.box(X0 + 1000.0, Y0 - 1000.0, X0 + 1500.0, Y0 - 500.0)
    (tmp_path / "lake.geojson").write_text(json.dumps({
        "type": "FeatureCollection",
        "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
        "features": [{"type": "Feature", "properties": {},
                      "geometry": json.loads(shapely.to_geojson(poly))}]}))
    edit_raster(src, "lake", out=tmp_path / "l.tif", shape=tmp_path / "lake.geojson")
    grid, _ = read_habitat(tmp_path / "l.tif", "classes")
    assert (~grid.mask[5:10, 10:15]).all()  # 5 x 5 cells of 100 m
    assert (~grid.mask).sum() == 25 + 5  # and the five no-data cells of the test map


@pytest.mark.parametrize("kwargs, needle", [
    ({"line": ["1,2", "3,4"], "width": 50.0}, "outside the map"),
    ({"line": LINE}, "--width"),
    ({"line": LINE[:1], "width": 50.0}, "at least two points"),
    ({"line": LINE, "width": -5.0}, "--width"),
    ({"line": LINE, "width": 50.0, "value": 1.5}, "class code"),
    ({"line": ["a,b", "1,2"], "width": 50.0}, "x,y"),
    ({"width": 50.0}, "give the shape"),
])
def test_bad_edits_are_refused_and_write_nothing(tmp_path: Path, kwargs, needle):
    src = write_habitat(tmp_path / "h.tif")
    with pytest.raises(InputError) as info:
        edit_raster(src, "corridor", out=tmp_path / "c.tif", measure=tmp_path / "c.geojson",
                    **kwargs)
    assert needle in str(info.value)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["h.tif"]


def test_edits_never_overwrite_unless_asked(tmp_path: Path):
    src = write_habitat(tmp_path / "h.tif")
    (tmp_path / "c.geojson").write_text("{}")
    with pytest.raises(InputError, match="--overwrite"):
        edit_raster(src, "corridor", out=tmp_path / "c.tif", measure=tmp_path / "c.geojson",
                    line=LINE, width=50.0)
    assert not (tmp_path / "c.tif").exists()
    assert (tmp_path / "c.geojson").read_text() == "{}"
    with pytest.raises(InputError, match="new file"):
        edit_raster(src, "corridor", out=src, line=LINE, width=50.0, overwrite=True)


def test_snippet_for_polygons_has_no_buffer():
    text = measure_snippet("corridor", "wood edge", "w.geojson", None, "classes")
    assert "buffer" not in text and 'name = "wood edge"' in text


def test_narrow_diagonal_roads_get_a_note_and_wide_ones_are_unbroken(tmp_path: Path):
    # geometry of the lattice: cell centres within w/2 of a diagonal line form an unbroken
    # 4-neighbour band only if w >= sqrt(2) h (design requirement; patch count by
    # scipy.ndimage.label, reference library)
    from scipy import ndimage

    src = write_habitat(tmp_path / "h.tif")
    diag = [f"{X0},{Y0}", f"{X0 + 2400.0},{Y0 - 2400.0}"]  # 45°, through cell corners
    thin = edit_raster(src, "road", out=tmp_path / "t.tif", line=diag, width=60.0)
    wide = edit_raster(src, "road", out=tmp_path / "w.tif", line=diag, width=150.0)
    assert thin["note"] and "√2" in thin["note"] and wide["note"] is None
    four = ndimage.generate_binary_structure(2, 1)
    for name, pieces in (("t.tif", lambda n: n > 1), ("w.tif", lambda n: n == 1)):
        grid, cl = read_habitat(tmp_path / name, "classes")
        road = (cl == 3)
        road[~grid.mask] = False
        assert pieces(ndimage.label(road, four)[1]), name
