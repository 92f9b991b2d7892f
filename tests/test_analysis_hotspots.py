"""Hotspot analysis: Gi* against esda, FDR, the effect-size floor, persistence, places,
kernels and the product (GeoTIFF legends read back through GDAL)."""

from __future__ import annotations

import csv
import warnings

import numpy as np
import pytest
import rasterio
import scipy.stats
import xarray as xr
from conftest import write_run_record
from gdal_pam import legend

from preyscape.analysis.hotspot_places import band_sensitivity, compass, find_places
from preyscape.analysis.hotspots import (
    CLASS_NODATA,
    default_band_m,
    distance_band_kernel,
    fdr_significant,
    getis_ord_gi_star,
    hotspots,
    hotspots_of_run,
    persistent_hotspots,
)
from preyscape.analysis.hotspots_output import write_hotspots
from preyscape.analysis.settings import AnalysisSettings
from preyscape.errors import FileProblem, InputError
from preyscape.landscape.grid import Grid
from preyscape.store import ResultWriter

# A small grid of non-square cells: 15 rows of 20 m, 18 columns of 30 m.
NY, NX, DX, DY = 15, 18, 30.0, 20.0
BAND = 75.0  # m; no centre distance sqrt((30 a)^2 + (20 b)^2) equals 75 exactly


def _field(seed: int = 7) -> tuple[np.ndarray, np.ndarray]:
    """Random values around 10 plus a bump, a few no-data cells (mask False or NaN)."""
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:NY, 0:NX]
    cx, cy = (xx + 0.5) * DX, -(yy + 0.5) * DY
    values = 10.0 + rng.random((NY, NX))
    values += 5.0 * np.exp(-(((cx - 200.0) / 60.0) ** 2 + ((cy + 100.0) / 50.0) ** 2))
    mask = np.ones((NY, NX), dtype=bool)
    mask[0, :3] = False
    mask[7, 9] = False
    mask[14, 17] = False
    values[~mask] = -999.0  # must be ignored
    values[3, 4] = np.nan  # a non-finite value is no data too
    return values, mask


@pytest.mark.parametrize("method", ["direct", "fft"])
def test_gi_star_matches_esda(method):
    # Reference library: PySAL esda G_Local(star=True, transform="B", permutations=0)
    # (Getis & Ord 1992, Geogr Anal 24:189; Ord & Getis 1995, Geogr Anal 27:286).
    # How esda computes it (esda/getisord.py): with star=True and binary weights whose
    # diagonal is zero (libpysal DistanceBand has none), it sets every self-weight to 1,
    # i.e. the same "self included" band as ours. It then forms G*_i = sum_j w_ij y_j /
    # sum y, E = W_i / n and Var = W_i (n - W_i) / (n - 1) / n^2 * s^2 / ybar^2 with the
    # population variance s^2 = mean(y^2) - ybar^2. So z = (sum_j w_ij y_j - ybar W_i) /
    # (s sqrt(W_i (n - W_i) / (n - 1))), which is the Ord & Getis form with sum w^2 = W_i
    # for binary weights: for positive values (ybar > 0) the two agree to round-off.
    from esda.getisord import G_Local
    from libpysal.weights import DistanceBand

    values, mask = _field()
    data = mask & np.isfinite(values)
    yy, xx = np.nonzero(data)  # row-major order, as values[data]
    pts = np.column_stack([(xx + 0.5) * DX, -(yy + 0.5) * DY])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        w = DistanceBand(pts, threshold=BAND, binary=True, silence_warnings=True)
        ref = G_Local(values[data], w, transform="B", star=True, permutations=0)
    assert w.max_neighbors == 30  # our kernel has 31 cells, self included (hand count)
    z = getis_ord_gi_star(values, mask, DX, DY, BAND, method=method)
    np.testing.assert_allclose(z[data], ref.Zs, rtol=1e-8, atol=1e-12)
    assert np.isnan(z[~data]).all()
    assert z[data].max() > 5  # the bump stands out (sanity: the test is not trivial)


