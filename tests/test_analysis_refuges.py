"""Effects of refuges: preyscape.analysis.refuges.

Hand-made fields for the bookkeeping; the real solver for the spill-over decay
length and the flux across a transect. Units: km, km², years, animals per km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr
from rasterio.crs import CRS

from preyscape.analysis.refuges import (
    decay_length,
    distance_from_edge,
    inside_outside,
    refuge_effect,
    spillover_profile,
)
from preyscape.landscape.grid import Grid
from preyscape.model.fields import build_fields, multipliers_from_classes
from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.stepper import Stepper
from preyscape.store import ResultWriter

H_M = 100.0  # cell size, metres (0.1 km)
AREA = (H_M / 1000.0) ** 2  # km² per cell
NO_REACTION = Interaction("lotka-volterra", attack_rate=0.0)


def hand_dataset(prey: np.ndarray, times, mask=None) -> xr.Dataset:
    """A results-like dataset (time, y, x) of 100 m cells without a CRS."""
    prey = np.asarray(prey, dtype=np.float32)
    _, ny, nx = prey.shape
    mask = np.ones((ny, nx), bool) if mask is None else mask
    x = 1000.0 + (np.arange(nx) + 0.5) * H_M
    y = 5000.0 - (np.arange(ny) + 0.5) * H_M
    return xr.Dataset(
        {"prey": (("time", "y", "x"), np.where(mask, prey, np.nan)),
         "mask": (("y", "x"), mask.astype(np.uint8))},
        coords={"time": np.asarray(times, float), "y": y, "x": x},
    )


# ---------------------------------------------------------------------------
# refuges: bookkeeping on a hand-made field
# ---------------------------------------------------------------------------


def test_inside_outside_on_a_hand_made_field():
    # design requirement: statistics over the snapshots after t = 0
    cells = np.zeros((4, 4), bool)
    cells[1:3, 1:3] = True  # 4 refuge cells, 12 outside
    f0 = np.full((4, 4), 99.0)  # the start: ignored
    f1 = np.where(cells, 10.0, 0.5)
    f2 = np.where(cells, 20.0, 3.0)
    f2[0, 0] = 0.0
    ds = hand_dataset([f0, f1, f2], [0.0, 1.0, 2.0])
    res = inside_outside(ds, cells, species="prey", presence=1.0)
    ins, out = res["inside"], res["outside"]
    assert ins["cells"] == 4 and out["cells"] == 12
    assert ins["area_km2"] == pytest.approx(4 * AREA)
    assert ins["mean_density"] == pytest.approx(15.0)
    assert ins["min_mean_density"] == pytest.approx(10.0)
    assert ins["persistence"] == pytest.approx(1.0)
    mean2 = (11 * 3.0 + 0.0) / 12  # outside mean density at t = 2
    assert out["mean_density"] == pytest.approx((0.5 + mean2) / 2)
    assert out["min_mean_density"] == pytest.approx(0.5)
    assert out["persistence"] == pytest.approx((0 + 11 / 12) / 2)  # only t = 2, 11 cells


def test_distance_from_edge_is_half_a_cell_beside_the_refuge():
    # design requirement (definition): side neighbours at dx/2 or dy/2, corners at
    # hypot(dx/2, dy/2), further cells one cell more per step
    cells = np.zeros((5, 7), bool)
    cells[2, 3] = True
    d = distance_from_edge(cells, dx_m=100.0, dy_m=40.0)
    assert d[2, 3] == 0.0
    assert d[2, 4] == pytest.approx(50.0) and d[2, 2] == pytest.approx(50.0)
    assert d[1, 3] == pytest.approx(20.0) and d[3, 3] == pytest.approx(20.0)
    assert d[1, 4] == pytest.approx(math.hypot(50.0, 20.0))
    assert d[2, 6] == pytest.approx(250.0)
    assert d[0, 3] == pytest.approx(60.0)


def test_decay_length_recovers_a_known_exponential():
    # textbook: log of A exp(-d/l) + b is linear in d once b is removed
    d = np.linspace(0.05, 3.0, 30)
    y = 40.0 * np.exp(-d / 0.7) + 2.5
    ell, info = decay_length(d, y, baseline=2.5)
    assert ell == pytest.approx(0.7, rel=1e-9) and info["method"] == "log-linear"
    ell, info = decay_length(d, y)  # baseline fitted as well
    assert ell == pytest.approx(0.7, rel=1e-6)
    assert info["baseline"] == pytest.approx(2.5, rel=1e-6)
    assert info["amplitude"] == pytest.approx(40.0, rel=1e-6)
    flat, info = decay_length(d, np.full(d.shape, 3.0), baseline=0.0)
    assert math.isnan(flat) and info["error"]


# ---------------------------------------------------------------------------
# refuges: spill-over against the reaction-diffusion solution
# ---------------------------------------------------------------------------
D_PREY = 0.5  # km²/yr
R_PREY = 2.0  # 1/yr: growth in the source band, loss rate outside
K_PREY = 100.0  # animals/km²
SOURCE_COLS = 20


def steady_strip(shape=(3, 80)) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Steady prey density of a source band (west) beside a sink, by the real solver."""
    mask = np.ones(shape, bool)
    codes = np.full(shape, 2)
    codes[:, :SOURCE_COLS] = 1
    # class 2 has no capacity: with logistic growth it is a sink of rate -r (model/fields.py)
    mult = multipliers_from_classes(codes, mask, {1: {}, 2: {"prey_capacity": 0.0}})
    f = build_fields(mult, mask, R_PREY, K_PREY, 1.0, D_PREY, D_PREY, logistic=True)
    mv = build_movement(f.prey_move, mask, H_M, H_M)
    st = Stepper(mask, mv, mv, f.r, f.inv_K, f.m, Interaction("logistic-prey", 0.0), dt=0.05)
    N = np.where(codes == 1, K_PREY, 0.0)
    P = np.zeros(shape)
    st.advance(N, P, 0, 600)  # 30 years: far beyond the slowest relaxation time
    before = N.copy()
    st.advance(N, P, 600, 20)
    assert np.abs(N - before).max() < 1e-4 * K_PREY  # steady
    return N, codes == 1, mask


