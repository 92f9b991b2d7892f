"""Tests for preyscape.scenario: loading, validation and error messages."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from conftest import BASE, CAPACITY, DELETE, apply_overrides, habitat_array, write_habitat

from preyscape.assemble import prepare
from preyscape.errors import InputError
from preyscape.scenario import Scenario, load_scenario, parse_scenario


def load_error(path: Path) -> str:
    """The text of the InputError that loading ``path`` raises."""
    with pytest.raises(InputError) as info:
        load_scenario(path)
    return str(info.value)


def test_valid_file_loads(scenario_path):
    sc = load_scenario(scenario_path)
    assert isinstance(sc, Scenario)
    assert sc.path == scenario_path
    # values as written in conftest.BASE
    assert sc.prey.growth == 3.7
    assert sc.prey.capacity == CAPACITY
    assert sc.interaction.form == "holling-ii"
    assert [c.code for c in sc.landscape.classes] == [1, 2]
    assert sc.landscape.classes[1].prey_capacity == 0.5
    assert sc.landscape.classes[0].prey_capacity == 1.0  # documented default multiplier
    assert len(sc.start.releases) == 1 and sc.start.releases[0].species == "predator"
    assert sc.run.years == 0.5 and sc.run.save_every == 0.25 and sc.run.step == "auto"


def test_parse_scenario_accepts_a_dict(tmp_path):
    write_habitat(tmp_path / "habitat.tif")
    sc = parse_scenario(apply_overrides(BASE, {}), tmp_path / "in_memory.toml")
    assert sc.resolve(sc.landscape.habitat) == tmp_path / "habitat.tif"


def test_misspelt_key_names_file_key_path_and_suggestion(write_scenario):
    path = write_scenario({"prey.growth": DELETE, "prey.grwoth": 3.7}, name="typo.toml")
    text = load_error(path)
    assert str(path) in text
    assert "prey.grwoth" in text
    assert "did you mean 'growth'" in text


def test_misspelt_key_in_class_table_row(write_scenario):
    path = write_scenario({"landscape.classes.1": {"code": 2, "prey_capacty": 0.5}})
    text = load_error(path)
    assert "landscape.classes[1].prey_capacty" in text
    assert "did you mean 'prey_capacity'" in text


def test_negative_rate_refused(write_scenario):
    path = write_scenario({"prey.growth": -1.0})
    text = load_error(path)
    assert str(path) in text
    assert "prey.growth" in text
    assert "-1" in text  # the offending value is quoted back


def test_negative_class_multiplier_refused(write_scenario):
    path = write_scenario({"landscape.classes.1": {"code": 2, "prey_capacity": -0.5}})
    assert "landscape.classes[1].prey_capacity" in load_error(path)


@pytest.mark.parametrize("value", ["half a year", "long"])
def test_string_for_years_refused(write_scenario, value):
    path = write_scenario({"run.years": value})
    text = load_error(path)
    assert "run.years" in text
    assert value in text


def test_missing_required_section_refused(write_scenario):
    path = write_scenario({"predator": DELETE})
    text = load_error(path)
    assert str(path) in text
    assert "predator" in text
    assert "missing" in text


def test_missing_required_key_refused(write_scenario):
    path = write_scenario({"interaction.attack_rate": DELETE})
    assert "interaction.attack_rate: missing" in load_error(path)


def test_missing_raster_refused(write_scenario):
    path = write_scenario({"landscape.habitat": "no_such_habitat.tif"})
    text = load_error(path)
    assert str(path) in text
    assert "landscape.habitat" in text
    assert "no_such_habitat.tif" in text


def test_missing_scenario_file_refused(tmp_path):
    from preyscape.errors import FileProblem

    path = tmp_path / "absent.toml"
    with pytest.raises(FileProblem) as info:  # a file problem: also an OSError
        load_scenario(path)
    assert str(path) in str(info.value) and isinstance(info.value, OSError)


def test_invalid_toml_refused_with_line(write_scenario):
    text = "title = 'x'\n\n[run]\nyears = = 1\n"
    path = write_scenario(text=text, name="broken.toml")
    msg = load_error(path)
    assert str(path) in msg
    assert "TOML" in msg
    assert "line 4" in msg  # the bad line, counted from 1 as tomllib reports it


def test_relative_paths_resolve_against_scenario_folder(scenario_path, tmp_path, monkeypatch):
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    assert not Path("habitat.tif").exists()  # a cwd-relative lookup would fail
    sc = load_scenario(scenario_path)
    assert sc.resolve(sc.landscape.habitat) == tmp_path / "habitat.tif"
    # also when the scenario itself is given by a relative path
    sc2 = load_scenario(Path("..") / scenario_path.name)
    assert sc2.resolve(sc2.landscape.habitat).resolve() == (tmp_path / "habitat.tif").resolve()
    setup = prepare(sc2)  # the raster really is read from the scenario folder
    assert setup.grid.shape == habitat_array().shape


def test_years_not_multiple_of_save_every_refused(write_scenario):
    path = write_scenario({"run.years": 0.5, "run.save_every": 0.3})
    text = load_error(path)
    assert "run" in text
    assert "whole number" in text


def test_save_every_longer_than_years_refused(write_scenario):
    path = write_scenario({"run.years": 0.5, "run.save_every": 1.0})
    assert "exceeds years" in load_error(path)


def test_diffusivity_with_ecological_movement_refused(write_scenario):
    path = write_scenario({"prey.movement": "ecological", "prey.motility": 0.5})
    text = load_error(path)  # prey.diffusivity is still given by the base scenario
    assert "prey" in text
    assert "'diffusivity' does not apply" in text
    assert "ecological" in text


def test_ecological_movement_without_motility_refused(write_scenario):
    path = write_scenario({"predator.movement": "ecological", "predator.diffusivity": DELETE})
    assert "needs 'motility'" in load_error(path)


def test_digest_changes_with_raster_bytes(scenario_path, tmp_path):
    d1 = load_scenario(scenario_path).digest()
    assert load_scenario(scenario_path).digest() == d1  # deterministic
    changed = habitat_array()
    changed[5, 5] = 2 if changed[5, 5] == 1 else 1
    write_habitat(tmp_path / "habitat.tif", changed)
    d2 = load_scenario(scenario_path).digest()
    assert d2 != d1
    assert len(d2) == 64 and all(c in "0123456789abcdef" for c in d2)  # SHA-256 hex


def test_digest_changes_with_settings(write_scenario):
    d1 = load_scenario(write_scenario(name="a.toml")).digest()
    d2 = load_scenario(write_scenario({"prey.growth": 3.8}, name="b.toml")).digest()
    assert d1 != d2


def test_several_errors_reported_together(write_scenario):
    path = write_scenario({"prey.growth": -1.0, "predator.mortality": -2.0})
    text = load_error(path)
    assert "prey.growth" in text and "predator.mortality" in text


def test_habitat_array_has_nodata_cells():
    # guard for the fixtures the other tests rely on
    assert (habitat_array() == 0).sum() == 5
    assert set(np.unique(habitat_array())) == {0, 1, 2}


@pytest.mark.parametrize("value", ["0.5", True])
def test_quoted_number_or_boolean_for_years_refused(write_scenario, value):
    path = write_scenario({"run.years": value})
    assert "run.years" in load_error(path)


def test_hyphenated_misspelt_key_keeps_key_path(write_scenario):
    path = write_scenario({"run.save_every": DELETE, "run.save-every": 0.25})
    text = load_error(path)
    assert "run.save-every" in text
    assert "did you mean 'save_every'" in text


# ---------------------------------------------------------------------------
# measures, variants and analysis settings
# ---------------------------------------------------------------------------
FENCE = {"name": "north fence", "kind": "fence", "geometry": "habitat.tif",
         "permeability": {"prey": 1.0, "predator": 0.0}}


def test_fence_needs_permeability(write_scenario):
    bad = {k: v for k, v in FENCE.items() if k != "permeability"}
    text = load_error(write_scenario({"measures": [bad]}))
    assert "measures[0]" in text and "permeability" in text


def test_key_of_another_kind_is_refused(write_scenario):
    text = load_error(write_scenario({"measures": [{**FENCE, "protected_fraction": 0.5}]}))
    assert "'protected_fraction' does not apply to kind = 'fence'" in text


def test_measure_needs_exactly_one_source(write_scenario):
    text = load_error(write_scenario({"measures": [{**FENCE, "raster": "habitat.tif"}]}))
    assert "exactly one of 'geometry'" in text


def test_measure_file_must_exist(write_scenario):
    text = load_error(write_scenario({"measures": [{**FENCE, "geometry": "nowhere.geojson"}]}))
    assert "measures[0].geometry" in text and "not found" in text


def test_switch_times_fall_on_save_points(write_scenario):
    text = load_error(write_scenario({"measures": [{**FENCE, "start_year": 0.1}]}))
    assert "measures[0].start_year" in text and "save_every" in text
    text = load_error(write_scenario({"measures": [{**FENCE, "start_year": 0.25,
                                                    "end_year": 0.25}]}))
    assert "end_year" in text


def test_variant_names_unknown_measure_with_suggestion(write_scenario):
    path = write_scenario({"measures": [{**FENCE, "baseline": False}],
                           "variants": [{"name": "v", "add": ["north fance"]}]})
    text = load_error(path)
    assert "variants[0].add" in text and "did you mean 'north fence'" in text


def test_variant_may_not_change_the_grid(write_scenario):
    path = write_scenario({"variants": [{"name": "v", "set": {"landscape.cell_size": 200.0}}]})
    assert "cannot change in a variant" in load_error(path)


def test_variant_override_is_validated_with_its_key(write_scenario):
    sc = load_scenario(write_scenario({"variants": [{"name": "v",
                                                     "set": {"predator.mortality": -1.0}}]}))
    with pytest.raises(InputError) as info:
        sc.for_variant("v")
    text = str(info.value)
    assert "variant 'v'" in text and "predator.mortality" in text
    sc = load_scenario(write_scenario({"variants": [{"name": "w", "set": {"predator.mortalty":
                                                                           1.0}}]}))
    with pytest.raises(InputError) as info:
        sc.for_variant("w")
    assert "mortalty" in str(info.value)


def test_variant_measures_and_unknown_variant(write_scenario):
    path = write_scenario({"measures": [FENCE, {**FENCE, "name": "b", "baseline": False}],
                           "variants": [{"name": "swap", "add": ["b"],
                                         "remove": ["north fence"]}]})
    sc = load_scenario(path)
    assert [m.name for m in sc.active_measures()] == ["north fence"]
    assert [m.name for m in sc.for_variant("swap").active_measures()] == ["b"]
    assert sc.variant_names() == ["baseline", "swap"]
    with pytest.raises(InputError) as info:
        sc.for_variant("swop")
    assert "did you mean 'swap'" in str(info.value)


def test_baseline_is_a_reserved_variant_name(write_scenario):
    text = load_error(write_scenario({"variants": [{"name": "baseline"}]}))
    assert "'baseline' is the name of the run without variants" in text


def test_analysis_settings(write_scenario):
    sc = load_scenario(write_scenario({"analysis": {
        "hotspot_distance": 300.0,
        "transects": [{"name": "t", "points": [[1.0, 2.0], [3.0, 4.0]]}]}}))
    # unset keys stay unset here; their defaults live in AnalysisSettings (one place)
    assert sc.analysis.hotspot_distance == 300.0 and sc.analysis.presence is None
    from preyscape.analysis.settings import AnalysisSettings

    assert AnalysisSettings.build(sc.analysis.model_dump(mode="json")).presence == 1.0
    text = load_error(write_scenario({"analysis": {"transects": [{"name": "t",
                                                                  "points": [[1.0, 2.0]]}]}}))
    assert "analysis.transects[0].points" in text


REFUGE = {"name": "fen", "kind": "refuge", "raster": "habitat.tif", "protected_fraction": 0.5}


@pytest.mark.parametrize("key", ["baseline", "closed_to_predators"])
@pytest.mark.parametrize("value", ["yes", "true", 1, 0])
def test_booleans_are_strict(write_scenario, key, value):
    # design requirement: like numbers, booleans are not guessed from text or integers
    path = write_scenario({"measures": [{**REFUGE, key: value}]})
    text = load_error(path)
    assert f"measures[0].{key}" in text and "boolean" in text


def test_real_booleans_are_accepted(write_scenario):
    sc = load_scenario(write_scenario({"measures": [{**REFUGE, "baseline": False,
                                                     "closed_to_predators": True}]}))
    assert sc.measures[0].baseline is False and sc.measures[0].closed_to_predators is True


@pytest.mark.parametrize("key,value", [("prey.capacity", 1e300), ("prey.capacity", 1e31),
                                       ("prey.growth", 1e-40), ("predator.diffusivity", 1e35),
                                       ("landscape.classes.1.prey_capacity", 1e-38)])
def test_values_beyond_32_bit_fields_are_refused_with_the_range(write_scenario, key, value):
    # design requirement: per-cell fields are float32 (IEEE 754 single: up to 3.4e38,
    # normal down to 1.2e-38); values that would overflow or vanish are refused
    path = write_scenario({key: value})
    text = load_error(path)
    assert "between 1e-30 and 1e+30" in text
    where = key.replace(".1.", "[1].")
    assert where in text


def test_zero_and_the_ends_of_the_range_are_accepted(write_scenario):
    sc = load_scenario(write_scenario({"landscape.classes.1.prey_capacity": 0.0,
                                       "prey.capacity": 1e30, "prey.growth": 1e-30}))
    assert sc.prey.capacity == 1e30 and sc.landscape.classes[1].prey_capacity == 0.0


def test_negative_seed_is_refused(write_scenario):
    assert "run.seed" in load_error(write_scenario({"run.seed": -3}))


def test_a_folder_for_a_file_is_named_as_such(write_scenario, tmp_path):
    (tmp_path / "maps").mkdir()
    text = load_error(write_scenario({"landscape.habitat": "maps"}))
    assert "landscape.habitat" in text and "'maps' is a folder" in text


def test_class_colour_is_a_css_colour(write_scenario):
    # design requirement (issue 16): an optional colour per habitat class, any CSS colour
    # name or hex code; anything else is refused with what would be valid
    path = write_scenario({"landscape.classes.0.colour": "ForestGreen",
                           "landscape.classes.1.colour": "#a1b2c3"})
    sc = load_scenario(path)
    assert [c.colour for c in sc.landscape.classes] == ["forestgreen", "#a1b2c3"]
    path = write_scenario({"landscape.classes.1.colour": "forrestgreen"}, name="bad.toml")
    text = load_error(path)
    assert "landscape.classes[1].colour" in text and "did you mean 'forestgreen'" in text
    assert "hex code" in text
    for bad in ("#12", "#ggg", "C0", "tab:blue"):  # not CSS (matplotlib-only forms too)
        path = write_scenario({"landscape.classes.1.colour": bad}, name="bad2.toml")
        assert "is not a colour" in load_error(path), bad


# ---------------------------------------------------------------------------
# prey alone, predator rasters, zero growth, extinction thresholds (design requirements)
# ---------------------------------------------------------------------------
PREY_ALONE = {"predator": DELETE, "interaction": DELETE,
              "start.releases.0.species": "prey"}


def test_prey_alone_needs_no_predator_or_interaction(write_scenario):
    sc = load_scenario(write_scenario(PREY_ALONE))
    assert sc.predator is None and sc.interaction is None
    assert not sc.has_predator and sc.species == ("prey",)
    assert sc.form == "logistic-prey"  # prey grow logistically without [interaction]


def test_prey_alone_may_keep_its_interaction_form(write_scenario):
    sc = load_scenario(write_scenario({"predator": DELETE, "start.releases.0.species": "prey",
                                       "interaction.form": "lotka-volterra",
                                       "interaction.handling_time": DELETE}))
    assert sc.form == "lotka-volterra" and sc.species == ("prey",)


@pytest.mark.parametrize("overrides,key", [
    ({"start.releases.0.species": DELETE}, "start.releases[0]"),
    ({"start.predator_density": 2.0}, "start.predator_density"),
    ({"start.predator": "raster", "start.predator_raster": "habitat.tif"}, "start.predator"),
    ({"analysis.predator_threshold": 1.0}, "analysis.predator_threshold"),
    ({"analysis.goal": "fewer-predators"}, "analysis.goal"),
])
def test_prey_alone_refuses_anything_about_predators(write_scenario, overrides, key):
    text = load_error(write_scenario({**PREY_ALONE, **overrides}))
    assert key in text and "no [predator]" in text


def test_predator_without_interaction_refused(write_scenario):
    text = load_error(write_scenario({"interaction": DELETE}))
    assert "interaction" in text and "[predator]" in text


def test_prey_alone_without_capacity_names_logistic_growth(write_scenario):
    text = load_error(write_scenario({**PREY_ALONE, "prey.capacity": DELETE,
                                      "start.prey": "uniform", "start.prey_density": 1.0}))
    assert "prey.capacity" in text and "without [interaction]" in text


def test_predator_start_from_a_raster_keys(write_scenario):
    sc = load_scenario(write_scenario({"start.predator": "raster",
                                       "start.predator_raster": "habitat.tif"}))
    assert sc.start.predator_raster == "habitat.tif"
    assert ("start.predator_raster", "habitat.tif") in sc.input_files()
    assert "habitat.tif" in sc.files()
    text = load_error(write_scenario({"start.predator": "raster"}, name="a.toml"))
    assert "start" in text and "predator_raster" in text
    text = load_error(write_scenario({"start.predator_raster": "habitat.tif"}, name="b.toml"))
    assert "predator_raster needs predator = 'raster'" in text
    text = load_error(write_scenario({"start.predator": "raster", "start.predator_density": 1.0,
                                      "start.predator_raster": "habitat.tif"}, name="c.toml"))
    assert "predator_density applies to predator = 'uniform'" in text
    text = load_error(write_scenario({"start.predator": "raster",
                                      "start.predator_raster": "missing.tif"}, name="d.toml"))
    assert "start.predator_raster" in text and "not found" in text


def test_zero_prey_growth_allowed_negative_refused(write_scenario):
    assert load_scenario(write_scenario({"prey.growth": 0.0})).prey.growth == 0.0
    assert "prey.growth" in load_error(write_scenario({"prey.growth": -0.1}, name="n.toml"))
    # predators that never die have no equilibrium: mortality stays positive
    assert "predator.mortality" in load_error(
        write_scenario({"predator.mortality": 0.0}, name="m.toml"))


def test_corridor_may_set_growth_on_a_suitability_landscape(write_scenario, tmp_path):
    from conftest import utm_grid

    from preyscape.landscape.io import write_geotiff

    write_geotiff(tmp_path / "suit.tif", utm_grid(), np.full((24, 30), 0.6, np.float32),
                  nodata=np.nan, dtype="float32")
    (tmp_path / "line.geojson").write_text(
        '{"type": "FeatureCollection", "crs": {"type": "name", "properties": {"name": '
        '"urn:ogc:def:crs:EPSG::32633"}}, "features": [{"type": "Feature", "properties": {}, '
        '"geometry": {"type": "LineString", "coordinates": [[500500, 4999500], '
        '[502500, 4999500]]}}]}')
    corridor = {"name": "dry strip", "kind": "corridor", "geometry": "line.geojson",
                "buffer": 60.0, "prey_growth": 0.0, "predator_mortality": 2.0}
    over = {"landscape.habitat": "suit.tif", "landscape.values": "suitability",
            "landscape.classes": DELETE, "measures": [corridor]}
    sc = load_scenario(write_scenario(over))
    setup = prepare(sc)
    on = setup.measures[0].cells
    assert on.sum() > 10
    # zero growth there: neither growth nor decline (capacity > 0), predators die faster
    off = ~on & setup.grid.mask
    assert np.all(setup.fields.r[on] == 0.0) and np.all(setup.fields.r[off] == np.float32(3.7))
    np.testing.assert_allclose(setup.fields.m[on], 2.0)
    text = load_error(write_scenario({**over, "measures": [{**corridor, "prey_capacity": 0.5}]},
                                     name="cap.toml"))
    assert "measures[0].prey_capacity" in text and "suitability" in text


@pytest.mark.parametrize("key,value,per_km2", [
    ("extinction_threshold", 0.5, 0.5),
    ("extinction_threshold_per_cell", 0.02, 0.02 / 0.01),  # 100 m cells: 0.01 km²
])
def test_extinction_threshold_per_km2_or_per_cell(write_scenario, key, value, per_km2):
    from preyscape.assemble import extinction_of

    sc = load_scenario(write_scenario({f"predator.{key}": value}))
    assert sc.predator.extinction_per_km2(0.01) == pytest.approx(per_km2)
    assert extinction_of(sc, 0.01) == pytest.approx((0.0, per_km2))
    assert extinction_of(load_scenario(write_scenario(name="none.toml")), 0.01) is None


def test_extinction_threshold_both_forms_or_negative_refused(write_scenario):
    text = load_error(write_scenario({"prey.extinction_threshold": 1.0,
                                      "prey.extinction_threshold_per_cell": 1.0}))
    assert "prey" in text and "not both" in text
    text = load_error(write_scenario({"prey.extinction_threshold": -1.0}, name="n.toml"))
    assert "prey.extinction_threshold" in text
