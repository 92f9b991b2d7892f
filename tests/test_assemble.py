"""Tests for preyscape.assemble and preyscape.preview: the initial state, the step, and the
numbers derived before a run (what check prints)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from conftest import (
    CAPACITY,
    DELETE,
    DX,
    NODATA_CELLS,
    RELEASE_COL,
    RELEASE_DENSITY,
    RELEASE_RADIUS,
    RELEASE_ROW,
    RELEASE_X,
    RELEASE_Y,
    SHAPE,
    WOOD_CAPACITY,
    X0,
    Y0,
    habitat_array,
)

from preyscape.assemble import prepare
from preyscape.errors import InputError
from preyscape.preview import derived
from preyscape.runfolder import simulate
from preyscape.scenario import load_scenario


@pytest.fixture
def setup(scenario_path):
    return prepare(load_scenario(scenario_path))


def cell_centres() -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre coordinates (m) of the test grid, computed here from its corner."""
    x = X0 + (np.arange(SHAPE[1]) + 0.5) * DX
    y = Y0 - (np.arange(SHAPE[0]) + 0.5) * DX
    return np.meshgrid(x, y)


def test_grid_and_mask_match_raster(setup):
    hab = habitat_array()
    assert setup.grid.shape == SHAPE
    assert (setup.grid.dx, setup.grid.dy) == (DX, DX)
    assert (setup.grid.x0, setup.grid.y0) == (X0, Y0)
    np.testing.assert_array_equal(setup.grid.mask, hab != 0)
    assert setup.grid.n_cells == SHAPE[0] * SHAPE[1] - len(NODATA_CELLS)


def test_prey_starts_at_capacity_and_zero_on_nodata(setup):
    hab = habitat_array()
    # class table of conftest.BASE: class 1 at capacity, class 2 at WOOD_CAPACITY of it
    expected = np.select([hab == 1, hab == 2], [CAPACITY, CAPACITY * WOOD_CAPACITY], 0.0)
    np.testing.assert_allclose(setup.N0, expected, rtol=1e-12, atol=0)
    for r, c in NODATA_CELLS:
        assert setup.N0[r, c] == 0.0
        assert setup.P0[r, c] == 0.0
    assert setup.N0.dtype == np.float64 and setup.N0.flags.c_contiguous


def test_release_adds_density_within_radius(setup):
    X, Y = cell_centres()
    # reference computation with numpy: cell centres within the radius of the release
    inside = np.hypot(X - RELEASE_X, Y - RELEASE_Y) <= RELEASE_RADIUS
    inside &= habitat_array() != 0
    assert inside.sum() == 21  # lattice points with i² + j² <= 2.5² (counted by hand)
    expected = np.where(inside, RELEASE_DENSITY, 0.0)
    np.testing.assert_array_equal(setup.P0, expected)
    assert setup.P0[RELEASE_ROW, RELEASE_COL] == RELEASE_DENSITY


def test_prey_release_adds_to_capacity(write_scenario):
    path = write_scenario({"start.releases.0": {
        "x": RELEASE_X, "y": RELEASE_Y, "radius": 50.0, "density": 7.0, "species": "prey"}})
    s = prepare(load_scenario(path))
    # a radius below half a cell still marks the cell holding the point
    hab = habitat_array()
    expected = np.select([hab == 1, hab == 2], [CAPACITY, CAPACITY * WOOD_CAPACITY], 0.0)
    expected[RELEASE_ROW, RELEASE_COL] += 7.0
    np.testing.assert_array_equal(s.N0, expected)
    assert not s.P0.any()


def test_release_on_nodata_cell_refused(write_scenario):
    r, c = NODATA_CELLS[-1]
    path = write_scenario({"start.releases.0.x": X0 + (c + 0.5) * DX,
                           "start.releases.0.y": Y0 - (r + 0.5) * DX})
    with pytest.raises(InputError) as info:
        prepare(load_scenario(path))
    assert "start.releases[0]" in str(info.value)
    assert str(path) in str(info.value)


