"""Tests for preyscape.store: the run folder written by a tiny simulate() run."""

from __future__ import annotations

import json

import numpy as np
import pytest
import rasterio
import xarray as xr
from conftest import EPSG, SHAPE, make_landscape, utm_grid

import preyscape
from preyscape.analysis.results import open_run
from preyscape.assemble import prepare
from preyscape.errors import FileProblem
from preyscape.runfolder import simulate
from preyscape.scenario import load_scenario
from preyscape.store import ResultWriter

SNAPSHOT_TIMES = [0.0, 0.25, 0.5]  # years = 0.5, save_every = 0.25 in conftest.BASE


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    """One tiny run (no maps) shared by the tests of this module."""
    folder = tmp_path_factory.mktemp("store")
    scenario = make_landscape(folder)
    out = simulate(scenario, folder / "run", progress=False, maps=False)
    return {"scenario": scenario, "out": out, "habitat": folder / "habitat.tif"}


@pytest.fixture(scope="module")
def results(run):
    with xr.open_dataset(run["out"] / "results.nc", decode_times=False) as ds:
        yield ds.load()


def attr(var: xr.DataArray, name: str):
    """A netCDF attribute, whether xarray left it in attrs or moved it to encoding."""
    return var.attrs.get(name, var.encoding.get(name))


def test_run_folder_contents(run):
    out = run["out"]
    assert (out / "results.nc").is_file()
    assert (out / "run.json").is_file()
    assert (out / "checkpoint.npz").is_file()
    for sp in ("prey", "predator"):
        for label in ("mean", "final"):
            assert (out / "summary" / f"{sp}_{label}.tif").is_file()
    assert not (out / "maps").exists()  # maps=False
    assert list(out.parent.glob(".run.partial-*")) == []


@pytest.mark.parametrize("sp", ["prey", "predator"])
def test_density_variables_are_cf(results, sp):
    v = results[sp]
    assert v.dims == ("time", "y", "x")
    assert v.shape == (len(SNAPSHOT_TIMES), *SHAPE)
    assert v.attrs["units"] == "km-2"
    assert sp in v.attrs["long_name"]
    assert attr(v, "grid_mapping") == "spatial_ref"


def test_spatial_ref_and_coordinates(results):
    sr = results["spatial_ref"].attrs
    assert "crs_wkt" in sr
    assert rasterio.crs.CRS.from_wkt(sr["crs_wkt"]).to_epsg() == EPSG
    assert sr["grid_mapping_name"] == "transverse_mercator"  # UTM is transverse Mercator
    assert results["x"].attrs["units"] == "m"
    assert results["y"].attrs["units"] == "m"
    g = utm_grid()
    np.testing.assert_allclose(results["x"].values, g.x)
    np.testing.assert_allclose(results["y"].values, g.y)
    assert results.attrs["Conventions"] == "CF-1.8"


def test_snapshot_times(results):
    np.testing.assert_allclose(results["time"].values, SNAPSHOT_TIMES, rtol=0, atol=1e-12)
    assert results["time"].attrs["units"] == "common_years since 0001-01-01 00:00:00"
    assert results["time"].attrs["calendar"] == "noleap"
    assert results["time"].attrs["standard_name"] == "time"


def test_time_axis_is_cf_time(run):
    # Reference libraries: xarray's CF time decoding and cftime read the axis as dates
    # (CF-1.8 §4.4: units "<unit> since <reference>", a calendar). In the 365-day calendar
    # a common year is 365 days, so 0.25 yr is 91.25 days after the start (0001-01-01).
    import cftime

    with xr.open_dataset(run["out"] / "results.nc") as ds:  # decode_times=True
        t = ds["time"].values
    assert isinstance(t[0], cftime.DatetimeNoLeap)
    assert (t[0].year, t[0].month, t[0].day) == (1, 1, 1)
    assert (t[1] - t[0]).total_seconds() == pytest.approx(0.25 * 365 * 86400)
    dates = cftime.num2date(SNAPSHOT_TIMES, "common_years since 0001-01-01 00:00:00",
                            calendar="noleap")
    assert list(dates) == list(t)
    # and the float years are unchanged for readers that do not decode (store, analysis)
    with open_run(run["out"]) as r:
        np.testing.assert_allclose(r.times, SNAPSHOT_TIMES)


