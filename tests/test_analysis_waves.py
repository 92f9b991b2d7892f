"""Travelling fronts and waves against exact solutions and published speeds.

Each numerical check names its source beside it. Units: map metres, km along
transects, years, animals per km².
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
import xarray as xr

from preyscape.analysis import waves as W
from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.model import theory
from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.stepper import Stepper


def strip_grid(ncol: int, h: float, nrow: int = 3, mask=None) -> Grid:
    """A west-east strip of ``nrow x ncol`` cells of ``h`` metres, corner at (0, nrow*h)."""
    return Grid((nrow, ncol), 0.0, nrow * h, h, h, "", mask)


def middle_line(grid: Grid) -> list[tuple[float, float]]:
    """The west-east line through the middle row, edge to edge (metres)."""
    y = float(grid.y[grid.ny // 2])
    return [(grid.x0, y), (grid.x0 + grid.width_m, y)]


def dataset(grid: Grid, times, prey, predator=None) -> xr.Dataset:
    """A results-like dataset in memory (time years, y/x metres, animals/km²)."""
    prey = np.asarray(prey, dtype=np.float32)
    pred = np.zeros_like(prey) if predator is None else np.asarray(predator, np.float32)
    dims = ("time", "y", "x")
    return xr.Dataset(
        {"prey": (dims, prey), "predator": (dims, pred),
         "mask": (("y", "x"), grid.mask.astype(np.uint8))},
        coords={"time": np.asarray(times, float), "y": grid.y, "x": grid.x},
    )


# ---------------------------------------------------------------------------
# arrival times and transects
# ---------------------------------------------------------------------------
def test_arrival_time_is_exact_on_a_linear_ramp_and_streams():
    # Design requirement: linear interpolation between snapshots is exact when the
    # density rises linearly in time, u = a + b t, so T = (threshold - a) / b.
    rng = np.random.default_rng(5)
    shape = (6, 7)
    a = rng.uniform(0.0, 0.5, shape)
    b = rng.uniform(0.05, 0.4, shape)
    a[0, 0] = 2.0  # above the threshold from the start
    b[1, 1] = 0.0  # never reaches it
    mask = np.ones(shape, bool)
    mask[2, 3] = False
    times = np.array([0.0, 0.7, 1.3, 2.9, 4.0, 6.5, 10.0])  # uneven snapshot intervals
    frames = (a + b * t for t in times)  # a generator: read once, one frame at a time
    T = W.arrival_time(frames, times, 1.0, mask=mask)
    with np.errstate(divide="ignore"):
        expect = (1.0 - a) / b
    ok = mask & (b > 0) & (expect <= times[-1]) & (a < 1.0)
    np.testing.assert_allclose(T[ok], expect[ok], rtol=1e-12)
    assert T[0, 0] == 0.0
    assert np.isnan(T[1, 1]) and np.isnan(T[2, 3])
    assert np.all(np.isnan(T[mask & (b > 0) & (expect > times[-1])]))
    # cells without data in a frame (NaN) do not arrive there
    fr = [np.full((1, 2), np.nan), np.array([[0.5, np.nan]]), np.array([[1.5, 2.0]])]
    T = W.arrival_time(fr, [0.0, 1.0, 2.0], 1.0)
    assert T[0, 0] == pytest.approx(1.5)
    assert T[0, 1] == 2.0  # no earlier value to interpolate from: the snapshot time
    with pytest.raises(ValueError, match="increase"):
        W.arrival_time([a, a], [1.0, 1.0], 1.0)


def test_transect_sampling_distances_on_a_diagonal_line():
    # Textbook (Pythagoras): a line 3000 m east and 4000 m south is 5 km long; points
    # every 100 m lie at multiples of 0.1 km, each in the cell containing it.
    mask = np.ones((50, 40), bool)
    mask[20:25, :] = False  # a no-data band crossed by the line
    g = Grid((50, 40), 1000.0, 9000.0, 100.0, 100.0, "", mask)
    start, end = (1050.0, 8950.0), (4050.0, 4950.0)
    tr = W.sample_transect(g, [start, end], spacing_m=100.0, name="diagonal")
    assert tr.length_km == pytest.approx(5.0)
    assert tr.spacing_km == pytest.approx(0.1)
    k = np.round(tr.distance_km / 0.1).astype(int)
    np.testing.assert_allclose(tr.distance_km, 0.1 * k, atol=1e-12)
    np.testing.assert_allclose(tr.x, start[0] + 0.6 * 1000 * tr.distance_km)
    np.testing.assert_allclose(tr.y, start[1] - 0.8 * 1000 * tr.distance_km)
    np.testing.assert_array_equal(tr.col, np.floor((tr.x - 1000.0) / 100.0))
    np.testing.assert_array_equal(tr.row, np.floor((9000.0 - tr.y) / 100.0))
    # dropped points keep their distances: a gap across the no-data band
    assert tr.n < 51 and np.all(g.mask[tr.row, tr.col])
    assert np.max(np.diff(tr.distance_km)) > 0.5
    assert tr.distance_km[0] == 0.0 and tr.distance_km[-1] == pytest.approx(5.0)
    # a polyline: distance is measured along it (two legs of 300 m and 400 m)
    tr2 = W.sample_transect(g, [(1050, 8950), (1350, 8950), (1350, 8550)])
    assert tr2.length_km == pytest.approx(0.7)
    assert tr2.distance_km[-1] == pytest.approx(0.7)
    assert tr2.x[3] == pytest.approx(1350) and tr2.y[-1] == pytest.approx(8550)
    with pytest.raises(InputError, match="no point"):
        W.sample_transect(g, [(0, 0), (10, 10)])
    with pytest.raises(InputError, match="two points"):
        W.sample_transect(g, [(1050, 8950)])


def test_front_position_interpolates_the_last_crossing():
    # Design requirement: the furthest crossing from >= threshold to below, linear
    # between the two points around it.
    d = np.arange(6) * 0.5
    p = np.array([9.0, 1.0, 6.0, 4.0, 0.0, 0.0])  # a dip, then the front
    assert W.front_position(p, d, 5.0) == pytest.approx(1.0 + 0.5 * (6 - 5) / (6 - 4))
    assert math.isnan(W.front_position(p, d, 10.0))
    assert W.front_position(np.full(6, 7.0), d, 5.0) == 2.5  # beyond the end


# ---------------------------------------------------------------------------
# exact Fisher wave
# ---------------------------------------------------------------------------
C_AZ = 5.0 / math.sqrt(6.0)  # Ablowitz & Zeppetella 1979 wave speed for r = D = K = 1


def az_wave(x_km, t, x0=3.0):
    """Ablowitz & Zeppetella 1979 (Bull Math Biol 41:835; from memory): the exact
    Fisher wave u = (1 + C exp(z/sqrt 6))^-2, z = x - c t, c = 5/sqrt 6 (r=D=K=1)."""
    return (1.0 + np.exp((x_km - x0 - C_AZ * t) / math.sqrt(6.0))) ** -2


def test_exact_fisher_wave_speed_arrival_and_local_speed():
    # Ablowitz & Zeppetella 1979 (from memory): the front moves at exactly c = 5/sqrt 6.
    h = 50.0
    g = strip_grid(400, h, nrow=5)
    xk = g.x / 1000.0
    times = np.arange(0.0, 8.0 + 1e-9, 0.1)
    frames = [np.broadcast_to(az_wave(xk, t), g.shape) for t in times]
    tr = W.sample_transect(g, middle_line(g))
    fit = W.front_speed(frames, times, tr, 0.5, predicted_km_yr=C_AZ)
    assert fit.speed == pytest.approx(C_AZ, rel=1e-3)
    assert fit.r2 > 0.99999 and fit.n > 40
    assert fit.ratio == pytest.approx(1.0, abs=1e-3)
    # arrival time: T(x) = (x - x0 - z_half)/c with u(z_half) = 1/2
    z_half = math.sqrt(6.0) * math.log(math.sqrt(2.0) - 1.0)
    T = W.arrival_time(iter(frames), times, 0.5)
    expect = np.broadcast_to((xk - 3.0 - z_half) / C_AZ, g.shape)
    moving = (expect > 0.2) & (expect < 7.8)
    np.testing.assert_allclose(T[moving], expect[moving], atol=2e-3)  # years
    assert np.all(T[expect < 0] == 0.0) and np.all(np.isnan(T[expect > 8.1]))
    # local speed 1/|grad T| on the interior of the swept strip
    v = W.local_front_speed(T, g.dx, g.dy)
    inner = np.zeros(g.shape, bool)
    inner[:, 1:-1] = moving[:, :-2] & moving[:, 2:]
    np.testing.assert_allclose(v[inner], C_AZ, rtol=5e-3)
    v0 = W.local_front_speed(T, g.dx, g.dy, smooth_cells=0)
    np.testing.assert_allclose(v0[inner], C_AZ, rtol=5e-3)
    assert np.all(np.isnan(v[T == 0.0]))


# ---------------------------------------------------------------------------
# fronts from the solver
# ---------------------------------------------------------------------------
def strip_stepper(shape, h, D_prey, D_pred, inter, dt, r, K, m):
    """A stepper on a strip with closed edges (as tests/test_solve_stepper.py does)."""
    mask = np.ones(shape, bool)
    mv_n = build_movement(np.full(shape, D_prey), mask, h, h)
    mv_p = build_movement(np.full(shape, D_pred), mask, h, h)
    return Stepper(mask, mv_n, mv_p, np.full(shape, r), np.full(shape, 1.0 / K),
                   np.full(shape, m), inter, dt)


def snapshots(st, N, P, every, years, species):
    """Yield copies of one species' density every ``every`` years (a whole number of steps)."""
    n_per = round(every / st.dt)
    assert n_per * st.dt == pytest.approx(every)  # snapshot times must be exact
    k = 0
    yield (N, P)[species].copy()
    for _ in range(round(years / every)):
        st.advance(N, P, k, n_per)
        k += n_per
        yield (N, P)[species].copy()


