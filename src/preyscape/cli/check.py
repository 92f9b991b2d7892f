"""``preyscape check``: validate a scenario and print what it implies."""

from __future__ import annotations

import json
import math
from pathlib import Path


def add_parsers(sub) -> None:
    """Register ``check``."""
    c = sub.add_parser("check", help="validate a scenario and print what it implies")
    c.add_argument("scenario", type=Path, help="scenario file (TOML)")
    c.add_argument("--json", action="store_true", help="print the numbers as JSON")
    c.set_defaults(handler=check)


def check(args) -> int:
    """Validate a scenario, place every variant's measures, print what it implies."""
    from preyscape.assemble import check_variant_measures, derived, prepare
    from preyscape.scenario import load_scenario

    sc = load_scenario(args.scenario)
    setup = prepare(sc)
    d = derived(setup)
    d["variant_measures"] = check_variant_measures(
        [sc.for_variant(n) for n in sc.variant_names()[1:]])
    d.update(start_and_warnings(setup, d))
    if args.json:
        print(json.dumps(d, indent=2, default=str))
    else:
        print("\n".join(check_lines(args.scenario, d) + start_warning_lines(d)))
    return 0


# --- one species, and species that cannot invade (issue 12) ---------------------------
def _grows(rate) -> bool:
    return rate is not None and math.isfinite(rate) and rate > 0


def _cannot_grow(rate) -> bool:
    return rate is not None and math.isfinite(rate) and rate <= 0


def _prey_front_line(d: dict) -> str:
    b = d["best_habitat"]
    if not _grows(b["r"]):
        why = "prey do not grow (prey.growth = 0): they spread only by movement, with no front"
    elif not b["D_N"] > 0:
        why = "prey do not move (movement coefficient 0): no front"
    else:
        return f"prey front speed    {_fmt(d['prey_front_speed'], 'km/yr')} (Fisher–KPP 2√(rD))"
    return f"prey front speed    none: {why}"


def _predator_front_line(d: dict) -> str:
    b, gP = d["best_habitat"], d["predator_growth_at_capacity"]
    if gP is None or not math.isfinite(gP):
        why = "prey grow without limit (lotka-volterra), so there is no capacity to invade"
    elif gP <= 0:
        why = (f"predators cannot invade or persist: even in prey at capacity they gain "
               f"{_fmt(gP + b['m'], '/yr')}, no more than their mortality m = "
               f"{_fmt(b['m'], '/yr')}")
    elif not b["D_P"] > 0:
        why = "predators do not move (movement coefficient 0): no front"
    else:
        return (f"predator front      {_fmt(d['predator_front_speed'], 'km/yr')} into prey at "
                "capacity (Dunbar 1983)")
    return f"predator front      none: {why}"


def _prey_patch_line(d: dict) -> str:
    cp = d["critical_patch_prey"]
    if not _grows(d["best_habitat"]["r"]):
        return "critical patch      prey: none (prey do not grow, so no patch sustains them)"
    return (f"critical patch      prey: strip {_fmt(cp['strip_width'], 'km')}, square side "
            f"{_fmt(cp['square_side'], 'km')}, disc radius {_fmt(cp['disc_radius'], 'km')}")


def _prey_only_lines(path: Path, d: dict) -> list[str]:
    """The first lines of ``check`` for prey alone: no predator numbers, said once."""
    g, b = d["grid"], d["best_habitat"]
    lines = [
        f"scenario            {path}",
        f"grid                {g['rows']} rows x {g['cols']} cols, cell {g['cell_size_m'][0]:g}"
        f" x {g['cell_size_m'][1]:g} m, extent {g['extent_km'][0]:.3g} x "
        f"{g['extent_km'][1]:.3g} km",
        f"cells with data     {g['cells_with_data']}",
        f"time step           {_fmt(d['step_years'], 'yr')} ({d['steps']} steps, scheme "
        f"{d['scheme']})",
        "movement per step   prey D·dt/h² = " + _fmt(d["movement_per_step"]["prey"]),
        f"best habitat        r = {_fmt(b['r'], '/yr')}, K = {_fmt(b['K'], 'per km²')}",
        "predator            none: no predator in this scenario",
        _prey_front_line(d),
        _prey_patch_line(d) + "  (Skellam 1951; lethal surroundings)",
    ]
    return lines


# --- start totals and warnings (issue 12) --------------------------------------------
def start_and_warnings(setup, d: dict) -> dict:
    """``start`` (animals at t = 0, per release) and ``warnings`` (possible slips)."""
    from preyscape.plausibility import plausibility_warnings, start_totals

    return {"start": start_totals(setup),
            "warnings": [w.as_dict() for w in plausibility_warnings(setup, d)]}


def _animals(x: float) -> str:
    return f"{x:.4g} animal{'' if x == 1 else 's'}"


