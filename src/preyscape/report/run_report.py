"""The report of a run: every registered analysis of a run folder in one HTML page.

:func:`write_report` runs each analysis the registry marks for the report
(:data:`preyscape.analysis.commands.ANALYSES`) on the run, and the
comparisons on the run against each other run given, into a temporary
folder; it renders the :class:`~preyscape.analysis.output.Part` values they
return with :class:`~preyscape.report.html.Report` and writes one HTML file.
The temporary outputs are removed; run ``preyscape hotspots``, ``waves``,
``effects`` or ``compare`` to keep the GeoTIFFs and tables.

The page is read by a planner first and a modeller second. Every part has a
place (:data:`preyscape.analysis.output.PLACES`), and the parts are shown in
that order, each place in the order the parts were made:

1. ``summary``: the plain-language summary (:func:`~preyscape.report.summary.summary_part`,
   built from every output's ``headlines()``), then
2. ``answer``: the answer to the planner's question (rankings and change maps of the
   comparisons; the alternatives side by side), then the standard cautions;
3. ``detail``: the maps of the run and the details of each analysis;
4. ``method``: the model explained, the settings, the statistics and the sources.

Other code adds parts through ``extra_parts`` (each rendered at its place) and
sentences on how sure the results are through ``how_sure``.

Examples
--------
``run_folder`` and ``other_run`` are finished runs of one scenario; ``out_folder`` is a
folder for outputs:

>>> path = write_report(run_folder, out_folder / "report.html", [other_run], animate=False)
>>> text = path.read_text(encoding="utf-8")
>>> text.startswith("<!DOCTYPE html>"), text.index("Summary") < text.index("Read this first")
(True, True)
"""

from __future__ import annotations

import math
import shutil
import tempfile
from collections.abc import Sequence
from contextlib import ExitStack
from pathlib import Path
from typing import Any

from preyscape.analysis.output import (
    PLACES,
    Bullets,
    Facts,
    Figure,
    Paragraph,
    Part,
    Table,
    provenance,
)
from preyscape.analysis.results import NO_PREDATOR
from preyscape.errors import InputError

__all__ = ["SOURCES", "render_part", "write_report"]

SOURCES = [
    "Lotka–Volterra interaction: Lotka 1925; Volterra 1926, Nature 118:558.",
    "Holling type II / Rosenzweig–MacArthur: Rosenzweig & MacArthur 1963, Am Nat 97:209; "
    "Hopf capacity: Rosenzweig 1971, Science 171:385.",
    "Fisher–KPP front speed 2√(rD): Fisher 1937, Ann Eugen 7:355; Kolmogorov, Petrovsky & "
    "Piskunov 1937. Finite-time delay of a front: Bramson 1983, Mem AMS 44(285).",
    "Predator invasion speed 2√(D(eaK/(1+ahK) − m)): Dunbar 1983, J Math Biol 17:11; Owen & "
    "Lewis 2001, Bull Math Biol 63:655.",
    "Invasion speed of a mixed landscape (homogenised and periodic patches): Shigesada, "
    "Kawasaki & Teramoto 1986, Theor Popul Biol 30:143; Shigesada & Kawasaki 1997, Biological "
    "Invasions: Theory and Practice, Oxford University Press.",
    "Finite-time speed of a front from a release: Ebert & van Saarloos 2000, Physica D 146:1; "
    "in periodic media Hamel, Nolen, Roquejoffre & Ryzhik 2016, J Eur Math Soc 18:465.",
    "Ecological diffusion (motility): Turchin 1998, Quantitative Analysis of Movement; "
    "Garlick et al. 2011, Bull Math Biol 73:2088.",
    "Getis–Ord Gi*: Getis & Ord 1992, Geogr Anal 24:189; Ord & Getis 1995, Geogr Anal "
    "27:286. False discovery rate: Benjamini & Hochberg 1995, J R Stat Soc B 57:289.",
    "Change between runs beyond the timing of population cycles: the adjusted range of "
    "cumulative departures, Hurst 1951, Trans Am Soc Civ Eng 116:770 (from memory).",
    "Hotspots that stand out by at least one standard deviation, and their persistence: "
    "Santora & Veit 2013, Mar Ecol Prog Ser 487:287; all significant Gi* cells against the "
    "top ones: Cleasby et al. 2020, Biol Conserv 241:108375.",
    "Numerical method: Strang 1968, SIAM J Numer Anal 5:506; Peaceman & Rachford 1955, "
    "J SIAM 3:28; Hundsdorfer & Verwer 2003, Numerical Solution of Time-Dependent "
    "Advection-Diffusion-Reaction Equations, Springer.",
]

REPORT_FRAMES = 24
"""Frames of the report's animation (the GIF of a run folder may hold more)."""


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
    sec = rep.section(part.title, part.anchor, place=part.place)
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
    ] + _landscape_facts(pr)