def test_kernel_shape_for_non_square_cells():
    # Hand count (textbook geometry): offsets (i rows of 20 m, j columns of 30 m) with
    # (20 i)^2 + (30 j)^2 <= 65^2: |i| <= 3 at j = 0, |i| <= 2 at |j| = 1, |i| <= 1 at |j| = 2.
    k = distance_band_kernel(30.0, 20.0, 65.0)
    expected = np.array([
        [0, 0, 1, 0, 0],
        [0, 1, 1, 1, 0],
        [1, 1, 1, 1, 1],
        [1, 1, 1, 1, 1],
        [1, 1, 1, 1, 1],
        [0, 1, 1, 1, 0],
        [0, 0, 1, 0, 0],
    ], dtype=float)
    np.testing.assert_array_equal(k, expected)
    # a band equal to a centre distance includes it (design requirement)
    assert distance_band_kernel(25.0, 25.0, 50.0).shape == (5, 5)
    np.testing.assert_array_equal(distance_band_kernel(30.0, 20.0, 10.0), [[1.0]])


def test_self_only_band_gives_standard_scores():
    # With a band shorter than both cell sides, W_i = 1 and Gi* reduces to the
    # standard score (x_i - xbar) / S, S the population standard deviation (textbook).
    values, mask = _field(3)
    data = mask & np.isfinite(values)
    z = getis_ord_gi_star(values, mask, DX, DY, 15.0)
    x = values[data]
    np.testing.assert_allclose(z[data], (x - x.mean()) / x.std(), rtol=1e-12)


def test_constant_field_and_empty_mask():
    # Design requirement: S = 0 gives z = 0 on data cells, NaN elsewhere.
    mask = np.ones((6, 7), dtype=bool)
    mask[2, 3] = False
    z = getis_ord_gi_star(np.full((6, 7), 4.2), mask, 10.0, 10.0, 25.0)
    assert (z[mask] == 0).all() and np.isnan(z[2, 3])
    assert not fdr_significant(z).any()
    assert np.isnan(getis_ord_gi_star(np.ones((3, 3)), np.zeros((3, 3), bool), 1, 1, 2)).all()


def test_fdr_hand_worked_step_up():
    # Benjamini & Hochberg 1995 (J R Stat Soc B 57:289), worked by hand: m = 4,
    # alpha = 0.05, thresholds k alpha / m = 0.0125, 0.025, 0.0375, 0.05. Sorted
    # p = 0.001, 0.03, 0.035, 0.9: rank 2 fails (0.03 > 0.025) but rank 3 passes
    # (0.035 <= 0.0375), so the step-up rule rejects ranks 1-3.
    p = np.array([0.035, 0.9, 0.001, 0.03])
    z = scipy.stats.norm.isf(p)  # upper-tail z-scores with these p-values
    np.testing.assert_array_equal(fdr_significant(z, 0.05, "upper"), [True, False, True, True])
    # a NaN is not a test: with m = 3 the thresholds become 0.0167, 0.0333, 0.05
    z5 = np.append(z, np.nan)
    np.testing.assert_array_equal(fdr_significant(z5, 0.05, "upper"),
                                  [True, False, True, True, False])
    # two-sided: p = 2 sf(|z|) gives 0.07, 0.2, 0.002, 0.06; sorted 0.002 <= 0.0125,
    # 0.06 > 0.025, 0.07 > 0.0375, 0.2 > 0.05 -> only the smallest
    np.testing.assert_array_equal(fdr_significant(z, 0.05, "two-sided"),
                                  [False, False, True, False])


def test_fdr_matches_scipy():
    # Reference library: scipy.stats.false_discovery_control (Benjamini-Hochberg).
    rng = np.random.default_rng(11)
    z = np.concatenate([rng.normal(size=400), rng.normal(3.0, 1.0, size=100)])
    for tail in ("upper", "two-sided"):
        p = (scipy.stats.norm.sf(z) if tail == "upper"
             else 2 * scipy.stats.norm.sf(np.abs(z)))
        ref = scipy.stats.false_discovery_control(p, method="bh") <= 0.05
        np.testing.assert_array_equal(fdr_significant(z, 0.05, tail), ref)
        assert 50 < ref.sum() < 150