def test_summary_geotiffs_explain_themselves(run):
    # design requirement: band description, units and source run in the file
    with rasterio.open(run["out"] / "summary" / "predator_mean.tif") as ds:
        assert "time-mean density" in ds.descriptions[0] and "predator" in ds.descriptions[0]
        assert ds.units[0] == "animals per km2"
        assert ds.tags()["source_run"] == "baseline"


def test_first_snapshot_is_initial_state(results, run):
    s = prepare(load_scenario(run["scenario"]))
    first = results["prey"].isel(time=0).values
    np.testing.assert_allclose(first[s.grid.mask], s.N0[s.grid.mask], rtol=1e-6)
    assert np.isnan(first[~s.grid.mask]).all()


def test_summary_geotiffs_match_input_raster(run):
    with rasterio.open(run["habitat"]) as src:
        crs, transform = src.crs, src.transform
    for name in ("prey_mean", "prey_final", "predator_mean", "predator_final"):
        with rasterio.open(run["out"] / "summary" / f"{name}.tif") as ds:
            assert ds.crs.to_epsg() == crs.to_epsg() == EPSG
            assert ds.transform.almost_equals(transform)
            assert (ds.height, ds.width) == SHAPE
            assert ds.dtypes[0] == "float32"


def test_summary_mean_is_mean_of_snapshots_after_the_first(run, results):
    # reference computation with numpy from the stored (float32) snapshots
    ref = results["prey"].values[1:].astype(np.float64).mean(axis=0)
    with rasterio.open(run["out"] / "summary" / "prey_mean.tif") as ds:
        got = ds.read(1).astype(np.float64)
    ok = np.isfinite(ref)
    np.testing.assert_array_equal(np.isfinite(got), ok)
    np.testing.assert_allclose(got[ok], ref[ok], rtol=1e-6)


def test_run_json_record(run):
    info = json.loads((run["out"] / "run.json").read_text())
    sc = load_scenario(run["scenario"])
    assert info["preyscape_version"] == preyscape.__version__
    assert info["scenario_sha256"] == sc.digest()
    assert info["seed"] == 3
    assert isinstance(info["wall_time_s"], float) and info["wall_time_s"] >= 0
    assert info["step_years"] == pytest.approx(prepare(sc).dt, rel=1e-12)
    assert info["snapshots"] == len(SNAPSHOT_TIMES)
    assert info["steps"] == round(0.5 / info["step_years"])


def test_results_digest_matches_run_json(run, results):
    info = json.loads((run["out"] / "run.json").read_text())
    assert results.attrs["scenario_sha256"] == info["scenario_sha256"]


def test_open_run(run):
    rf = open_run(run["out"])
    assert rf.info["seed"] == 3
    with rf.results as ds:
        assert set(ds.data_vars) >= {"prey", "predator", "prey_total", "predator_total"}


def test_open_run_refuses_non_run_folder(tmp_path):
    (tmp_path / "results.nc").write_bytes(b"")  # no run.json
    with pytest.raises(FileProblem) as info:
        open_run(tmp_path)
    assert str(tmp_path) in str(info.value)
    with pytest.raises(FileProblem):
        open_run(tmp_path / "does_not_exist")


def test_result_writer_time_mean(tmp_path):
    mask = np.ones(SHAPE, dtype=bool)
    mask[0, :3] = False
    g = utm_grid().with_mask(mask)
    rng = np.random.default_rng(0)
    snaps = [(rng.uniform(0, 100, SHAPE), rng.uniform(0, 5, SHAPE)) for _ in range(4)]
    w = ResultWriter(tmp_path / "r.nc", g, {"prey": "vole", "predator": ""}, {"title": "t"})
    try:
        for k, (N, P) in enumerate(snaps):
            w.write(0.25 * k, N, P)
    finally:
        w.close()
    assert w.n == 4
    means = w.means()
    # reference computation with numpy: mean over the snapshots after the first (the
    # means are of the stored float32 snapshots, hence rtol 1e-6)
    for sp, idx in (("prey", 0), ("predator", 1)):
        ref = np.mean([s[idx] for s in snaps[1:]], axis=0)
        np.testing.assert_allclose(means[sp][mask], ref[mask], rtol=1e-6)
        assert np.isnan(means[sp][~mask]).all()
    # the file holds the same snapshots (float32), NaN off the mask, and the totals
    with xr.open_dataset(tmp_path / "r.nc", decode_times=False) as ds:
        np.testing.assert_allclose(ds["time"].values, [0.0, 0.25, 0.5, 0.75])
        np.testing.assert_allclose(ds["prey"].values[2][mask], snaps[2][0][mask], rtol=1e-6)
        assert np.isnan(ds["prey"].values[2][~mask]).all()
        total = snaps[3][1][mask].sum() * g.cell_area_km2  # animals = density x area
        assert float(ds["predator_total"].values[3]) == pytest.approx(total, rel=1e-12)
        assert "predator" in ds["predator"].attrs["long_name"]