def _landscape_facts(pr: dict) -> list[tuple[str, str]]:
    """The landscape's own predictions beside the best-habitat ones (docs/method.md)."""
    land = pr.get("landscape")
    if not land:
        return []
    speeds, growth = [], []
    for sp, who in (("prey", "prey"), ("predator", "predators")):
        rec = land[sp]
        growth.append(rec["verdict"])
        if rec.get("speed") is None:
            speeds.append(f"{who}: not defined")
        elif rec["status"] != "invasion expected":
            speeds.append(f"{who}: no invasion expected (mean growth at low density "
                          f"{_num(rec.get('growth'), '/yr', 3)})")
        else:
            why = [w for w, flag in (("patches coarse", rec.get("coarse")),
                                     ("prey not at capacity", rec.get("prey_smoothed")))
                   if flag]
            speeds.append(f"{who} {_num(rec['speed'], 'km/yr', 3)}"
                          + (f" ({', '.join(why)}: only a guide)" if why else ""))
    return [("predicted front speeds, this landscape",
             "; ".join(speeds) + " — homogenised over the habitat classes (Shigesada, Kawasaki "
             "& Teramoto 1986); fronts from a release approach them from below"),
            ("where each species can grow", " ".join(growth))]


def _measure_rows(measures: list[dict], species: Sequence[str] = ("prey", "predator"),
                  ) -> list[list]:
    """One table row per measure; settings of species the run does not model are left out."""
    rows = []
    for m in measures:
        size = f"{m['area_km2']:.3g} km²" if "area_km2" in m else ""
        if "faces" in m:
            size = (size + "; " if size else "") + f"{m['faces']} cell faces"
        end = "end" if m.get("end_year") is None else f"{m['end_year']:g}"
        if m["kind"] == "fence":
            p = m.get("permeability", {})
            detail = ("permeability " + ", ".join(f"{sp} {p.get(sp)}" for sp in species)
                      + f"; {len(m.get('gaps', []))} gaps")
        elif m["kind"] == "refuge":
            detail = (f"{m.get('protected_fraction')} of prey protected"
                      + ("; closed to predators" if m.get("closed_to_predators")
                         and "predator" in species else ""))
        else:
            detail = ", ".join(f"{k} = {v}" for k, v in (m.get("sets") or {}).items())
        rows.append([m["name"], m["kind"], f"{m['start_year']:g}–{end}", size, detail])
    return rows


def _settings_part(run) -> Part:
    info = run.info
    g = info["grid"]
    facts = (
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
    )
    blocks: list = [Facts(facts)]
    if run.measures:
        blocks.append(Table(("measure", "kind", "years", "size", "settings"),
                            tuple(tuple(r) for r in _measure_rows(run.measures, run.species)),
                            caption="Measures in this run"))
        for t in run.info.get("fence_topology") or []:  # leaky fences, checked before the run
            if t.get("warning") and t.get("species", "prey") in run.species:
                blocks.append(Paragraph(t["warning"]))
    else:
        blocks.append(Paragraph("This run has no corridors, fences or refuges."))
    return Part("Scenario and run", tuple(blocks), "scenario-and-run", place="method")


def _maps_part(run, gif: Path | None) -> Part:
    maps = run.path / "maps"
    blocks: list = [Paragraph(
        f"The maps of run '{run.label}'. Densities are animals per km²; hatched grey cells "
        "have no habitat data. Time means average the snapshots after the start. Every map "
        "names its coordinate system in the caption; distances are in km from the map's "
        "south-west corner.")]
    for f, cap in (("habitat.png", "Habitat and the measures of this run"),
                   ("prey_mean.png", f"Time-mean density of {_name(run, 'prey')}"),
                   ("predator_mean.png", f"Time-mean density of {_name(run, 'predator')}"),
                   ("totals.png", "Animals in the whole landscape over time"),
                   ("prey_snapshots.png", "Prey from start to end, on one colour scale"),
                   ("predator_snapshots.png", "Predators from start to end")):
        if (maps / f).is_file():
            blocks.append(Figure(maps / f, cap, cap))
    if gif is not None and gif.is_file():
        both = "predator" in run.species
        blocks.append(Figure(gif, ("Animation of both species (each on one colour scale for "
                                   "the whole run)") if both else "Animation of the prey (on one "
                             "colour scale for the whole run)", "animated maps of "
                             f"{'prey and predator' if both else 'prey'} density"))
    return Part(f"Maps of {run.label}", tuple(blocks), "maps")


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


def _run_analyses(run, others: Sequence, work: Path) -> list:
    """Every registered analysis's output: comparisons first, then the one-run analyses."""
    from preyscape.analysis.commands import ANALYSES, writer
    from preyscape.analysis.results import map_layers_of
    from preyscape.plots import map_context

    settings = run.settings()
    mods = [writer(m) for m in ANALYSES if writer(m).COMMAND.in_report]
    outputs = []
    for mod in mods if others else ():  # all other runs in one call: one ranking
        if mod.COMMAND.runs == "several":
            with map_context(**map_layers_of([run, *others])):
                outputs.append(mod.write([run, *others], settings, work / mod.COMMAND.name))
    for mod in mods:
        if mod.COMMAND.runs == "one":
            with map_context(**run.map_layers()):
                outputs.append(mod.write([run], settings, work / mod.COMMAND.name))
    return outputs


