"""Effects of refuges and corridors written out as tables and figures.

The output folder holds::

    refuges.csv                    per refuge, species and region (inside / outside):
                                   cells, area, mean density, lowest mean density,
                                   persistence; the same for the run without the refuge
    refuge_<name>_spillover.png    prey against distance from the refuge edge, with fit
    refuge_<name>_profile.csv      the profile (distance km, density animals/km²)
    targets.csv                    per target patch and species: colonisation time
    flux.csv                       per transect and species: net flow across it at every
                                   snapshot (animals/yr) and the running total (animals)
    flux_<name>.png                the flows against time
    effects.json                   the numbers above as one record

Refuges come from the run's measures, target patches from the scenario's
``[analysis]`` (``targets/`` in the run folder) or a GeoJSON file, and
transects from the settings or a GeoJSON file. Fluxes use the movement
operators the run saved for each epoch.

Examples
--------
``run_folder`` is a finished run folder with a refuge; ``out_folder`` a folder for
outputs:

>>> out = write_effects(run_folder, out_folder / "effects")
>>> [r.name for r in out.refuges]
['fen refuge']
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape.analysis.commands import Command, Option
from preyscape.analysis.output import (
    Facts,
    Figure,
    FileRecord,
    Paragraph,
    Part,
    Table,
    Written,
    output_folder,
    write_csv,
)
from preyscape.analysis.results import NO_PREDATOR
from preyscape.analysis.settings import COLONISED_SHARE, AnalysisSettings
from preyscape.names import slug
from preyscape.store import SPECIES

COMMAND = Command(
    name="effects",
    help="refuge, corridor and transect effects",
    runs="one",
    options=(
        Option("--without", "without", "the run without the refuges (default: found beside "
               "RUN if there)", type=Path, metavar="RUN_WITHOUT", setting=False),
        Option("--targets", "targets_file", "GeoJSON polygons of target patches", type=Path,
               metavar="GEOJSON", setting=False),
        Option("--transects", "transects_file", "GeoJSON lines to count animals across",
               type=Path, metavar="GEOJSON", setting=False),
    ),
    out_help="RUN/effects",
)

COLOURS = {"prey": "#2a788e", "predator": "#b5367a"}
NOTHING_TO_MEASURE = (
    "Nothing to measure: this run has no refuge (a measure of kind 'refuge'), no target "
    "patch ([[analysis.targets]] in the scenario, or --targets) and no transect "
    "([[analysis.transects]], or --transects). Only effects.json was written.")
REFUGE_HEADER = ["refuge", "species", "region", "cells", "area_km2", "mean_density_per_km2",
                 "lowest_mean_density_per_km2", "persistence", "without_mean_density_per_km2",
                 "without_lowest_mean_density_per_km2", "without_persistence"]


@dataclass(frozen=True)
class RefugeRecord:
    """One refuge: inside/outside statistics per species and the spill-over decay length.

    ``regions[species]`` is ``{"inside_outside": ..., "inside_outside_without": ...}``
    (see :func:`preyscape.analysis.refuges.inside_outside`); ``decay_length_km`` in km.
    """

    name: str
    area_km2: float | None
    protected_fraction: float | None
    regions: dict
    decay_length_km: float | None
    profile_is_difference: bool
    figure: str | None
    fit: dict = field(default_factory=dict)

    def as_record(self) -> dict:
        """The refuge as plain JSON values (``effects.json``)."""
        return {"name": self.name, "area_km2": self.area_km2,
                "protected_fraction": self.protected_fraction, **self.regions,
                "decay_length_km": self.decay_length_km,
                "profile_is_difference": self.profile_is_difference,
                "fit": {k: v for k, v in self.fit.items()
                        if isinstance(v, (int, float, str, bool))},
                "figure": self.figure}


@dataclass(frozen=True)
class CrossingRecord:
    """Net animals that crossed a transect over the run (from its left to its right)."""

    name: str
    net_animals: dict
    figure: str


@dataclass(frozen=True)
class EffectsOutput(Written):
    """What :func:`write_effects` wrote.

    Attributes
    ----------
    without : pathlib.Path or None
        The run without the refuges it was compared with.
    refuges : tuple of RefugeRecord
    targets : tuple of TargetColonisation
    transects : tuple of CrossingRecord
    names : dict
        Common names of the species.
    """

    without: Path | None = None
    refuges: tuple = ()
    targets: tuple = ()
    transects: tuple = ()
    names: dict = field(default_factory=dict)
    corridors: tuple = ()
    species: tuple = SPECIES

    @property
    def empty(self) -> bool:
        """True when the run had nothing to measure (no refuge, target or transect)."""
        return not (self.refuges or self.targets or self.transects)

    def summary_lines(self) -> list[str]:
        lines = [f"effects: {self.folder}"]
        if self.empty:
            return lines + [f"  {NOTHING_TO_MEASURE}"]
        if self.without is not None:
            lines.append(f"  compared with the run without refuges: {self.without}")
        elif self.refuges:
            lines.append("  no run without the refuges was found or given (--without): the "
                         "decay length below is that of the time-mean prey profile, not the "
                         "refuge's own effect")
        for r in self.refuges:
            lines.append(f"  refuge {r.name}: spill-over decay length "
                         f"{_fmt(r.decay_length_km, 'km')}")
        for t in self.targets:
            sp = "predator" if "predator" in t.years else "prey"
            lines.append(f"  target {t.name}: {sp} colonised in year {_fmt(t.years.get(sp))}")
        if self.species == ("prey",):
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def report_parts(self) -> list[Part]:
        if self.empty:
            return [Part("Refuges, target patches and crossings",
                         (Paragraph(NOTHING_TO_MEASURE),), "effects")]
        parts = []
        if self.refuges:
            parts.append(Part("Refuges", tuple(_refuge_blocks(self))))
        if self.targets or self.transects:
            title = ("Corridors: colonisation and movement" if self.corridors else
                     "Colonisation of target patches and crossings")
            parts.append(Part(title, tuple(_corridor_blocks(self))))
        return parts

    def headlines(self) -> list[str]:
        out = []
        for r in self.refuges:
            io = r.regions["prey"]["inside_outside"]["inside"]
            wo = (r.regions["prey"]["inside_outside_without"] or {}).get("inside")
            if wo and wo.get("mean_density"):
                change = 100 * (io["mean_density"] - wo["mean_density"]) / wo["mean_density"]
                prey = self.names.get("prey", "prey")
                a, b = (f"{v:,.0f}".replace(",", "\u2009")  # thin space in thousands
                        for v in (io["mean_density"], wo["mean_density"]))
                out.append(f"Inside the {r.name}, {prey} (prey) average {a} per km² against "
                           f"{b} in the run without it ({change:+.0f} %).")
        return out


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "none" if x is None else "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _label(out: EffectsOutput, sp: str) -> str:
    n = out.names.get(sp, sp)
    return f"{sp} ({n})" if n and n != sp else sp


def _refuge_blocks(out: EffectsOutput) -> list:
    if out.without is not None:
        text = (f"Compared with the run without the refuge: {out.without}. The spill-over "
                "profile is the difference of the time-mean prey density (with − without) "
                "against distance from the refuge edge, with an exponential fit and its decay "
                "length.")
    else:
        text = ("No run without the refuge was found beside this one, so the spill-over "
                "profile is that of the time-mean prey density itself. Run a variant that "
                "removes the refuge to isolate its effect.")
    rows = []
    for r in out.refuges:
        for sp in out.species:
            io = r.regions[sp]["inside_outside"]
            wo = r.regions[sp]["inside_outside_without"] or {}
            for region in ("inside", "outside"):
                a, b = io[region], wo.get(region, {})
                rows.append((r.name, _label(out, sp), region, a["mean_density"],
                             b.get("mean_density"), a["min_mean_density"],
                             b.get("min_mean_density"), a["persistence"], b.get("persistence")))
    blocks: list = [Paragraph(text), Table(
        ("refuge", "species", "region", "mean density (per km²)", "without refuge",
         "lowest mean density (per km²)", "without refuge", "persistence", "without refuge"),
        tuple(rows), caption="Inside versus outside each refuge (densities in animals per "
        "km²; persistence: share of snapshots with at least the presence density)")]
    for r in out.refuges:
        blocks.append(Facts(((f"{r.name}: decay length of the spill-over",
                               _fmt(r.decay_length_km, "km")),)))
        if r.figure:
            blocks.append(Figure(out.folder / r.figure, f"Spill-over from {r.name}",
                                 f"prey density against distance from the edge of {r.name}"))
    return blocks


def _corridor_blocks(out: EffectsOutput) -> list:
    blocks: list = []
    what = {"prey": "prey", "predator": "predators"}
    if out.targets:
        rows = tuple((t.name, t.cells, *(t.years.get(sp) for sp in out.species))
                     for t in out.targets)
        blocks.append(Table(("target patch", "cells",
                             *(f"{what[sp]} colonised (year)" for sp in out.species)), rows,
                            caption="A patch counts as colonised when half its cells reach the "
                            "arrival threshold; empty: not within the run."))
    for tr in out.transects:
        net = ", ".join(f"{what[sp]} {_fmt(tr.net_animals[sp], 'animals')}"
                        for sp in out.species)
        blocks.append(Facts(((
            f"net crossing of '{tr.name}' over the run",
            f"{net} (positive: from its left to its right)"),)))
        blocks.append(Figure(out.folder / tr.figure, f"Animals crossing the transect "
                             f"'{tr.name}'", f"net flow of animals across '{tr.name}' against "
                             "time"))
    return blocks


def default_out(runs: Sequence) -> Path:
    """``RUN/effects``."""
    return Path(runs[0].path) / "effects"


def write(runs: Sequence, settings: AnalysisSettings, out: Path, *, overwrite: bool = False,
          without: Path | None = None, targets_file: Path | None = None,
          transects_file: Path | None = None) -> EffectsOutput:
    """The registry's entry point: :func:`write_effects` of the one run.

    ``without`` defaults to the run without the refuges found beside it
    (:func:`find_without_refuge`); ``transects_file`` replaces the settings'
    transects.
    """
    run = runs[0]
    if transects_file is not None:
        from dataclasses import replace

        from preyscape.analysis.waves_output import transects_from_file

        settings = replace(settings, transects=transects_from_file(transects_file, run.grid))
    without = without or find_without_refuge(run.path, run.info)
    return write_effects(run, out, settings=settings, without=without,
                         targets_file=targets_file, overwrite=overwrite)


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
        if not isinstance(other, dict) or other.get("scenario") != info.get("scenario"):
            continue
        if {m["name"] for m in other.get("measures", [])} == want:
            return sib
    return None


def write_effects(run, out: str | Path, *, settings: AnalysisSettings | None = None,
                  without=None, targets_file: Path | None = None,
                  overwrite: bool = False) -> EffectsOutput:
    """Refuge, target and transect effects of a run, written into ``out``.

    Parameters
    ----------
    run : RunResults or path
        A finished run.
    out : str or pathlib.Path
        Output folder, created atomically.
    settings : AnalysisSettings, optional
        Presence and arrival thresholds (animals/km²) and transects; default
        the run's own.
    without : RunResults or path, optional
        The same scenario's run without the refuges (a variant that removes
        them): the spill-over profile is then that of the difference.
    targets_file : pathlib.Path, optional
        GeoJSON polygons of more target patches (property ``name``).
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    EffectsOutput
    """
    from preyscape.analysis.results import RunResults, open_run

    run = run if isinstance(run, RunResults) else open_run(run)
    settings = settings or run.settings()
    other = None
    if without is not None:
        other = without if isinstance(without, RunResults) else open_run(without)
    try:
        with output_folder(out, overwrite) as tmp:
            files: list[FileRecord] = []
            refuges = _write_refuges(tmp, run, other, settings, files)
            targets = _write_targets(tmp, run, settings, targets_file, files)
            crossings = _write_crossings(tmp, run, settings, files)
            record = {"run": str(run.path), "presence_per_km2": settings.presence,
                      "thresholds_per_km2": {sp: settings.arrival_threshold(sp)
                                             for sp in run.species},
                      "refuges": [r.as_record() for r in refuges],
                      "targets": [{"name": t.name, "cells": t.cells,
                                   **{f"{sp}_colonised_year": t.years[sp]
                                      for sp in run.species}}
                                  for t in targets],
                      "transects": [{"name": c.name, **{f"{sp}_net_animals": v for sp, v in
                                                        c.net_animals.items()},
                                     "figure": c.figure} for c in crossings]}
            if not (refuges or targets or crossings):
                record["note"] = NOTHING_TO_MEASURE
            (tmp / "effects.json").write_text(json.dumps(record, indent=2, default=float)
                                              + "\n")
            files.append(FileRecord("effects.json", "record", "The numbers as one record"))
    finally:
        if other is not None and other is not without:
            other.close()
    return EffectsOutput(Path(out), tuple(files), None if other is None else other.path,
                         tuple(refuges), tuple(targets), tuple(crossings), run.species_names,
                         tuple(m["name"] for m in run.measures if m["kind"] == "corridor"),
                         run.species)


def _write_refuges(tmp: Path, run, other, settings: AnalysisSettings,
                   files: list[FileRecord]) -> list[RefugeRecord]:
    from preyscape.analysis.refuges import refuge_effect

    rows, out = [], []
    for m in run.measures:
        if m["kind"] != "refuge" or not m.get("cells_file"):
            continue
        cells = run.cells_of(m)
        regions, decay, diff, figure, fit = {}, None, False, None, {}
        for sp in run.species:
            # the time means as the run keeps them: read once for all refuges and analyses
            eff = refuge_effect(run.ds, cells, ds_without=None if other is None else other.ds,
                                species=sp, presence=settings.presence,
                                mean=run.time_mean(sp),
                                mean_without=None if other is None else other.time_mean(sp))
            regions[sp] = {"inside_outside": eff.inside_outside,
                           "inside_outside_without": eff.inside_outside_without}
            for region in ("inside", "outside"):
                a = eff.inside_outside[region]
                b = (eff.inside_outside_without or {}).get(region, {})
                rows.append([m["name"], sp, region, a["cells"], a["area_km2"],
                             a["mean_density"], a["min_mean_density"], a["persistence"],
                             b.get("mean_density", ""), b.get("min_mean_density", ""),
                             b.get("persistence", "")])
            if sp == "prey":
                decay, diff, fit = eff.decay_length_km, eff.difference, eff.fit
                figure = _write_profile(tmp, m["name"], eff, files)
        out.append(RefugeRecord(m["name"], m.get("area_km2"), m.get("protected_fraction"),
                                regions, decay, diff, figure, fit))
    if rows:
        write_csv(tmp / "refuges.csv", REFUGE_HEADER, rows)
        files.append(FileRecord("refuges.csv", "table", "Inside versus outside each refuge"))
    return out


def _write_profile(tmp: Path, name: str, eff, files: list[FileRecord]) -> str:
    base = slug(name)
    what = ("prey density with − without the refuge" if eff.difference
            else "prey time-mean density")
    fig = f"refuge_{base}_spillover.png"
    profile_plot(eff.distance_km, eff.density, eff.fit, tmp / fig,
                 ylabel=f"{what} (animals per km²)")
    write_csv(tmp / f"refuge_{base}_profile.csv",
              ["distance_from_edge_km", "density_per_km2"],
              [[float(d), float(v)] for d, v in zip(eff.distance_km, eff.density, strict=True)])
    files += [FileRecord(fig, "figure", f"Spill-over from {name}", "prey", key=name),
              FileRecord(f"refuge_{base}_profile.csv", "table", f"Spill-over profile of {name}",
                         "prey", key=name)]
    return fig


def _write_targets(tmp: Path, run, settings: AnalysisSettings, targets_file: Path | None,
                   files: list[FileRecord]) -> list:
    from preyscape.analysis.effects import colonisation

    targets = run.targets()
    if targets_file is not None:
        from preyscape.landscape.measures import zones_from_polygons

        labels, names = zones_from_polygons(targets_file, run.grid, source=str(targets_file))
        targets += [(n, labels == k) for k, n in enumerate(names)]
    thr = {sp: settings.arrival_threshold(sp) for sp in run.species}
    found = colonisation(run.ds, targets, thr, COLONISED_SHARE)
    rows = [[t.name, sp, t.cells, thr[sp], COLONISED_SHARE,
             "" if t.years[sp] is None else t.years[sp]] for t in found for sp in thr]
    if rows:
        write_csv(tmp / "targets.csv", ["target", "species", "cells", "threshold_per_km2",
                                        "share", "colonised_year"], rows)
        files.append(FileRecord("targets.csv", "table", "Colonisation of target patches"))
    return found


def _write_crossings(tmp: Path, run, settings: AnalysisSettings,
                     files: list[FileRecord]) -> list[CrossingRecord]:
    from preyscape.analysis.effects import cumulative, transect_fluxes

    rows, out = [], []
    ops = run.operators() if settings.transects else []
    # every transect in one pass over each species' snapshots
    flows = {sp: transect_fluxes(run.ds, ops, [tr.points for tr in settings.transects], sp)
             for sp in run.species} if settings.transects else {}
    for j, tr in enumerate(settings.transects):
        series, net = {}, {}
        for sp in run.species:
            times, flow = flows[sp][0], flows[sp][1][j]
            total = cumulative(flow, times)
            series[sp] = (times, flow, total)
            net[sp] = float(total[-1])
            rows += [[tr.name, sp, float(t), float(f), float(c)]
                     for t, f, c in zip(times, flow, total, strict=True)]
        fig = f"flux_{slug(tr.name)}.png"
        flux_plot(series, run.species_names, tr.name, tmp / fig)
        files.append(FileRecord(fig, "figure", f"Animals crossing the transect '{tr.name}'",
                                key=tr.name))
        out.append(CrossingRecord(tr.name, net, fig))
    if rows:
        write_csv(tmp / "flux.csv", ["transect", "species", "time_years",
                                     "net_flow_animals_per_year", "cumulative_animals"], rows)
        files.append(FileRecord("flux.csv", "table", "Net flow across each transect"))
    return out


# --- figures -------------------------------------------------------------------------
def profile_plot(distance: np.ndarray, density: np.ndarray, fit: dict | None, path: Path,
                 ylabel: str = "density (animals per km²)") -> Path:
    """Spill-over profile: density (animals/km²) against distance from the refuge edge (km).

    ``fit`` as from :func:`preyscape.analysis.refuges.decay_length`:
    ``amplitude``, ``length_km`` and ``baseline`` draw the curve
    ``baseline + amplitude · exp(−d/length)``; nothing is drawn if any is NaN.
    """
    from preyscape.plots import _new, _save

    fig = _new((6.4, 4.0))
    ax = fig.add_subplot()
    d = np.asarray(distance, dtype=float)
    ax.plot(d, density, "o", ms=4, color="#2a788e", label="mean over cells at that distance")
    if fit is not None:
        a, ell, b = (float(fit.get(k, np.nan)) for k in ("amplitude", "length_km", "baseline"))
        if np.isfinite([a, ell, b]).all() and d.size:
            xs = np.linspace(0.0, float(d.max()), 200)
            ax.plot(xs, b + a * np.exp(-xs / ell), color="#b5367a",
                    label=f"fit: decay length {ell:.3g} km")
    ax.axhline(0.0, color="#808080", lw=0.8)
    ax.set_xlabel("distance from the refuge edge (km)")
    ax.set_ylabel(ylabel)
    ax.set_title("Spill-over from the refuge", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return _save(fig, path)


def flux_plot(series: dict, names: dict, transect: str, path: Path) -> Path:
    """Net flow across a transect (animals/yr) and its running total (animals).

    ``series`` is ``{species: (times in years, flow in animals/yr, cumulative animals)}``.
    """
    from preyscape.plots import _new, _save

    fig = _new((7.0, 5.0))
    top = fig.add_subplot(2, 1, 1)
    bottom = fig.add_subplot(2, 1, 2, sharex=top)
    for sp, (t, flow, total) in series.items():
        label = f"{sp} ({names.get(sp) or sp})"
        top.plot(t, flow, color=COLOURS.get(sp), label=label)
        bottom.plot(t, total, color=COLOURS.get(sp), label=label)
    for ax in (top, bottom):
        ax.axhline(0.0, color="0.6", lw=0.8)
    top.set_ylabel("net flow (animals/yr)")
    bottom.set_ylabel("running total (animals)")
    bottom.set_xlabel("time (years)")
    top.legend(fontsize=8)
    top.set_title(f"Animals crossing '{transect}' (positive: from its left to its right)",
                  fontsize=10)
    top.set_xlim(float(np.min([s[0][0] for s in series.values()])),
                 float(np.max([s[0][-1] for s in series.values()])))
    fig.tight_layout()
    return _save(fig, path)