def test_fisher_kpp_front_speed_from_the_solver():
    # Fisher 1937 (Ann Eugen 7:355); Kolmogorov, Petrovsky & Piskunov 1937: c* = 2 sqrt(rD).
    # A front from a compact start approaches c* from below, its position lagging by
    # (3/2) sqrt(D/r) ln t (Bramson 1983, Mem AMS 44(285)).
    r, D, h = 1.0, 0.1, 50.0
    g = strip_grid(600, h)
    inter = Interaction("logistic-prey", attack_rate=0.0)
    st = strip_stepper(g.shape, h, D, 0.0, inter, 0.05, r, 1.0, 0.5)
    N = np.zeros(g.shape)
    N[:, :10] = 1.0
    P = np.zeros(g.shape)
    c_star = theory.fisher_speed(r, D)
    years = 47.0
    times = np.arange(0.0, years + 1e-9, 0.5)
    tr = W.sample_transect(g, middle_line(g))
    fit = W.front_speed(snapshots(st, N, P, 0.5, years, 0), times, tr, 0.5,
                        predicted_km_yr=c_star)
    assert fit.speed == pytest.approx(c_star, rel=0.04)
    assert fit.ratio < 1.0
    assert fit.n > 40 and fit.r2 > 0.999
    # Bramson's expansion over the fitted window gives the mean speed to < 1 %
    t0, t1 = fit.times[0], fit.times[-1]
    bramson = c_star - 1.5 * math.sqrt(D / r) * math.log(t1 / t0) / (t1 - t0)
    assert fit.speed == pytest.approx(bramson, rel=0.01)


