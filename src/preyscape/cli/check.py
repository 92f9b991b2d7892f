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
    c.add_argument("--allow-large", action="store_true",
                   help="check even when the memory estimate exceeds the available memory or "
                   "the run needs more than a million steps")
    c.set_defaults(handler=check)


def check(args) -> int:
    """Validate a scenario, place every variant's measures, print what it implies."""
    from preyscape.assemble import check_variant_measures, derived, prepare
    from preyscape.scenario import load_scenario

    sc = load_scenario(args.scenario)
    d = derived(prepare(sc, allow_large=args.allow_large))
    d["variant_measures"] = check_variant_measures(
        [sc.for_variant(n) for n in sc.variant_names()[1:]])
    if args.json:
        from preyscape.store import json_safe

        print(json.dumps(json_safe(d), indent=2, default=str, allow_nan=False))
    else:
        print("\n".join(check_lines(args.scenario, d)))
    return 0


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "none" if x is None else ("unbounded" if x == math.inf else "n/a")
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def check_lines(path: Path, d: dict) -> list[str]:
    """The lines ``check`` prints for the numbers of :func:`preyscape.assemble.derived`."""
    g = d["grid"]
    eq = d["equilibrium"]
    b = d["best_habitat"]
    lines = [
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
    cp, cq = d["critical_patch_prey"], d["critical_patch_predator"]
    lines += [
        f"prey front speed    {_fmt(d['prey_front_speed'], 'km/yr')} (Fisher–KPP 2√(rD))",
        f"predator front      {_fmt(d['predator_front_speed'], 'km/yr')} into prey at capacity "
        "(Dunbar 1983)",
        f"critical patch      prey: strip {_fmt(cp['strip_width'], 'km')}, square side "
        f"{_fmt(cp['square_side'], 'km')}, disc radius {_fmt(cp['disc_radius'], 'km')}",
        f"                    predator (prey at K): strip {_fmt(cq['strip_width'], 'km')}, "
        f"square side {_fmt(cq['square_side'], 'km')}, disc radius "
        f"{_fmt(cq['disc_radius'], 'km')}  (Skellam 1951; lethal surroundings)",
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
