"""What a scenario implies before it runs: the numbers ``check`` prints and ``run.json`` records.

:func:`derived` gives the grid, the step, best-habitat equilibria and
stability, published front speeds and critical patches, predictions for the
landscape as it is (:func:`landscape_predictions`), fence topology
(:func:`fence_topology`), and estimates of memory and disk use, from a
:class:`~preyscape.assemble.Setup`. :func:`predictions` is the part a run
records for later comparison with what it did.

Examples
--------
``scenario_path`` is a scenario file (such as ``landscapes/veldrun_moor.toml``):

>>> from preyscape.assemble import prepare
>>> from preyscape.scenario import load_scenario
>>> d = derived(prepare(load_scenario(scenario_path)))
>>> d["prey_front_speed"] > 0, d["grid"]["rows"] > 0
(True, True)
"""

from __future__ import annotations

import math

from preyscape import limits
from preyscape.assemble import (
    Setup,
    _best,
    _predator,
    _source,
    place_measures,
)
from preyscape.landscape.grid import Grid
from preyscape.model import theory
from preyscape.scenario import Scenario

__all__ = ["derived", "fence_topology", "landscape_predictions", "predictions",
           "variant_fence_topology"]


def predictions(setup: Setup) -> dict:
    """The published predictions a report sets results against (from :func:`derived`)."""
    d = derived(setup)
    keys = ("equilibrium", "stable", "period_years", "hopf_capacity", "lv_period_years",
            "prey_front_speed", "predator_front_speed", "best_habitat")
    out = {k: d[k] for k in keys}
    out["equilibrium"] = [None if not math.isfinite(v) else v for v in out["equilibrium"]]
    out["predator_growth_at_capacity"] = d["predator_growth_at_capacity"]
    sc = setup.scenario
    out["growth"] = sc.prey.growth
    out["prey_movement"] = sc.prey.move_coefficient
    out["predator_movement"] = sc.predator.move_coefficient if sc.has_predator else None
    out["landscape"] = d["landscape"]
    return out


def landscape_predictions(setup: Setup) -> dict:
    """Predictions for the landscape as it is: growth per class, speeds of the mix.

    The habitat classes (or suitability bands) before measures, through
    :func:`preyscape.model.landscape_theory.landscape_prediction`; JSON values
    (:func:`~preyscape.model.landscape_theory.prediction_record`) plus the
    constants that rebuild per-cell growth along a transect.
    """
    from preyscape.model import landscape_theory as lt

    sc, g, inter = setup.scenario, setup.grid, setup.interaction
    pr = _predator(sc)
    ls = sc.landscape
    table = ({c.code: c.model_dump() for c in ls.classes} if ls.values == "classes" else None)
    classes = lt.map_classes(setup.habitat, g.mask, g.dx, g.dy, table,
                             {c.code: c.name or str(c.code) for c in ls.classes})
    K = sc.prey.capacity if inter.logistic else None
    pred = lt.landscape_prediction(
        inter, sc.prey.growth, K, pr.mortality, sc.prey.move_coefficient,
        pr.move_coefficient, classes.multipliers, classes.cells,
        prey_kind=sc.prey.movement, predator_kind=pr.movement,
        patch_length_km=classes.patch_km, names=classes.names)
    rec = lt.prediction_record(pred, classes)
    smooth = lt.prey_spread_ratio(pred.growth.prey.growth, sc.prey.move_coefficient
                                  * classes.multipliers["prey_movement"], classes.patch_km,
                                  classes.shares)
    rec["predator"]["prey_spread_ratio"] = smooth
    rec["predator"]["prey_smoothed"] = bool(smooth > lt.PREY_SMOOTHING)
    rec["constants"] = {
        "form": inter.form, "attack_rate": inter.attack_rate, "handling_time": inter.h,
        "efficiency": inter.efficiency, "interference": inter.c, "growth": sc.prey.growth,
        "capacity": K, "mortality": pr.mortality,
        "prey_move": sc.prey.move_coefficient, "predator_move": pr.move_coefficient,
        "prey_kind": sc.prey.movement, "predator_kind": pr.movement}
    rec["measures_included"] = False
    return rec


