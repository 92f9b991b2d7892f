"""The report of a run: every registered analysis of a run folder in one HTML page.

:func:`write_report` runs each analysis the registry marks for the report
(:data:`preyscape.analysis.commands.ANALYSES`) on the run, and the
comparisons on the run against each other run given, into a temporary
folder; it renders the :class:`~preyscape.analysis.output.Part` values they
return with :class:`~preyscape.report.html.Report` and writes one HTML file.
The temporary outputs are removed; run ``preyscape hotspots``, ``waves``,
``effects`` or ``compare`` to keep the GeoTIFFs and tables.

Examples
--------
``run_folder`` and ``other_run`` are finished runs of one scenario; ``out_folder`` is a
folder for outputs:

>>> path = write_report(run_folder, out_folder / "report.html", [other_run], animate=False)
>>> path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
True
"""

from __future__ import annotations

import math
import shutil
import tempfile
from pathlib import Path
from typing import Any

from preyscape.analysis.output import Bullets, Facts, Figure, Paragraph, Part, Table
from preyscape.analysis.results import NO_PREDATOR
from preyscape.errors import InputError

__all__ = ["SOURCES", "write_report"]

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


def _name(run, sp: str) -> str:
    n = run.species_names[sp]
    return f"{sp} ({n})" if n != sp else sp


def render_part(rep, part: Part) -> None:
    """Add a :class:`~preyscape.analysis.output.Part` to a report as one section."""
    sec = rep.section(part.title, part.anchor)
    for b in part.blocks:
        if isinstance(b, Paragraph):
            sec.paragraph(b.text)
        elif isinstance(b, Bullets):
            sec.bullets(b.items)
        elif isinstance(b, Facts):
            sec.facts(b.items, b.caption)
        elif isinstance(b, Table):
            sec.table(list(b.header), [list(r) for r in b.rows], caption=b.caption,
                      numeric_format=b.numeric_format)
        elif isinstance(b, Figure):
            sec.figure(b.path, b.caption, b.alt or b.caption)
        else:  # pragma: no cover - a new block type without a renderer
            raise TypeError(f"no renderer for {type(b).__name__}")


def _species_facts(run) -> list[tuple[str, str]]:
    st = run.info.get("settings") or {}
    facts = []
    for sp in run.species if st else ():
        s = st.get(sp) or {}
        coef = s.get("diffusivity") if s.get("movement") == "fickian" else s.get("motility")
        what = "diffusivity" if s.get("movement") == "fickian" else "motility"
        rate = (f"growth {s.get('growth')} /yr, capacity {s.get('capacity')} per km²"
                if sp == "prey" else f"mortality {s.get('mortality')} /yr")
        facts.append((_name(run, sp), f"{rate}; {s.get('movement')} movement, {what} "
                                      f"{coef} km²/yr (best habitat)"
                       + _extinction_text(run, sp)))
    if "predator" not in run.species:
        facts.append(("predator", NO_PREDATOR))
        return facts
    it = st.get("interaction") or {}
    if it:
        facts.append(("interaction", f"{it.get('form')}: attack rate {it.get('attack_rate')} "
                                     f"km²/yr, handling time {it.get('handling_time')} yr, "
                                     f"efficiency {it.get('efficiency')}"))
    return facts


def _extinction_text(run, sp: str) -> str:
    """The species' extinction threshold as recorded in ``run.json``, or ""."""
    ex = (run.info.get("extinction") or {}).get(sp)
    if not ex:
        return ""
    return (f"; extinction threshold {ex['per_km2']:.4g} per km² ({ex['per_cell']:.4g} "
            "per cell): lower densities were set to zero after every step")


def _extinction_facts(run) -> list[tuple[str, str]]:
    """What the extinction thresholds removed, once for the run (none: no fact)."""
    if not any((run.info.get("extinction") or {}).values()):
        return []
    removed = run.info.get("extinction_removed_animals") or 0.0
    return [("extinction thresholds", f"{removed:.4g} animals removed over the run (all "
             "species). A threshold removes populations that would otherwise recover from a "
             "fraction of an animal (common practice); it also slows invasion fronts a little "
             "(Brunet & Derrida 1997, Phys Rev E 56:2597).")]


def _prediction_facts(run) -> list[tuple[str, str]]:
    pr = run.predictions
    if "predator" not in run.species:
        return [("predicted front speed", "prey into empty habitat "
                 f"{_num(pr.get('prey_front_speed'), 'km/yr')} (Fisher–KPP 2√(rD))")]
    eq = pr.get("equilibrium") or [None, None]
    stable = pr.get("stable")
    return [
        ("equilibrium, best habitat", f"prey {_num(eq[0], 'per km²')}, predator "
                                      f"{_num(eq[1], 'per km²')}"
         + ("" if stable is None else (" (stable)" if stable else
                                       " (unstable: populations cycle)"))),
        ("Hopf capacity", _num(pr.get("hopf_capacity"), "prey per km²")),
        ("predicted front speeds", "prey into empty habitat "
                                   f"{_num(pr.get('prey_front_speed'), 'km/yr')}; "
                                   "predators into prey at capacity "
                                   f"{_num(pr.get('predator_front_speed'), 'km/yr')}"),
    ]