def test_predator_invasion_speed_into_prey_at_capacity():
    # Dunbar 1983 (J Math Biol 17:11): predators invading prey at K spread at
    # c* = 2 sqrt(D_P (e a K/(1 + a h K) - m)). Holling II with K below the Hopf
    # capacity (Rosenzweig 1971), so the wake settles and the front is a plain front.
    inter = Interaction("holling-ii", attack_rate=6.0, handling_time=0.1, efficiency=1.0)
    r, K, m, D_P, h = 1.0, 1.0, 0.75, 1.0 / 3.0, 50.0
    assert K < theory.hopf_capacity(inter, m)
    c_star = theory.predator_speed(inter, K, m, D_P)
    assert c_star == pytest.approx(2.0, rel=1e-6)  # e a K/(1+a h K) - m = 3.75 - 0.75
    g = strip_grid(700, h)
    st = strip_stepper(g.shape, h, 0.1, D_P, inter, 0.025, r, K, m)
    N = np.full(g.shape, K)
    P = np.zeros(g.shape)
    P[:, :10] = 0.1
    p_star = theory.equilibrium(inter, r, K, m)[1]
    years = 17.5
    times = np.arange(0.0, years + 1e-9, 0.25)
    tr = W.sample_transect(g, middle_line(g))
    fit = W.front_speed(snapshots(st, N, P, 0.25, years, 1), times, tr, 0.2 * p_star,
                        species="predator", predicted_km_yr=c_star)
    assert fit.ratio == pytest.approx(1.0, abs=0.05)
    assert fit.ratio < 1.001  # approached from below, as for Fisher fronts
    assert fit.n > 30 and fit.r2 > 0.999


