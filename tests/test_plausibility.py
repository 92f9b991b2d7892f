"""Start totals and the warnings ``check`` gives for numbers that look like slips.

Each warning must name the scenario key and its value. The usual ranges are orders of
magnitude from memory (plausibility.RANGES); the limits that trigger a warning lie two
orders beyond them, so these tests use values far outside.
"""

from __future__ import annotations

import math

import pytest
from conftest import CAPACITY, DELETE, RELEASE_DENSITY

from preyscape.assemble import prepare
from preyscape.plausibility import RANGES, plausibility_warnings, start_totals
from preyscape.preview import derived
from preyscape.scenario import load_scenario


def warnings_of(write_scenario, overrides: dict) -> list:
    setup = prepare(load_scenario(write_scenario(overrides)), allow_large=True)
    return plausibility_warnings(setup, derived(setup))


def lines_of(write_scenario, overrides: dict) -> list[str]:
    return [w.line() for w in warnings_of(write_scenario, overrides)]


def with_key(lines: list[str], key: str) -> list[str]:
    return [ln for ln in lines if ln.startswith(key + " = ")]


def test_start_totals_count_released_animals_and_capacity(write_scenario):
    # Reference computation: 21 cells of 0.01 km² at 10 predators per km² (the release of
    # conftest, counted in test_assemble), prey at capacity on 715 cells (1000 per km² on
    # class 1, 500 on class 2).
    setup = prepare(load_scenario(write_scenario({})))
    t = start_totals(setup)
    assert t["releases"] == [{"key": "start.releases[0]", "species": "predator", "cells": 21,
                              "animals": pytest.approx(21 * RELEASE_DENSITY * 0.01)}]
    assert t["predator"] == pytest.approx(2.1)
    assert t["prey"] == pytest.approx(float(setup.N0.sum()) * 0.01)
    assert t["prey"] < setup.grid.n_cells * CAPACITY * 0.01
    prey_alone = prepare(load_scenario(write_scenario(
        {"predator": DELETE, "interaction": DELETE, "start.releases.0.species": "prey"},
        )))
    assert start_totals(prey_alone)["predator"] is None


def test_predator_diffusivity_in_square_metres_is_named(write_scenario):
    # The slip of the issue: 15 km²/yr typed as 15,000,000 (m²/yr).
    lines = with_key(lines_of(write_scenario, {"predator.diffusivity": 15_000_000.0}),
                     "predator.diffusivity")
    assert any("1.5e+07 km²/yr: far above the usual range" in ln and "15 km²/yr" in ln
               for ln in lines)
    # the predicted front crosses the 3 km landscape within one save interval as well
    assert any("would cross the landscape" in ln and "run.save_every = 0.25" in ln
               for ln in lines)


def test_release_radius_below_a_cell_is_named(write_scenario):
    # The slip of the issue: 0.5 (km meant) read as 0.5 m.
    lines = lines_of(write_scenario, {"start.releases.0.radius": 0.5})
    radius = with_key(lines, "start.releases[0].radius")
    assert len(radius) == 1 and "0.5 m: smaller than a cell (100 m)" in radius[0]
    assert "500 m" in radius[0]
    # one cell at 10 per km² is 0.1 animals: less than one animal
    assert any("less than one animal" in ln for ln in with_key(lines,
                                                                "start.releases[0].density"))


def test_release_radius_beyond_the_landscape_is_named(write_scenario):
    lines = with_key(lines_of(write_scenario, {"start.releases.0.radius": 250_000.0}),
                     "start.releases[0].radius")
    assert len(lines) == 1 and "larger than the landscape (3 km across)" in lines[0]
    assert "covers 715 of 715 cells" in lines[0]