def test_fdr_matches_scipy_whether_most_few_or_ranks_near_their_bounds_pass():
    # Reference library: scipy.stats.false_discovery_control (Benjamini & Hochberg 1995,
    # J R Stat Soc B 57:289). The rank is found by counting, which takes a different way
    # when nearly every cell is significant (smooth density fields), when few are, and
    # when p-values sit just above their bounds for many ranks (the rank falls by one a
    # round, and sorting the p-values left takes over); non-finite z are not tested.
    rng = np.random.default_rng(3)
    m = 400
    slow = np.concatenate([np.full(20, 1e-6), (np.arange(21, m + 1) + 0.5) * 0.05 / m])
    cases = {"most": rng.normal(4.0, 1.5, 20_000),
             "few": np.concatenate([rng.normal(size=20_000), rng.normal(4.5, 0.5, 60)]),
             "near bounds, upper": scipy.stats.norm.isf(slow),
             "near bounds, two-sided": scipy.stats.norm.isf(slow / 2)}
    for name, z in cases.items():
        z = z.copy()
        z[:3] = [np.nan, np.inf, -np.inf]
        finite = np.isfinite(z)
        for tail in ("upper", "two-sided"):
            p = (scipy.stats.norm.sf(z[finite]) if tail == "upper"
                 else 2 * scipy.stats.norm.sf(np.abs(z[finite])))
            ref = np.zeros(z.shape, bool)
            ref[finite] = scipy.stats.false_discovery_control(p, method="bh") <= 0.05
            got = fdr_significant(z, 0.05, tail)
            np.testing.assert_array_equal(got, ref, err_msg=f"{name}, {tail}")
            assert not got[~finite].any()
    # by construction: the 20 small p-values pass, every later rank lies above its bound
    assert fdr_significant(cases["near bounds, upper"], 0.05, "upper").sum() == 20


def test_hotspots_flags_bump_hot():
    # Design requirement: a planted bump is a significant hotspot; z and p consistent.
    values, mask = _field()
    res = hotspots(values, mask, DX, DY, BAND)
    row, col = 5, 6  # the bump centre (x 200 m, y -100 m) lies in cell (4/5, 6)
    assert res["hot"][row, col] and not res["cold"][row, col]
    assert not (res["hot"] & res["cold"]).any()
    assert not res["hot"][~mask].any()
    np.testing.assert_allclose(res["p"][row, col], 2 * scipy.stats.norm.sf(res["z"][row, col]))


def test_persistent_fraction_counts_frames_with_bump():
    # Design requirement: a bump present in k of n frames is a hotspot in exactly k/n of
    # them; cells far from it are never hotspots. Frames come from a generator (read once).
    rng = np.random.default_rng(5)
    ny, nx, h = 30, 30, 10.0
    yy, xx = np.mgrid[0:ny, 0:nx]
    bump = 8.0 * np.exp(-((yy - 10) ** 2 + (xx - 20) ** 2) / 8.0)
    mask = np.ones((ny, nx), dtype=bool)
    mask[25:, :4] = False
    with_bump = [True, False, True, True, False, False, True, False]  # k = 4 of n = 8

    def frames():
        for b in with_bump:
            yield 5.0 + 0.3 * rng.random((ny, nx)) + (bump if b else 0.0)

    frac = persistent_hotspots(frames(), mask, h, h, 30.0)
    assert frac[10, 20] == pytest.approx(4 / 8)
    far = np.hypot(yy - 10, xx - 20) > 9
    assert (frac[far & mask] == 0).all()
    assert np.isnan(frac[~mask]).all()
    with pytest.raises(ValueError, match="no snapshots"):
        persistent_hotspots(iter([]), mask, h, h, 30.0)


def test_default_band():
    # Common practice, no source: max(3 cells, 2 % of the shorter extent).
    assert default_band_m(Grid((400, 400), 0, 0, 25.0, 25.0)) == pytest.approx(200.0)
    assert default_band_m(Grid((20, 30), 0, 0, 30.0, 20.0)) == pytest.approx(90.0)