def test_derived_front_speeds(setup, scenario_path):
    sc = load_scenario(scenario_path)
    d = derived(setup)
    r, D = sc.prey.growth, sc.prey.diffusivity
    # Fisher 1937: minimal Fisher-KPP front speed 2 sqrt(r D), km/yr
    assert d["prey_front_speed"] == pytest.approx(2 * math.sqrt(r * D), rel=1e-12)
    assert d["prey_front_speed"] == pytest.approx(2.7202941017470885, rel=1e-12)  # 2√(3.7·0.5)
    a, h, e = sc.interaction.attack_rate, sc.interaction.handling_time, sc.interaction.efficiency
    m, D_P, K = sc.predator.mortality, sc.predator.diffusivity, CAPACITY
    # Dunbar 1983 (J Math Biol 17:11): predators invading prey at capacity,
    # 2 sqrt(D_P (e a K / (1 + a h K) - m)) at best habitat (class 1, multipliers 1)
    growth_P = e * a * K / (1 + a * h * K) - m
    assert growth_P == pytest.approx(2.5 / 1.5 - 1.0)  # worked by hand: 0.01·0.25·1000/1.5 - 1
    assert d["predator_front_speed"] == pytest.approx(2 * math.sqrt(D_P * growth_P), rel=1e-12)
    assert d["best_habitat"]["K"] == CAPACITY


def test_derived_grid_and_equilibrium(setup):
    d = derived(setup)
    assert (d["grid"]["rows"], d["grid"]["cols"]) == SHAPE
    assert d["grid"]["cells_with_data"] == SHAPE[0] * SHAPE[1] - len(NODATA_CELLS)
    assert d["grid"]["extent_km"] == pytest.approx((3.0, 2.4))
    # Rosenzweig & MacArthur 1963: N* = m / (a (e - m h)) = 1 / (0.25 · 0.008) = 500
    assert d["equilibrium"][0] == pytest.approx(500.0)
    # Rosenzweig 1971: K_H = (e + m h) / (a h (e - m h)) = 0.012 / 0.000004 = 3000
    assert d["hopf_capacity"] == pytest.approx(3000.0)
    assert d["stable"] is True  # K = 1000 < K_H
    assert d["snapshots"] == 3  # t = 0, 0.25, 0.5
    assert d["steps"] * setup.dt == pytest.approx(0.5)


def test_derived_critical_patch(setup):
    d = derived(setup)
    # Skellam 1951: strip width pi sqrt(D / r)
    assert d["critical_patch_prey"]["strip_width"] == pytest.approx(math.pi * math.sqrt(0.5 / 3.7))


def test_auto_step_divides_save_every(setup, scenario_path):
    sc = load_scenario(scenario_path)
    n = sc.run.save_every / setup.dt
    assert n == pytest.approx(round(n), abs=1e-9)
    assert round(n) > 1
    # accuracy 0.05 of the fastest rate (r = 3.7/yr, stepper.auto_step), rounded down to fit
    assert setup.dt <= 0.05 / 3.7
    assert setup.dt == pytest.approx(0.25 / 19)  # ceil(0.25 / (0.05/3.7)) = 19 steps


@pytest.mark.parametrize("save_every", [0.1, 0.125, 1 / 3])
def test_auto_step_divides_other_save_intervals(write_scenario, save_every):
    path = write_scenario({"run.years": 1.0, "run.save_every": save_every})
    s = prepare(load_scenario(path))
    n = save_every / s.dt
    assert abs(n - round(n)) < 1e-9 * n


def test_fixed_step_not_dividing_save_every_refused(write_scenario):
    path = write_scenario({"run.step": 0.03})
    with pytest.raises(InputError) as info:
        prepare(load_scenario(path))
    assert "run.step" in str(info.value)