def start_warning_lines(d: dict) -> list[str]:
    """The start totals, each release, and the warnings, clearly marked."""
    from preyscape.plausibility import CheckWarning

    st = d["start"]
    pred = "" if st["predator"] is None else f", predator {_animals(st['predator'])}"
    lines = [f"start totals        prey {_animals(st['prey'])}{pred} (in "
             f"{st['cells']} cells with data)"]
    for r in st["releases"]:
        lines.append(f"released            {r['key']}: {_animals(r['animals'])} ({r['species']}) "
                     f"in {r['cells']} cell{'' if r['cells'] == 1 else 's'}")
    ws = d["warnings"]
    if ws:
        lines.append(f"WARNINGS            {len(ws)}: the scenario is valid and runs, but check "
                     "these values (a slip of units?)")
        lines += [f"  WARNING {CheckWarning(**w).line()}" for w in ws]
    return lines


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "none" if x is None else ("unbounded" if x == math.inf else "n/a")
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def check_lines(path: Path, d: dict) -> list[str]:
    """The lines ``check`` prints for the numbers of :func:`preyscape.assemble.derived`."""
    g = d["grid"]
    eq = d["equilibrium"]
    b = d["best_habitat"]
    prey_only = "predator" not in d.get("species", ("prey", "predator"))
    lines = _prey_only_lines(path, d) if prey_only else [
        f"scenario            {path}",
        f"grid                {g['rows']} rows x {g['cols']} cols, cell {g['cell_size_m'][0]:g}"
        f" x {g['cell_size_m'][1]:g} m, extent {g['extent_km'][0]:.3g} x "
        f"{g['extent_km'][1]:.3g} km",
        f"cells with data     {g['cells_with_data']}",
        f"time step           {_fmt(d['step_years'], 'yr')} ({d['steps']} steps, scheme "
        f"{d['scheme']})",
        "movement per step   prey D·dt/h² = " + _fmt(d["movement_per_step"]["prey"])
        + ", predator = " + _fmt(d["movement_per_step"]["predator"]),
        f"best habitat        r = {_fmt(b['r'], '/yr')}, K = {_fmt(b['K'], 'per km²')}, "
        f"m = {_fmt(b['m'], '/yr')}",
        f"equilibrium         prey {_fmt(eq[0], 'per km²')}, predator {_fmt(eq[1], 'per km²')}"
        + ("" if d["stable"] is None else (" (stable)" if d["stable"] else " (unstable: cycles)")),
        f"local period        {_fmt(d['period_years'], 'yr')} (Lotka–Volterra small-amplitude "
        f"2π/√(rm) = {_fmt(d['lv_period_years'], 'yr')})",
    ]
    if d["hopf_capacity"] is not None:
        lines.append(f"Hopf capacity       K_H = {_fmt(d['hopf_capacity'], 'per km²')} "
                     "(oscillations where K > K_H; Rosenzweig 1971)")
    cq = d["critical_patch_predator"]
    lines += [] if prey_only else [
        _prey_front_line(d),
        _predator_front_line(d),
        _prey_patch_line(d),
        "                    predator: none (predators cannot grow even in prey at capacity)"
        if _cannot_grow(d["predator_growth_at_capacity"]) else
        f"                    predator (prey at K): strip {_fmt(cq['strip_width'], 'km')}, "
        f"square side {_fmt(cq['square_side'], 'km')}, disc radius "
        f"{_fmt(cq['disc_radius'], 'km')}  (Skellam 1951; lethal surroundings)",
    ]
    lines += [
        f"memory estimate     {_fmt(d['memory_mb'], 'MB', 3)}",
        f"results on disk     {d['snapshots']} snapshots, at most "
        f"{_fmt(d['disk_mb'], 'MB', 3)} before compression",
    ]
    for m in d.get("measures", []):
        size = (f"{m['cells']} cells, {m['area_km2']:.3g} km²" if "cells" in m else "")
        if "faces" in m:
            size += (", " if size else "") + f"{m['faces']} cell faces"
        when = f"years {m['start_year']:g}–{'end' if m['end_year'] is None else m['end_year']}"
        lines.append(f"measure             {m['kind']} '{m['name']}': {size}; {when}")
    for m in d.get("variant_measures", []):
        size = (f"{m['cells']} cells, {m['area_km2']:.3g} km²" if "cells" in m else "")
        if "faces" in m:
            size += (", " if size else "") + f"{m['faces']} cell faces"
        lines.append(f"measure             {m['kind']} '{m['name']}': {size} "
                     f"(in variants {', '.join(m['variants'])})")
    for v in d.get("variants", []):
        parts = [f"+{a}" for a in v["add"]] + [f"-{r}" for r in v["remove"]]
        parts += [f"{k} = {x}" for k, x in v["set"].items()]
        lines.append(f"variant             {v['name']}: {', '.join(parts) or 'as baseline'}")
    return lines
