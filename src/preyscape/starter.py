"""Starter scenarios: a commented scenario file for any habitat raster.

:func:`write_starter` reads a habitat raster (made by ``preyscape landscape
make`` or the user's own), lists its classes with their cell counts, and
writes a scenario TOML that holds every required key, one
``[[landscape.classes]]`` row per class present, a predator release near the
centre of the map, and the parameters of one of three contrasting
predator–prey pairs (:data:`PAIRS`), each value with its units, a plausible
range and where it comes from. The file is validated with
:func:`preyscape.scenario.parse_scenario` before it is renamed into place,
so it runs as written; the parameters are a starting point to be replaced by
values for the population at hand.

Units are those of every scenario: rates per year, densities animals per
km², diffusivities km² per year, attack rates km² per predator per year,
handling times years per prey.
"""

from __future__ import annotations

import json
import math
import os
import textwrap
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from preyscape.cautions import CAUTION
from preyscape.errors import InputError

__all__ = ["PAIRS", "Pair", "Value", "class_table", "starter_text", "write_starter"]


#: A raster with more distinct codes than this is not treated as a class map.
MAX_CLASSES = 255


@dataclass(frozen=True)
class Value:
    """One parameter: value, plausible range and where it comes from.

    Attributes
    ----------
    value : float
        The value written into the scenario, in the scenario's units.
    low, high : float
        A plausible range, same units.
    note : str
        The source ("read: ..." for values read in a source, "from memory"
        for values recalled, "order of magnitude, from memory" for guesses
        of scale).
    """

    value: float
    low: float
    high: float
    note: str


@dataclass(frozen=True)
class Pair:
    """A predator–prey pair with parameters in scenario units."""

    key: str
    title: str
    prey: str
    predator: str
    growth: Value            # prey, 1/yr
    capacity: Value          # prey per km²
    prey_diffusivity: Value  # km²/yr
    mortality: Value         # predator, 1/yr
    predator_diffusivity: Value  # km²/yr
    attack_rate: Value       # km² per predator per year
    handling_time: Value     # years per prey
    efficiency: Value        # predators per prey eaten
    release_density: float   # predators per km² in the release disc
    years: float
    save_every: float
    about: str
    sources: tuple[str, ...]