def test_final_geotiff_and_checkpoint_hold_last_state(run, results):
    from preyscape.store import load_checkpoint

    last = results["predator"].values[-1]
    with rasterio.open(run["out"] / "summary" / "predator_final.tif") as ds:
        final = ds.read(1)
    np.testing.assert_array_equal(final, last)  # both float32 casts of the same state
    info = json.loads((run["out"] / "run.json").read_text())
    step, N, P = load_checkpoint(run["out"] / "checkpoint.npz")[:3]
    assert step == info["steps"]
    ok = np.isfinite(last)
    np.testing.assert_array_equal(P[ok].astype(np.float32), last[ok])
    assert N.dtype == np.float64


# ---------------------------------------------------------------------------
# output paths, atomic replacement, stale temporary folders (design requirements)
# ---------------------------------------------------------------------------
def ended_pid() -> int:
    """The id of a process that has ended."""
    import subprocess
    import sys

    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    return p.pid


def test_check_output_refuses_before_creating_anything(tmp_path):
    from pathlib import Path

    from preyscape.errors import InputError
    from preyscape.store import check_output

    (tmp_path / "f").write_text("x")
    (tmp_path / "d").mkdir()
    check_output(tmp_path / "new" / "deeper")  # fine, and nothing is created
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d", "f"]
    with pytest.raises(FileProblem, match="is a file, not a folder"):
        check_output(tmp_path / "f" / "out")
    for overwrite in (False, True):
        with pytest.raises(FileProblem, match="not a folder"):
            check_output(tmp_path / "f", overwrite)
        with pytest.raises(FileProblem, match="is a folder"):
            check_output(tmp_path / "d", overwrite, kind="file")
    with pytest.raises(InputError, match="--overwrite"):
        check_output(tmp_path / "d")
    check_output(tmp_path / "d", True)
    with pytest.raises(InputError, match="an input of this command"):
        check_output(tmp_path / "d", True, protect=[tmp_path / "d" / "scenario.toml"])
    with pytest.raises(InputError, match="current folder"):
        check_output(Path.cwd(), True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["d", "f"]


def test_check_output_refuses_a_place_that_cannot_be_written(tmp_path):
    import os
    from pathlib import Path

    from preyscape.store import check_output

    if os.geteuid() == 0:  # root writes anywhere but in read-only system folders
        place = Path("/sys/preyscape-test")
    else:
        place = tmp_path / "locked"
        place.mkdir()
        place.chmod(0o555)
    try:
        with pytest.raises(FileProblem, match="not writable"):
            check_output(place / "out")
    finally:
        if place.is_relative_to(tmp_path):
            place.chmod(0o755)


@pytest.mark.parametrize("exchange", [True, False])
def test_overwrite_replaces_the_whole_folder(tmp_path, monkeypatch, exchange):
    import preyscape.store as store

    if not exchange:  # a system without an atomic exchange: rename aside, rename in
        monkeypatch.setattr(store, "_exchange", lambda a, b: False)
    out = tmp_path / "out"
    out.mkdir()
    (out / "old.txt").write_text("old")
    with store.output_folder(out, overwrite=True) as tmp:
        (tmp / "new.txt").write_text("new")
        assert (out / "old.txt").is_file()  # untouched until the new one is complete
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    assert sorted(p.name for p in out.iterdir()) == ["new.txt"]


def test_interrupted_block_keeps_its_folder_only_when_asked(tmp_path):
    from preyscape.store import output_folder, partial_path

    out = tmp_path / "out"
    with pytest.raises(KeyboardInterrupt), output_folder(out, keep=lambda t: True) as tmp:
        (tmp / "checkpoint.npz").write_bytes(b"x")
        raise KeyboardInterrupt
    assert [p.name for p in tmp_path.iterdir()] == [partial_path(out).name]
    with pytest.raises(KeyboardInterrupt), output_folder(out) as tmp:
        raise KeyboardInterrupt  # not kept; the stale one of before is removed first
    assert list(tmp_path.iterdir()) == []


def test_stale_temporary_folders_are_removed_or_restored(tmp_path):
    from preyscape.store import partial_path, remove_stale, stale_partials

    out = tmp_path / "out"
    import os

    gone, alive = ended_pid(), os.getppid()
    (partial_path(out, gone)).mkdir()
    (partial_path(out, alive)).mkdir()  # a running process's: never touched
    aside = tmp_path / f".out.replaced-{gone}"
    aside.mkdir()
    (aside / "run.json").write_text("{}")
    assert stale_partials(out) == [partial_path(out, gone)]
    remove_stale(out)  # out is missing: the folder set aside is the old one, put back
    assert (out / "run.json").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["out", partial_path(out, alive).name])
    aside.mkdir()
    remove_stale(out)  # out exists: the old one set aside is deleted
    assert not aside.exists() and (out / "run.json").is_file()


