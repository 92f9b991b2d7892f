"""The report of a run: every analysis of a run folder in one self-contained HTML page.

:func:`write_report` runs the hotspot, travelling-wave and effect analyses
(and a comparison with each other run given) into a temporary folder, embeds
their figures and key numbers in a :class:`preyscape.report.Report`, and
writes one HTML file. The temporary products are removed; run
``preyscape hotspots``, ``waves``, ``effects`` or ``compare`` to keep the
GeoTIFFs and tables.
"""

from __future__ import annotations

import json
import math
import shutil
import tempfile
from pathlib import Path
from typing import Any

from preyscape.errors import InputError
from preyscape.store import SPECIES, open_run

SOURCES = [
    "Lotka–Volterra interaction: Lotka 1925; Volterra 1926, Nature 118:558.",
    "Holling type II / Rosenzweig–MacArthur: Rosenzweig & MacArthur 1963, Am Nat 97:209; "
    "Hopf capacity: Rosenzweig 1971, Science 171:385.",
    "Fisher–KPP front speed 2√(rD): Fisher 1937, Ann Eugen 7:355; Kolmogorov, Petrovsky & "
    "Piskunov 1937. Finite-time delay of a front: Bramson 1983, Mem AMS 44(285).",
    "Predator invasion speed 2√(D(eaK/(1+ahK) − m)): Dunbar 1983, J Math Biol 17:11; Owen & "
    "Lewis 2001, Bull Math Biol 63:655.",
    "Ecological diffusion (motility): Turchin 1998, Quantitative Analysis of Movement; "
    "Garlick et al. 2011, Bull Math Biol 73:2088.",
    "Getis–Ord Gi*: Getis & Ord 1992, Geogr Anal 24:189; Ord & Getis 1995, Geogr Anal "
    "27:286. False discovery rate: Benjamini & Hochberg 1995, J R Stat Soc B 57:289.",
    "Numerical method: Strang 1968, SIAM J Numer Anal 5:506; Peaceman & Rachford 1955, "
    "J SIAM 3:28; Hundsdorfer & Verwer 2003, Numerical Solution of Time-Dependent "
    "Advection-Diffusion-Reaction Equations, Springer.",
]


