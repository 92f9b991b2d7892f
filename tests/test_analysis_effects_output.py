"""Effects of measures written from run folders: ``preyscape.analysis.effects_output``.

The runs use the tiny test landscape of ``conftest.py`` (24 x 30 cells of 100 m,
open ground west of column 18, woodland east of it): a baseline with a prey
refuge and a variant without it, run once for the module, plus a short run of
prey movement only for the conservation check of the transect flux.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import numpy as np
import pytest
import xarray as xr
from conftest import (
    BASE,
    DX,
    RELEASE_X,
    RELEASE_Y,
    SHAPE,
    X0,
    Y0,
    apply_overrides,
    to_toml,
    utm_grid,
    write_habitat,
)
from test_runfolder import box, geojson

from preyscape.analysis.effects import transect_faces, transect_flux
from preyscape.analysis.effects_output import write_effects
from preyscape.analysis.results import RunResults
from preyscape.analysis.settings import AnalysisSettings
from preyscape.errors import FileProblem, InputError
from preyscape.runfolder import simulate, simulate_variants
from preyscape.store import grid_of, load_operators

REFUGE_BOX = (3, 9, 2, 8)  # rows 3..8, cols 2..7: 36 cells, all with data
NEAR_BOX = (11, 14, 9, 12)  # 3 x 3 cells around the predator release (row 12, col 10)
FAR_BOX = (2, 7, 23, 28)  # woodland in the north-east, about 1.5 km from the release
LINE_X = X0 + 15.3 * DX  # inside column 15: a north-south line crosses face 15
NORTHWARDS = [[LINE_X, Y0 - SHAPE[0] * DX - 300.0], [LINE_X, Y0 + 300.0]]
SOUTHWARDS = NORTHWARDS[::-1]
YEARS, SAVE = 0.5, 0.125
PRESENCE = 1.0  # animals/km², the default of [analysis]


def read_csv(path: Path) -> list[dict[str, str]]:
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def folder_state(folder: Path) -> dict[str, bytes]:
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


# ---------------------------------------------------------------------------
# transect_faces: the sign convention
# ---------------------------------------------------------------------------
def test_line_drawn_northwards_counts_west_to_east_flow_as_positive():
    # design requirement (analysis/effects.py): the positive direction is from the left of
    # the line to its right, walking from its first point to its last
    grid = utm_grid()
    fx, fy, sx, sy = transect_faces(NORTHWARDS, grid)
    assert fx.shape == (SHAPE[0], SHAPE[1] + 1) and fy.shape == (SHAPE[0] + 1, SHAPE[1])
    assert fx[:, 15].all() and fx.sum() == SHAPE[0]  # face 15: between columns 14 and 15
    assert not fy.any()
    assert np.all(sx[fx] == 1.0)
    fx2, fy2, sx2, _ = transect_faces(SOUTHWARDS, grid)
    assert np.array_equal(fx2, fx) and not fy2.any()
    assert np.all(sx2[fx2] == -1.0)


def test_line_drawn_eastwards_counts_north_to_south_flow_as_positive():
    # design requirement: heading east, the left is north, so north-to-south flow is +1
    grid = utm_grid()
    y = Y0 - 7.3 * DX  # inside row 7: crosses the faces between rows 6 and 7
    east = [[X0 - 200.0, y], [X0 + SHAPE[1] * DX + 200.0, y]]
    fx, fy, _, sy = transect_faces(east, grid)
    assert not fx.any()
    assert fy[7, :].all() and fy.sum() == SHAPE[1]
    assert np.all(sy[fy] == 1.0)
    _, fy2, _, sy2 = transect_faces(east[::-1], grid)
    assert np.array_equal(fy2, fy) and np.all(sy2[fy2] == -1.0)


def test_face_crossed_twice_counts_once_with_the_first_sign():
    # documented behaviour: a face crossed by two segments counts once (the first)
    grid = utm_grid()
    x2 = X0 + 15.45 * DX  # back south, still between the centres of columns 14 and 15
    there_and_back = NORTHWARDS + [[x2, Y0 - SHAPE[0] * DX - 300.0]]
    fx, fy, sx, _ = transect_faces(there_and_back, grid)
    assert fx[:, 15].all() and fx.sum() == SHAPE[0] and not fy.any()
    assert np.all(sx[fx] == 1.0)


# ---------------------------------------------------------------------------
# transect_flux: conservation on a real run
# ---------------------------------------------------------------------------
def test_flux_across_a_diagonal_line_is_the_change_on_its_right(tmp_path):
    # design requirement (conservation, DESIGN.md §2): with movement only and closed
    # edges, the animals crossing a line that cuts the landscape in two are exactly what
    # the side on its right gains. With the explicit scheme and one forward-Euler substep
    # per snapshot this holds step by step: M(t+dt) - M(t) = dt * flux(t) (textbook
    # finite-volume telescoping sum), up to the float32 rounding of results.nc.
    write_habitat(tmp_path / "habitat.tif")
    dt = 0.0025  # years; dt * (largest movement rate, 200/yr) = 0.5: one substep
    over = {
        "prey.growth": 1e-9,  # reaction negligible: < 1e-11 relative change per step
        "predator.diffusivity": 0.2,  # keeps the explicit substep count at one
        "start.prey": "uniform", "start.prey_density": 0.0, "start.predator_density": 0.0,
        "start.releases": [{"x": RELEASE_X, "y": RELEASE_Y, "radius": 450.0,
                            "density": 1000.0, "species": "prey"}],
        "run.years": 20 * dt, "run.save_every": dt, "run.step": dt, "run.scheme": "explicit",
    }
    path = tmp_path / "movement.toml"
    path.write_text(to_toml(apply_overrides(BASE, over)))
    run = simulate(path, tmp_path / "run", progress=False, maps=False)
    ops = load_operators(run)
    assert len(ops) == 1 and tuple(ops[0]["span"]) == (0.0, 20 * dt)
    assert ops[0]["prey_cx"].shape == (SHAPE[0], SHAPE[1] + 1)
    # a line heading north-north-east across the whole landscape, through no cell centre:
    # it crosses faces between columns and between rows
    a = (X0 + 8.3 * DX, Y0 - SHAPE[0] * DX - 200.0)
    b = (X0 + 19.7 * DX, Y0 + 200.0)
    with xr.open_dataset(run / "results.nc", decode_times=False) as ds:
        grid = grid_of(ds)
        times, flow = transect_flux(ds, ops, [a, b], "prey")
        back_times, back = transect_flux(ds, ops, [b, a], "prey")
        u = np.nan_to_num(ds["prey"].values.astype(np.float64))
    fx, fy, _, _ = transect_faces([a, b], grid)
    assert fx.any() and fy.any()
    rows, cols = np.indices(SHAPE)
    xc, yc = X0 + (cols + 0.5) * DX, Y0 - (rows + 0.5) * DX
    cross = (b[0] - a[0]) * (yc - a[1]) - (b[1] - a[1]) * (xc - a[0])
    right = cross < 0  # right of the line, walking from a to b
    assert np.abs(cross).min() > 0
    gained = np.diff((u * right).sum(axis=(1, 2)) * grid.cell_area_km2)  # animals
    np.testing.assert_allclose(times, dt * np.arange(21), atol=1e-12)
    assert gained.max() > 1.0  # animals did cross
    np.testing.assert_allclose(gained, dt * flow[:-1], rtol=0, atol=1e-4 * gained.max())
    # the reversed line counts the same flow with the opposite sign
    np.testing.assert_array_equal(back_times, times)
    np.testing.assert_array_equal(back, -flow)


def test_flux_of_a_run_without_operators_is_refused(tmp_path):
    # runs made before operators were saved cannot give fluxes: a clear message, not a crash
    (tmp_path / "operators").mkdir()
    with pytest.raises(FileProblem, match="operators"):
        RunResults(tmp_path, {}).operators()


# ---------------------------------------------------------------------------
# write_effects on a baseline with a refuge and a variant without it
# ---------------------------------------------------------------------------
@pytest.fixture(scope="module")
def runs(tmp_path_factory) -> dict:
    folder = tmp_path_factory.mktemp("effects")
    write_habitat(folder / "habitat.tif")
    geojson(folder / "refuge.geojson", box(*REFUGE_BOX))
    geojson(folder / "near.geojson", box(*NEAR_BOX))
    geojson(folder / "far.geojson", box(*FAR_BOX))
    over = {
        "measures": [{"name": "fen refuge", "kind": "refuge", "geometry": "refuge.geojson",
                      "protected_fraction": 0.7}],
        "variants": [{"name": "no-refuge", "remove": ["fen refuge"]}],
        "analysis": {
            "transects": [{"name": "eastwards flow", "points": NORTHWARDS}],
            "targets": [{"name": "near release", "geometry": "near.geojson"},
                        {"name": "far woodland", "geometry": "far.geojson"}],
        },
        "start.releases.0.density": 100.0,  # predators per km²
        "run.years": YEARS, "run.save_every": SAVE,
    }
    path = folder / "scenario.toml"
    path.write_text(to_toml(apply_overrides(BASE, over)))
    made = simulate_variants(path, folder / "runs", progress=False, maps=False)
    base, without = made["baseline"], made["no-refuge"]
    with_without = write_effects(base, folder / "effects", without=without)
    lines = [{"name": "north", "points": NORTHWARDS}, {"name": "south", "points": SOUTHWARDS}]
    alone = write_effects(base, folder / "effects-alone",
                          settings=AnalysisSettings(transects=lines))
    assert with_without.without == without and alone.without is None
    assert {f.name for f in with_without.files} <= {p.name for p in with_without.folder.iterdir()}

    def record(out) -> dict:
        return {**json.loads((out.folder / "effects.json").read_text()),
                "folder": str(out.folder)}

    return {"folder": folder, "base": base, "without": without, "rec": record(with_without),
            "out": folder / "effects", "alone": record(alone),
            "out_alone": folder / "effects-alone"}


def direct_region_stats(results: Path, cells: np.ndarray, species: str) -> dict[str, float]:
    """Mean density, lowest mean density and persistence of a region, straight from numpy."""
    with xr.open_dataset(results, decode_times=False) as ds:
        u = ds[species].values.astype(np.float64)[1:]  # the snapshots after t = 0
        mask = ds["mask"].values.astype(bool)
    region = cells & mask
    per_snapshot = u[:, region].mean(axis=1)  # animals/km², equal cells
    return {"cells": int(region.sum()), "mean": float(per_snapshot.mean()),
            "lowest": float(per_snapshot.min()),
            "persistence": float((u[:, region] >= PRESENCE).mean())}


def box_cells(r0: int, r1: int, c0: int, c1: int) -> np.ndarray:
    c = np.zeros(SHAPE, bool)
    c[r0:r1, c0:c1] = True
    return c


def test_effects_folder_holds_tables_figures_and_record(runs):
    out = runs["out"]
    names = {p.name for p in out.iterdir()}
    assert {"effects.json", "refuges.csv", "targets.csv", "flux.csv",
            "refuge_fen-refuge_spillover.png", "refuge_fen-refuge_profile.csv",
            "flux_eastwards-flow.png"} <= names
    for png in (n for n in names if n.endswith(".png")):
        data = (out / png).read_bytes()
        assert data.startswith(b"\x89PNG\r\n\x1a\n") and len(data) > 1000, png
    rec = json.loads((out / "effects.json").read_text())
    assert [r["name"] for r in rec["refuges"]] == ["fen refuge"]
    assert [t["name"] for t in rec["targets"]] == ["near release", "far woodland"]
    assert [t["name"] for t in rec["transects"]] == ["eastwards flow"]
    assert runs["rec"]["folder"] == str(out)
    assert not list(out.parent.glob(".effects.partial-*"))


@pytest.mark.parametrize("species", ["prey", "predator"])
def test_refuge_table_equals_direct_numpy_statistics(runs, species):
    # design requirement: inside/outside statistics are time means over the snapshots
    # after t = 0 (analysis/compare.py definitions), recomputed here with plain numpy
    rows = [r for r in read_csv(runs["out"] / "refuges.csv") if r["species"] == species]
    assert [r["region"] for r in rows] == ["inside", "outside"]
    inside = box_cells(*REFUGE_BOX)
    for row, cells in zip(rows, (inside, ~inside), strict=True):
        mine = direct_region_stats(runs["base"] / "results.nc", cells, species)
        other = direct_region_stats(runs["without"] / "results.nc", cells, species)
        assert row["refuge"] == "fen refuge"
        assert int(row["cells"]) == mine["cells"]
        assert float(row["area_km2"]) == pytest.approx(mine["cells"] * 0.01)  # 100 m cells
        # CSV numbers carry 6 significant digits
        assert float(row["mean_density_per_km2"]) == pytest.approx(mine["mean"], rel=1e-5)
        assert float(row["lowest_mean_density_per_km2"]) == pytest.approx(mine["lowest"],
                                                                          rel=1e-5)
        assert float(row["persistence"]) == pytest.approx(mine["persistence"], rel=1e-5)
        assert float(row["without_mean_density_per_km2"]) == pytest.approx(other["mean"],
                                                                           rel=1e-5)
        assert float(row["without_lowest_mean_density_per_km2"]) == pytest.approx(
            other["lowest"], rel=1e-5)
        assert float(row["without_persistence"]) == pytest.approx(other["persistence"],
                                                                  rel=1e-5)
    assert mine["cells"] == SHAPE[0] * SHAPE[1] - 5 - 36  # outside: data cells less refuge


def test_refuge_shelters_prey_against_the_run_without_it(runs):
    # the refuge shields 70 % of the prey inside it from predation, so prey there are
    # denser than in the same run without it
    rec = runs["rec"]["refuges"][0]
    inside = rec["prey"]["inside_outside"]["inside"]
    inside_without = rec["prey"]["inside_outside_without"]["inside"]
    assert inside["mean_density"] > inside_without["mean_density"]
    assert rec["profile_is_difference"] is True
    assert math.isfinite(rec["decay_length_km"]) and rec["decay_length_km"] > 0


def test_without_columns_are_empty_without_the_other_run(runs):
    rows = read_csv(runs["out_alone"] / "refuges.csv")
    assert len(rows) == 4
    for r in rows:
        assert r["without_mean_density_per_km2"] == ""
        assert r["without_lowest_mean_density_per_km2"] == ""
        assert r["without_persistence"] == ""
        assert r["mean_density_per_km2"] != ""
    assert runs["alone"]["refuges"][0]["profile_is_difference"] is False


def test_target_far_from_the_release_is_colonised_later(runs):
    rows = {(r["target"], r["species"]): r for r in read_csv(runs["out"] / "targets.csv")}
    near = float(rows["near release", "predator"]["colonised_year"])
    far = float(rows["far woodland", "predator"]["colonised_year"])
    assert near == 0.0  # predators are released there
    assert far > near
    # the interpolated time lies between the last snapshot below half the patch occupied
    # and the first at or above it (definition in analysis/effects.colonisation_time)
    with xr.open_dataset(runs["base"] / "results.nc", decode_times=False) as ds:
        u = ds["predator"].values.astype(np.float64)
        times = ds["time"].values.astype(float)
    share = (u[:, box_cells(*FAR_BOX)] >= PRESENCE).mean(axis=1)
    k = int(np.argmax(share >= 0.5))
    assert share[k] >= 0.5 and k > 0
    assert times[k - 1] < far <= times[k]
    assert rows["far woodland", "prey"]["colonised_year"] == "0"  # prey start at capacity


def test_flux_sign_flips_when_the_transect_is_reversed(runs):
    # design requirement: reversing a line swaps its left and right
    rows = read_csv(runs["out_alone"] / "flux.csv")
    by = {}
    for r in rows:
        by.setdefault((r["transect"], r["species"]), []).append(r)
    for sp in ("prey", "predator"):
        north, south = by["north", sp], by["south", sp]
        assert len(north) == len(south) == round(YEARS / SAVE) + 1
        for a, b in zip(north, south, strict=True):
            assert a["time_years"] == b["time_years"]
            assert float(b["net_flow_animals_per_year"]) == -float(
                a["net_flow_animals_per_year"])
            assert float(b["cumulative_animals"]) == -float(a["cumulative_animals"])
    # predators spread east from their release west of the line: positive northwards
    pred = by["north", "predator"]
    assert float(pred[1]["net_flow_animals_per_year"]) > 0
    nets = {t["name"]: t["predator_net_animals"] for t in runs["alone"]["transects"]}
    assert nets["north"] > 0 and nets["south"] == -nets["north"]
    # the scenario's transect (the same line) gives the same numbers as the caller's
    scen = [r for r in read_csv(runs["out"] / "flux.csv") if r["species"] == "predator"]
    assert [r["net_flow_animals_per_year"] for r in scen] == [
        r["net_flow_animals_per_year"] for r in pred]


def test_existing_output_folder_is_refused_and_left_untouched(runs):
    # design requirement: never overwrite results unless asked
    out = runs["out"]
    before = folder_state(out)
    with pytest.raises(InputError) as err:
        write_effects(runs["base"], out, without=runs["without"])
    assert str(out) in str(err.value) and "--overwrite" in str(err.value)
    assert folder_state(out) == before
    assert not list(out.parent.glob(".effects.partial-*"))
