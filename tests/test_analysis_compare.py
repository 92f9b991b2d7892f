"""Comparing two runs: preyscape.analysis.compare and preyscape.analysis.compare_output.

Two small synthetic runs are written with the real ResultWriter. Units: animals
per km², km², years.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pytest
import rasterio
import xarray as xr
from rasterio.crs import CRS

from preyscape.analysis.compare import (
    change_classes,
    check_same_grid,
    compare_runs,
    difference,
    relative_change,
    zone_table,
)
from preyscape.analysis.results import cell_statistics as run_statistics
from preyscape.analysis.settings import AnalysisSettings
from preyscape.errors import FileProblem, InputError
from preyscape.landscape.grid import Grid
from preyscape.landscape.io import write_geotiff
from preyscape.store import ResultWriter

SHAPE = (6, 8)
DX = 100.0  # m: cells of 0.01 km²
X0, Y0 = 600_000.0, 6_100_000.0
WKT = CRS.from_epsg(32633).to_wkt()
TIMES = [0.0, 1.0, 2.0, 3.0, 4.0]  # four snapshots after the start: means are exact


def make_grid(shape=SHAPE, x0=X0, crs=WKT, extra_nodata=()) -> Grid:
    mask = np.ones(shape, bool)
    mask[0, 0] = False
    for rc in extra_nodata:
        mask[rc] = False
    return Grid(shape, x0, Y0, DX, DX, crs, mask)


def habitat_codes(shape=SHAPE) -> np.ndarray:
    h = np.ones(shape)
    h[:, shape[1] // 2:] = 2.0
    return h


def frames(seed: int, n: int = len(TIMES), shape=SHAPE) -> tuple[np.ndarray, np.ndarray]:
    # multiples of 1/4 up to 40: sums of four of them and their quarter are exact in float32
    rng = np.random.default_rng(seed)
    prey = rng.integers(0, 160, (n, *shape)) / 4.0
    pred = rng.integers(0, 20, (n, *shape)) / 4.0
    return prey, pred


def write_run(folder: Path, prey, pred, times=TIMES, grid: Grid | None = None,
              title="run", habitat=None) -> Path:
    grid = grid or make_grid()
    folder.mkdir(parents=True)
    w = ResultWriter(folder / "results.nc", grid, {"prey": "bank vole", "predator": "stoat"},
                     {"title": title}, habitat_codes(grid.shape) if habitat is None else habitat)
    for t, n, p in zip(times, prey, pred, strict=True):
        w.write(t, n, p)
    w.close()
    (folder / "run.json").write_text(json.dumps(
        {"title": title, "species": {"prey": "bank vole", "predator": "stoat"}}))
    return folder


def open_results(folder: Path) -> xr.Dataset:
    with xr.open_dataset(folder / "results.nc", decode_times=False) as ds:
        return ds.load()


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    base = tmp_path_factory.mktemp("compare")
    fa, fb = frames(1), frames(2)
    a = write_run(base / "a", *fa, title="Fernhollow without hedgerows")
    b = write_run(base / "b", *fb, title="Fernhollow with hedgerows")
    return {"base": base, "a": a, "b": b, "frames_a": fa, "frames_b": fb,
            "ds_a": open_results(a), "ds_b": open_results(b)}


# ---------------------------------------------------------------------------
# per-cell statistics and differences
# ---------------------------------------------------------------------------
def test_run_statistics_match_numpy_over_snapshots_after_start(runs):
    # design requirement: statistics over the snapshots after t = 0, as store.time_means
    prey = runs["frames_a"][0][1:]
    mask = make_grid().mask
    s = run_statistics(runs["ds_a"], "prey", presence=10.0)
    assert s.snapshots == len(TIMES) - 1
    for key, expect in (("mean", prey.mean(axis=0)), ("minimum", prey.min(axis=0)),
                        ("maximum", prey.max(axis=0)),
                        ("persistence", (prey >= 10.0).mean(axis=0))):
        got = getattr(s, key)
        assert got.dtype == np.float32
        np.testing.assert_array_equal(got[mask], expect[mask].astype(np.float32), err_msg=key)
        assert np.isnan(got[0, 0])


def test_difference_maps_are_exactly_b_minus_a(runs):
    # design requirement: difference maps are exactly B − A of the runs' own statistics
    mask = make_grid().mask
    sa = run_statistics(runs["ds_a"], "prey", presence=5.0)
    sb = run_statistics(runs["ds_b"], "prey", presence=5.0)
    d = difference(sa, sb)
    pa, pb = runs["frames_a"][0][1:], runs["frames_b"][0][1:]
    exact_mean = pb.mean(axis=0) - pa.mean(axis=0)  # exact: quarters, four snapshots
    exact_pers = (pb >= 5.0).mean(axis=0) - (pa >= 5.0).mean(axis=0)
    np.testing.assert_array_equal(d["mean"][mask], exact_mean[mask])
    np.testing.assert_array_equal(d["persistence"][mask], exact_pers[mask])
    assert np.isnan(d["mean"][0, 0]) and np.isnan(d["persistence"][0, 0])
    cmp = compare_runs(runs["ds_a"], runs["ds_b"], presence=5.0)
    np.testing.assert_array_equal(cmp["prey_mean_difference"].values[mask], exact_mean[mask])
    assert cmp.attrs["same_times"] == 1


def test_relative_change_is_nan_below_presence():
    # design requirement: (B − A)/A where A >= presence, NaN elsewhere
    a = np.array([10.0, 1.0, 0.99, np.nan, 4.0])
    b = np.array([12.0, 0.5, 5.0, 1.0, 4.0])
    rel = relative_change(a, b, presence=1.0)
    np.testing.assert_allclose(rel[[0, 1, 4]], [0.2, -0.5, 0.0], rtol=1e-7)
    assert np.isnan(rel[2]) and np.isnan(rel[3])


def test_change_classes_at_the_threshold_edges():
    # design requirement: changed when |B − A| > threshold·A (strictly) where A >= presence;
    # when A < presence, changed only if B >= presence; encoding 0/1/2/3, −1 no data
    #               exact 10%  >10%   -10%   < -10%  appears below  both below at presence
    a = np.array([10.0, 10.0, 10.0, 10.0, 0.5, 0.5, 0.2, 1.0, 10.0])
    b = np.array([11.0, 11.5, 9.0, 8.9, 1.0, 0.99, 0.9, 1.2, np.nan])
    prey_changed = [False, True, False, True, True, False, False, True]
    steady = np.full(a.shape, 20.0)
    c = change_classes(a, b, steady, steady, threshold=0.10, presence=1.0)
    assert c.dtype == np.int8
    np.testing.assert_array_equal(c[:-1], np.where(prey_changed, 1, 0))
    assert c[-1] == -1
    # the same cases as predator: code 2; both species changing: 3
    c2 = change_classes(steady, steady, a, b, threshold=0.10, presence=1.0)
    np.testing.assert_array_equal(c2[:-1], np.where(prey_changed, 2, 0))
    c3 = change_classes(a, b, a, b, threshold=0.10, presence=1.0)
    np.testing.assert_array_equal(c3[:-1], np.where(prey_changed, 3, 0))
    assert c2[-1] == -1 and c3[-1] == -1


# ---------------------------------------------------------------------------
# zones
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("sp", ["prey", "predator"])
def test_zone_table_adds_up_to_landscape_totals(runs, sp):
    # design requirement (conservation of bookkeeping): zones covering every data cell
    # add up to the landscape totals written by the solver in `{sp}_total`
    ds = runs["ds_a"]
    labels = (habitat_codes() - 1).astype(int)
    rows = zone_table(ds, labels, ["meadow", "scrub"], sp, presence=2.0)
    total = ds[f"{sp}_total"].values
    assert sum(r["mean_animals"] for r in rows) == pytest.approx(total[1:].mean(), rel=1e-6)
    grid = make_grid()
    assert sum(r["area_km2"] for r in rows) == pytest.approx(grid.n_cells * 0.01, rel=1e-12)
    assert sum(r["min_animals"] for r in rows) <= total[1:].min() * (1 + 1e-6)
    # hand computation for the western zone
    u = (runs["frames_a"][0] if sp == "prey" else runs["frames_a"][1])[1:]
    west = grid.mask & (labels == 0)
    animals = u[:, west].sum(axis=1) * 0.01
    r0 = rows[0]
    assert r0["zone"] == "meadow" and r0["cells"] == int(west.sum())
    assert r0["mean_density"] == pytest.approx(animals.mean() / r0["area_km2"], rel=1e-9)
    assert r0["min_animals"] == pytest.approx(animals.min(), rel=1e-9)
    assert r0["persistence"] == pytest.approx((u[:, west] >= 2.0).mean(), rel=1e-12)
    assert r0["occupied_fraction"] == pytest.approx(
        np.mean(animals >= 2.0 * r0["area_km2"]), rel=1e-12)


def test_zone_without_data_cells_has_nan_statistics(runs):
    labels = np.full(SHAPE, -1)
    labels[0, 0] = 1  # the no-data cell
    labels[1:, :] = 0
    rows = zone_table(runs["ds_a"], labels, ["inner", "nowhere"], "prey")
    assert rows[1]["cells"] == 0 and np.isnan(rows[1]["mean_density"])
    assert rows[0]["cells"] == 5 * 8


# ---------------------------------------------------------------------------
# mismatched grids
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("kind,expect", [
    ("shape", "cells"),
    ("shift", "west edge"),
    ("crs", "coordinate reference"),
    ("mask", "data masks differ"),
])
def test_mismatched_grids_are_refused(tmp_path, runs, kind, expect):
    # design requirement: a clean InputError naming both runs
    shape = (6, 9) if kind == "shape" else SHAPE
    grid = make_grid(
        shape=shape,
        x0=X0 + 50.0 if kind == "shift" else X0,
        crs=CRS.from_epsg(32634).to_wkt() if kind == "crs" else WKT,
        extra_nodata=((3, 3),) if kind == "mask" else (),
    )
    prey, pred = frames(5, shape=shape)
    other = write_run(tmp_path / "other", prey, pred, grid=grid)
    with pytest.raises(InputError) as err:
        check_same_grid(runs["ds_a"], open_results(other), ("Fernhollow", "Ashby Fen"))
    msg = str(err.value)
    assert "Fernhollow" in msg and "Ashby Fen" in msg and expect in msg


def test_different_snapshot_times_are_allowed(tmp_path, runs):
    # design requirement: each run's statistics over its own snapshots
    prey, pred = frames(7, n=3)
    other = write_run(tmp_path / "short", prey, pred, times=[0.0, 0.5, 1.0])
    cmp = compare_runs(runs["ds_a"], open_results(other))
    assert cmp.attrs["same_times"] == 0
    assert cmp.attrs["prey_snapshots_b"] == 2
    mask = make_grid().mask
    np.testing.assert_allclose(cmp["prey_mean_b"].values[mask], prey[1:].mean(0)[mask])


# ---------------------------------------------------------------------------
# the product
# ---------------------------------------------------------------------------
def read_zones_csv(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_write_comparison_end_to_end(runs):
    from preyscape.analysis.compare_output import write_comparison

    out = runs["base"] / "cmp"
    summary = write_comparison(runs["a"], runs["b"], out,
                               settings=AnalysisSettings(change_threshold=0.1, presence=1.0))
    for name in ("prey_mean_difference", "predator_mean_difference",
                 "prey_persistence_difference", "predator_persistence_difference"):
        assert (out / f"{name}.tif").is_file() and (out / f"{name}.png").is_file()
    for name in ("prey_relative_change.tif", "predator_relative_change.tif", "change.tif",
                 "change.png", "zones.csv", "totals.png", "comparison.json"):
        assert (out / name).is_file(), name
    assert not list(out.parent.glob(".cmp.partial-*"))
    grid = make_grid()
    # design requirement: the rasters hold the analysis maps, on the run grid
    cmp = compare_runs(runs["ds_a"], runs["ds_b"], threshold=0.1, presence=1.0)
    with rasterio.open(out / "change.tif") as src:
        assert src.crs.to_epsg() == 32633
        assert src.transform.c == X0 and src.transform.f == Y0
        assert src.nodata == -1
        np.testing.assert_array_equal(src.read(1), cmp["change"].values)
    with rasterio.open(out / "prey_mean_difference.tif") as src:
        np.testing.assert_array_equal(src.read(1)[grid.mask],
                                      cmp["prey_mean_difference"].values[grid.mask])
    rec = json.loads((out / "comparison.json").read_text())
    assert sum(rec["changed_cells"].values()) == grid.n_cells
    assert rec["changed_cells"] == summary.changed_cells
    assert rec["changed_area_km2"]["both"] == pytest.approx(rec["changed_cells"]["both"] * 0.01)
    assert rec["settings"]["zone_source"] == "habitat classes"
    assert rec["zones"] == ["class 1", "class 2"]
    # zone table: default zones are the habitat classes; they add up to the totals
    rows = read_zones_csv(out / "zones.csv")
    assert [(r["zone"], r["species"]) for r in rows] == [
        ("class 1", "prey"), ("class 1", "predator"), ("class 2", "prey"),
        ("class 2", "predator")]
    for sp in ("prey", "predator"):
        mine = [r for r in rows if r["species"] == sp]
        for run, ds in (("a", runs["ds_a"]), ("b", runs["ds_b"])):
            got = sum(float(r[f"mean_animals_{run}"]) for r in mine)
            assert got == pytest.approx(ds[f"{sp}_total"].values[1:].mean(), rel=1e-5)
        for r in mine:  # the CSV keeps 6 significant digits
            a, b = float(r["mean_density_a"]), float(r["mean_density_b"])
            assert float(r["mean_density_b_minus_a"]) == pytest.approx(b - a, rel=1e-4, abs=1e-4)
    # an existing folder is refused unless overwrite is asked for
    with pytest.raises(InputError, match="already exists"):
        write_comparison(runs["a"], runs["b"], out)
    write_comparison(runs["a"], runs["b"], out, settings=AnalysisSettings(change_threshold=0.5),
                     overwrite=True)
    assert json.loads((out / "comparison.json").read_text())["settings"]["threshold"] == 0.5


def test_write_comparison_refuses_bad_input(runs, tmp_path):
    from preyscape.analysis.compare_output import write_comparison

    with pytest.raises(FileProblem, match="not a finished run folder"):
        write_comparison(runs["a"], tmp_path / "missing", tmp_path / "o1")
    with pytest.raises(InputError, match="presence"):
        write_comparison(runs["a"], runs["b"], tmp_path / "o2",
                         settings=AnalysisSettings(presence=0.0))
    with pytest.raises(InputError, match="zone file not found"):
        write_comparison(runs["a"], runs["b"], tmp_path / "o3", zones=tmp_path / "nope.tif")
    assert not (tmp_path / "o1").exists() and not (tmp_path / "o3").exists()


def test_write_comparison_with_raster_zones(runs, tmp_path):
    from preyscape.analysis.compare_output import write_comparison

    grid = make_grid()
    z = np.full(SHAPE, 7, dtype=np.uint8)
    z[3:, :] = 9  # north and south halves
    write_geotiff(tmp_path / "zones.tif", grid, z, nodata=0, dtype="uint8")
    out = tmp_path / "cmp"
    summary = write_comparison(runs["a"], runs["b"], out, zones=tmp_path / "zones.tif")
    assert summary.record["zones"] == ["zone 7", "zone 9"]
    rows = read_zones_csv(out / "zones.csv")
    north = [r for r in rows if r["zone"] == "zone 7" and r["species"] == "prey"][0]
    # 3 rows x 8 cols minus the no-data corner, cells of 0.01 km²
    assert float(north["area_km2"]) == pytest.approx(23 * 0.01)


def test_write_comparison_with_polygon_zones(runs, tmp_path):
    from preyscape.analysis.compare_output import write_comparison

    # two invented parcels: the western and eastern halves of the grid
    def square(x0, x1):
        return [[[x0, Y0], [x1, Y0], [x1, Y0 - 600], [x0, Y0 - 600], [x0, Y0]]]

    fc = {"type": "FeatureCollection",
          "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
          "features": [
              {"type": "Feature", "properties": {"parcel": "Low Copse"},
               "geometry": {"type": "Polygon", "coordinates": square(X0, X0 + 400)}},
              {"type": "Feature", "properties": {"parcel": "High Leys"},
               "geometry": {"type": "Polygon", "coordinates": square(X0 + 400, X0 + 800)}},
          ]}
    path = tmp_path / "parcels.geojson"
    path.write_text(json.dumps(fc))
    out = tmp_path / "cmp"
    summary = write_comparison(runs["a"], runs["b"], out, zones=path, zone_field="parcel")
    assert sorted(summary.record["zones"]) == ["High Leys", "Low Copse"]
    assert summary.record["settings"]["zone_source"] == "polygons"
    rows = [r for r in read_zones_csv(out / "zones.csv") if r["species"] == "prey"]
    area = {r["zone"]: float(r["area_km2"]) for r in rows}
    assert area["Low Copse"] == pytest.approx(23 * 0.01)  # 6 x 4 cells less the corner
    assert area["High Leys"] == pytest.approx(24 * 0.01)
    got = sum(float(r["mean_animals_a"]) for r in rows)
    # design requirement: zones covering the landscape add up to the totals
    assert got == pytest.approx(runs["ds_a"]["prey_total"].values[1:].mean(), rel=1e-5)
