"""Starter scenarios (starter.py): written for any raster, they pass check and run."""

from __future__ import annotations

import itertools
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from conftest import habitat_array, write_habitat

from preyscape.errors import InputError
from preyscape.landscape.make import PATTERNS, make_landscape
from preyscape.model import theory
from preyscape.model.reactions import Interaction
from preyscape.scenario import Scenario, load_scenario
from preyscape.starter import PAIRS, write_starter

SMALL = {"rows": 24, "cols": 30, "cell_size": 100.0}


@pytest.fixture(scope="module")
def maps(tmp_path_factory) -> dict[tuple[str, str], Path]:
    """Every pattern as three classes and as suitability, on a small grid."""
    folder = tmp_path_factory.mktemp("starter")
    out = {}
    for pattern in PATTERNS:
        out[pattern, "classes"] = make_landscape(folder / f"{pattern}_c.tif", pattern, seed=4,
                                                 fractions=[0.3, 0.5, 0.2], **SMALL)["out"]
        out[pattern, "suitability"] = make_landscape(folder / f"{pattern}_s.tif", pattern,
                                                     seed=4, suitability=True, **SMALL)["out"]
    return out


@pytest.mark.parametrize("pattern, kind, pair",
                         list(itertools.product(PATTERNS, ("classes", "suitability"), PAIRS)))
def test_starter_for_every_generated_landscape_passes_check(maps, tmp_path, capsys, pattern,
                                                            kind, pair):
    from preyscape.cli import main

    out = tmp_path / "sub" / "starter.toml"
    out.parent.mkdir()
    r = write_starter(maps[pattern, kind], out, pair=pair)
    assert r["kind"] == kind
    sc = load_scenario(out)
    assert sc.landscape.values == kind
    assert main(["check", str(out)]) == 0
    assert "time step" in capsys.readouterr().out


# round robin: every pattern runs as classes and as suitability, every pair twice
RUNS = [(p, k, list(PAIRS)[i % 3]) for i, (p, k) in
        enumerate(itertools.product(PATTERNS, ("classes", "suitability")))]


@pytest.mark.parametrize("pattern, kind, pair", RUNS)
def test_starter_runs_as_written(maps, tmp_path, pattern, kind, pair):
    # design requirement: the starter runs unchanged, and the run is sane: finite,
    # non-negative densities, prey still present, predators spread from the release
    import xarray as xr

    from preyscape.runfolder import simulate

    out = tmp_path / "starter.toml"
    write_starter(maps[pattern, kind], out, pair=pair)
    folder = simulate(load_scenario(out), tmp_path / "run", progress=False, maps=False)
    with xr.open_dataset(folder / "results.nc") as ds:
        prey, pred = ds["prey"].values, ds["predator"].values
        assert ds.sizes["time"] == round(PAIRS[pair].years / PAIRS[pair].save_every) + 1
    assert np.all(np.isfinite(prey[np.isfinite(prey)])) and np.nanmin(prey) >= 0
    assert np.nanmin(pred) >= 0
    assert np.nansum(prey[-1]) > 0
    occupied0 = np.nansum(pred[0] > 0)
    assert np.nansum(pred[1] > 0) > occupied0  # predators moved beyond the release disc


def test_every_required_key_is_in_the_file_and_every_class_has_a_row(tmp_path):
    src = write_habitat(tmp_path / "h.tif")  # classes 1 and 2 with no-data 0
    r = write_starter(src, tmp_path / "s.toml", pair="hare-lynx")
    data = tomllib.loads((tmp_path / "s.toml").read_text())
    required = [k for k, f in Scenario.model_fields.items() if f.is_required()]
    assert set(required) <= set(data)
    codes = [c["code"] for c in data["landscape"]["classes"]]
    assert codes == [1, 2]
    # cell counts: reference numpy count of the raster written
    assert [c["cells"] for c in r["classes"]] == [int((habitat_array() == k).sum())
                                                  for k in (1, 2)]
    row = data["landscape"]["classes"][0]
    assert set(row) == {"code", "name", "prey_capacity", "prey_growth", "prey_movement",
                        "predator_mortality", "predator_movement"}
    assert data["landscape"]["habitat"] == "h.tif"  # relative to the scenario's folder


def test_class_names_and_capacities_come_from_the_raster_tags(tmp_path):
    make_landscape(tmp_path / "m.tif", "random", seed=1, fractions=[0.25, 0.75], **SMALL)
    write_starter(tmp_path / "m.tif", tmp_path / "m.toml")
    rows = tomllib.loads((tmp_path / "m.toml").read_text())["landscape"]["classes"]
    assert [(c["name"], c["prey_capacity"]) for c in rows] == [("habitat", 1.0),
                                                               ("matrix", 0.1)]
    assert "180 cells, 25.00 % of the map" in (tmp_path / "m.toml").read_text()


def test_release_lies_on_the_best_habitat_near_the_centre(tmp_path):
    from preyscape.landscape.io import read_habitat

    make_landscape(tmp_path / "m.tif", "clusters", seed=3, fractions=[0.2, 0.8], **SMALL)
    write_starter(tmp_path / "m.tif", tmp_path / "m.toml")
    rel = tomllib.loads((tmp_path / "m.toml").read_text())["start"]["releases"][0]
    grid, cl = read_habitat(tmp_path / "m.tif", "classes")
    assert cl[grid.rowcol(rel["x"], rel["y"])] == 1


# --- the parameter sets -------------------------------------------------------------
def _interaction(p) -> Interaction:
    return Interaction("holling-ii", p.attack_rate.value, p.handling_time.value,
                       p.efficiency.value)


