"""What ``check`` adds to the numbers: the start totals and warnings about slips.

A scenario can be valid and still hold a slip: metres typed where kilometres
were meant, m²/yr where km²/yr were meant, days where years were meant.
:func:`start_totals` counts the animals a scenario starts with;
:func:`plausibility_warnings` compares its numbers with the landscape and
with the usual range of values for animals, and returns a
:class:`CheckWarning` for each number that looks wrong, naming the key, its value
and what would be typical. A warning never stops a run.

The usual ranges below are wide on purpose: a warning means "many times
outside what animals do", not "unusual". They are orders of magnitude from
memory, spanning the small invertebrates to the large mammals in
``docs/landscapes.md`` (aphid, ladybird, vole, weasel, hare, lynx):

================================  ==========================  ======================
quantity                          usual range                 warning outside
================================  ==========================  ======================
diffusivity, motility             10⁻⁴ – 10³ km²/yr           10⁻⁶ – 10⁵ km²/yr
prey growth, predator mortality   0.01 – 100 per year         10⁻³ – 10³ per year
attack rate                       10⁻⁵ – 10³ km²/yr           10⁻⁷ – 10⁵ km²/yr
handling time                     10⁻⁶ – 0.05 yr              above 1 yr
efficiency                        10⁻⁴ – 0.5                  above 1
prey capacity                     10⁻² – 10⁹ per km²          10⁻⁴ – 10¹¹ per km²
================================  ==========================  ======================

Examples
--------
``scenario_path`` is a scenario file (such as ``landscapes/veldrun_moor.toml``):

>>> from preyscape.assemble import prepare
>>> from preyscape.preview import derived
>>> from preyscape.scenario import load_scenario
>>> setup = prepare(load_scenario(scenario_path))
>>> totals = start_totals(setup)
>>> totals["predator"] > 0 and totals["releases"][0]["species"]
'predator'
>>> [w.key for w in plausibility_warnings(setup, derived(setup))]  # half a year
['run.years']
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from preyscape.assemble import Setup, release_cells

__all__ = ["RANGES", "CheckWarning", "plausibility_warnings", "start_totals"]

SOURCE = "order of magnitude, from memory"

RANGES: dict[str, tuple[float, float, float, float, str]] = {
    # quantity: (usual low, usual high, warn below, warn above, unit)
    "movement": (1e-4, 1e3, 1e-6, 1e5, "km²/yr"),
    "rate": (0.01, 100.0, 1e-3, 1e3, "per year"),
    "attack_rate": (1e-5, 1e3, 1e-7, 1e5, "km² per predator per year"),
    "handling_time": (1e-6, 0.05, 0.0, 1.0, "years per prey"),
    "efficiency": (1e-4, 0.5, 0.0, 1.0, "predators per prey eaten"),
    "capacity": (1e-2, 1e9, 1e-4, 1e11, "animals per km²"),
}
"""Usual range and warning limits of each kind of value (:data:`SOURCE`)."""


@dataclass(frozen=True)
class CheckWarning:
    """A number that looks like a slip.

    Attributes
    ----------
    key : str
        The scenario key, such as ``predator.diffusivity`` or
        ``start.releases[0].radius``.
    value : float or str
        Its value, in the units of the scenario.
    unit : str
        Those units.
    message : str
        What is wrong and what would be typical.
    """

    key: str
    value: float | str
    unit: str
    message: str

    def line(self) -> str:
        """One line: the key, its value and the message."""
        v = repr(self.value) if isinstance(self.value, str) else _g(self.value)
        return f"{self.key} = {v}{' ' + self.unit if self.unit else ''}: {self.message}"

    def as_dict(self) -> dict:
        """The warning as a JSON-ready dict."""
        return asdict(self)


def _g(x: float) -> str:
    if x == 0 or 1e-3 <= abs(x) < 1e6:
        return f"{x:.4g}"
    return f"{x:.3g}"


def start_totals(setup: Setup) -> dict:
    """Animals at the start, per species and per release.

    Returns
    -------
    dict
        ``prey`` and ``predator`` (animals in the landscape at t = 0, after
        releases and noise; ``predator`` None without a predator), ``cells``
        (cells with data) and ``releases``: for each ``start.releases[k]``
        its ``key``, ``species``, ``cells`` (cells it adds to) and
        ``animals`` (density × those cells' area, before noise).
    """
    sc, g = setup.scenario, setup.grid
    area = g.cell_area_km2
    releases = []
    for k, rel in enumerate(sc.start.releases):
        n = int(release_cells(g, rel.x, rel.y, rel.radius).sum())
        releases.append({"key": f"start.releases[{k}]", "species": rel.species, "cells": n,
                         "animals": rel.density * n * area})
    return {"prey": float(np.sum(setup.N0)) * area,
            "predator": float(np.sum(setup.P0)) * area if sc.has_predator else None,
            "cells": g.n_cells, "releases": releases}


def _outside(key: str, value: float, kind: str, hint: str = "") -> CheckWarning | None:
    lo, hi, warn_lo, warn_hi, unit = RANGES[kind]
    if value == 0 or warn_lo <= value <= warn_hi:
        return None
    side = "above" if value > warn_hi else "below"
    return CheckWarning(key, value, unit, f"far {side} the usual range for animals ({_g(lo)} to "
                                     f"{_g(hi)} {unit}; {SOURCE}){hint}")


def _value_warnings(sc) -> list[CheckWarning]:
    """Values far outside the usual range for animals (:data:`RANGES`)."""
    out = []
    for sp in sc.species:
        spec = getattr(sc, sp)
        what = "diffusivity" if spec.movement == "fickian" else "motility"
        v = spec.move_coefficient
        hint = (f". In m²/yr? {_g(v)} m²/yr is {_g(v / 1e6)} km²/yr" if v > 1e5 else "")
        out.append(_outside(f"{sp}.{what}", v, "movement", hint))
    out.append(_outside("prey.growth", sc.prey.growth, "rate"))
    out.append(_outside("prey.capacity", sc.prey.capacity or 0.0, "capacity",
                        ". Per hectare? 1 per ha is 100 per km²; per m²? 1 per m² is 10⁶ "
                        "per km²"))
    if sc.has_predator:
        it = sc.interaction
        out.append(_outside("predator.mortality", sc.predator.mortality, "rate"))
        out.append(_outside("interaction.attack_rate", it.attack_rate, "attack_rate"))
        h = it.handling_time
        if h > 0:
            out.append(_outside(
                "interaction.handling_time", h, "handling_time",
                f": a predator could eat at most 1/h = {_g(1 / h)} prey a year. In days? "
                f"{_g(h)} days is {_g(h / 365.25)} yr"))
        out.append(_outside(
            "interaction.efficiency", it.efficiency, "efficiency",
            ": every prey eaten would make more than one new predator (possible only where "
            "one host yields several offspring, as in some parasitoids)"))
    return [w for w in out if w is not None]


def _release_warnings(setup: Setup, totals: dict) -> list[CheckWarning]:
    sc, g = setup.scenario, setup.grid
    out = []
    cell = min(g.dx, g.dy)
    side = max(g.width_m, g.height_m)
    for k, (rel, rec) in enumerate(zip(sc.start.releases, totals["releases"], strict=True)):
        key = f"start.releases[{k}]"
        if rel.radius < cell:
            out.append(CheckWarning(
                f"{key}.radius", rel.radius, "m",
                f"smaller than a cell ({cell:g} m): the release fills only the "
                f"{rec['cells']} cell{'s' if rec['cells'] != 1 else ''} holding its centre. "
                f"The radius is in metres: {_g(rel.radius)} km would be "
                f"{_g(rel.radius * 1000)} m; a release usually covers a few cells or more"))
        elif rel.radius > side:
            out.append(CheckWarning(
                f"{key}.radius", rel.radius, "m",
                f"larger than the landscape ({side / 1000:.3g} km across): the release covers "
                f"{rec['cells']} of {g.n_cells} cells. The radius is in metres; for a start "
                "on every cell use start.prey_density or start.predator_density"))
        if rec["animals"] < 1.0:
            out.append(CheckWarning(
                f"{key}.density", rel.density, "per km²",
                f"the release adds {_g(rec['animals'])} animals in all ({rec['cells']} "
                f"cell{'s' if rec['cells'] != 1 else ''} of {g.cell_area_km2:.3g} km²): less "
                "than one animal. Densities are per km²; a release is usually at least a few "
                "animals"))
        thr = getattr(sc, rel.species).extinction_per_km2(g.cell_area_km2)
        if thr is not None and rel.density < thr:
            out.append(CheckWarning(
                f"{key}.density", rel.density, "per km²",
                f"below {rel.species}'s extinction threshold ({_g(thr)} per km²): the "
                "released animals are removed at the first step"))
    return out


def _time_warnings(setup: Setup, d: dict) -> list[CheckWarning]:
    sc, g = setup.scenario, setup.grid
    out = []
    side_km = max(g.width_m, g.height_m) / 1000.0
    save = sc.run.save_every
    for sp in sc.species:
        c = d.get(f"{sp}_front_speed")
        spec = getattr(sc, sp)
        what = "diffusivity" if spec.movement == "fickian" else "motility"
        if c is not None and math.isfinite(c) and c > 0 and side_km / c < save:
            out.append(CheckWarning(
                f"{sp}.{what}", spec.move_coefficient, "km²/yr",
                f"the predicted {sp} front ({_g(c)} km/yr) would cross the landscape "
                f"({side_km:.3g} km) in {_g(side_km / c)} yr, less than one save interval "
                f"(run.save_every = {save:g} yr), so no snapshot would show it. Animal fronts "
                f"usually move metres to tens of km a year ({SOURCE})"))
    period = d.get("period_years")
    if period is not None and math.isfinite(period) and period > 0:
        if sc.run.years < period:
            damped = "; damped there" if d.get("stable") else ""
            out.append(CheckWarning(
                "run.years", sc.run.years, "yr",
                f"shorter than one local predator–prey cycle ({period:.3g} yr in the best "
                f"habitat{damped}): the run cannot show a cycle; run for several periods"))
        if save > period / 4:
            out.append(CheckWarning(
                "run.save_every", save, "yr",
                f"more than a quarter of the local cycle ({period:.3g} yr): snapshots cannot "
                f"follow the cycles; save at most every {period / 8:.2g} yr (8 per cycle)"))
    if d.get("steps", 0) > 1_000_000:
        out.append(CheckWarning(
            "run.years", sc.run.years, "yr",
            f"needs {d['steps']:,} steps of {setup.dt:.3g} yr: the step is set by the fastest "
            "rate (growth, mortality or predation on rare prey a·P); check the rates and "
            "densities for a slip of units"))
    return out


def _threshold_warnings(setup: Setup, d: dict) -> list[CheckWarning]:
    sc, g = setup.scenario, setup.grid
    out = []
    eq = d.get("equilibrium") or (math.nan, math.nan)
    level = {"prey": (d["best_habitat"].get("K"), "the prey capacity in the best habitat"),
             "predator": (eq[1], "the predators' equilibrium density in the best habitat")}
    for sp in sc.species:
        spec = getattr(sc, sp)
        thr = spec.extinction_per_km2(g.cell_area_km2)
        if thr is None:
            continue
        key = (f"{sp}.extinction_threshold_per_cell" if spec.extinction_threshold_per_cell
               is not None else f"{sp}.extinction_threshold")
        value = spec.extinction_threshold_per_cell or spec.extinction_threshold
        ref, what = level[sp]
        if ref is not None and math.isfinite(ref) and thr >= ref:
            out.append(CheckWarning(
                key, value, "per cell" if key.endswith("per_cell") else "per km²",
                f"{_g(thr)} per km² is at or above {what} ({_g(ref)} per km²): the threshold "
                "would remove the species where it does best. A threshold is usually well "
                "below one animal per cell"))
    return out


def _edge_warnings(setup: Setup, d: dict) -> list[CheckWarning]:
    """Species that cannot persist on the whole map when its edge is lethal."""
    sc, g = setup.scenario, setup.grid
    if sc.landscape.edge != "hostile":
        return []
    b = d["best_habitat"]
    w, h = g.width_m / 1000.0, g.height_m / 1000.0
    shape = math.pi ** 2 * (1.0 / w ** 2 + 1.0 / h ** 2)  # 1/km²: slowest mode of the box
    out = []
    for sp, rate, D in (("prey", b["r"], b["D_N"]),
                        ("predator", d.get("predator_growth_at_capacity"), b.get("D_P"))):
        if sp not in sc.species or rate is None or not rate > 0 or D is None:
            continue
        if D * shape > rate:
            what = "prey" if sp == "prey" else "predators (in prey at capacity)"
            out.append(CheckWarning(
                "landscape.edge", "hostile", "",
                f"the landscape ({w:.3g} × {h:.3g} km) is too small for {what} with lethal "
                f"edges: even if every cell were best habitat, animals would be lost over the "
                f"edge at Dπ²(1/W² + 1/H²) = {D * shape:.3g}/yr, faster than they grow "
                f"({rate:.3g}/yr), so they cannot persist (Skellam 1951; critical square "
                f"side π√(2D/r) = {math.pi * math.sqrt(2 * D / rate):.3g} km)"))
    return out


def plausibility_warnings(setup: Setup, d: dict) -> list[CheckWarning]:
    """Numbers of a scenario that look like slips, with what would be typical.

    Parameters
    ----------
    setup : Setup
        The prepared scenario (:func:`preyscape.assemble.prepare`).
    d : dict
        Its :func:`preyscape.preview.derived` numbers.

    Returns
    -------
    list of Warning
        In the order: values outside the usual range, releases, time and
        speed, extinction thresholds, edges. Empty when nothing looks wrong.
    """
    totals = start_totals(setup)
    return (_value_warnings(setup.scenario) + _release_warnings(setup, totals)
            + _time_warnings(setup, d) + _threshold_warnings(setup, d)
            + _edge_warnings(setup, d))