PAIRS: dict[str, Pair] = {
    "vole-weasel": Pair(
        key="vole-weasel",
        title="field vole and least weasel (small mammals)",
        prey="field vole", predator="least weasel",
        growth=Value(4.0, 2.0, 6.0, "from memory: several litters a summer"),
        capacity=Value(8000.0, 1000.0, 15000.0,
                       "from memory: tens to about a hundred voles per hectare in good "
                       "grassland at a peak"),
        prey_diffusivity=Value(0.5, 0.1, 2.0, "order of magnitude, from memory"),
        mortality=Value(1.0, 0.5, 2.0, "from memory: about one weasel in three survives a year"),
        predator_diffusivity=Value(5.0, 1.0, 20.0,
                                   "order of magnitude, from memory: weasels range over "
                                   "several km in a year"),
        attack_rate=Value(0.25, 0.1, 1.0, "order of magnitude, from memory"),
        handling_time=Value(0.002, 0.001, 0.005,
                            "from memory: at most about 500 voles per weasel per year"),
        efficiency=Value(0.01, 0.005, 0.02,
                         "from memory: weasels grow at most e/h - m = 4 per year"),
        release_density=20.0, years=6.0, save_every=0.125,
        about="Multi-year vole cycles driven by a specialist predator. The same values as "
              "the bundled demo (landscapes/veldrun_moor.toml).",
        sources=("Turchin & Hanski 1997, Am. Nat. 149:842 (vole-weasel model; values here "
                 "not read from it)",
                 "Hanski et al. 2001, Ecology 82:1505 (from memory)"),
    ),
    "hare-lynx": Pair(
        key="hare-lynx",
        title="snowshoe hare and Canada lynx (larger mammals)",
        prey="snowshoe hare", predator="Canada lynx",
        growth=Value(1.5, 0.7, 2.5,
                     "from memory; births of 6-20 leverets per female per year (Hodges 2000, "
                     "read) bound it from above"),
        capacity=Value(400.0, 100.0, 600.0,
                       "read: peak densities of 1-2 hares/ha in the south and up to 4-6 hares/"
                       "ha in the north (Hodges 2000)"),
        prey_diffusivity=Value(1.0, 0.2, 5.0, "order of magnitude, from memory"),
        mortality=Value(0.8, 0.4, 1.5,
                        "from memory: lynx numbers fall steeply in the years after a hare "
                        "crash"),
        predator_diffusivity=Value(50.0, 10.0, 200.0,
                                   "order of magnitude, from memory; home ranges averaged "
                                   "28 km² in central Alberta (Brand et al. 1976, read in "
                                   "the abstract)"),
        attack_rate=Value(11.0, 4.6, 14.3,
                          "read: a fitted type II response with s = 3.11 ha per lynx per day "
                          "(1.26 in increase, 3.92 in decrease years) = 11.4 km²/yr "
                          "(Stenseth et al. 1998, Fig. 3D, from O'Donoghue et al. 1998 data; "
                          "units inferred from the caption)"),
        handling_time=Value(0.002, 0.0014, 0.0023,
                            "read: the same fit gives at most 1.3-1.9 hares per lynx per day, "
                            "and kill rates of 0.3-1.2 hares/day were observed (O'Donoghue et "
                            "al. 1998)"),
        efficiency=Value(0.0032, 0.0015, 0.006,
                         "from memory: chosen so lynx grow at most e/h - m = 0.8 per year"),
        release_density=0.5, years=20.0, save_every=0.25,
        about="The classic 8-11 year cycle (O'Donoghue et al. 1998). With these values the "
              "local model cycles: the Hopf capacity is near 140 hares per km².",
        sources=("Hodges 2000, chapters 6 and 7 in Ruggiero et al. (eds), Ecology and "
                 "Conservation of Lynx in the United States, USDA Forest Service RMRS-GTR-30 "
                 "(abstracts read)",
                 "O'Donoghue et al. 1998, Ecology 79:1193 (abstract read)",
                 "Stenseth et al. 1998, PNAS 95:15430 (Fig. 3 caption read)",
                 "Brand, Keith & Fischer 1976, J. Wildl. Manage. 40:416 (abstract read; "
                 "citation details from memory)"),
    ),
    "aphid-ladybird": Pair(
        key="aphid-ladybird",
        title="cereal aphid and seven-spot ladybird (invertebrates)",
        prey="cereal aphid", predator="seven-spot ladybird",
        growth=Value(80.0, 40.0, 150.0,
                     "order of magnitude, from memory: 0.1-0.4 per day in the growing "
                     "season"),
        capacity=Value(1.0e9, 1.0e8, 1.0e10,
                       "order of magnitude, from memory: 100-10 000 aphids per m² of crop"),
        prey_diffusivity=Value(0.01, 0.001, 0.1,
                               "order of magnitude, from memory: wingless aphids walking "
                               "between plants; winged dispersal is not modelled"),
        mortality=Value(10.0, 8.0, 30.0,
                        "read: adult life span of 44 days in the laboratory gives at least "
                        "8.3 per year (Kumari et al. 2020); more in the field"),
        predator_diffusivity=Value(1.0, 0.1, 10.0, "order of magnitude, from memory"),
        attack_rate=Value(3.0e-4, 1.0e-4, 1.0e-3,
                          "order of magnitude, from memory: about 1 m² searched per "
                          "ladybird per day"),
        handling_time=Value(3.0e-5, 1.0e-5, 3.5e-5,
                            "read: adults ate up to 78 aphids a day (Kumari et al. 2020); "
                            "3e-5 yr is about 90 a day"),
        efficiency=Value(0.0015, 0.0008, 0.003,
                         "read: a larva ate 580 aphids while it grew (Kumari et al. 2020), so "
                         "at most 1/580 = 0.0017 new ladybirds per aphid eaten"),
        release_density=1.0e4, years=0.5, save_every=0.02,
        about="Fast dynamics within one growing season: run it for months, not years (the "
              "model has no winter).",
        sources=("Kumari, Verma & Sharma 2020, J. Entomol. Zool. Stud. 8(1) (abstract read)",
                 "Xia, van der Werf & Rabbinge 1999, Environ. Entomol. 28:307 (abstract read: "
                 "47 % egg-to-adult survival, 287 eggs per female at 25 °C)",
                 "Dixon 2000, Insect Predator-Prey Dynamics: Ladybird Beetles and Biological "
                 "Control, Cambridge University Press (from memory)"),
    ),
}