@pytest.mark.parametrize("key,value,text", [
    ("prey.growth", 5000.0, "per year: far above the usual range"),
    ("predator.mortality", 2000.0, "per year: far above the usual range"),
    ("prey.diffusivity", 1e-8, "km²/yr: far below the usual range"),
    ("interaction.attack_rate", 1e7, "km² per predator per year: far above"),
    ("interaction.handling_time", 2.0, "In days? 2 days is 0.005476 yr"),
    ("interaction.efficiency", 3.0, "more than one new predator"),
    ("prey.capacity", 1e12, "Per hectare?"),
])
def test_values_far_outside_the_usual_range_are_named(write_scenario, key, value, text):
    lines = with_key(lines_of(write_scenario, {key: value}), key)
    assert lines and any(text in ln for ln in lines), lines
    assert "order of magnitude, from memory" in lines[0]


def test_usual_values_give_no_range_warning(write_scenario):
    # the vole values of conftest lie inside every usual range
    lines = lines_of(write_scenario, {"run.years": 16.0, "run.save_every": 0.25})
    assert lines == []
    for lo, hi, warn_lo, warn_hi, _ in RANGES.values():
        assert warn_lo <= lo < hi <= warn_hi


def test_fast_front_crossing_within_a_save_interval_is_named(write_scenario):
    # D = 1e4 km²/yr lies inside the warning limits, but 2 sqrt(rD) = 385 km/yr crosses the
    # 3 km landscape in 0.008 yr, well within one save interval of 0.25 yr.
    lines = with_key(lines_of(write_scenario, {"prey.diffusivity": 1e4}), "prey.diffusivity")
    assert len(lines) == 1 and "would cross the landscape (3 km) in 0.007" in lines[0]


def test_run_shorter_than_the_period_and_sparse_snapshots_are_named(write_scenario):
    lines = lines_of(write_scenario, {})
    assert with_key(lines, "run.years") and "shorter than one local" in lines[0]
    lines = lines_of(write_scenario, {"run.years": 16.0, "run.save_every": 4.0})
    sparse = with_key(lines, "run.save_every")
    assert len(sparse) == 1 and "more than a quarter of the local cycle" in sparse[0]
    assert not with_key(lines, "run.years")


def test_too_many_steps_are_named(write_scenario):
    lines = with_key(lines_of(write_scenario, {"prey.growth": 20000.0, "run.years": 60.0,
                                               "run.save_every": 0.5}), "run.years")
    assert any("steps of" in ln and "slip of units" in ln for ln in lines)


def test_extinction_threshold_above_capacity_and_release_below_it(write_scenario):
    lines = lines_of(write_scenario, {"prey.extinction_threshold": 2000.0,
                                      "predator.extinction_threshold": 50.0})
    prey = with_key(lines, "prey.extinction_threshold")
    assert len(prey) == 1 and "at or above the prey capacity" in prey[0]
    pred = with_key(lines, "predator.extinction_threshold")
    assert len(pred) == 1 and "equilibrium density" in pred[0]
    rel = with_key(lines, "start.releases[0].density")
    assert any("removed at the first" in ln for ln in rel)
    # per cell: 0.5 animals in a cell of 0.01 km² is 50 per km², above the equilibrium
    lines = lines_of(write_scenario, {"predator.extinction_threshold_per_cell": 0.5})
    pc = with_key(lines, "predator.extinction_threshold_per_cell")
    assert len(pc) == 1 and "50 per km²" in pc[0]


def test_lethal_edge_of_a_small_landscape_is_named(write_scenario):
    # Skellam 1951 (Biometrika 38:196): on a W x H rectangle with lethal edges a species
    # persists only if its growth exceeds D pi² (1/W² + 1/H²). Here (3 x 2.4 km): prey
    # 0.5 x 9.87 x 0.285 = 1.41/yr < r = 3.7 persist; predators 2 x 9.87 x 0.285 = 5.6/yr >
    # 0.01 x 0.25 x 1000 / 1.5 - 1 = 0.667/yr do not.
    lines = with_key(lines_of(write_scenario, {"landscape.edge": "hostile"}),
                     "landscape.edge")
    assert len(lines) == 1 and "too small for predators" in lines[0]
    assert "5.62/yr" in lines[0] and "0.667/yr" in lines[0]
    cq = math.pi * math.sqrt(2 * 2.0 / (0.01 * 0.25 * 1000 / 1.5 - 1.0))
    assert f"{cq:.3g} km" in lines[0]
