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
    from preyscape.assemble import check_variant_measures, prepare
    from preyscape.preview import derived, variant_fence_topology
    from preyscape.scenario import load_scenario

    sc = load_scenario(args.scenario)
    setup = prepare(sc, allow_large=args.allow_large)
    d = derived(setup)
    variants = [sc.for_variant(n) for n in sc.variant_names()[1:]]
    d["variant_measures"] = check_variant_measures(variants)
    d["variant_fence_topology"] = variant_fence_topology(variants)
    d.update(start_and_warnings(setup, d))
    if args.json:
        from preyscape.store import json_safe

        print(json.dumps(json_safe(d), indent=2, default=str, allow_nan=False))
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
        return (f"prey front speed    {_fmt(d['prey_front_speed'], 'km/yr')} "
                "(Fisher–KPP 2√(rD), best habitat)")
    return f"prey front speed    none: {why}"


def _predator_front_line(d: dict) -> str:
    b, gP = d["best_habitat"], d["predator_growth_at_capacity"]
    if gP is None or not math.isfinite(gP):
        return ("predator front      not defined: prey without a carrying capacity "
                "(Lotka–Volterra), so there is no capacity to invade")
    if gP <= 0:
        why = (f"predators cannot invade or persist: even in prey at capacity they gain "
               f"{_fmt(gP + b['m'], '/yr')}, no more than their mortality m = "
               f"{_fmt(b['m'], '/yr')} (best habitat)")
    elif not b["D_P"] > 0:
        why = "predators do not move (movement coefficient 0): no front"
    else:
        return (f"predator front      {_fmt(d['predator_front_speed'], 'km/yr')} into prey at "
                "capacity (Dunbar 1983, best habitat)")
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
    """The lines ``check`` prints for the numbers of :func:`preyscape.preview.derived`."""
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
    if d.get("landscape"):
        lines += landscape_lines(d)
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
    return lines + topology_lines(d)


def _km(x: float) -> str:
    return f"{x / 1000:.3g} km" if x >= 1000 else f"{x:.0f} m"


def topology_lines(d: dict) -> list[str]:
    """Lines about each fence's open ends and separation, warnings last."""
    from preyscape.landscape.topology import metres_text, place_text

    groups = [("baseline", d.get("fence_topology") or [])]
    groups += list((d.get("variant_fence_topology") or {}).items())
    lines, warnings, seen = [], [], set()
    for variant, recs in groups:
        for t in recs:
            if t["species"] is None:
                continue
            ends = t["open_ends"]
            what = ("separates the landscape into "
                    + " and ".join(f"{a:.3g}" for a in t["sides_km2"]) + " km²"
                    if t["separates"] else "does not separate the landscape")
            if ends:
                what += "; open " + ("end" if len(ends) == 1 else "ends") + " at " + "; ".join(
                    f"{place_text(e['x'], e['y'])} (way round {metres_text(e['way_round_m'])}"
                    + (", a gate)" if e["at_gap"] else ")") for e in ends)
            who = "prey" if t["species"] == "prey" else "predators"
            lines.append(f"fence topology      {t['kind']} '{t['name']}' [{variant}], stops "
                         f"{who}: {_km(t['length_m'])}, {t['faces']} faces; {what}")
            if t.get("warning") and (t["name"], t["species"], t["warning"]) not in seen:
                seen.add((t["name"], t["species"], t["warning"]))
                warnings.append(f"WARNING             {t['warning']}")
    return lines + warnings


# --- growth per class and predictions for the landscape as it is (issue 15) -----------
_INDENT = " " * 20
_WIDTH = 100


def _wrap(head: str, text: str) -> list[str]:
    import textwrap

    return textwrap.wrap(text, _WIDTH, initial_indent=f"{head:<20}", subsequent_indent=_INDENT)


def _growth_cell(g) -> str:
    if g is None:
        return "n/a"
    return f"{g:+.3g} {'source' if g > 0 else 'sink'}"