def test_fixed_step_is_used(write_scenario):
    s = prepare(load_scenario(write_scenario({"run.step": 0.0125})))
    assert s.dt == 0.0125


def test_failed_run_leaves_no_folder(scenario_path, tmp_path, monkeypatch):
    from preyscape import store

    def boom(*args, **kwargs):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(store, "write_summaries", boom)
    out = tmp_path / "runs" / "failed"
    with pytest.raises(RuntimeError):
        simulate(scenario_path, out, progress=False, maps=False)
    assert not out.exists()
    assert list(out.parent.glob(".failed.partial-*")) == []


def test_failed_overwrite_keeps_old_folder(scenario_path, tmp_path, monkeypatch):
    from preyscape import store

    out = tmp_path / "kept"
    out.mkdir()
    (out / "run.json").write_text('{"old": true}\n')

    def boom(*args, **kwargs):
        raise RuntimeError("disk full (simulated)")

    monkeypatch.setattr(store, "write_summaries", boom)
    with pytest.raises(RuntimeError):
        simulate(scenario_path, out, overwrite=True, progress=False, maps=False)
    assert (out / "run.json").read_text() == '{"old": true}\n'
    assert list(tmp_path.glob(".kept.partial-*")) == []


def test_derived_landscape_predictions_worked_by_hand(setup):
    # Growth at low density per class and the homogenised speeds (docs/method.md). The
    # test landscape: class 1 (open ground) on 429 cells, class 2 (woodland, capacity
    # x 0.5 = 500, prey movement x 0.5, predator movement x 2) on 286: shares 0.6 and 0.4.
    land = derived(setup)["landscape"]
    rows = {c["code"]: c for c in land["classes"]}
    assert rows[1]["cells"] == 429 and rows[2]["cells"] == 286
    assert rows[1]["share"] == pytest.approx(0.6) and rows[2]["share"] == pytest.approx(0.4)
    assert rows[2]["name"] == "woodland"
    # Holling 1959; Rosenzweig & MacArthur 1963: e a K/(1 + a h K) - m by hand:
    # K = 1000: 2.5/1.5 - 1 = 0.666667; K = 500 = N*: 1.25/1.25 - 1 = 0 (a sink: <= 0)
    assert rows[1]["predator_growth"] == pytest.approx(2.0 / 3.0)
    assert rows[2]["predator_growth"] == pytest.approx(0.0, abs=1e-12)
    assert rows[1]["prey_growth"] == rows[2]["prey_growth"] == pytest.approx(3.7)
    assert land["predator"]["sink_share"] == pytest.approx(0.4)
    assert land["prey"]["sink_share"] == 0.0
    # Shigesada, Kawasaki & Teramoto 1986: c = 2 sqrt(<r> D_h), D_h the harmonic mean.
    # prey: D_h = 1/(0.6/0.5 + 0.4/0.25) = 1/2.8; predators: <r> = 0.4,
    # D_h = 1/(0.6/2 + 0.4/4) = 2.5, so c = 2 sqrt(0.4 * 2.5) = 2
    assert land["prey"]["speed"] == pytest.approx(2 * math.sqrt(3.7 / 2.8))
    assert land["predator"]["speed"] == pytest.approx(2.0)
    assert land["predator"]["decay_rate"] == pytest.approx(math.sqrt(0.4 / 2.5))
    # patch length of class 1: the longer of its mean runs along rows (17.875 cells)
    # and along columns ((22 + 23 + 16 * 24)/18 = 23.83 cells) of 100 m
    assert rows[1]["patch_km"] == pytest.approx(0.1 * 429 / 18)
    assert land["constants"]["capacity"] == CAPACITY and land["measures_included"] is False