# ---------------------------------------------------------------------------
# periodic travelling waves
# ---------------------------------------------------------------------------
def test_wavelength_and_period_of_a_synthetic_wave():
    # Design requirement: u = A cos(2 pi (x/lam - t/T)) + background, windows holding
    # non-integer numbers of periods; lam and T recovered to 1 %.
    lam, T = 3.7, 2.3  # km, years
    x = np.arange(0.0, 20.0, 0.05)  # 5.4 wavelengths
    t = np.arange(0.0, 30.0, 0.125)  # 13 periods
    prof = 40.0 + 0.3 * x + 12.0 * np.cos(2 * np.pi * (x / lam - 1.0 / T))
    assert W.wavelength_along(prof, x) == pytest.approx(lam, rel=0.01)
    series = 40.0 + 12.0 * np.cos(2 * np.pi * (2.0 / lam - t / T))
    series[t < 4.0] = 0.0  # a transient the caller leaves out
    assert W.period_at(series, t, t_min=4.0) == pytest.approx(T, rel=0.01)
    # gaps (points dropped on no-data cells) are bridged by interpolation
    keep = (x < 8.0) | (x > 9.0)
    assert W.wavelength_along(prof[keep], x[keep]) == pytest.approx(lam, rel=0.01)
    # fewer than two wavelengths in the window: not measurable
    assert math.isnan(W.wavelength_along(prof[x < 6.0], x[x < 6.0]))