# --- run datasets and the product --------------------------------------------
def _write_run(folder, n_snap: int = 5):
    """A small results.nc: noise plus a bump (prey) / a dip and bump (predator)."""
    rng = np.random.default_rng(2)
    mask = np.ones((20, 24), dtype=bool)
    mask[0, :2] = False
    mask[19, 23] = False
    grid = Grid((20, 24), 400_000.0, 6_000_000.0, 50.0, 50.0, mask=mask)
    yy, xx = np.mgrid[0:20, 0:24]
    bump = np.exp(-((yy - 6) ** 2 + (xx - 16) ** 2) / 6.0)
    folder.mkdir(parents=True, exist_ok=True)
    w = ResultWriter(folder / "results.nc", grid, {"prey": "field vole", "predator": "stoat"},
                     {"title": "test"})
    for k in range(n_snap):
        noise = rng.random((20, 24))
        if k == 0:  # the start: uniform, must not enter the mean
            w.write(0.0, np.full((20, 24), 500.0), np.full((20, 24), 2.0))
        else:
            w.write(0.25 * k, 400.0 + 20.0 * noise + 600.0 * bump, 1.0 + 0.1 * noise + 3 * bump)
    w.close()
    write_run_record(folder, {"prey": "field vole", "predator": "stoat"})
    return grid


def test_hotspots_of_run(tmp_path):
    # Design requirement: time mean over snapshots after the start (as store.time_means).
    grid = _write_run(tmp_path / "run")
    with xr.open_dataset(tmp_path / "run" / "results.nc", decode_times=False) as ds:
        res = hotspots_of_run(ds, "prey", band_m=150.0)
        expected = ds["prey"].isel(time=slice(1, None)).mean("time").values
    np.testing.assert_allclose(res.mean, expected, rtol=1e-6)
    assert res.snapshots == 4 and res.band_m == 150.0
    assert res.classes[6, 16] == 1 and bool(res.hot[6, 16])
    assert res.persistence[6, 16] == 1.0
    assert res.classes[0, 0] == CLASS_NODATA == 255 and not grid.mask[0, 0]
    assert np.isnan(res.persistence[0, 0])
    # the effect is the neighbourhood mean's excess in landscape standard deviations
    d = res.data
    assert res.landscape_mean == pytest.approx(res.mean[d].mean())
    assert res.landscape_sd == pytest.approx(res.mean[d].std())
    # ratio = neighbourhood mean / landscape mean, >= 1 + floor * S / mean on hotspots
    assert (res.ratio[res.hot] >= 1 + res.landscape_sd / res.landscape_mean - 1e-9).all()