def _species_speed(d: dict, sp: str) -> list[str]:
    """What a species' front does on the landscape as it is, in words where it cannot spread."""
    from preyscape.model.theory import mean_front_speed

    rec = d["landscape"][sp]
    who = "prey" if sp == "prey" else "predators"
    best = d[f"{sp}_front_speed"]
    if rec.get("speed") is None:
        return _wrap(f"{sp} landscape", rec["message"])
    if rec["status"] != "invasion expected":
        if not rec.get("source_share"):
            text = f"no front: {who} cannot grow in any habitat class, so they cannot invade."
        else:
            text = f"no invasion expected. {rec['message']}"
        return _wrap(f"{sp} landscape", text)
    c = rec["speed"]
    text = f"{_fmt(c, 'km/yr', 3)} in a fine-grained mix of these classes (homogenised"
    if best and math.isfinite(best) and best > 0:
        text += f"; {100 * c / best:.0f} % of the best-habitat {_fmt(best, 'km/yr', 3)}"
    text += "; Shigesada, Kawasaki & Teramoto 1986)."
    if best and math.isfinite(best) and c > 1.005 * best:
        text += (f" It exceeds the best-habitat value because {who} move faster through other "
                 "classes.")
    if rec.get("coarse"):
        text += (f" The patches are coarse for {who} (grain {rec['grain']:.3g} > 1), so this "
                 "value is only a guide: large source patches can carry a front even where the "
                 "mean growth is negative, and large sinks can stop one.")
    if rec.get("prey_smoothed"):
        text += (" Prey spread over a distance (√(D/r)) comparable to some patches "
                 f"({rec['prey_spread_ratio']:.2g} of their length), so they will not sit at "
                 "each class's capacity ahead of the predators, which this value assumes: it is "
                 "only a guide (waves uses the prey density the run had ahead of the front).")
    years = d["steps"] * d["step_years"]
    lam = rec.get("decay_rate")
    if lam and years > 0:
        # the front is fitted while it crosses the map (waves leaves out the first 20 %)
        across = max(d["grid"]["extent_km"])
        t1 = min(years, across / c)
        w = mean_front_speed(c, lam, 0.2 * t1, t1)
        span = (f"years {0.2 * t1:.3g}–{t1:.3g}"
                + (" of this run" if t1 >= years else
                   f" (the front needs about {t1:.3g} years to cross the {across:.3g} km map)"))
        if w.mean <= 0:
            text += (f" A front from a local release approaches it from below, and over {span} "
                     f"it lags by more than this speed ({_fmt(w.correction, 'km/yr', 3)}; "
                     "Bramson 1983): far from the asymptotic regime, hardly a front yet. Seeing "
                     f"this speed needs a run much longer than 1/growth = "
                     f"{1 / rec['growth']:.3g} years, on a landscape large enough for the front "
                     "to travel that long.")
        else:
            text += (f" A front from a local release approaches it from below: over {span} "
                     f"expect about {_fmt(w.mean, 'km/yr', 3)} on average (Bramson 1983)")
            more = ("a longer run" if t1 >= years else
                    "a larger landscape (the front is still forming while it crosses this one)")
            text += (f", far from the asymptotic regime: {more} is needed to see this speed."
                     if w.far_from_asymptotic else ".")
    return _wrap(f"{sp} landscape", text)


def landscape_lines(d: dict) -> list[str]:
    """``check``'s lines on growth per habitat class and the landscape's own predictions.

    ``d["landscape"]`` is :func:`preyscape.preview.landscape_predictions`: the
    growth rate at low density of each species per class (prey r·multiplier;
    predators e f(K_class) − m_class with prey at the class's capacity),
    source or sink, the sink share, a verdict in words, and the homogenised
    invasion speed (``docs/method.md``, "Predictions for a mixed landscape").
    """
    rec = d["landscape"]
    species = [sp for sp in ("prey", "predator") if sp in d.get("species", ("prey", "predator"))]
    unit = "band" if rec["basis"] == "suitability" else "class"
    width = max([len(unit)] + [len(c["name"]) for c in rec["classes"]]) + 2
    lines = _wrap(f"growth per {unit}", "growth rate at low density, per year; > 0 source, "
                  "≤ 0 sink" + ("; predators with prey at each class's capacity"
                               if "predator" in species else ""))
    lines.append(f"{_INDENT}{unit:<{width}}{'share':>7}  {'patch':>9}  "
                 + "".join(f"{sp:<14}" for sp in species).rstrip())
    for c in rec["classes"]:
        patch = "n/a" if c["patch_km"] is None else f"{c['patch_km']:.3g} km"
        lines.append(f"{_INDENT}{c['name']:<{width}}{100 * c['share']:>5.1f} %  {patch:>9}  "
                     + "".join(f"{_growth_cell(c[f'{sp}_growth']):<14}"
                               for sp in species).rstrip())
    sinks = []
    for sp in species:
        share = rec[sp]["sink_share"]
        if all(c[f"{sp}_growth"] is None for c in rec["classes"]):
            share = None  # growth not defined (predators on prey without a capacity)
        sinks.append(f"{sp} {'n/a' if share is None else f'{100 * share:.1f} %'}")
    lines.append(f"{'sink share':<20}" + ", ".join(sinks) + " of the landscape")
    for sp in species:
        lines += _wrap(f"{sp} growth", rec[sp]["verdict"])
    for sp in species:
        lines += _species_speed(d, sp)
    note = (("Habitat as in the class table" if rec["basis"] == "classes" else
             "Suitability in bands of 0.1, each taken at its mean")
            + ", before measures (corridors, refuges, fences). "
            "These are properties of the equations, not of the animals: a model is not a field "
            "survey.")
    lines += _wrap("note", note)
    return lines