def test_wave_summary_returns_the_lambda_omega_selected_wavelength():
    # Sherratt 1994 (Physica D 70:370; from memory): behind an invasion in the
    # lambda-omega normal form (lambda(r) = 1 - r^2, omega(r) = w0 - w1 r^2, D = 1),
    # the selected periodic travelling wave has wavenumber q = (sqrt(1 + w1^2) - 1)/|w1|,
    # amplitude sqrt(1 - q^2) and frequency omega(amplitude). Here a synthetic wave
    # built from it checks that the pipeline returns 2 pi / q (dimensionless units
    # read as km and years).
    w0, w1 = 2.0, 1.0
    q = (math.sqrt(1 + w1**2) - 1) / abs(w1)
    amp = math.sqrt(1 - q**2)
    omega = w0 - w1 * amp**2
    h = 250.0
    g = strip_grid(400, h)  # 100 km
    xk = g.x / 1000.0
    times = np.arange(0.0, 80.0 + 1e-9, 0.25)
    c_front = 2.0  # invasion speed of the normal form, 2 sqrt(lambda(0) D)

    def density(t):
        behind = 1.0 / (1.0 + np.exp((xk - 2.0 - c_front * t) / 0.5))
        return np.broadcast_to(behind * (1.0 + amp * np.cos(omega * t - q * xk)), g.shape)

    ds = dataset(g, times, np.zeros((times.size, *g.shape)),
                 np.stack([density(t) for t in times]))
    tr = W.sample_transect(g, middle_line(g), name="middle")
    ws = W.wave_summary(ds, species="predator", transect=tr, t_min=40.0, threshold=0.05)
    assert ws.wavelength == pytest.approx(2 * math.pi / q, rel=0.01)
    assert ws.period == pytest.approx(2 * math.pi / omega, rel=0.01)
    assert ws.phase_speed == pytest.approx(omega / q, rel=0.02)
    assert len(ws.periods) == 3 and len(ws.wavelengths) == 3
    # the front itself: speed 2 (the synthetic front moves at exactly c_front)
    # (to ~1 %: the wave modulates the density at the leading edge, so the crossing wobbles)
    fit = W.front_speed(ds, None, tr, 0.05, species="predator", predicted_km_yr=c_front)
    assert fit.ratio == pytest.approx(1.0, abs=0.02)