def _num(x: Any, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if isinstance(x, (int, float)):
        return f"{x:.{digits}g}" + (f" {unit}" if unit else "")
    return str(x)


def _name(info: dict, sp: str) -> str:
    n = (info.get("species") or {}).get(sp) or ""
    return f"{sp} ({n})" if n else sp


def _run_label(run) -> str:
    return f"{run.info.get('variant', 'baseline')} ({run.path.name})"


def find_without_refuge(run_folder: Path, info: dict) -> Path | None:
    """A sibling run folder of the same scenario without this run's refuges, if any.

    Looks in the parent folder for a run made from the same scenario file
    whose measures are this run's minus every refuge.
    """
    mine = {m["name"] for m in info.get("measures", [])}
    refuges = {m["name"] for m in info.get("measures", []) if m["kind"] == "refuge"}
    if not refuges:
        return None
    want = mine - refuges
    for sib in sorted(Path(run_folder).resolve().parent.iterdir()):
        rec = sib / "run.json"
        if sib.resolve() == Path(run_folder).resolve() or not rec.is_file():
            continue
        try:
            other = json.loads(rec.read_text())
        except (OSError, ValueError):
            continue
        if other.get("scenario") != info.get("scenario"):
            continue
        if {m["name"] for m in other.get("measures", [])} == want:
            return sib
    return None


def _settings_section(rep, run) -> None:
    info = run.info
    g = info["grid"]
    st = info.get("settings") or {}
    sec = rep.section("Scenario and run")
    facts = [
        ("scenario file", info.get("scenario", "")),
        ("variant", info.get("variant", "baseline")),
        ("run folder", str(run.path)),
        ("grid", f"{g['rows']} rows × {g['cols']} columns of {g['cell_size_m'][0]:g} × "
                 f"{g['cell_size_m'][1]:g} m; {g['cells_with_data']} cells with data"),
        ("simulated time", f"{info['years']:g} years, snapshots every "
                           f"{info['save_every_years']:g} yr ({info['snapshots']} snapshots)"),
        ("time step", f"{info['step_years']:.4g} yr ({info['steps']} steps, scheme "
                      f"{info.get('scheme')})"),
    ]
    for sp in SPECIES if st else ():
        s = st.get(sp) or {}
        coef = s.get("diffusivity") if s.get("movement") == "fickian" else s.get("motility")
        what = "diffusivity" if s.get("movement") == "fickian" else "motility"
        rate = (f"growth {s.get('growth')} /yr, capacity {s.get('capacity')} per km²"
                if sp == "prey" else f"mortality {s.get('mortality')} /yr")
        facts.append((_name(info, sp), f"{rate}; {s.get('movement')} movement, {what} "
                                       f"{coef} km²/yr (best habitat)"))
    it = st.get("interaction") or {}
    if it:
        facts.append(("interaction", f"{it.get('form')}: attack rate {it.get('attack_rate')} "
                                     f"km²/yr, handling time {it.get('handling_time')} yr, "
                                     f"efficiency {it.get('efficiency')}"))
    pr = info.get("predictions") or {}
    eq = pr.get("equilibrium") or [None, None]
    facts += [
        ("equilibrium, best habitat", f"prey {_num(eq[0], 'per km²')}, predator "
                                      f"{_num(eq[1], 'per km²')}"
                                      + ("" if pr.get("stable") is None else
                                         (" (stable)" if pr.get("stable") else
                                          " (unstable: populations cycle)"))),
        ("Hopf capacity", _num(pr.get("hopf_capacity"), "prey per km²")),
        ("predicted front speeds", "prey into empty habitat "
                                   f"{_num(pr.get('prey_front_speed'), 'km/yr')}; "
                                   "predators into prey at capacity "
                                   f"{_num(pr.get('predator_front_speed'), 'km/yr')}"),
        ("computed with", f"preyscape {info.get('preyscape_version')} in "
                          f"{info.get('wall_time_s')} s; finished {info.get('finished')}"),
    ]
    sec.facts(facts)
    ms = info.get("measures") or []
    if ms:
        rows = []
        for m in ms:
            size = (f"{m['area_km2']:.3g} km²" if "area_km2" in m else "")
            if "faces" in m:
                size = (size + "; " if size else "") + f"{m['faces']} cell faces"
            end = "end" if m.get("end_year") is None else f"{m['end_year']:g}"
            detail = ""
            if m["kind"] == "fence":
                p = m.get("permeability", {})
                detail = (f"permeability prey {p.get('prey')}, predator {p.get('predator')}; "
                          f"{len(m.get('gaps', []))} gaps")
            elif m["kind"] == "refuge":
                detail = (f"{m.get('protected_fraction')} of prey protected"
                          + ("; closed to predators" if m.get("closed_to_predators") else ""))
            else:
                detail = ", ".join(f"{k} = {v}" for k, v in (m.get("sets") or {}).items())
            rows.append([m["name"], m["kind"], f"{m['start_year']:g}–{end}", size, detail])
        sec.table(["measure", "kind", "years", "size", "settings"], rows,
                  caption="Measures in this run")
    else:
        sec.paragraph("This run has no corridors, fences or refuges.")


def _maps_section(rep, run, gif: Path | None) -> None:
    maps = run.path / "maps"
    info = run.info
    sec = rep.section("Maps")
    sec.paragraph("All densities are animals per km². Grey cells have no habitat data. "
                  "Time means average the snapshots after the start.")
    for f, cap in (("habitat.png", "Habitat classes and measures"),
                   ("prey_mean.png", f"Time-mean density of {_name(info, 'prey')}"),
                   ("predator_mean.png", f"Time-mean density of {_name(info, 'predator')}"),
                   ("totals.png", "Animals in the whole landscape over time"),
                   ("prey_snapshots.png", "Prey from start to end, on one colour scale"),
                   ("predator_snapshots.png", "Predators from start to end")):
        if (maps / f).is_file():
            sec.figure(maps / f, cap, cap)
    if gif is not None and gif.is_file():
        sec.figure(gif, "Animation of both species (each on one colour scale for the "
                   "whole run)", "animated maps of prey and predator density")


def _hotspot_section(rep, hs: dict, tmp: Path, info: dict) -> None:
    sec = rep.section("Hotspots")
    sec.paragraph(
        f"Getis–Ord Gi* z-scores of the time-mean density, with every cell within "
        f"{hs['band_m']:g} m as a neighbour (binary distance band, the cell itself included). "
        f"A cell is a significant hotspot (or coldspot) when its two-sided p-value passes "
        f"the Benjamini–Hochberg false-discovery-rate test at {hs['alpha']:g}. On smooth "
        "density fields large parts of the landscape pass: read hotspots as where animals "
        "cluster, not as rare anomalies. Persistence is the share of snapshots in which a "
        "cell is a hotspot.")
    rows = []
    for sp in SPECIES:
        d = hs["species"][sp]
        rows.append([_name(info, sp), d["n_cells"], d["hot_cells"], d["hot_area_km2"],
                     d["cold_cells"], 100.0 * d["hot_share_of_animals"]])
    sec.table(["species", "cells", "hotspot cells", "hotspot area (km²)", "coldspot cells",
               "animals on hotspots (%)"], rows)
    for png in hs["maps"]:
        cap = png.replace("_", " ").removesuffix(".png")
        sec.figure(tmp / png, cap, cap)


def _wave_section(rep, wv: dict, tmp: Path, info: dict) -> None:
    sec = rep.section("Travelling waves")
    thr = wv.get("thresholds", {})
    sec.paragraph(
        "The arrival time of a cell is the first time its density reaches the threshold "
        f"(prey {_num(thr.get('prey'), 'per km²')}, predators "
        f"{_num(thr.get('predator'), 'per km²')}). The front speed along a transect is the "
        "slope of the front's position against time. Predicted speeds are the published "
        "minimal speeds for the best habitat: Fisher–KPP 2√(rD) for prey spreading into "
        "empty habitat, and Dunbar's 2√(D(eaK/(1+ahK) − m)) for predators invading prey at "
        "capacity. A front approaches its minimal speed from below: over a few kilometres "
        "it is slower, and poorer habitat slows it further.")
    rows = []
    notes = []
    # a species that occupies most of the landscape from the start has no front to follow
    settled = [sp for sp in SPECIES
               if (wv.get("arrival", {}).get(sp) or {}).get("present_at_start_fraction", 0) > 0.5]
    for sp in settled:
        notes.append(f"{_name(info, sp)} occupied most of the landscape from the start, so "
                     "there is no front of it to follow.")
    for f in wv.get("fronts", []):
        if f["species"] in settled or f["n"] < 2:
            continue
        rows.append([f["transect"], _name(info, f["species"]), f["speed_km_yr"],
                     f["stderr_km_yr"], f["predicted_km_yr"], f["ratio"], f["n"],
                     f["wavelength_km"], f["period_yr"]])
        if isinstance(f["ratio"], float) and math.isfinite(f["ratio"]):
            notes.append(f"{f['transect']}, {f['species']}: the fitted front moved at "
                         f"{100 * f['ratio']:.0f} % of the minimal speed predicted for the "
                         "best habitat. Below 100 % is expected over short distances (a "
                         "front approaches its minimal speed from below; Bramson 1983) and "
                         "where poorer habitat lies on the way; well above it would point "
                         "to a too coarse step or threshold.")
    if rows:
        sec.table(["transect", "species", "fitted speed (km/yr)", "std. error (km/yr)",
                   "predicted minimal speed (km/yr)", "fitted / predicted", "snapshots",
                   "wavelength behind the front (km)", "period behind the front (yr)"],
                  rows)
    else:
        sec.paragraph("No front could be fitted (no transect, or no front crossed one).")
    if notes:
        sec.bullets(notes)
    for png in wv.get("pngs", []):
        if any(png.startswith(f"{sp}_") or png.endswith(f"_{sp}.png") for sp in settled):
            continue
        if png.startswith("front_") and not any(
                png == f.get("figure") for f in wv.get("fronts", []) if f["n"] >= 2):
            continue
        cap = png.replace("_", " ").removesuffix(".png")
        if png.endswith("_front_speed.png"):
            cap += (" (1/|∇T| of the arrival time T; very large values mark places the front "
                    "reaches almost at once, near the release or where fronts meet, not a "
                    "fast-moving front)")
        sec.figure(tmp / png, cap, cap)


def _effects_section(rep, ef: dict, tmp: Path, info: dict, without: Path | None) -> None:
    if ef["refuges"]:
        sec = rep.section("Refuges")
        if without is not None:
            sec.paragraph(f"Compared with the run without the refuge: {without}. The "
                          "spill-over profile is the difference of the time-mean prey "
                          "density (with − without) against distance from the refuge edge, "
                          "with an exponential fit and its decay length.")
        else:
            sec.paragraph("No run without the refuge was found beside this one, so the "
                          "spill-over profile is that of the time-mean prey density itself. "
                          "Run a variant that removes the refuge to isolate its effect.")
        rows = []
        for r in ef["refuges"]:
            for sp in SPECIES:
                io = r[sp]["inside_outside"]
                wo = r[sp]["inside_outside_without"] or {}
                for region in ("inside", "outside"):
                    a = io[region]
                    b = wo.get(region, {})
                    rows.append([r["name"], _name(info, sp), region, a["mean_density"],
                                 b.get("mean_density"), a["min_mean_density"],
                                 b.get("min_mean_density"), a["persistence"],
                                 b.get("persistence")])
        sec.table(["refuge", "species", "region", "mean density (per km²)",
                   "without refuge", "lowest mean density (per km²)", "without refuge",
                   "persistence", "without refuge"], rows,
                  caption="Inside versus outside each refuge (densities in animals per km²; "
                  "persistence: share of snapshots with at least the presence density)")
        for r in ef["refuges"]:
            sec.facts([(f"{r['name']}: decay length of the spill-over",
                        _num(r.get("decay_length_km"), "km"))])
            if r.get("figure"):
                sec.figure(tmp / r["figure"], f"Spill-over from {r['name']}",
                           f"prey density against distance from the edge of {r['name']}")
    if ef["targets"] or ef["transects"]:
        sec = rep.section("Corridors: colonisation and movement")
        if ef["targets"]:
            rows = [[t["name"], t["cells"], t.get("prey_colonised_year"),
                     t.get("predator_colonised_year")] for t in ef["targets"]]
            sec.table(["target patch", "cells", "prey colonised (year)",
                       "predators colonised (year)"], rows,
                      caption="A patch counts as colonised when half its cells reach the "
                      "arrival threshold; empty: not within the run.")
        for tr in ef["transects"]:
            sec.facts([(f"net crossing of '{tr['name']}' over the run",
                        f"prey {_num(tr['prey_net_animals'], 'animals')}, predators "
                        f"{_num(tr['predator_net_animals'], 'animals')} (positive: from its "
                        "left to its right)")])
            sec.figure(tmp / tr["figure"], f"Flows across {tr['name']}",
                       f"net flow of animals across {tr['name']} against time")


def _compare_section(rep, cmp: dict, tmp: Path, base, other) -> None:
    sec = rep.section(f"Change: {_run_label(base)} → {_run_label(other)}")
    thr = cmp["settings"]["threshold"]
    area = cmp["changed_area_km2"]
    sec.paragraph(
        f"Run A is {base.path}; run B is {other.path}. Differences are B − A. A cell "
        f"changes when its time-mean density changes by more than {thr:.0%} of run A's, "
        "or when a species becomes present or absent there.")
    rows = [[k, cmp["changed_cells"][k], area[k]] for k in cmp["changed_cells"]]
    sec.table(["change", "cells", "area (km²)"], rows)
    tot = cmp.get("time_mean_totals_animals") or {}
    if tot:
        rows = []
        for sp, v in tot.items():
            if not isinstance(v, dict):
                continue
            a, b = v.get("a"), v.get("b")
            pct = 100.0 * (b - a) / a if a else None
            rows.append([sp, a, b, pct])
        sec.table(["species", "run A (animals)", "run B (animals)", "change (%)"], rows,
                  caption="Time-mean animals in the whole landscape", numeric_format="{:,.0f}")
    for f, cap in (("change.png", "Where the outcome changes"),
                   ("prey_mean_difference.png", "Prey time-mean density, B − A"),
                   ("predator_mean_difference.png", "Predator time-mean density, B − A"),
                   ("totals.png", "Landscape totals of both runs")):
        if (tmp / f).is_file():
            sec.figure(tmp / f, cap, cap)


def write_report(
    run_folder: str | Path,
    out: str | Path | None = None,
    others: list[str | Path] | tuple = (),
    overwrite: bool = False,
    animate: bool = True,
) -> Path:
    """Analyse a run (and compare it with others) into one self-contained HTML file.

    Parameters
    ----------
    run_folder : str or pathlib.Path
        The run to report on.
    out : str or pathlib.Path, optional
        The HTML file; default ``<run_folder>/report.html``.
    others : sequence of paths
        Runs of the same grid to compare with (each as B against this run as A).
    overwrite : bool
        Replace an existing report file.
    animate : bool
        Include the animated GIF of both species.

    Returns
    -------
    pathlib.Path
        The report file.
    """
    from preyscape.plots.animate import animate_run
    from preyscape.products.compare import write_comparison
    from preyscape.products.effects import colonisation, write_effects
    from preyscape.products.hotspots import write_hotspots
    from preyscape.products.waves import write_waves
    from preyscape.report import Report

    run = open_run(run_folder)
    info = run.info
    out = Path(out) if out is not None else run.path / "report.html"
    if out.exists() and not overwrite:
        raise InputError("report file already exists; choose another with --out or pass "
                         "--overwrite to replace it", str(out))
    others = [open_run(o) for o in others]
    settings = info.get("analysis") or {}
    pr = info.get("predictions") or {}
    title = info.get("title") or run.path.name
    years = info["years"]
    sub = f"variant {info.get('variant', 'baseline')}: {years:g} year{'' if years == 1 else 's'}"
    if others:
        sub += " — compared with " + ", ".join(_run_label(o) for o in others)
    rep = Report(title, sub)
    work = Path(tempfile.mkdtemp(prefix=".preyscape-report-", dir=out.parent
                                 if out.parent.exists() else None))
    try:
        _settings_section(rep, run)
        gif = None
        if animate:
            gif = animate_run(run.path / "results.nc", work / "animation.gif",
                              names=info.get("species"), title=title)
        _maps_section(rep, run, gif)
        hs = write_hotspots(run.path, work / "hotspots", settings.get("hotspot_distance"),
                            settings.get("significance", 0.05))
        _hotspot_section(rep, hs, work / "hotspots", info)
        thresholds = {sp: settings.get(f"{sp}_threshold") for sp in SPECIES}
        thresholds = {k: v for k, v in thresholds.items() if v}
        transects = settings.get("transects") or None
        wv = write_waves(run.path, work / "waves", transects, thresholds or None,
                         {"prey": pr.get("prey_front_speed"),
                          "predator": pr.get("predator_front_speed")})
        _wave_section(rep, wv, work / "waves", info)
        without = find_without_refuge(run.path, info)
        ef = write_effects(run.path, work / "effects", without=without)
        _effects_section(rep, ef, work / "effects", info, without)
        for k, o in enumerate(others):
            cmp = write_comparison(run.path, o.path, work / f"compare-{k}",
                                   settings.get("change_threshold", 0.10),
                                   settings.get("presence", 1.0))
            _compare_section(rep, cmp, work / f"compare-{k}", run, o)
            targets = colonisation(o.path, o.info)
            if targets:
                sec = rep.section(f"Colonisation in {_run_label(o)}")
                sec.table(["target patch", "prey colonised (year)",
                           "predators colonised (year)"],
                          [[t["name"], t.get("prey_colonised_year"),
                            t.get("predator_colonised_year")] for t in targets])
        src = rep.section("Methods and sources")
        src.paragraph("preyscape solves reaction–diffusion equations for the densities of "
                      "both species on the habitat raster (Strang splitting of the local "
                      "interaction and movement; Peaceman–Rachford ADI for movement). See "
                      "docs/method.md for the equations and the published checks in the "
                      "test suite.")
        src.bullets(SOURCES)
        rep.write(out, overwrite=overwrite)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    return out