def test_write_hotspots_product(tmp_path):
    # Design requirement: files exist, the planted bump is classed hot in the GeoTIFF, and
    # every raster explains itself in a GIS (band description, units, source run, and for
    # the class raster the category names and attribute table, read back through GDAL).
    grid = _write_run(tmp_path / "run")
    out = tmp_path / "hot"
    summary = write_hotspots(tmp_path / "run", out,
                             settings=AnalysisSettings(hotspot_distance=150.0))
    for sp in ("prey", "predator"):
        for f in (f"{sp}_gi_star.tif", f"{sp}_hotspot_class.tif",
                  f"{sp}_hotspot_persistence.tif", f"{sp}_hotspots.png",
                  f"{sp}_hotspot_persistence.png", f"{sp}_gi_star.png"):
            assert (out / f).is_file(), f
        with rasterio.open(out / f"{sp}_hotspot_class.tif") as src:
            cls = src.read(1)
            assert src.nodata == 255 and src.dtypes[0] == "uint8"
            assert src.descriptions[0].startswith("hotspot class of")
            assert src.units[0] == "class code"
            assert f"{sp}_hotspot_class.tif.aux.xml" in {p.rsplit("/", 1)[-1] for p in src.files}
        names, rows = legend(out / f"{sp}_hotspot_class.tif")
        assert names == ["neither", "hotspot", "coldspot"]
        assert [(r["value"], r["class"]) for r in rows] == [
            ("0", "neither"), ("1", "hotspot"), ("2", "coldspot")]
        with rasterio.open(out / f"{sp}_gi_star.tif") as src:
            assert "Gi* z-score" in src.descriptions[0] and src.units[0] == "z-score"
        assert cls[6, 16] == 1 and cls[0, 0] == 255
        s = summary.species[sp]
        assert s.n_cells == grid.n_cells and s.hot_cells > 0
        assert s.hot_area_km2 == pytest.approx(s.hot_cells * 0.0025)
        assert 0 < s.hot_share_of_animals < 1
        assert s.places and s.places[0].cells == s.hot_cells  # one bump, one place
        assert [b.band_m for b in s.bands] == [75.0, 300.0]
    assert summary.band_m == 150.0
    maps = [f.name for f in summary.files if f.role == "map"]
    assert all((out / p).is_file() for p in maps) and len(maps) == 6
    assert all((out / f.name).is_file() for f in summary.files)
    # every GeoTIFF has a picture of its own
    for tif in out.glob("*.tif"):
        stem = tif.stem.replace("_hotspot_class", "_hotspots")
        assert (out / f"{stem}.png").is_file(), tif.name
    with open(out / "hotspots.csv") as fh:
        rows = list(csv.DictReader(fh))
    assert [r["species"] for r in rows] == ["prey", "predator"]
    assert int(rows[0]["hot_cells"]) == summary.species["prey"].hot_cells
    with open(out / "hotspot_places.csv") as fh:
        places = list(csv.DictReader(fh))
    assert places[0]["place"] == "1" and places[0]["where"] == "north-east"
    assert summary.headlines() and "north-east" in summary.headlines()[0]
    with pytest.raises(InputError, match="already exists"):
        write_hotspots(tmp_path / "run", out)
    with pytest.raises(FileProblem, match="not a finished run folder"):
        write_hotspots(tmp_path / "nothing", tmp_path / "hot2")
    with pytest.raises(InputError, match="positive"):
        write_hotspots(tmp_path / "run", tmp_path / "hot3",
                       settings=AnalysisSettings(hotspot_distance=-5.0))
    assert not (tmp_path / "hot2").exists() and not (tmp_path / "hot3").exists()


# --- the effect-size floor: a case where the answer is known -------------------------------
def _neighbourhood_mean(values: np.ndarray, h: float, band: float) -> np.ndarray:
    """Brute force: the mean of every cell's band (self included), independent of ours."""
    ny, nx = values.shape
    out = np.empty_like(values)
    for i in range(ny):
        for j in range(nx):
            yy, xx = np.mgrid[0:ny, 0:nx]
            near = np.hypot((yy - i) * h, (xx - j) * h) <= band * (1 + 1e-9)
            out[i, j] = values[near].mean()
    return out


def test_floor_singles_out_the_planted_place_on_a_smooth_field():
    # Known answer: a smooth, autocorrelated field (a gentle ramp) with one planted bump.
    # Plain Gi* with the FDR marks a large share of the ramp (the issue with smooth model
    # fields); with the floor only cells whose neighbourhood mean is at least one landscape
    # standard deviation above the mean remain (Santora & Veit 2013, Mar Ecol Prog Ser
    # 487:287), which is the bump. The expected set is computed by brute force.
    h, band = 10.0, 30.0
    yy, xx = np.mgrid[0:30, 0:30]
    field = 100.0 + 1.0 * xx + 120.0 * np.exp(-((yy - 8) ** 2 + (xx - 22) ** 2) / 8.0)
    res = hotspots(field, None, h, h, band)
    m = _neighbourhood_mean(field, h, band)
    expected = res["significant_hot"] & (m >= field.mean() + field.std())
    np.testing.assert_array_equal(res["hot"], expected)
    np.testing.assert_allclose(res["effect"], (m - field.mean()) / field.std(), rtol=1e-9)
    assert res["significant_hot"].mean() > 0.2  # plain Gi*: a quarter of the landscape
    assert 0 < res["hot"].mean() < res["significant_hot"].mean() / 2.5  # the floor: the bump
    far = np.hypot(yy - 8, xx - 22) > 6
    assert not res["hot"][far].any()  # only the bump