def class_table(raster) -> list[dict]:
    """Classes of a class raster: code, cells, share, name and prey-capacity multiplier.

    Parameters
    ----------
    raster : preyscape.landscape.files.HabitatRaster
        A class raster.

    Returns
    -------
    list of dict
        One per code on a cell with data, in code order: ``code``, ``cells``,
        ``share`` (of cells with data), ``name`` (from the raster's tags, or
        ``"class <code>"``) and ``prey_capacity`` (from ``QUALITY_`` tags,
        else 1.0).

    Raises
    ------
    InputError
        If the raster has more than :data:`MAX_CLASSES` distinct codes.
    """
    counts = raster.class_counts()
    if len(counts) > MAX_CLASSES:
        raise InputError(f"the raster holds {len(counts)} distinct codes, too many for a class "
                         "table; if it holds continuous values, rescale them to [0, 1] and use "
                         "it as suitability (--values suitability)")
    total = sum(counts.values())
    return [{"code": c, "cells": n, "share": n / total,
             "name": raster.names.get(c, f"class {c}"),
             "prey_capacity": raster.quality.get(c, 1.0)} for c, n in counts.items()]


def _release_cell(raster, table: list[dict] | None,
                  density: float = math.inf) -> tuple[float, float, float]:
    """Release centre (x, y, metres) and radius (metres) near the map centre on good habitat.

    The radius is at least 3 cells and 3 % of the map's shorter side, and large enough for
    about 5 animals at ``density`` (animals/km²), but at most a quarter of the shorter side.
    """
    grid = raster.grid
    if raster.kind == "classes":
        best = max(table, key=lambda r: (r["prey_capacity"], r["cells"]))["code"]
        good = grid.mask & (raster.values == best)
    else:
        s = raster.values
        good = grid.mask & (s >= np.nanmedian(s[grid.mask]))
    cx = (grid.bounds[0] + grid.bounds[2]) / 2.0
    cy = (grid.bounds[1] + grid.bounds[3]) / 2.0
    d = np.where(good, grid.distance_to(cx, cy), np.inf)
    r, c = np.unravel_index(np.argmin(d), d.shape)
    short = min(grid.width_m, grid.height_m)
    five = 1000.0 * math.sqrt(5.0 / (math.pi * density))  # m: 5 animals in the disc
    radius = max(3.0 * max(grid.dx, grid.dy), 0.03 * short, min(five, 0.25 * short))
    radius = float(f"{radius:.2g}")
    return float(grid.x[c]), float(grid.y[r]), radius


def _num(x: float) -> str:
    """A TOML float (always with a decimal point or an exponent)."""
    text = repr(float(x))
    return text if any(ch in text for ch in ".en") else text + ".0"


def _str(s: str) -> str:
    return json.dumps(s, ensure_ascii=False)


def _row(key: str, v: Value, unit: str) -> str:
    """A commented key: units, range and source wrapped above ``key = value``."""
    note = f"{unit}; plausible {_g(v.low)} to {_g(v.high)}. Source: {v.note}."
    wrapped = textwrap.wrap(note, 88, initial_indent="# ", subsequent_indent="#   ")
    return "\n".join([*wrapped, f"{key} = {_num(v.value)}"])


def _comment(text: str) -> list[str]:
    return textwrap.wrap(text, 90, initial_indent="# ", subsequent_indent="# ")


def _g(x: float) -> str:
    return f"{x:.3g}"