def write_report(run_folder: str | Path, out: str | Path | None = None,
                 others: list[str | Path] | tuple = (), *, overwrite: bool = False,
                 animate: bool = True, extra_parts: Sequence[Part] = (),
                 how_sure: Sequence[str] = (), ensemble: str | Path | None = None) -> Path:
    """Analyse a run (and compare it with others) into one self-contained HTML file.

    Parameters
    ----------
    run_folder : str or pathlib.Path
        The run to report on (the reference).
    out : str or pathlib.Path, optional
        The HTML file; default ``<run_folder>/report.html``.
    others : sequence of paths
        Alternatives on the same grid to compare with (each as B against this run as A).
    overwrite : bool
        Replace an existing report file.
    animate : bool
        Include the animated GIF of both species.
    extra_parts : sequence of Part
        More parts, each rendered at its place (e.g. an uncertainty section).
    how_sure : sequence of str
        Sentences for the summary's "How sure" paragraph.
    ensemble : str or pathlib.Path, optional
        A finished ensemble folder (``preyscape ensemble``) whose uncertainty
        section is added.

    Returns
    -------
    pathlib.Path
        The report file.
    """
    from preyscape.analysis.results import open_run
    from preyscape.report.html import Report

    run = open_run(run_folder)
    out = Path(out) if out is not None else run.path / "report.html"
    if out.exists() and not overwrite:
        raise InputError("report file already exists; choose another with --out or pass "
                         "--overwrite to replace it", str(out))
    others = [open_run(o) for o in others]
    years = run.info["years"]
    sub = f"{run.label}: {years:g} year{'' if years == 1 else 's'}"
    if others:
        sub += " — compared with " + ", ".join(o.label for o in others)
    rep = Report(run.title, sub)
    work = Path(tempfile.mkdtemp(prefix=".preyscape-report-",
                                 dir=out.parent if out.parent.exists() else None))
    try:
        if ensemble is not None:  # the uncertainty section of an ensemble of this scenario
            from preyscape.ensemble.output import open_ensemble

            extra_parts = [*extra_parts, *open_ensemble(ensemble).report_parts()]
        parts = _parts(run, others, work, animate, how_sure) + list(extra_parts)
        for part in sorted(parts, key=lambda p: PLACES.index(p.place)):
            render_part(rep, part)
        rep.write(out, overwrite=overwrite)
    finally:
        shutil.rmtree(work, ignore_errors=True)
        for r in (run, *others):
            r.close()
    return out


def _parts(run, others: Sequence, work: Path, animate: bool,
           how_sure: Sequence[str]) -> list[Part]:
    from preyscape.plots import map_context
    from preyscape.plots.animate import animate_run
    from preyscape.report.alternatives import alternatives_parts
    from preyscape.report.summary import model_part, summary_part

    with ExitStack() as stack:
        stack.enter_context(provenance(**run.provenance()))
        outputs = _run_analyses(run, others, work)
        gif = None
        if animate:
            with map_context(**run.map_layers()):
                gif = animate_run(run.grid, run.times, run.frame, work / "animation.gif",
                                  species=run.species,
                                  names=run.species_names, title=run.title,
                                  max_frames=REPORT_FRAMES, scale="auto",
                                  floor=run.settings().presence)
    answers = [p for o in outputs for p in o.report_parts() if p.place == "answer"]
    parts = [summary_part(run, others, outputs, how_sure=how_sure)]
    parts += alternatives_parts(run, others, outputs, work, has_answer=bool(answers))
    parts += [_maps_part(run, gif)]
    for o in outputs:
        parts += o.report_parts()
    for other in others:
        parts += _colonisation_parts(other)
    parts += [model_part(run), _settings_part(run), _sources_part(run)]
    return parts


PREDATOR_SOURCES = ("Lotka–Volterra", "Holling", "Predator")
"""How the sources that concern predators begin (left out for a run of prey alone)."""


def _sources_part(run) -> Part:
    """How the model is solved and the published sources (place ``method``)."""
    both = "predator" in run.species
    sources = [s for s in SOURCES if both or not s.startswith(PREDATOR_SOURCES)]
    return Part("Sources", (Paragraph(
        "preyscape solves reaction–diffusion equations for the densities of "
        + ("both species" if both else "the prey") + " on the habitat raster (Strang "
        "splitting of the local " + ("interaction" if both else "growth") + " and movement; "
        "Peaceman–Rachford ADI for movement). See docs/method.md for the equations and the "
        "published checks in the test suite."), Bullets(tuple(sources))), "sources",
        place="method")