# ---------------------------------------------------------------------------
# limits checked before a run (design requirements; estimates from docs/performance.md)
# ---------------------------------------------------------------------------
def test_memory_beyond_what_is_available_is_refused_with_a_cell_size_that_fits(
        write_scenario):
    from preyscape.limits import check_memory, memory_estimate_mb

    sc = load_scenario(write_scenario({"landscape.cell_size": 10.0}))  # 100 x the cells
    cells = SHAPE[0] * SHAPE[1] * 100
    check_memory(sc, available=memory_estimate_mb(cells) + 1.0)  # fits
    with pytest.raises(InputError) as err:
        check_memory(sc, available=250.0 + cells * 180 / 1e6 / 10)  # a tenth of the grid fits
    text = str(err.value)
    assert "landscape.cell_size" in text and "--allow-large" in text
    size = float(text.split("a cell size of ")[1].split(" m")[0])
    # a grid of a tenth of the cells fits: cells √10 times larger, plus a margin
    assert 10.0 * math.sqrt(10) <= size <= 1.2 * 10.0 * math.sqrt(10)


def test_memory_limit_applies_before_the_raster_is_read(write_scenario, monkeypatch):
    import preyscape.landscape.io as io

    def never(*a, **k):
        raise AssertionError("the raster was read")

    monkeypatch.setattr(io, "read_habitat", never)
    path = write_scenario({"landscape.cell_size": 0.01})  # 7.2e10 cells
    with pytest.raises(InputError, match="landscape.cell_size"):
        prepare(load_scenario(path))


def test_absurd_step_counts_are_refused_with_their_cause(write_scenario):
    from preyscape.limits import MAX_STEPS

    sc = load_scenario(write_scenario({"run.step": 1e-7}))
    with pytest.raises(InputError) as err:
        prepare(sc)
    assert "run.step" in str(err.value) and "5,000,000 steps" in str(err.value)
    assert round(0.5 / prepare(sc, allow_large=True).dt) > MAX_STEPS  # allowed when asked
    sc = load_scenario(write_scenario({"prey.growth": 1e6}))
    with pytest.raises(InputError, match="set by prey.growth"):
        prepare(sc)


def test_a_value_times_its_multiplier_beyond_float32_is_refused(write_scenario):
    path = write_scenario({"prey.capacity": 1e30, "landscape.classes.1.prey_capacity": 10.0})
    with pytest.raises(InputError, match="prey.capacity: this value times its habitat"):
        prepare(load_scenario(path))


def test_a_start_beyond_what_a_run_holds_is_refused(write_scenario, tmp_path):
    from conftest import utm_grid

    from preyscape.landscape.io import write_geotiff

    write_geotiff(tmp_path / "dense.tif", utm_grid(), np.full(SHAPE, 1e35, np.float32))
    path = write_scenario({"start.prey": "raster", "start.prey_raster": "dense.tif"})
    with pytest.raises(InputError, match="start: the start gives prey densities up to"):
        prepare(load_scenario(path))


def test_densities_that_overflow_end_in_a_message_and_leave_nothing(write_scenario,
                                                                   tmp_path):
    # prey-only Lotka-Volterra: N0 e^{rt} passes 3.4e38 (float32) at t = ln(3.4e18)/120
    path = write_scenario({"interaction.form": "lotka-volterra",
                           "interaction.handling_time": 0.0, "prey.growth": 120.0,
                           "start.prey": "uniform", "start.prey_density": 1e20,
                           "start.releases": [], "run.years": 0.5, "run.save_every": 0.5})
    out = tmp_path / "runs" / "lv"
    with pytest.raises(InputError) as err:
        simulate(path, out, maps=False, progress=False)
    assert "stopped being finite at t = 0.5 yr" in str(err.value)
    assert "lotka-volterra" in str(err.value)
    assert not out.exists() and list(out.parent.iterdir()) == []


# ---------------------------------------------------------------------------
# start from rasters, prey alone, zero growth (design requirements)
# ---------------------------------------------------------------------------
def _write_density(path, values, cell=DX):
    """A float32 density raster (animals/km²) over the test grid with cells of ``cell`` m."""
    from conftest import EPSG
    from rasterio.crs import CRS

    from preyscape.landscape.grid import Grid
    from preyscape.landscape.io import write_geotiff

    g = Grid(values.shape, X0, Y0, cell, cell, crs_wkt=CRS.from_epsg(EPSG).to_wkt())
    write_geotiff(path, g, values.astype(np.float32), nodata=np.nan, dtype="float32")
    return path


