"""Measures in a run: fences, corridors and refuges from the scenario, on and off in time.

These run the whole pipeline (scenario -> prepare -> stepper) on the tiny test
landscape of ``conftest.py``: 24 x 30 cells of 100 m, class 1 (open ground) in
the western 60 % of columns, class 2 (woodland) east of it.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import (
    BASE,
    DELETE,
    DX,
    RELEASE_COL,
    RELEASE_ROW,
    SHAPE,
    X0,
    Y0,
    apply_overrides,
    to_toml,
)

from preyscape.assemble import epoch_state, prepare
from preyscape.errors import InputError
from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.runfolder import simulate, simulate_variants
from preyscape.scenario import load_scenario
from preyscape.solve.run import integrate_epochs
from preyscape.solve.stepper import Stepper, StepStats

FENCE_COL = 15  # the fence runs along the face line between columns 14 and 15
CRS_MEMBER = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}}


def geojson(path: Path, geometry: dict) -> str:
    doc = {"type": "FeatureCollection", "crs": CRS_MEMBER,
           "features": [{"type": "Feature", "properties": {}, "geometry": geometry}]}
    path.write_text(json.dumps(doc))
    return path.name


def face_line(col: int) -> dict:
    """A north-south line along the face between columns col-1 and col, beyond both rims."""
    x = X0 + col * DX
    return {"type": "LineString", "coordinates": [[x, Y0 + 500.0], [x, Y0 - 3000.0]]}


def row_y(row: int) -> float:
    return Y0 - (row + 0.5) * DX


def box(r0: int, r1: int, c0: int, c1: int) -> dict:
    """A polygon covering the cells rows r0..r1-1, columns c0..c1-1 (edges on face lines)."""
    xa, xb = X0 + c0 * DX, X0 + c1 * DX
    ya, yb = Y0 - r0 * DX, Y0 - r1 * DX
    return {"type": "Polygon", "coordinates": [[[xa, ya], [xb, ya], [xb, yb], [xa, yb],
                                                [xa, ya]]]}


class Frames:
    """A sink keeping every snapshot."""

    def __init__(self):
        self.times, self.N, self.P = [], [], []

    def write(self, t, N, P):
        self.times.append(t)
        self.N.append(N.copy())
        self.P.append(P.copy())


def run_frames(sc) -> Frames:
    """Run a scenario through the epochs in memory (no run folder)."""
    setup = prepare(sc)
    N, P = setup.N0.copy(), setup.P0.copy()
    stats = StepStats()
    sink = Frames()
    integrate_epochs(lambda k: setup.epoch_stepper(k, stats), [e[:2] for e in setup.epochs],
                     N, P, sc.run.save_every, setup.dt, sink, progress=False)
    return sink


def fence_scenario(write_scenario, tmp_path, fence: dict, extra: dict | None = None):
    name = geojson(tmp_path / "fence.geojson", face_line(FENCE_COL))
    measure = {"name": "predator fence", "kind": "fence", "geometry": name,
               "permeability": {"prey": 1.0, "predator": 0.0}, **fence}
    over = {
        "measures": [measure],
        # prey start only west of the fence, so crossing is visible
        "start.prey": "uniform", "start.prey_density": 0.0,
        "start.releases": [
            {"x": X0 + (RELEASE_COL + 0.5) * DX, "y": row_y(RELEASE_ROW), "radius": 250.0,
             "density": 10.0},
            {"x": X0 + (RELEASE_COL + 0.5) * DX, "y": row_y(RELEASE_ROW), "radius": 450.0,
             "density": 500.0, "species": "prey"},
        ],
        "run.years": 1.0, "run.save_every": 0.25,
        **(extra or {}),
    }
    return load_scenario(write_scenario(over))


def test_complete_predator_fence_keeps_predators_on_their_side(write_scenario, tmp_path):
    # design requirement (issue 3): a predator-proof fence across the whole landscape keeps
    # released predators on their side for the whole run, exactly, while prey cross
    sc = fence_scenario(write_scenario, tmp_path, {})
    frames = run_frames(sc)
    for P in frames.P:
        assert np.all(P[:, FENCE_COL:] == 0.0)
    assert frames.P[-1][:, :FENCE_COL].sum() > 0
    assert frames.N[0][:, FENCE_COL:].sum() == 0.0
    assert frames.N[-1][:, FENCE_COL:].max() > 1.0  # prey crossed (animals/km²)


def test_fence_with_one_gap_lets_predators_through_only_there(write_scenario, tmp_path):
    # design requirement (issue 3): the earliest arrival beyond a fence is next to its gap
    gap_row = 4
    sc = fence_scenario(write_scenario, tmp_path, {"gaps": [
        {"x": X0 + FENCE_COL * DX, "y": row_y(gap_row), "width": 40.0}]})
    setup = prepare(sc)
    fx, fy = setup.layers[0].faces
    assert fx[:, FENCE_COL].sum() == SHAPE[0] - 1  # a 40 m gate opens exactly one face
    assert not fx[gap_row, FENCE_COL]
    frames = run_frames(sc)
    first = next(P for P in frames.P[1:] if P[:, FENCE_COL].max() > 0)
    assert int(np.argmax(first[:, FENCE_COL])) == gap_row
    # and the densities just east of the fence fall off away from the gap
    col = frames.P[1][:, FENCE_COL]
    assert col[gap_row] > col[gap_row + 6] > col[gap_row + 12]


def test_mass_is_conserved_exactly_with_fences_and_no_reaction():
    # design requirement (DESIGN.md §2): with closed edges and no reaction the movement
    # step conserves animals exactly, with fences (any permeability) on some faces
    rng = np.random.default_rng(4)
    shape = (20, 26)
    mask = np.ones(shape, bool)
    mask[3, 4] = mask[15, 20] = False
    fx = np.zeros((shape[0], shape[1] + 1), bool)
    fy = np.zeros((shape[0] + 1, shape[1]), bool)
    fx[2:15, 9] = True
    fy[12, 5:22] = True
    for kind, perm in (("fickian", 0.0), ("ecological", 0.3)):
        px = np.where(fx, perm, 1.0)
        py = np.where(fy, perm, 1.0)
        D = rng.uniform(0.2, 3.0, shape)
        mv = build_movement(D, mask, 50.0, 50.0, kind, perm_x=px, perm_y=py)
        st = Stepper(mask, mv, mv, 0.0, 0.0, 0.0, Interaction("lotka-volterra", 1.0, 0.0, 0.5),
                     dt=0.02)
        N = np.where(mask, rng.uniform(0, 100, shape), 0.0)
        P = np.zeros(shape)
        before = N.sum()
        st.advance(N, P, 0, 40)
        assert math.isclose(N.sum(), before, rel_tol=1e-12)
        assert np.all(N >= 0)


def test_measure_starting_later_changes_nothing_before(write_scenario, tmp_path):
    # design requirement (issue 3): a measure that starts in year t changes nothing before t
    base = fence_scenario(write_scenario, tmp_path, {"baseline": False})
    late = fence_scenario(write_scenario, tmp_path, {"start_year": 0.5})
    a, b = run_frames(base), run_frames(late)
    assert a.times == b.times == [0.0, 0.25, 0.5, 0.75, 1.0]
    for k in range(3):  # t = 0, 0.25, 0.5: bitwise the same
        assert np.array_equal(a.N[k], b.N[k]) and np.array_equal(a.P[k], b.P[k])
    assert not np.array_equal(a.P[-1], b.P[-1])
    # after the switch the fence acts: nothing new crosses, and what was east stays east
    assert b.P[-1][:, FENCE_COL:].sum() > 0  # predators that crossed before the switch
    assert a.P[-1][:, FENCE_COL:].sum() > b.P[-1][:, FENCE_COL:].sum()


def test_measure_ending_restores_the_operator(write_scenario, tmp_path):
    sc = fence_scenario(write_scenario, tmp_path, {"end_year": 0.5})
    setup = prepare(sc)
    assert [e[:2] for e in setup.epochs] == [(0.0, 0.5), (0.5, 1.0)]
    assert setup.epochs[0][2] == ("predator fence",) and setup.epochs[1][2] == ()
    frames = run_frames(sc)
    assert frames.P[2][:, FENCE_COL:].sum() == 0.0
    assert frames.P[-1][:, FENCE_COL:].sum() > 0.0


def test_full_refuge_makes_prey_inside_grow_logistically(write_scenario, tmp_path):
    # Verhulst 1838 (Corresp Math Phys 10:113): N(t) = K / (1 + (K/N0 - 1) e^(-r t)).
    # Prey do not move (D = 0), so each refuge cell is on its own; predators everywhere.
    name = geojson(tmp_path / "refuge.geojson", box(4, 10, 3, 9))
    over = {
        "measures": [{"name": "full refuge", "kind": "refuge", "geometry": name,
                      "protected_fraction": 1.0}],
        "prey.diffusivity": 0.0,
        "start.prey": "uniform", "start.prey_density": 100.0,
        "start.predator_density": 20.0, "start.releases": [],
        "run.years": 1.0, "run.save_every": 0.25,
    }
    sc = load_scenario(write_scenario(over))
    setup = prepare(sc)
    cells = setup.layers[0].cells
    assert cells.sum() == 36 and cells[4:10, 3:9].all()
    frames = run_frames(sc)
    r, K = BASE["prey"]["growth"], BASE["prey"]["capacity"]
    for t, N in zip(frames.times, frames.N, strict=True):
        exact = K / (1.0 + (K / 100.0 - 1.0) * math.exp(-r * t))
        assert np.allclose(N[cells], exact, rtol=1e-6)
    outside = frames.N[-1][4:10, 12]
    assert np.all(outside < 0.99 * K / (1.0 + (K / 100.0 - 1.0) * math.exp(-r)))


def test_refuge_closed_to_predators_keeps_them_out(write_scenario, tmp_path):
    # design requirement: a refuge closed to predators blocks the faces of its outline
    name = geojson(tmp_path / "refuge.geojson", box(2, 8, 2, 8))
    over = {"measures": [{"name": "exclosure", "kind": "refuge", "geometry": name,
                          "protected_fraction": 0.5, "closed_to_predators": True}],
            "run.years": 1.0, "run.save_every": 0.25}
    frames = run_frames(load_scenario(write_scenario(over)))
    assert all(np.all(P[2:8, 2:8] == 0.0) for P in frames.P)
    assert frames.P[-1][10:, :].max() > 0


def test_corridor_sets_habitat_values_on_its_cells(write_scenario, tmp_path):
    # the corridor replaces the class multipliers on the cells it covers
    line = {"type": "LineString", "coordinates": [[X0 + 20.5 * DX, Y0 - 0.5 * DX],
                                                  [X0 + 20.5 * DX, Y0 - 23.5 * DX]]}
    name = geojson(tmp_path / "strip.geojson", line)
    over = {"measures": [{"name": "strip", "kind": "corridor", "geometry": name,
                          "buffer": 60.0, "prey_capacity": 1.0, "predator_movement": 1.0}]}
    setup = prepare(load_scenario(write_scenario(over)))
    cells = setup.layers[0].cells
    assert cells[:, 20].sum() == SHAPE[0] - 1  # (12, 20) is a no-data cell
    assert not cells[:, 19].any() and not cells[:, 21].any()  # 60 m < 100 m to the next centre
    K = setup.fields.K
    cap = BASE["prey"]["capacity"]
    assert np.allclose(K[cells], cap)
    assert np.allclose(K[:, 22][setup.grid.mask[:, 22]], cap * 0.5)


def test_overlapping_fences_act_in_series(write_scenario, tmp_path):
    name = geojson(tmp_path / "fence.geojson", face_line(FENCE_COL))
    over = {"measures": [
        {"name": "a", "kind": "fence", "geometry": name,
         "permeability": {"prey": 0.5, "predator": 1.0}},
        {"name": "b", "kind": "fence", "geometry": name,
         "permeability": {"prey": 0.4, "predator": 1.0}}]}
    sc = load_scenario(write_scenario(over))
    setup = prepare(sc)
    plain = epoch_state(setup, ())[1]
    both = setup.prey_movement
    ratio = both.cx[:, FENCE_COL] / plain.cx[:, FENCE_COL]
    assert np.allclose(ratio[plain.cx[:, FENCE_COL] > 0], 0.2)
    assert np.array_equal(both.cx[:, :FENCE_COL], plain.cx[:, :FENCE_COL])


def test_measure_outside_the_landscape_is_refused(write_scenario, tmp_path):
    far = {"type": "LineString", "coordinates": [[X0 - 9000.0, Y0], [X0 - 8000.0, Y0 - 900.0]]}
    name = geojson(tmp_path / "far.geojson", far)
    path = write_scenario({"measures": [{"name": "far", "kind": "fence", "geometry": name,
                                         "permeability": {"predator": 0.0}}]})
    with pytest.raises(InputError) as info:
        prepare(load_scenario(path))
    assert "measures[0].geometry" in str(info.value)


def test_variants_run_into_their_own_folders(write_scenario, tmp_path):
    name = geojson(tmp_path / "fence.geojson", face_line(FENCE_COL))
    over = {
        "measures": [{"name": "fence", "kind": "fence", "geometry": name, "baseline": False,
                      "permeability": {"predator": 0.0}}],
        "variants": [{"name": "fenced", "add": ["fence"]},
                     {"name": "hungry", "set": {"predator.mortality": 1.5}}],
    }
    sc = load_scenario(write_scenario(over))
    out = tmp_path / "runs"
    folders = simulate_variants(sc, out, maps=False, progress=False)
    assert list(folders) == ["baseline", "fenced", "hungry"]
    info = {k: json.loads((f / "run.json").read_text()) for k, f in folders.items()}
    assert info["fenced"]["variant"] == "fenced"
    assert [m["name"] for m in info["fenced"]["measures"]] == ["fence"]
    assert info["baseline"]["measures"] == []
    assert (folders["fenced"] / "measures" / "fence.geojson").is_file()
    assert (folders["fenced"] / "operators" / "epoch_0.npz").is_file()
    # a second call refuses to overwrite, before running anything
    with pytest.raises(InputError):
        simulate_variants(sc, out, ["hungry"], maps=False, progress=False)
    # the override reached the model
    assert sc.for_variant("hungry").predator.mortality == 1.5


def test_single_run_folder_without_variants(scenario_path, tmp_path):
    folder = simulate(scenario_path, tmp_path / "one", maps=False, progress=False)
    info = json.loads((folder / "run.json").read_text())
    assert info["variant"] == "baseline" and info["measures"] == []
    assert info["epochs"] == [{"start_year": 0.0, "end_year": 0.5, "measures": []}]
    assert math.isclose(info["predictions"]["prey_front_speed"], 2 * math.sqrt(3.7 * 0.5))


def test_toml_round_trip_of_measures(tmp_path):
    # the conftest TOML writer handles inline tables as nested tables
    data = apply_overrides(BASE, {"measures": [{"name": "x", "kind": "fence", "geometry": "f",
                                                "permeability": {"predator": 0.0}}]})
    assert "[measures.permeability]" in to_toml(data)


def test_snapshot_maps_pick_a_log_scale_from_the_presence_threshold(write_scenario, tmp_path,
                                                                    monkeypatch):
    # design requirement (issue: a front invading at low density vanished in the bottom
    # colour). plots.choose_scale: log when the densities at or above the presence
    # threshold span more than two orders of magnitude (worked by hand below).
    from matplotlib import colormaps
    from PIL import Image

    from preyscape import plots, runfolder
    from preyscape.landscape.grid import Grid

    front = np.zeros(SHAPE)
    front[:, :10], front[:, 10:20] = 40.0, 0.04
    assert plots.choose_scale([front], 0.01) == "log"  # 40 / 0.04 = 1000 > 100
    assert plots.choose_scale([front], 0.1) == "linear"  # only 40 is present
    assert plots.choose_scale([front], None) == "linear"
    # the panels: on the log scale 0.04 sits at log(4)/log(4000) of the colour map
    # (matplotlib LogNorm, reference library) and the empty east in its lowest colour
    grid = Grid(SHAPE, X0, Y0, DX, DX)
    ramp = colormaps[plots.SPECIES_CMAP["predator"]]

    def share(path, value):
        rgb = np.asarray(Image.open(path).convert("RGB"), float)
        want = np.array(ramp(value)[:3]) * 255
        # PNGs are saved with 256 indexed colours: quantising moves a colour by a few levels
        return float((np.abs(rgb - want).max(axis=-1) <= 8).mean())

    low = math.log(4.0) / math.log(4000.0)
    log = plots.snapshot_panels(grid, np.array([0.0]), [front], "predator", "stoat",
                                tmp_path / "log.png", scale="auto", floor=0.01)
    lin = plots.snapshot_panels(grid, np.array([0.0]), [front], "predator", "stoat",
                                tmp_path / "lin.png")
    assert share(log, low) > 0.05 and share(lin, low) < 0.005
    assert share(log, 0.0) > 0.05
    # the run's maps ask for it with the scenario's presence threshold
    seen = []
    real = plots.snapshot_panels
    monkeypatch.setattr(plots, "snapshot_panels",
                        lambda *a, **kw: seen.append(kw) or real(*a, **kw))
    path = write_scenario({"analysis.presence": 0.002}, name="presence.toml")
    folder = simulate(path, tmp_path / "run", maps=False, progress=False)
    runfolder.draw_run_maps(folder)
    assert [kw["floor"] for kw in seen] == [0.002, 0.002]
    assert all(kw["scale"] == "auto" for kw in seen)


# ---------------------------------------------------------------------------
# prey alone, extinction thresholds, start and end totals
# ---------------------------------------------------------------------------
STRIP_TOML = """
[landscape]
habitat = "strip.tif"
values = "classes"
[[landscape.classes]]
code = 1
[prey]
growth = 1.0
capacity = 100.0
diffusivity = 1.0
[start]
prey = "uniform"
prey_density = 0.0
[[start.releases]]
x = 500150.0
y = 4999850.0
radius = 150.0
density = 100.0
species = "prey"
[run]
years = 20.0
save_every = 0.5
"""


def test_prey_alone_front_moves_at_the_fisher_kpp_speed(tmp_path):
    # Fisher 1937 (Ann Eugen 7:355); Kolmogorov, Petrovsky & Piskunov 1937: a front of prey
    # alone moves at 2 sqrt(rD) = 2 km/yr for r = 1/yr, D = 1 km²/yr; from a compact start
    # it approaches that speed from below, lagging by (3/2) sqrt(D/r) ln t (Bramson 1983,
    # Mem AMS 44(285); theory.mean_front_speed). Fitted over 10-20 years on a strip of
    # 3 x 500 cells of 100 m, the run of a scenario without [predator] gave 1.890 km/yr:
    # 0.945 of 2 sqrt(rD) and 0.996 of Bramson's finite-time mean (1.897 km/yr).
    from conftest import utm_grid

    from preyscape.landscape.io import write_geotiff
    from preyscape.model import theory

    grid = utm_grid((3, 500))
    write_geotiff(tmp_path / "strip.tif", grid, np.ones((3, 500), np.uint8), nodata=0,
                  dtype="uint8")
    (tmp_path / "fk.toml").write_text(STRIP_TOML)
    run = simulate(tmp_path / "fk.toml", tmp_path / "run", maps=False, progress=False)
    info = json.loads((run / "run.json").read_text())
    assert info["species_present"] == ["prey"] and info["species"]["predator"] is None
    assert info["predictions"]["prey_front_speed"] == pytest.approx(2.0)
    import xarray as xr

    with xr.open_dataset(run / "results.nc", decode_times=False) as ds:
        t = ds["time"].values
        u = ds["prey"].values[:, 1, :]
        assert not np.nanmax(ds["predator"].values) > 0  # no predator anywhere, ever
    x = grid.x - grid.x0  # m from the west edge
    sel = t >= 10.0
    pos = []
    for row in u[sel]:
        j = int(np.nonzero(row >= 50.0)[0].max())  # the front: where the prey reach K/2
        pos.append((x[j] + (row[j] - 50.0) / (row[j] - row[j + 1]) * DX) / 1000.0)
    speed = float(np.polyfit(t[sel], pos, 1)[0])
    bramson = theory.mean_front_speed(2.0, 1.0, 0, 0, times=t[sel]).mean
    assert 0.92 < speed / 2.0 < 1.0
    assert speed / bramson == pytest.approx(1.0, abs=0.015)
    assert info["totals_animals"]["prey"]["start"] == pytest.approx(9 * 100.0 * 0.01)


def test_extinction_threshold_recorded_and_nothing_left_below_it(write_scenario, tmp_path):
    # Design requirement: with predator.extinction_threshold_per_cell = 0.12 animals (0.01 km²
    # cells: 12 per km²) every saved predator density is 0 or at least 12 per km², and run.json
    # records the threshold in both units and the animals removed. (The 105 predators
    # released spread over the landscape at 8-22 per km² by the first save point.)
    path = write_scenario({"predator.extinction_threshold_per_cell": 0.12,
                           "start.releases.0.density": 500.0})
    run = simulate(path, tmp_path / "run", maps=False, progress=False)
    info = json.loads((run / "run.json").read_text())
    assert info["extinction"] == {"prey": None, "predator": {
        "per_km2": pytest.approx(12.0), "per_cell": pytest.approx(0.12),
        "given_as": "per cell"}}
    assert info["extinction_removed_animals"] > 0
    import xarray as xr

    with xr.open_dataset(run / "results.nc", decode_times=False) as ds:
        P = ds["predator"].values[1:]
    P = P[np.isfinite(P)]
    assert np.all((P == 0.0) | (P >= 12.0)) and np.count_nonzero(P) > 0
    assert np.count_nonzero(P == 0.0) > 0


def test_prey_alone_run_draws_no_predator_maps(write_scenario, tmp_path):
    path = write_scenario({"predator": DELETE, "interaction": DELETE,
                           "start.releases.0.species": "prey"})
    run = simulate(path, tmp_path / "run", progress=False)
    maps = sorted(p.name for p in (run / "maps").iterdir())
    assert "prey_mean.png" in maps and "totals.png" in maps
    assert not [m for m in maps if m.startswith("predator")]