# ---------------------------------------------------------------------------
# product: rasters, table, figures
# ---------------------------------------------------------------------------
def test_write_waves_from_a_small_run_folder(tmp_path):
    # Design requirement: a run folder -> arrival and speed GeoTIFFs, fronts.csv and
    # PNGs; synthetic logistic fronts moving east at known speeds (no solver needed).
    import rasterio
    from conftest import write_run_record

    from preyscape.analysis.settings import AnalysisSettings, TransectLine
    from preyscape.analysis.waves_output import write_waves
    from preyscape.store import ResultWriter, time_means

    c_prey, c_pred = 0.5, 0.3  # km/yr
    mask = np.ones((12, 80), bool)
    mask[0, :5] = False
    g = Grid((12, 80), 600_000.0, 5_000_000.0, 50.0, 50.0, "", mask)
    xk = (g.x - g.x0) / 1000.0
    run = tmp_path / "run"
    run.mkdir()
    w = ResultWriter(run / "results.nc", g, {"prey": "vole", "predator": "stoat"}, {})
    for t in np.arange(0.0, 7.0 + 1e-9, 0.25):
        N = np.broadcast_to(100.0 / (1 + np.exp((xk - 0.3 - c_prey * t) / 0.1)), g.shape)
        P = np.broadcast_to(5.0 / (1 + np.exp((xk - 0.2 - c_pred * t) / 0.1)), g.shape)
        w.write(float(t), N.copy(), P.copy())
    w.close()
    write_run_record(run)
    y = float(g.y[6])
    out = tmp_path / "waves"
    east = TransectLine("east", ((600_000, y), (604_000, y)))
    s = write_waves(run, out, settings=AnalysisSettings(transects=(east,)),
                    predicted={"prey": 0.5, "predator": 0.25})
    for name in ("prey_arrival.tif", "predator_arrival.tif", "prey_front_speed.tif",
                 "predator_front_speed.tif", "fronts.csv", "prey_arrival.png",
                 "predator_front_speed.png", "front_east_prey.png", "front_east_predator.png"):
        assert (out / name).is_file() and (out / name).stat().st_size > 0, name
    assert {f.name for f in s.files} >= {"front_east_prey.png", "prey_arrival.png"}
    with rasterio.open(out / "prey_arrival.tif") as src:
        a = src.read(1)
    assert np.isnan(a[0, 0]) and np.isfinite(a[6, 40])
    rows = list(csv.DictReader((out / "fronts.csv").open()))
    assert [(r["transect"], r["species"]) for r in rows] == [("east", "prey"),
                                                              ("east", "predator")]
    speeds = {r["species"]: float(r["speed_km_yr"]) for r in rows}
    assert speeds["prey"] == pytest.approx(c_prey, rel=0.01)  # synthetic, known
    assert speeds["predator"] == pytest.approx(c_pred, rel=0.01)
    assert float(rows[1]["ratio"]) == pytest.approx(c_pred / 0.25, rel=0.01)
    # default thresholds: 10 % of the largest time-mean density (common practice, no source)
    means = {sp: float(np.nanmax(v)) for sp, v in time_means(run / "results.nc", mask).items()}
    assert s.arrival["prey"].threshold == pytest.approx(0.1 * means["prey"])
    assert s.fronts[0].speed_km_yr == pytest.approx(c_prey, rel=0.01)
    # the automatic transect follows the predator front from where it started
    s2 = write_waves(run, tmp_path / "auto", settings=AnalysisSettings(
        prey_threshold=50.0, predator_threshold=2.5), predicted={})
    assert s2.automatic and s2.fronts[0].transect == "auto"
    assert s2.fronts[1].speed_km_yr == pytest.approx(c_pred, rel=0.05)
    # user mistakes
    with pytest.raises(InputError, match="already exists"):
        write_waves(run, out)
    with pytest.raises(InputError, match="transects\\[0\\]"):
        write_waves(run, tmp_path / "bad", settings=AnalysisSettings(
            transects=({"name": "x", "points": [[0, 0]]},)))
    with pytest.raises(InputError, match="no point"):
        write_waves(run, tmp_path / "bad", settings=AnalysisSettings(
            transects=(TransectLine("far", ((0, 0), (1, 1))),)))
    with pytest.raises(InputError, match="prey_threshold"):
        write_waves(run, tmp_path / "bad", settings=AnalysisSettings(prey_threshold=-1.0))
    assert not (tmp_path / "bad").exists()