@pytest.mark.parametrize("pair", PAIRS.values(), ids=list(PAIRS))
def test_every_value_has_a_range_and_a_source(pair):
    for name in ("growth", "capacity", "prey_diffusivity", "mortality", "predator_diffusivity",
                 "attack_rate", "handling_time", "efficiency"):
        v = getattr(pair, name)
        assert v.low <= v.value <= v.high, name
        assert "read" in v.note or "from memory" in v.note, name
    assert pair.sources
    # predators can grow on prey at capacity (else the release dies out at once)
    p = pair
    growth_at_k = (p.efficiency.value * p.attack_rate.value * p.capacity.value
                   / (1 + p.attack_rate.value * p.handling_time.value * p.capacity.value)
                   - p.mortality.value)
    assert growth_at_k > 0


def test_hare_lynx_cycle_period_matches_the_observed_cycle():
    # Hare and lynx numbers peak every 8-11 years (O'Donoghue et al. 1998, Ecology 79:1193,
    # abstract). The local Rosenzweig-MacArthur model with the hare-lynx values cycles
    # (K above the Hopf capacity, Rosenzweig 1971) with a period in that range.
    p = PAIRS["hare-lynx"]
    inter = _interaction(p)
    st = theory.local_stability(inter, p.growth.value, p.capacity.value, p.mortality.value)
    assert st["period"] == pytest.approx(9.5, abs=1.5)
    assert p.capacity.value > theory.hopf_capacity(inter, p.mortality.value)


def test_vole_weasel_values_are_the_demo_values():
    # one source of truth for the small-mammal pair: the bundled demo scenario
    demo = tomllib.loads((Path(__file__).parents[1] / "landscapes" /
                          "veldrun_moor.toml").read_text())
    p = PAIRS["vole-weasel"]
    assert p.growth.value == demo["prey"]["growth"]
    assert p.capacity.value == demo["prey"]["capacity"]
    assert p.prey_diffusivity.value == demo["prey"]["diffusivity"]
    assert p.mortality.value == demo["predator"]["mortality"]
    assert p.attack_rate.value == demo["interaction"]["attack_rate"]
    assert p.handling_time.value == demo["interaction"]["handling_time"]
    assert p.efficiency.value == demo["interaction"]["efficiency"]


def test_aphid_ladybird_is_fast():
    # the invertebrate pair's local period is a matter of weeks to months, not years
    p = PAIRS["aphid-ladybird"]
    st = theory.local_stability(_interaction(p), p.growth.value, p.capacity.value,
                                p.mortality.value)
    assert st["period"] < 0.5
    assert p.years <= 1.0
    assert math.isfinite(st["period"])


# --- refusals ---------------------------------------------------------------------------
def test_starter_refuses_existing_file_unknown_pair_and_degree_rasters(tmp_path):
    src = write_habitat(tmp_path / "h.tif")
    (tmp_path / "h.toml").write_text("# mine\n")
    with pytest.raises(InputError, match="--overwrite"):
        write_starter(src)
    assert (tmp_path / "h.toml").read_text() == "# mine\n"
    with pytest.raises(InputError, match="unknown pair"):
        write_starter(src, tmp_path / "x.toml", pair="owl-mouse")
    assert not (tmp_path / "x.toml").exists()
    write_starter(src, overwrite=True)
    assert (tmp_path / "h.toml").read_text().startswith("# Starter scenario")


# --- prey alone, lethal edges, release size -----------------------------------------------
@pytest.mark.parametrize("kind", ("classes", "suitability"))
def test_prey_only_starter_has_no_predator_and_releases_prey(maps, tmp_path, kind):
    # Design requirement: --prey-only writes a valid scenario of prey alone, with prey
    # released at capacity near the centre on empty land, and --edge sets the edge rule.
    out = tmp_path / "p.toml"
    write_starter(maps["fractal", kind], out, prey_only=True, edge="hostile")
    data = tomllib.loads(out.read_text())
    assert "predator" not in data and "interaction" not in data
    assert all("predator_mortality" not in c for c in data["landscape"].get("classes", []))
    assert data["landscape"]["edge"] == "hostile"
    rel = data["start"]["releases"][0]
    assert rel["species"] == "prey" and rel["density"] == PAIRS["vole-weasel"].capacity.value
    assert data["start"]["prey"] == "uniform" and data["start"]["prey_density"] == 0.0
    sc = load_scenario(out)
    assert sc.species == ("prey",)


def test_release_holds_about_five_animals_where_the_map_allows(tmp_path):
    # Design requirement: the release disc holds about five animals (here lynx at 0.5 per
    # km² need a radius of 1.8 km), capped at a quarter of the map's shorter side.
    from preyscape.assemble import prepare
    from preyscape.plausibility import start_totals

    make_landscape(tmp_path / "big.tif", "random", seed=1, fractions=[0.6, 0.4], rows=200,
                   cols=200, cell_size=50.0)
    write_starter(tmp_path / "big.tif", tmp_path / "big.toml", pair="hare-lynx")
    rel = tomllib.loads((tmp_path / "big.toml").read_text())["start"]["releases"][0]
    assert rel["radius"] == pytest.approx(1800.0)  # 1000 sqrt(5 / (0.5 pi)) = 1784 m
    animals = start_totals(prepare(load_scenario(tmp_path / "big.toml")))["releases"][0]
    assert animals["animals"] == pytest.approx(0.5 * math.pi * 1.8 ** 2, rel=0.02)  # 5.1