def test_effect_of_a_plane_does_not_depend_on_the_band():
    # Textbook: the mean of a plane over a neighbourhood symmetric about a cell is the
    # plane's value there, so away from the edges the standardised excess (m_i - xbar)/S is
    # (x_i - xbar)/S whatever the band, while the Gi* z-score grows with it (about as
    # sqrt(W_i)). This is why the floor, unlike significance, changes little with the band.
    yy, xx = np.mgrid[0:40, 0:40]
    plane = 50.0 + 2.0 * xx + 1.0 * yy
    inner = (slice(8, 32), slice(8, 32))
    target = ((plane - plane.mean()) / plane.std())[inner]
    zs = []
    for band in (15.0, 40.0, 75.0):
        res = hotspots(plane, None, 10.0, 10.0, band)
        np.testing.assert_allclose(res["effect"][inner], target, atol=1e-9)
        zs.append(np.abs(res["z"][inner]).max())
    assert zs[0] < zs[1] < zs[2]


def test_floor_zero_is_plain_gi_star():
    # Design requirement: floor_sd = 0 gives exactly the FDR-significant cells.
    values, mask = _field()
    res = hotspots(values, mask, DX, DY, BAND, floor_sd=0.0)
    np.testing.assert_array_equal(res["hot"], res["significant_hot"])
    np.testing.assert_array_equal(res["cold"], res["significant_cold"])


def test_places_compass_and_band_checks():
    # Design requirement: touching hotspot cells (diagonals included) form one place,
    # numbered by size; where it lies is the ninth of the map it falls in.
    from preyscape.landscape.grid import Grid

    grid = Grid((30, 30), 0.0, 3000.0, 100.0, 100.0)
    hot = np.zeros((30, 30), dtype=bool)
    hot[2:6, 24:29] = True  # 20 cells, north-east
    hot[25, 1] = hot[26, 2] = True  # diagonal neighbours: one place, south-west
    mean = np.where(hot, 300.0, 100.0)
    pers = np.where(hot, 0.75, 0.0)
    places = find_places(hot, mean, pers, grid)
    assert [(p.number, p.cells, p.where) for p in places] == [
        (1, 20, "north-east"), (2, 2, "south-west")]
    xbar = mean.mean()
    assert places[0].ratio == pytest.approx(300.0 / xbar)
    assert places[0].persistence == pytest.approx(0.75)
    assert places[0].area_km2 == pytest.approx(0.2)
    assert places[0].share_of_animals == pytest.approx(20 * 300.0 / mean.sum())
    assert compass(grid, 15, 15) == "centre" and compass(grid, 0, 29) == "north-east"
    assert find_places(np.zeros((30, 30), bool), mean, None, grid) == ()
    # the same band gives the same hotspots: overlap 1
    values, mask = _field()
    ref = hotspots(values, mask, DX, DY, BAND)["hot"]
    (same,) = band_sensitivity(values, mask, DX, DY, [BAND], ref)
    assert same.overlap == 1.0 and same.hot_cells == int(ref.sum())


def test_hotspots_of_run_memory_does_not_grow_with_the_snapshots(tmp_path):
    # Design requirement (DEVELOPERS.md, "memory O(grid) regardless of run length"): the
    # time mean and the persistence of every snapshot come from one pass over the file,
    # one snapshot at a time, so 40 snapshots hold no more memory than 10; keeping them
    # would add 30 grids (2.8 MB as float64, against a peak of a few MB).
    from conftest import STREAM_SHAPE, stream_peaks

    grid_bytes = 8 * STREAM_SHAPE[0] * STREAM_SHAPE[1]
    peaks, results = stream_peaks(tmp_path, lambda ds: [
        hotspots_of_run(ds, sp, band_m=350.0) for sp in ("prey", "predator")])
    assert results[40][0].snapshots == 40 and results[10][0].snapshots == 10
    assert np.nanmax(results[40][1].persistence) > 0  # the front is a hotspot at times
    assert peaks[40] < 1.5 * peaks[10]
    assert peaks[40] - peaks[10] < 3 * grid_bytes