def test_json_safe_writes_standard_json(tmp_path):
    from preyscape.store import json_safe, write_json

    rec = {"a": float("nan"), "b": [1.0, float("inf"), np.float32(2.5)], "c": (np.int64(3),)}
    assert json_safe(rec) == {"a": None, "b": [1.0, None, 2.5], "c": [3]}
    write_json(tmp_path / "r.json", rec)

    def refuse(token):
        raise AssertionError(f"non-standard JSON token {token}")

    assert json.loads((tmp_path / "r.json").read_text(), parse_constant=refuse)["a"] is None


def test_result_writer_reopen_continues_and_overwrites_later_snapshots(tmp_path):
    grid = utm_grid()
    w = ResultWriter(tmp_path / "r.nc", grid, {}, {"title": "t"})
    ones = np.ones(grid.shape)
    for k in range(3):
        w.write(0.25 * k, ones * k, ones)
    w.close()
    w = ResultWriter.reopen(tmp_path / "r.nc", grid, 2)  # the third was after a checkpoint
    w.write(0.5, ones * 7, ones)
    w.write(0.75, ones * 8, ones)
    w.close()
    with xr.open_dataset(tmp_path / "r.nc", decode_times=False) as ds:
        assert ds["time"].values.tolist() == [0.0, 0.25, 0.5, 0.75]
        assert [float(ds["prey"][k].max()) for k in range(4)] == [0.0, 1.0, 7.0, 8.0]
    with pytest.raises(OSError):
        ResultWriter.reopen(tmp_path / "r.nc", grid, 9)


def test_find_damage_names_the_damaged_folder(run, tmp_path):
    import shutil

    from preyscape.analysis.results import find_damage

    bad = tmp_path / "bad"
    shutil.copytree(run["out"], bad)
    b = bytearray((bad / "results.nc").read_bytes())
    b[len(b) // 2:len(b) // 2 + 2000] = bytes(2000)
    (bad / "results.nc").write_bytes(bytes(b))
    assert find_damage([run["out"]]) is None
    problem = find_damage([run["out"], bad])
    assert isinstance(problem, FileProblem) and problem.source == str(bad)


def test_distance_band_beyond_the_landscape_is_refused_by_its_name(run):
    from preyscape.errors import InputError

    with open_run(run["out"]) as r:
        assert r.settings({"hotspot_distance": 500.0}).hotspot_distance == 500.0
        with pytest.raises(InputError, match="larger than the landscape") as err:
            r.settings({"hotspot_distance": 1e6}, {"hotspot_distance": "--distance"})
        assert err.value.source == "--distance"


def test_a_folder_that_appears_meanwhile_is_not_replaced(tmp_path):
    # design requirement: without --overwrite nothing is replaced, even when another
    # process creates the folder while this one writes
    from preyscape.errors import InputError
    from preyscape.store import output_folder

    out = tmp_path / "out"
    with pytest.raises(InputError, match="another process"), output_folder(out) as tmp:
        (tmp / "new.txt").write_text("new")
        out.mkdir()
        (out / "theirs.txt").write_text("theirs")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out"]
    assert [p.name for p in out.iterdir()] == ["theirs.txt"]