def test_spillover_decays_over_sqrt_d_over_r():
    # textbook: in a sink of loss rate r the steady density obeys D u'' = r u, so it decays
    # as exp(-d / sqrt(D/r)) away from the source (Skellam 1951, Biometrika 38:196;
    # Murray 2002, Mathematical Biology I)
    N, cells, mask = steady_strip()
    ell = math.sqrt(D_PREY / R_PREY)  # 0.5 km
    d, u = spillover_profile(N, cells, mask, H_M, H_M, max_m=4 * ell * 1000)
    np.testing.assert_allclose(d[:3], [0.05, 0.15, 0.25])  # half a cell, then one cell more
    assert np.all(np.diff(u) < 0)
    fitted, _ = decay_length(d, u, baseline=0.0)
    assert fitted == pytest.approx(ell, rel=0.05)
    free, info = decay_length(d, u)
    assert free == pytest.approx(ell, rel=0.05)
    assert abs(info["baseline"]) < 1e-3 * K_PREY


def test_refuge_effect_on_written_runs(tmp_path):
    # design requirement: with a run without the refuge, the profile is that of the
    # difference; textbook decay length sqrt(D/r) as above
    N, cells, mask = steady_strip()
    grid = Grid(N.shape, 400_000.0, 6_000_000.0, H_M, H_M, CRS.from_epsg(32633).to_wkt())
    datasets = []
    for name, state in (("with", N), ("without", np.zeros_like(N))):
        w = ResultWriter(tmp_path / f"{name}.nc", grid, {}, {})
        w.write(0.0, state * 0.0, state * 0.0)
        w.write(1.0, state, state * 0.0)
        w.write(2.0, state, state * 0.0)
        w.close()
        with xr.open_dataset(tmp_path / f"{name}.nc", decode_times=False) as ds:
            datasets.append(ds.load())
    res = refuge_effect(datasets[0], cells, ds_without=datasets[1], max_m=2000.0)
    assert res.difference is True
    assert res.fit["baseline"] == 0.0
    assert res.decay_length_km == pytest.approx(math.sqrt(D_PREY / R_PREY), rel=0.05)
    ins = res.inside_outside["inside"]
    assert ins["mean_density"] == pytest.approx(N[cells].mean(), rel=1e-6)
    assert res.inside_outside_without["inside"]["mean_density"] == 0.0
    alone = refuge_effect(datasets[0], cells, max_m=2000.0)
    assert alone.decay_length_km == pytest.approx(math.sqrt(D_PREY / R_PREY), rel=0.05)
    from preyscape.analysis.effects_output import profile_plot

    png = profile_plot(res.distance_km, res.density, res.fit, tmp_path / "p.png")
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


# ---------------------------------------------------------------------------
# corridors: colonisation
# ---------------------------------------------------------------------------