def starter_text(raster, habitat_rel: str, pair: Pair, source_name: str, *,
                 prey_only: bool = False, edge: str = "closed") -> str:
    """The starter scenario as TOML text (see :func:`write_starter`)."""
    grid = raster.grid
    table = class_table(raster) if raster.kind == "classes" else None
    x, y, radius = _release_cell(raster, table,
                                 pair.capacity.value if prey_only else pair.release_density)
    n_snap = round(pair.years / pair.save_every)
    lines = [
        f"# Starter scenario for {source_name}: {pair.title}.",
        "#",
        f"# Written by `preyscape starter` (pair '{pair.key}'). It runs as written:",
        "#   preyscape check THIS_FILE      # what the values imply",
        "#   preyscape run THIS_FILE        # a run folder under runs/",
        "# Every key is explained in docs/scenario.md; the parameter sets in docs/landscapes.md.",
        "#",
        *_comment(pair.about),
        "# Each value below gives its units, a plausible range and its source: 'read' values",
        "# were read in the source named; 'from memory' values were recalled, not checked; an",
        "# 'order of magnitude' is a guess of scale. Replace them with values for your",
        "# population before drawing any conclusion.",
        "#",
        *_comment(CAUTION),
        "#",
        "# Sources:",
        *[line for src in pair.sources
          for line in textwrap.wrap(src, 88, initial_indent="# - ", subsequent_indent="#   ")],
        "",
        f"title = {_str(f'{Path(source_name).stem}: {pair.prey} and {pair.predator}')}"
        if not prey_only else f"title = {_str(f'{Path(source_name).stem}: {pair.prey} alone')}",
        "",
        "[landscape]",
        f"habitat = {_str(habitat_rel)}",
        f"values = {_str(raster.kind)}",
        'edge = "closed"             # nothing crosses the map edge ("hostile": lethal edge)'
        if edge == "closed" else
        'edge = "hostile"            # lethal surroundings: density zero beyond the map edge',
        'nodata = "closed"           # nor the faces to no-data cells',
        "",
    ]
    if table is not None:
        lines += [
            f"# {len(table)} habitat classes on {grid.n_cells} cells with data "
            f"({grid.ny} x {grid.nx} cells of {grid.dx:g} x {grid.dy:g} m). Multipliers scale",
            "# the best-habitat values of [prey] and [predator] in each class (1 = as in the",
            "# best habitat; prey_capacity = 0 makes a sink). Set them from what you know of",
            "# each class" + (": the prey_capacity values below come from the raster's"
                              " QUALITY tags." if raster.quality else "."),
        ]
        for row in table:
            lines += [
                "",
                "[[landscape.classes]]",
                f"code = {row['code']}{' ' * max(1, 21 - len(str(row['code'])))}"
                f"# {row['cells']} cells, {100 * row['share']:.2f} % of the map",
                f"name = {_str(row['name'])}",
                f"prey_capacity = {_num(row['prey_capacity'])}",
                "prey_growth = 1.0",
                "prey_movement = 1.0",
                *(() if prey_only else ("predator_mortality = 1.0", "predator_movement = 1.0")),
            ]
    else:
        s = raster.values[grid.mask]
        lines += [
            f"# Suitability from {s.min():.3g} to {s.max():.3g} (mean {s.mean():.3g}) on "
            f"{grid.n_cells} cells with data ({grid.ny} x {grid.nx} cells of {grid.dx:g} x "
            f"{grid.dy:g} m).",
            "# It scales the prey capacity only: K = prey.capacity x suitability; growth,",
            "# mortality and movement are the [prey] and [predator] values everywhere.",
        ]
    lines += [
        "",
        "[prey]",
        f"name = {_str(pair.prey)}",
        _row("growth", pair.growth, "per year"),
        _row("capacity", pair.capacity, "animals per km² in the best habitat"),
        'movement = "fickian"',
        _row("diffusivity", pair.prey_diffusivity, "km² per year"),
        *(_prey_alone(pair, x, y, radius, grid) if prey_only else _with_predator(
            pair, x, y, radius, grid)),
        "",
        "[run]",
        f"years = {_num(pair.years)}",
        f"save_every = {_num(pair.save_every)}{' ' * max(1, 15 - len(_num(pair.save_every)))}"
        f"# years between snapshots: {n_snap + 1} snapshots in all",
        'step = "auto"',
        "seed = 1",
        "",
        "# To try a measure, draw it and add it here, for example:",
        "#   preyscape landscape corridor MAP.tif --line X,Y X,Y --width 100 --measure "
        "corridor.geojson",
        "# prints a [[measures]] table to paste below, and a [[variants]] entry such as",
        '#   [[variants]]',
        '#   name = "corridor"',
        '#   add = ["corridor"]',
        "# runs it beside the baseline.",
        "",
    ]
    return "\n".join(lines)


def _release_lines(x: float, y: float, radius: float, grid) -> list[str]:
    left, bottom, right, top = grid.bounds
    return [
        f"x = {_num(x)}{' ' * max(1, 24 - len(_num(x)))}# m, in the raster's CRS; the map "
        f"spans x {left:.0f} to {right:.0f} m",
        f"y = {_num(y)}{' ' * max(1, 24 - len(_num(y)))}# m; y {bottom:.0f} to {top:.0f} m",
        f"radius = {_num(radius)}{' ' * max(1, 19 - len(_num(radius)))}# m",
    ]


def _prey_alone(pair: Pair, x: float, y: float, radius: float, grid) -> list[str]:
    """``[start]`` of a scenario of prey alone: empty land, prey released near the centre."""
    return [
        "",
        "# No [predator] section: prey alone (no [interaction] needed: prey grow",
        "# logistically, r N (1 - N/K)).",
        "",
        "[start]",
        'prey = "uniform"            # empty land ...',
        "prey_density = 0.0",
        "",
        "[[start.releases]]          # ... and prey released near the centre of the map",
        'species = "prey"',
        *_release_lines(x, y, radius, grid),
        f"density = {_num(pair.capacity.value)}"
        f"{' ' * max(1, 18 - len(_num(pair.capacity.value)))}# prey ({pair.prey}) per km² in the "
        "disc: the capacity",
    ]