# ---------------------------------------------------------------------------
# predictions for the landscape as it is
# ---------------------------------------------------------------------------
def test_front_on_a_mixed_landscape_matches_the_landscape_prediction(tmp_path):
    # End to end: a generated mosaic of meadow (70 %) and cropland (30 %, no prey capacity:
    # a sink where prey decline at -r; prey move twice as fast there), prey released at
    # the west end, simulated and measured by `waves`. The landscape prediction is
    # 2 sqrt(<r> D_h) (Shigesada, Kawasaki & Teramoto 1986; Shigesada & Kawasaki 1997)
    # with <r> = 0.7 - 0.3 = 0.4 /yr and D_h = 0.1/(0.7 + 0.3/2) = 0.1176 km²/yr, as a mean
    # over the fitted years with Bramson's correction (Bramson 1983; Ebert & van Saarloos
    # 2000). The best-habitat bound 2 sqrt(rD) = 0.632 km/yr (Fisher 1937) is far off.
    from conftest import to_toml
    from rasterio.crs import CRS

    from preyscape.analysis.waves_output import write_waves
    from preyscape.landscape.generate import classify_by_fractions, gaussian_field
    from preyscape.landscape.io import write_geotiff
    from preyscape.runfolder import simulate

    rows, cols, h = 6, 400, 50.0
    g = Grid((rows, cols), 500000.0, 5000000.0, h, h, crs_wkt=CRS.from_epsg(32633).to_wkt())
    cls = classify_by_fractions(gaussian_field((rows, cols), 0.7, 5), {2: 0.3, 1: 0.7})
    write_geotiff(tmp_path / "habitat.tif", g, cls.astype(np.uint8), nodata=0, dtype="uint8")
    y = float(g.y[rows // 2])
    scenario = {
        "title": "generated meadow and cropland (invented)",
        "landscape": {"habitat": "habitat.tif", "values": "classes", "classes": [
            {"code": 1, "name": "meadow"},
            {"code": 2, "name": "cropland", "prey_capacity": 0.0, "prey_movement": 2.0}]},
        "prey": {"growth": 1.0, "capacity": 100.0, "movement": "fickian", "diffusivity": 0.1},
        "predator": {"mortality": 1.0, "movement": "fickian", "diffusivity": 1.0},
        "interaction": {"form": "holling-ii", "attack_rate": 0.25, "handling_time": 0.002,
                        "efficiency": 0.01},
        "start": {"prey": "uniform", "prey_density": 0.0, "releases": [
            {"species": "prey", "x": 500075.0, "y": y, "radius": 200.0, "density": 50.0}]},
        "run": {"years": 45.0, "save_every": 1.0, "step": "auto", "seed": 1},
        "analysis": {"presence": 0.01, "prey_threshold": 10.0, "transects": [
            {"name": "east", "points": [[500000.0, y], [500000.0 + cols * h, y]]}]},
    }
    (tmp_path / "s.toml").write_text(to_toml(scenario))
    run = simulate(tmp_path / "s.toml", tmp_path / "run", maps=False, progress=False)
    land = json.loads((run / "run.json").read_text())["predictions"]["landscape"]
    c_land = 2 * math.sqrt(0.4 * 0.1 / 0.85)
    assert land["prey"]["speed"] == pytest.approx(c_land, rel=1e-9)
    assert not land["prey"]["coarse"]
    out = write_waves(run, tmp_path / "waves")
    f = out.fronts[0]
    assert (f.transect, f.species) == ("east", "prey")
    assert f.landscape_km_yr == pytest.approx(c_land)
    assert not f.far_from_asymptotic
    # measured 0.429 km/yr: 0.68 of the best-habitat bound, 1.07 of the landscape
    # prediction over the fitted years, 0.90 of the one along the transect
    assert f.ratio < 0.75
    assert f.landscape_ratio == pytest.approx(1.0, abs=0.2)
    assert f.transect_ratio == pytest.approx(1.0, abs=0.2)
    assert f.landscape_window_km_yr < f.landscape_km_yr  # a front from a release lags
    row = next(csv.DictReader((tmp_path / "waves" / "fronts.csv").open()))
    assert float(row["landscape_ratio"]) == pytest.approx(f.landscape_ratio, rel=1e-5)
    text = "\n".join(out.summary_lines())
    assert "landscape map-wide (homogenised)" in text and "best-habitat bound" in text
    assert "predator: is absent from the run" in text


def test_prey_ahead_of_the_predators_and_their_growth_there():
    # design requirement: the prey of the last snapshot before the predators arrived;
    # predators' growth there e a N/(1 + a h N) - m (Holling 1959) instead of at capacity
    from preyscape.analysis import front_predictions as fp

    prey = np.array([[900.0, 900.0, 300.0], [600.0, 800.0, 300.0], [100.0, 700.0, 300.0]])
    pred = np.array([[5.0, 0.0, 0.0], [5.0, 2.0, 0.0], [5.0, 5.0, 0.1]])
    ahead = fp.prey_ahead(prey, pred, 1.0)
    assert ahead.tolist() == [900.0, 900.0, 300.0]
    record = {"basis": "classes", "classes": [
        {"code": 1, "multipliers": {"prey_capacity": 1.0, "predator_mortality": 1.0,
                                    "predator_movement": 1.0, "prey_growth": 1.0,
                                    "prey_movement": 1.0}}],
              "constants": {"form": "holling-ii", "attack_rate": 0.25, "handling_time": 0.002,
                            "efficiency": 0.01, "interference": 0.0, "growth": 4.0,
                            "capacity": 1000.0, "mortality": 1.0, "prey_move": 0.5,
                            "predator_move": 2.0, "prey_kind": "fickian",
                            "predator_kind": "fickian"}}
    r, D = fp.transect_classes(record, np.ones(3), "predator", ahead)
    # 0.01 * 0.25 * 900 / 1.45 - 1 = 0.551724; 0.75 / 1.15 - 1 = -0.347826
    assert r == pytest.approx([0.551724, 0.551724, -0.347826], rel=1e-5)
    assert D.tolist() == [2.0, 2.0, 2.0]
    # at capacity (K = 1000): 2.5 / 1.5 - 1
    r_cap, _ = fp.transect_classes(record, np.ones(3), "predator")
    assert r_cap == pytest.approx([2.0 / 3.0] * 3)


def test_waves_with_nothing_to_measure_says_why_and_draws_nothing_empty(tmp_path):
    # design requirement (honest empty states): prey present everywhere from the start,
    # predators absent: no front, no figure, a sentence for each and for the command
    from conftest import write_run_record

    from preyscape.analysis.settings import AnalysisSettings
    from preyscape.analysis.waves_output import write_waves
    from preyscape.store import ResultWriter

    g = Grid((10, 30), 600_000.0, 5_000_000.0, 50.0, 50.0, "")
    run = tmp_path / "run"
    run.mkdir()
    w = ResultWriter(run / "results.nc", g, {"prey": "vole", "predator": "stoat"}, {})
    for t in np.arange(0.0, 2.0 + 1e-9, 0.5):
        w.write(float(t), np.full(g.shape, 40.0 + t), np.zeros(g.shape))
    w.close()
    write_run_record(run)
    out = write_waves(run, tmp_path / "waves", settings=AnalysisSettings())
    assert out.arrival["prey"].no_front.startswith("occupied most of the landscape")
    assert out.arrival["predator"].no_front.startswith("is absent")
    assert not list((tmp_path / "waves").glob("*.png"))
    text = "\n".join(out.summary_lines())
    assert "nothing to measure: no species has a front in this run" in text
    blocks = out.report_parts()[0].blocks
    assert not [b for b in blocks if type(b).__name__ == "Figure"]
    bullets = " ".join(" ".join(b.items) for b in blocks if type(b).__name__ == "Bullets")
    assert "no front" in bullets and "absent" in bullets


def test_arrival_times_and_profiles_stream_the_snapshots(tmp_path):
    # Design requirement (DEVELOPERS.md, "memory O(grid) regardless of run length"): the
    # arrival time and the transect profiles read one snapshot at a time, so 40 snapshots
    # hold no more memory than 10 beyond the profiles themselves (keeping the snapshots
    # would add 30 grids, 2.8 MB).
    from conftest import STREAM_SHAPE, stream_peaks

    grid_bytes = 8 * STREAM_SHAPE[0] * STREAM_SHAPE[1]
    grid = Grid(STREAM_SHAPE, 0.0, 9600.0, 100.0, 100.0)
    line = W.sample_transect(grid, [[50.0, 5550.0], [11_950.0, 5550.0]])  # along row 40

    def both(ds):
        return (W.arrival_time_of_run(ds, "predator", 10.0),
                W.transect_series(ds, line, species="predator"))

    peaks, results = stream_peaks(tmp_path, both)
    # the front (half of 20 per km² at x = 1 + 1.5 t km) passes column 70 (x = 7 km in
    # the test field) at t = 4
    arrival, series = results[40]
    assert arrival[50, 70] == pytest.approx((7.0 - 1.0) / 1.5, abs=0.02)
    assert series.values.shape == (41, line.n)
    assert peaks[40] < 1.5 * peaks[10]
    assert peaks[40] - peaks[10] < 3 * grid_bytes
