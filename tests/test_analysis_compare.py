"""Comparing alternatives with a reference run: preyscape.analysis.compare, .ranking,
.compare_output and .compare_report.

Small synthetic runs are written with the real ResultWriter; the fence cases run the
model on the tiny landscape of ``conftest.py``. Units: animals per km², km², years.
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import conftest as ct
import numpy as np
import pytest
import rasterio
import xarray as xr
from rasterio.crs import CRS

from preyscape.analysis.change import level_change, window_statistics
from preyscape.analysis.compare import check_same_grid, compare, run_labels, zone_table
from preyscape.analysis.results import open_run
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
              title="run", habitat=None, variant=None, present=None) -> Path:
    grid = grid or make_grid()
    folder.mkdir(parents=True)
    w = ResultWriter(folder / "results.nc", grid, {"prey": "bank vole", "predator": "stoat"},
                     {"title": title}, habitat_codes(grid.shape) if habitat is None else habitat)
    for t, n, p in zip(times, prey, pred, strict=True):
        w.write(t, n, p)
    w.close()
    info = {"title": title, "species": {"prey": "bank vole", "predator": "stoat"},
            "variant": variant or folder.name, "classes": {"1": "meadow", "2": "scrub"}}
    if present is not None:  # what runfolder records for a scenario of prey alone
        info["species_present"] = list(present)
    (folder / "run.json").write_text(json.dumps(info))
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


def test_different_lengths_are_compared_at_common_times_with_a_warning(tmp_path, runs):
    # design requirement (issue 10): runs of different lengths or snapshot times are
    # compared at their common times only, and the comparison says so
    prey, pred = frames(7, n=4)
    other = write_run(tmp_path / "short", prey, pred, times=[0.0, 0.5, 1.0, 2.0])
    result = compare(runs["a"], [other])
    np.testing.assert_allclose(result.window.times, [1.0, 2.0])
    assert any("different lengths or snapshot times" in w and "2 years" in w
               for w in result.warnings)
    mask = make_grid().mask
    got = result.maps["prey_mean"].sel(alternative="short").values
    np.testing.assert_allclose(got[mask], prey[[2, 3]].mean(0)[mask], rtol=1e-6)
    base = result.maps["prey_mean_base"].values
    np.testing.assert_allclose(base[mask], runs["frames_a"][0][[1, 2]].mean(0)[mask],
                               rtol=1e-6)


def test_runs_on_different_grids_are_refused_by_compare(tmp_path, runs):
    grid = make_grid(x0=X0 + 50.0)
    prey, pred = frames(5)
    other = write_run(tmp_path / "shifted", prey, pred, grid=grid, variant="shifted line")
    with pytest.raises(InputError) as err:
        compare(runs["a"], [runs["b"], other])
    assert "'shifted line'" in str(err.value) and "west edge" in str(err.value)


# ---------------------------------------------------------------------------
# the comparison of alternatives (synthetic runs)
# ---------------------------------------------------------------------------
def test_compare_maps_are_the_change_statistics_of_each_alternative(runs, tmp_path):
    # design requirement: the maps hold, per alternative, exactly the statistics of
    # preyscape.analysis.change computed from the runs' own snapshots
    prey, pred = frames(9)
    third = write_run(tmp_path / "c", prey, pred, variant="hedges")
    settings = AnalysisSettings(presence=2.0, change_threshold=0.1)
    result = compare(runs["a"], [runs["b"], third], settings=settings)
    assert result.base == "a" and result.alternatives == ("b", "hedges")
    assert result.maps["prey_level_change"].dims == ("alternative", "y", "x")
    mask = make_grid().mask
    base = runs["frames_a"]
    for label, fr in (("b", runs["frames_b"]), ("hedges", (prey, pred))):
        for k, sp in enumerate(("prey", "predator")):
            sa = window_statistics(list(base[k][1:]), presence=2.0, mask=mask)
            sb = window_statistics(list(fr[k][1:]), presence=2.0, mask=mask)
            lc = level_change(sa, sb, threshold=0.1, presence=2.0)
            got = result.maps[f"{sp}_level_change"].sel(alternative=label).values
            np.testing.assert_array_equal(got, lc.classes)
            diff = result.maps[f"{sp}_difference"].sel(alternative=label).values
            np.testing.assert_allclose(diff[mask], (fr[k][1:].mean(0) - base[k][1:].mean(0))
                                       [mask], rtol=1e-6, atol=1e-6)
    assert list(result.ranking["alternative"]) == ["b", "hedges"]
    assert result.ranking["rank"].isna().all()  # no goal: the order given


@pytest.mark.parametrize("sp", ["prey", "predator"])
def test_zone_rows_are_named_by_class_and_add_up_to_the_totals(runs, sp):
    # design requirement: habitat classes carry their names; zones covering every data
    # cell add up to the landscape totals written by the solver
    result = compare(runs["a"], [runs["b"]])
    rows = result.zones[result.zones["species"] == sp]
    assert list(rows["zone"]) == ["meadow", "scrub"]
    total = runs["ds_a"][f"{sp}_total"].values[1:].mean()
    assert rows["mean_animals_base"].sum() == pytest.approx(total, rel=1e-6)
    total_b = runs["ds_b"][f"{sp}_total"].values[1:].mean()
    assert rows["mean_animals"].sum() == pytest.approx(total_b, rel=1e-6)


def test_runs_are_named_by_variant_and_never_twice_the_same(tmp_path):
    # design requirement (issue 10): never two identical labels
    class Run:
        def __init__(self, label, name):
            self.label, self.path = label, Path(tmp_path / name)

    labels = run_labels([Run("baseline", "x"), Run("fence", "y"), Run("fence", "z")])
    assert labels == ["baseline", "fence (y)", "fence (z)"]
    assert len(set(run_labels([Run("a", "x"), Run("a", "x")]))) == 2


def test_years_and_goal_settings_are_validated():
    s = AnalysisSettings.build({"years": [0, 4], "goal": "fewer-predators"})
    assert s.years == (0.0, 4.0) and s.goal == "fewer-predators"
    assert AnalysisSettings.build(None, {"years": "4:"}).years == (4.0, None)
    with pytest.raises(InputError, match="--years: must be a window of years"):
        AnalysisSettings.build(None, {"years": "four"}, {"years": "--years"})
    with pytest.raises(InputError, match="--goal: must be one of fewer-predators"):
        AnalysisSettings.build(None, {"goal": "fewer-weasels"}, {"goal": "--goal"})


# ---------------------------------------------------------------------------
# the written folder
# ---------------------------------------------------------------------------
def read_csv(path: Path) -> list[dict]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_write_comparison_end_to_end(runs):
    from preyscape.analysis.compare_output import write_comparison

    out = runs["base"] / "cmp"
    summary = write_comparison(runs["a"], [runs["b"]], out,
                               settings=AnalysisSettings(change_threshold=0.1, presence=1.0))
    for name in ("ranking.csv", "zones.csv", "sides.csv", "fences.csv", "totals.png",
                 "comparison.json"):
        assert (out / name).is_file(), name
    for sp in ("prey", "predator"):
        for name in ("level_change.tif", "level_change.png", "difference.tif",
                     "difference.png", "ratio.tif", "ratio.png", "persistence_difference.tif",
                     "persistence_difference.png", "arrival_delay.tif", "arrival_status.tif"):
            assert (out / "b" / f"{sp}_{name}").is_file(), (sp, name)
    # the class rasters name their classes for a GIS (read back through GDAL itself)
    from gdal_pam import legend

    from preyscape.analysis.change import ARRIVAL_CODES, LEVEL_CODES

    _, rows = legend(out / "b" / "predator_level_change.tif")
    assert {int(r["value"]): r["class"] for r in rows} == LEVEL_CODES
    names, _ = legend(out / "b" / "prey_arrival_status.tif")
    assert names == [ARRIVAL_CODES[k] for k in range(5)]
    with rasterio.open(out / "b" / "prey_level_change.tif") as src:
        assert src.descriptions[0].startswith("level change of prey")
        assert src.tags()["alternative"] == "b" and src.units[0] == "class code"
    assert not list(out.parent.glob(".cmp.partial-*"))
    # the rasters hold the maps, on the run grid, with the no-data code
    result = compare(runs["a"], [runs["b"]],
                     settings=AnalysisSettings(change_threshold=0.1, presence=1.0))
    with rasterio.open(out / "b" / "predator_level_change.tif") as src:
        assert src.crs.to_epsg() == 32633
        assert src.transform.c == X0 and src.transform.f == Y0
        assert src.nodata == -128
        np.testing.assert_array_equal(
            src.read(1), result.maps["predator_level_change"].sel(alternative="b").values)
    rec = json.loads((out / "comparison.json").read_text())
    assert rec["base"] == "a" and rec["alternatives"] == ["b"]
    assert rec["window"]["snapshots"] == 4 and rec["window"]["same_times"]
    assert set(rec["files"]) >= {"ranking.csv", "b/prey_level_change.png"}
    rows = read_csv(out / "ranking.csv")
    assert [r["alternative"] for r in rows] == ["b"]
    assert summary.ranking[0]["alternative"] == "b"
    assert summary.summary_lines()[0].startswith("comparison of 1 alternative with a")
    # the report's parts: the ranking and the change maps are the answer
    parts = summary.report_parts()
    assert parts[0].title == "Ranking of the alternatives" and parts[0].place == "answer"
    assert any(p.title == "Change: a → b" and p.place == "answer" for p in parts)
    assert summary.headlines() and all(h.endswith(".") for h in summary.headlines())
    # an existing folder is refused unless overwrite is asked for
    with pytest.raises(InputError, match="already exists"):
        write_comparison(runs["a"], runs["b"], out)
    write_comparison(runs["a"], runs["b"], out, settings=AnalysisSettings(change_threshold=0.5),
                     overwrite=True)
    assert json.loads((out / "comparison.json").read_text())["settings"][
        "change_threshold"] == 0.5


def test_write_comparison_refuses_bad_input(runs, tmp_path):
    from preyscape.analysis.compare_output import write_comparison

    with pytest.raises(FileProblem, match="not a finished run folder"):
        write_comparison(runs["a"], tmp_path / "missing", tmp_path / "o1")
    with pytest.raises(InputError, match="presence"):
        write_comparison(runs["a"], runs["b"], tmp_path / "o2",
                         settings=AnalysisSettings(presence=0.0))
    with pytest.raises(InputError, match="zone file not found"):
        write_comparison(runs["a"], runs["b"], tmp_path / "o3", zones=tmp_path / "nope.tif")
    with pytest.raises(InputError, match="no common snapshot lies in years 10–12"):
        write_comparison(runs["a"], runs["b"], tmp_path / "o4",
                         settings=AnalysisSettings(years=(10.0, 12.0)))
    assert not any((tmp_path / f"o{k}").exists() for k in range(1, 5))


def test_compare_with_raster_zones(runs, tmp_path):
    grid = make_grid()
    z = np.full(SHAPE, 7, dtype=np.uint8)
    z[3:, :] = 9  # north and south halves
    write_geotiff(tmp_path / "zones.tif", grid, z, nodata=0, dtype="uint8")
    rows = compare(runs["a"], runs["b"], zones=tmp_path / "zones.tif").zones
    north = rows[(rows["zone"] == "zone 7") & (rows["species"] == "prey")].iloc[0]
    # 3 rows x 8 cols minus the no-data corner, cells of 0.01 km²
    assert float(north["area_km2"]) == pytest.approx(23 * 0.01)
    assert north["zoning"] == "zone"


def test_compare_with_polygon_zones(runs, tmp_path):
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
    zones = compare(runs["a"], runs["b"], zones=path, zone_field="parcel").zones
    rows = [r for r in zones.to_dict("records") if r["species"] == "prey"]
    area = {r["zone"]: float(r["area_km2"]) for r in rows}
    assert area["Low Copse"] == pytest.approx(23 * 0.01)  # 6 x 4 cells less the corner
    assert area["High Leys"] == pytest.approx(24 * 0.01)
    got = sum(float(r["mean_animals_base"]) for r in rows)
    # design requirement: zones covering the landscape add up to the totals
    assert got == pytest.approx(runs["ds_a"]["prey_total"].values[1:].mean(), rel=1e-5)


# ---------------------------------------------------------------------------
# prey alone
# ---------------------------------------------------------------------------
# the ranking columns of a comparison of two species, as they were before runs of prey
# alone could be compared (observed on these runs; design requirement: unchanged)
BOTH_SPECIES_COLUMNS = ["rank", "alternative", "measures"] + [
    f"{sp}_{c}" for sp in ("prey", "predator") for c in (
        "total_change_pct", "window_change_pct", "gain_km2", "loss_km2", "gone_km2",
        "clarity", "persistence_change", "median_delay_yr", "never_km2")] + [
    "fence_length_m", "open_ends", "leaky"]


def test_runs_of_prey_alone_are_compared_on_the_prey_only(runs, tmp_path):
    # design requirement (prey alone): runs that record species_present = ["prey"] are
    # compared on the prey, and nothing about predators is computed or written
    from preyscape.analysis.compare_output import write_comparison
    from preyscape.analysis.results import NO_PREDATOR

    zero = np.zeros((len(TIMES), *SHAPE))
    a = write_run(tmp_path / "a", runs["frames_a"][0], zero, present=["prey"])
    b = write_run(tmp_path / "b", runs["frames_b"][0], zero, present=["prey"])
    settings = AnalysisSettings(presence=2.0, goal="more-prey")
    alone = compare(a, [b], settings=settings)
    assert alone.species == ("prey",)
    assert sorted(alone.maps.data_vars) == sorted(
        f"prey_{k}" for k in ("mean", "mean_base", "difference", "margin", "ratio",
                              "level_change", "persistence_difference", "arrival_delay",
                              "arrival_status"))
    assert not [c for c in alone.ranking.columns if "predator" in c]
    assert set(alone.zones["species"]) == {"prey"}
    # two species: as before, and the prey's statistics are the same as alone
    both = compare(runs["a"], [runs["b"]], settings=settings)
    assert both.species == ("prey", "predator")
    assert list(both.ranking.columns) == BOTH_SPECIES_COLUMNS
    np.testing.assert_array_equal(alone.maps["prey_level_change"].values,
                                  both.maps["prey_level_change"].values)
    prey_cols = [c for c in BOTH_SPECIES_COLUMNS if not c.startswith("predator")]
    assert list(alone.ranking.columns) == prey_cols
    assert alone.ranking[prey_cols[3:-3]].equals(both.ranking[prey_cols[3:-3]])
    # a run of each: compared on the species both model
    assert compare(runs["a"], [b]).species == ("prey",)
    # a goal that ranks by predators: one clear message naming the valid goals
    with pytest.raises(InputError, match="'fewer-predators'.*give one of fewer-prey, "
                                         "more-prey, or no goal"):
        compare(a, [b], settings=AnalysisSettings(goal="fewer-predators"))
    # the written folder: no predator file, column or word; the summary says so once
    out = write_comparison(a, [b], tmp_path / "cmp", settings=settings)
    assert [p for p in (tmp_path / "cmp").rglob("*") if "prey_" in p.name]
    assert not [p for p in (tmp_path / "cmp").rglob("*") if "predator" in p.name]
    for f in ("ranking.csv", "zones.csv", "sides.csv", "fences.csv", "comparison.json"):
        assert "predator" not in (tmp_path / "cmp" / f).read_text(), f
    assert "\n".join(out.summary_lines()).count(NO_PREDATOR) == 1
    assert "predator" not in " ".join(out.headlines()) + repr(out.report_parts())


# ---------------------------------------------------------------------------
# fences in real runs of the tiny landscape
# ---------------------------------------------------------------------------
FENCE_COL = 15  # along the face line between columns 14 and 15


def fence_line(y_end: float) -> dict:
    x = ct.X0 + FENCE_COL * ct.DX
    return {"type": "LineString", "coordinates": [[x, ct.Y0 + 500.0], [x, y_end]]}


@pytest.fixture(scope="module")
def fence_runs(tmp_path_factory):
    """Baseline and three predator fences at column 15: complete, 3 cells short, gated."""
    from preyscape.runfolder import simulate_variants

    folder = tmp_path_factory.mktemp("fences")
    ct.make_landscape(folder)
    crs = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}
    for name, geom in (("complete", fence_line(ct.Y0 - 3000.0)),
                       ("short", fence_line(ct.Y0 - 21 * ct.DX))):
        (folder / f"{name}.geojson").write_text(json.dumps(
            {"type": "FeatureCollection", "crs": crs, "features": [
                {"type": "Feature", "properties": {}, "geometry": geom}]}))
    perm = {"prey": 1.0, "predator": 0.0}
    gap = [{"x": ct.X0 + FENCE_COL * ct.DX, "y": ct.Y0 - 4.5 * ct.DX, "width": 40.0}]
    over = {
        "measures": [
            {"name": "full line", "kind": "fence", "geometry": "complete.geojson",
             "permeability": perm, "baseline": False},
            {"name": "short line", "kind": "fence", "geometry": "short.geojson",
             "permeability": perm, "baseline": False},
            {"name": "gated line", "kind": "fence", "geometry": "complete.geojson",
             "permeability": perm, "baseline": False, "gaps": gap},
        ],
        "variants": [{"name": "full", "add": ["full line"]},
                     {"name": "short", "add": ["short line"]},
                     {"name": "gated", "add": ["gated line"]}],
        # a denser, slower and faster-growing predator than the base scenario's, so its
        # front reaches the fence within the run
        "start.releases.0.density": 200.0, "predator.diffusivity": 0.3,
        "prey.capacity": 3000.0,
        "run.years": 1.5, "run.save_every": 0.125, "run.step": 0.0125,
        "analysis": {"predator_threshold": 1.0, "goal": "fewer-predators"},
    }
    path = folder / "fences.toml"
    path.write_text(ct.to_toml(ct.apply_overrides(ct.BASE, over)))
    return simulate_variants(path, folder / "runs", maps=False, progress=False)


def test_fence_alternatives_are_ranked_and_the_leaky_one_is_named(fence_runs):
    r = fence_runs
    result = compare(r["baseline"], [r["short"], r["full"], r["gated"]])
    rank = result.ranking.set_index("alternative")
    assert rank.loc["full", "rank"] == 1  # the complete fence keeps most predators out
    assert rank.loc["full", "predator_window_change_pct"] < rank.loc[
        "short", "predator_window_change_pct"]
    assert rank.loc["short", "open_ends"] == 1 and rank.loc["full", "open_ends"] == 0
    assert rank.loc["short", "leaky"] == "short line"
    assert rank.loc["gated", "open_ends"] == 0  # a drawn gate is not a leak
    leak = [w for w in result.warnings if "'short line'" in w]
    assert len(leak) == 1 and "300 m from the landscape edge" in leak[0]
    # where predators are gone: only beyond the complete fence
    gone = result.maps["predator_level_change"].sel(alternative="full").values == -2
    assert gone.any() and not gone[:, :FENCE_COL].any()
    # the sides of each fence: west and east, 15 columns each
    sides = result.sides[(result.sides["alternative"] == "short")
                         & (result.sides["species"] == "predator")]
    assert sorted(sides["side"]) == ["east", "west"]
    west = sides[sides["side"] == "west"].iloc[0]
    assert west["area_km2"] == pytest.approx((24 * 15 - 3) * 0.01)  # less the no-data cells


def test_arrival_delay_is_the_difference_of_the_arrival_maps(fence_runs):
    # design requirement (issue 10): the delay map is exactly t_alternative − t_base where
    # the species arrives in both, computed here independently from each run's file
    from preyscape.analysis.waves import arrival_time_of_run

    r = fence_runs
    result = compare(r["baseline"], [r["short"]])
    ta = arrival_time_of_run(open_run(r["baseline"]).ds, "predator", 1.0)
    tb = arrival_time_of_run(open_run(r["short"]).ds, "predator", 1.0)
    delay = result.maps["predator_arrival_delay"].sel(alternative="short").values
    status = result.maps["predator_arrival_status"].sel(alternative="short").values
    both = status == 0
    assert both.sum() > 100
    np.testing.assert_allclose(delay[both], (tb - ta)[both], rtol=0, atol=1e-6)
    # the front goes round the open end: later east of the fence, not west of it
    assert np.nanmean(delay[:, FENCE_COL + 2:]) > 0.05
    assert np.nanmax(np.abs(delay[:, :FENCE_COL - 3])) < 0.02


def test_no_net_flow_through_an_impassable_fence_and_the_gap_carries_it_all(fence_runs):
    # conservation of animals (divergence theorem, textbook): with every face of the
    # fence line closed to predators the net flow across the line is exactly 0 at every
    # snapshot; with one gate, the flow across the whole line is the flow through the gate
    from preyscape.analysis.effects import net_flux, transect_faces, transect_flux

    line = [(ct.X0 + FENCE_COL * ct.DX, ct.Y0 + 500.0), (ct.X0 + FENCE_COL * ct.DX, ct.Y0 - 3000.0)]
    full = open_run(fence_runs["full"])
    _, flow = transect_flux(full.ds, full.operators(), line, "predator")
    assert np.all(flow == 0.0)
    gated = open_run(fence_runs["gated"])
    times, flow = transect_flux(gated.ds, gated.operators(), line, "predator")
    assert np.abs(flow).max() > 0
    fx, fy, sx, sy = transect_faces(line, gated.grid)
    gate = np.zeros_like(fx)
    gate[4, FENCE_COL] = True
    op = gated.operators()[0]
    through_gate = net_flux((u for _, u in gated.frames("predator", range(times.size))),
                            times, op["predator_cx"], op["predator_cy"], op["predator_w"],
                            gate, np.zeros_like(fy), sx, sy, gated.grid.cell_area_km2)
    np.testing.assert_allclose(flow, through_gate, rtol=1e-12, atol=0)


def test_run_record_holds_each_fence_topology(fence_runs):
    # design requirement (issue 10): the same facts as `check` go into run.json
    full = json.loads((fence_runs["full"] / "run.json").read_text())["fence_topology"]
    short = json.loads((fence_runs["short"] / "run.json").read_text())["fence_topology"]
    assert [t["name"] for t in full] == ["full line"] and full[0]["separates"]
    assert full[0]["open_ends"] == [] and full[0]["warning"] is None
    assert short[0]["open_ends"][0]["way_round_m"] == 300.0
    assert "'short line'" in short[0]["warning"]
    assert json.loads((fence_runs["baseline"] / "run.json").read_text())["fence_topology"] == []