def test_predator_start_from_a_raster_band_plus_release(write_scenario, tmp_path):
    band = np.zeros(SHAPE)
    band[:, 20:23] = 4.0  # a north-south band of predators, 4 per km²
    _write_density(tmp_path / "band.tif", band)
    s = prepare(load_scenario(write_scenario({"start.predator": "raster",
                                              "start.predator_raster": "band.tif"})))
    mask = habitat_array() != 0
    X, Y = cell_centres()
    disc = (np.hypot(X - RELEASE_X, Y - RELEASE_Y) <= RELEASE_RADIUS) & mask
    expected = np.where(mask, band, 0.0) + np.where(disc, RELEASE_DENSITY, 0.0)
    np.testing.assert_allclose(s.P0, expected, rtol=0, atol=1e-12)
    assert s.P0[12, 20] == 0.0  # a no-data cell inside the band


def test_predator_raster_on_coarser_cells_is_averaged_by_area(write_scenario, tmp_path):
    # Reference computation: each 200 m source cell covers four 100 m cells exactly, so the
    # area-weighted average gives each of them the source value.
    coarse = np.arange(12 * 15, dtype=float).reshape(12, 15) / 10.0
    _write_density(tmp_path / "coarse.tif", coarse, cell=2 * DX)
    s = prepare(load_scenario(write_scenario({"start.predator": "raster",
                                              "start.predator_raster": "coarse.tif",
                                              "start.releases": DELETE})))
    expected = np.where(habitat_array() != 0, np.kron(coarse, np.ones((2, 2))), 0.0)
    np.testing.assert_allclose(s.P0, expected, rtol=1e-6)


def test_negative_predator_raster_names_the_key_and_cell(write_scenario, tmp_path):
    bad = np.zeros(SHAPE)
    bad[5, 6] = -1.0
    _write_density(tmp_path / "bad.tif", bad)
    with pytest.raises(InputError) as info:
        prepare(load_scenario(write_scenario({"start.predator": "raster",
                                              "start.predator_raster": "bad.tif"})))
    text = str(info.value)
    assert "start.predator_raster" in text and "row 5, col 6" in text and "predator" in text


def test_prey_alone_starts_without_predators_and_derives_no_predator_numbers(write_scenario):
    s = prepare(load_scenario(write_scenario({"predator": DELETE, "interaction": DELETE,
                                              "start.releases.0.species": "prey"})))
    assert not s.P0.any()
    assert s.interaction.attack_rate == 0.0 and s.interaction.logistic
    assert not s.fields.m.any() and not s.fields.predator_move.any()
    d = derived(s)
    assert d["species"] == ["prey"]
    for key in ("predator_front_speed", "predator_growth_at_capacity", "hopf_capacity",
                "lv_period_years", "critical_patch_predator", "period_years", "stable"):
        assert d[key] is None, key
    assert "predator" not in d["movement_per_step"] and "m" not in d["best_habitat"]
    # Fisher 1937; Kolmogorov, Petrovsky & Piskunov 1937: 2 sqrt(r D)
    assert d["prey_front_speed"] == pytest.approx(2 * math.sqrt(3.7 * 0.5))


def test_zero_prey_growth_has_no_front_and_a_finite_step(write_scenario):
    s = prepare(load_scenario(write_scenario({"prey.growth": 0.0})))
    d = derived(s)
    assert d["prey_front_speed"] == 0.0
    assert d["lv_period_years"] is None
    assert math.isinf(d["critical_patch_prey"]["square_side"])
    assert 0 < s.dt <= 0.25
    assert not s.fields.r.any()