def derived(setup: Setup) -> dict:
    """Numbers that describe a scenario before it runs (printed by ``check``).

    Returns a dict with the grid, the step, per-species movement numbers
    (cells crossed per step), best-habitat equilibria and stability, the
    Rosenzweig–MacArthur Hopf capacity, predicted front speeds, critical patch
    sizes, and estimates of memory and disk use.
    """
    sc, g, inter = setup.scenario, setup.grid, setup.interaction
    b = _best(sc, setup.fields)
    K_arg = b["K"] if inter.logistic else None
    stab = theory.local_stability(inter, b["r"], K_arg, b["m"])
    n_snap = round(sc.run.years / sc.run.save_every) + 1
    h_km2 = (min(g.dx, g.dy) / 1000.0) ** 2
    cells = g.ny * g.nx
    growth_P = (theory.predator_growth_at_capacity(inter, b["K"], b["m"])
                if math.isfinite(b["K"]) else None)
    out = {
        "grid": {
            "rows": g.ny, "cols": g.nx, "cells_with_data": g.n_cells,
            "cell_size_m": (g.dx, g.dy), "extent_km": (g.width_m / 1e3, g.height_m / 1e3),
        },
        "step_years": setup.dt,
        "steps": round(sc.run.years / setup.dt),
        "scheme": sc.run.scheme,
        "movement_per_step": {"prey": b["D_N"] * setup.dt / h_km2,
                              "predator": b["D_P"] * setup.dt / h_km2},
        "best_habitat": b,
        "equilibrium": stab["equilibrium"],
        "stable": stab["stable"],
        "period_years": stab["period"],
        "hopf_capacity": theory.hopf_capacity(inter, b["m"]) if inter.h > 0 else None,
        "lv_period_years": (theory.lv_period(b["r"], b["m"])
                            if b["r"] > 0 and b["m"] > 0 else None),
        "prey_front_speed": theory.fisher_speed(b["r"], b["D_N"]),
        "predator_front_speed": theory.predator_speed(inter, b["K"], b["m"], b["D_P"]),
        "predator_growth_at_capacity": growth_P,
        "critical_patch_prey": theory.critical_patch(b["r"], b["D_N"]),
        "critical_patch_predator": theory.critical_patch(
            growth_P if growth_P is not None else math.nan, b["D_P"]),
        # per cell during the run: state and transposed work (32 B), reaction fields (12),
        # per species faces and weights in two orientations (24) and pivots (32), unit
        # weights (8), habitat (4), start and output buffers: ~180 B; plus ~250 MB for
        # Python and the libraries (measured: benchmarks/run.py --only memory)
        "memory_mb": limits.memory_estimate_mb(cells),
        "disk_mb": n_snap * cells * 2 * 4 / 1e6,  # float32 snapshots before compression
        "snapshots": n_snap,
        "measures": [m.summary(g.cell_area_km2) for m in setup.measures],
        "fence_topology": fence_topology(sc, g, setup.measures),
        "landscape": landscape_predictions(setup),
        "variants": [
            {"name": v.name, "add": list(v.add), "remove": list(v.remove), "set": dict(v.set)}
            for v in sc.variants
        ],
    }
    if not sc.has_predator:  # prey alone: no predator numbers to print or record
        out.update(equilibrium=(math.nan, math.nan), stable=None, period_years=None,
                   hopf_capacity=None, lv_period_years=None, predator_front_speed=None,
                   predator_growth_at_capacity=None, critical_patch_predator=None,
                   movement_per_step={"prey": out["movement_per_step"]["prey"]},
                   best_habitat={k: b[k] for k in ("r", "K", "D_N")})
    out["species"] = list(sc.species)
    return out


def fence_topology(sc: Scenario, grid: Grid, measures) -> list[dict]:
    """Length, open ends and separation of each fence and closed refuge outline.

    See :func:`preyscape.landscape.topology.measure_topologies`; the warnings
    name the species as the scenario does.
    """
    from preyscape.landscape.topology import measure_topologies

    who = {"prey": "prey", "predator": "predators"}
    for sp, spec in (("prey", sc.prey), ("predator", _predator(sc))):
        who[sp] += f" ({spec.name})" if spec.name else ""
    return measure_topologies(grid, measures, who)


def variant_fence_topology(scenarios: list[Scenario]) -> dict[str, list[dict]]:
    """:func:`fence_topology` of every variant's measures, before any run.

    Returns variant name to its records; variants without fences or closed
    refuges are left out.
    """
    from preyscape.landscape.io import read_habitat

    if not scenarios:
        return {}
    ls = scenarios[0].landscape
    grid, _ = read_habitat(scenarios[0].resolve(ls.habitat), ls.values, ls.cell_size,
                           source=_source(scenarios[0], f"landscape.habitat ({ls.habitat})"))
    out = {}
    for v in scenarios:
        recs = fence_topology(v, grid, place_measures(v, grid))
        if recs:
            out[v.variant] = recs
    return out