def _measure_rows(measures: list[dict]) -> list[list]:
    rows = []
    for m in measures:
        size = f"{m['area_km2']:.3g} km²" if "area_km2" in m else ""
        if "faces" in m:
            size = (size + "; " if size else "") + f"{m['faces']} cell faces"
        end = "end" if m.get("end_year") is None else f"{m['end_year']:g}"
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
    return rows


def _settings_section(rep, run) -> None:
    info = run.info
    g = info["grid"]
    sec = rep.section("Scenario and run")
    facts = [
        ("scenario file", info.get("scenario", "")),
        ("variant", run.label),
        ("run folder", str(run.path)),
        ("grid", f"{g['rows']} rows × {g['cols']} columns of {g['cell_size_m'][0]:g} × "
                 f"{g['cell_size_m'][1]:g} m; {g['cells_with_data']} cells with data"),
        ("simulated time", f"{info['years']:g} years, snapshots every "
                           f"{info['save_every_years']:g} yr ({info['snapshots']} snapshots)"),
        ("time step", f"{info['step_years']:.4g} yr ({info['steps']} steps, scheme "
                      f"{info.get('scheme')})"),
        *_species_facts(run), *_extinction_facts(run), *_prediction_facts(run),
        ("computed with", f"preyscape {info.get('preyscape_version')} in "
                          f"{info.get('wall_time_s')} s; finished {info.get('finished')}"),
    ]
    sec.facts(facts)
    if run.measures:
        sec.table(["measure", "kind", "years", "size", "settings"], _measure_rows(run.measures),
                  caption="Measures in this run")
    else:
        sec.paragraph("This run has no corridors, fences or refuges.")


def _maps_section(rep, run, gif: Path | None) -> None:
    maps = run.path / "maps"
    sec = rep.section("Maps")
    sec.paragraph("All densities are animals per km². Grey cells have no habitat data. "
                  "Time means average the snapshots after the start.")
    for f, cap in (("habitat.png", "Habitat classes and measures"),
                   ("prey_mean.png", f"Time-mean density of {_name(run, 'prey')}"),
                   ("predator_mean.png", f"Time-mean density of {_name(run, 'predator')}"),
                   ("totals.png", "Animals in the whole landscape over time"),
                   ("prey_snapshots.png", "Prey from start to end, on one colour scale"),
                   ("predator_snapshots.png", "Predators from start to end")):
        if (maps / f).is_file():
            sec.figure(maps / f, cap, cap)
    if gif is not None and gif.is_file():
        both = "predator" in run.species
        sec.figure(gif, ("Animation of both species (each on one colour scale for the whole "
                         "run)") if both else "Animation of the prey (on one colour scale for "
                   "the whole run)",
                   f"animated maps of {'prey and predator' if both else 'prey'} density")


def _colonisation_parts(other) -> list[Part]:
    from preyscape.analysis.effects import colonisation
    from preyscape.analysis.settings import COLONISED_SHARE

    targets = other.targets()
    if not targets:
        return []
    settings = other.settings()
    thr = {sp: settings.arrival_threshold(sp) for sp in other.species}
    rows = tuple((t.name, *(t.years.get(sp) for sp in thr))
                 for t in colonisation(other.ds, targets, thr, COLONISED_SHARE))
    what = {"prey": "prey", "predator": "predators"}
    return [Part(f"Colonisation in {other.label}", (Table(
        ("target patch", *(f"{what[sp]} colonised (year)" for sp in thr)), rows),))]


def _analysis_parts(run, others, work: Path) -> list[Part]:
    from preyscape.analysis.commands import ANALYSES, writer

    parts: list[Part] = []
    settings = run.settings()
    mods = [writer(m) for m in ANALYSES if writer(m).COMMAND.in_report]
    for mod in mods:
        if mod.COMMAND.runs == "one":
            parts += mod.write([run], settings, work / mod.COMMAND.name).report_parts()
    for k, other in enumerate(others):
        for mod in mods:
            if mod.COMMAND.runs == "several":
                out = mod.write([run, other], settings, work / f"{mod.COMMAND.name}-{k}")
                parts += out.report_parts()
        parts += _colonisation_parts(other)
    return parts


def write_report(run_folder: str | Path, out: str | Path | None = None,
                 others: list[str | Path] | tuple = (), *, overwrite: bool = False,
                 animate: bool = True) -> Path:
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
    from preyscape.analysis.results import open_run
    from preyscape.plots.animate import animate_run
    from preyscape.report.html import Report

    run = open_run(run_folder)
    out = Path(out) if out is not None else run.path / "report.html"
    if out.exists() and not overwrite:
        raise InputError("report file already exists; choose another with --out or pass "
                         "--overwrite to replace it", str(out))
    others = [open_run(o) for o in others]
    years = run.info["years"]
    sub = f"variant {run.label}: {years:g} year{'' if years == 1 else 's'}"
    if others:
        sub += " — compared with " + ", ".join(o.label for o in others)
    rep = Report(run.title, sub)
    work = Path(tempfile.mkdtemp(prefix=".preyscape-report-",
                                 dir=out.parent if out.parent.exists() else None))
    try:
        _settings_section(rep, run)
        gif = None
        if animate:
            gif = animate_run(run.grid, run.times, run.frame, work / "animation.gif",
                              species=run.species, names=run.species_names, title=run.title)
        _maps_section(rep, run, gif)
        for part in _analysis_parts(run, others, work):
            render_part(rep, part)
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
        for r in (run, *others):
            r.close()
    return out