def _with_predator(pair: Pair, x: float, y: float, radius: float, grid) -> list[str]:
    """``[predator]``, ``[interaction]`` and ``[start]`` of a predator–prey starter."""
    return [
        "",
        "[predator]",
        f"name = {_str(pair.predator)}",
        _row("mortality", pair.mortality, "per year"),
        'movement = "fickian"',
        _row("diffusivity", pair.predator_diffusivity, "km² per year"),
        "",
        "[interaction]",
        'form = "holling-ii"         # logistic prey, saturating functional response',
        _row("attack_rate", pair.attack_rate, "km² per predator per year"),
        _row("handling_time", pair.handling_time, "years per prey"),
        _row("efficiency", pair.efficiency, "predators per prey eaten"),
        "",
        "[start]",
        'prey = "capacity"           # prey start at capacity in every cell',
        "noise = 0.05                # +-5 % variation, drawn with run.seed",
        "",
        "[[start.releases]]          # predators arrive near the centre of the map",
        *_release_lines(x, y, radius, grid),
        f"density = {_num(pair.release_density)}"
        f"{' ' * max(1, 18 - len(_num(pair.release_density)))}# predators ({pair.predator}) "
        "per km² in the disc",
    ]


def _habitat_path(raster: Path, scenario: Path) -> str:
    """The raster's path as the scenario names it: relative to the scenario's folder when
    that is short (at most two levels up), else absolute."""
    target = raster.resolve()
    try:
        rel = Path(os.path.relpath(target, scenario.resolve().parent))
    except ValueError:  # another drive
        return target.as_posix()
    return rel.as_posix() if rel.parts[:3].count("..") <= 2 else target.as_posix()


def write_starter(
    raster_path: str | os.PathLike[str],
    out: str | os.PathLike[str] | None = None,
    *,
    pair: str = "vole-weasel",
    values: str | None = None,
    prey_only: bool = False,
    edge: str = "closed",
    overwrite: bool = False,
) -> dict:
    """Write a starter scenario for a habitat raster.

    Parameters
    ----------
    raster_path : str or os.PathLike
        The habitat raster (projected CRS in metres).
    out : str or os.PathLike, optional
        The scenario file to write. Default: beside the raster, with its
        name and ``.toml``.
    pair : str
        A key of :data:`PAIRS`.
    values : {"classes", "suitability"}, optional
        What the raster holds. Default: guessed.
    prey_only : bool
        Prey alone: no ``[predator]`` or ``[interaction]``; prey start on empty
        land from a release (at capacity) near the centre.
    edge : {"closed", "hostile"}
        ``landscape.edge``: what lies beyond the map edge.
    overwrite : bool
        Replace an existing scenario file.

    Returns
    -------
    dict
        ``out`` (path), ``kind``, ``classes`` (:func:`class_table`, or None
        for suitability), ``pair`` and ``grid``.

    Raises
    ------
    InputError
        For an unknown pair, an unreadable raster, an existing file without
        ``overwrite``, or (a programming error surfacing as bad input) a
        scenario that does not validate.
    """
    import tomllib

    from preyscape.landscape import files
    from preyscape.scenario import parse_scenario

    if pair not in PAIRS:
        raise InputError(f"unknown pair {pair!r}; choose one of {', '.join(PAIRS)}")
    raster_path = Path(raster_path)
    out = Path(out) if out is not None else raster_path.with_suffix(".toml")
    files.refuse_existing(out, overwrite, "scenario file")
    raster = files.read_raster(raster_path, values)  # type: ignore[arg-type]
    try:
        text = starter_text(raster, _habitat_path(raster_path, out), PAIRS[pair],
                            raster_path.name, prey_only=prey_only, edge=edge)
    except InputError as exc:
        raise InputError(exc.message, exc.source or str(raster_path)) from None
    parse_scenario(tomllib.loads(text), out.resolve(), check_files=False)
    with files.staged([out], overwrite, "scenario file") as (tmp,):
        tmp.write_text(text, encoding="utf-8")
    return {"out": out, "kind": raster.kind, "pair": pair, "grid": raster.grid,
            "classes": class_table(raster) if raster.kind == "classes" else None}
