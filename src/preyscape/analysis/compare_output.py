"""Alternatives compared with a reference run and written out: one folder, one ranking.

``preyscape compare BASE ALT1 [ALT2 ...]`` writes :func:`preyscape.analysis.compare.compare`
into one folder::

    ranking.csv                       one row per alternative (the planner's table)
    zones.csv                         per alternative, habitat class (or zone) and species
    sides.csv                         per alternative, side of each fence and species
    fences.csv                        per alternative and fence: length, open ends, sides
    totals.png                        landscape totals of every run
    comparison.json                   window, runs, settings, warnings, ranking, files
    <alternative>/<sp>_level_change.tif/.png     gains and losses beyond the margin (int8)
    <alternative>/<sp>_difference.tif/.png       window mean, alternative − base
    <alternative>/<sp>_ratio.tif                 difference / margin
    <alternative>/<sp>_persistence_difference.tif
    <alternative>/<sp>_arrival_delay.tif/.png    years later (+) or earlier (−)
    <alternative>/<sp>_arrival_status.tif        where it arrives in one run only (int8)

Every run is named by its variant. The maps of one quantity share one colour
scale across the alternatives, and each map draws the measures of the
alternative it shows. Only the species every run models get maps, columns and
rows (:attr:`~preyscape.analysis.compare.Comparison.species`): runs of prey
alone write no predator file and no predator column, and the summary says once
that the scenario has no predator.

Examples
--------
``run_folder`` and ``other_run`` are finished runs of one scenario (its baseline and a
variant); ``out_folder`` is a folder for outputs:

>>> out = write_comparison(run_folder, [other_run], out_folder / "compare")
>>> out.base, out.alternatives
('baseline', ('fenced',))
>>> (out.folder / "ranking.csv").is_file()
True
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape.analysis.commands import Command, Option
from preyscape.analysis.output import (
    FileRecord,
    Part,
    Written,
    output_folder,
    write_csv,
    write_raster,
)
from preyscape.analysis.settings import AnalysisSettings
from preyscape.names import slug
from preyscape.store import SPECIES, write_json

COMMAND = Command(
    name="compare",
    help="where, when and by how much alternatives change the outcome against a reference run",
    runs="several",
    options=(
        Option("--years", "years", "window of years to judge change in, A:B (such as 0:4, or "
               "4: for year 4 to the end; default the whole run, or the scenario's "
               "analysis.years)", type=str, metavar="A:B"),
        Option("--goal", "goal", "rank the alternatives by: fewer-predators, more-predators, "
               "fewer-prey or more-prey (default the scenario's analysis.goal; none: as given)",
               type=str, metavar="GOAL"),
        Option("--threshold", "change_threshold", "smallest relative change of a level that "
               "matters (default 0.10 = 10%%, or the scenario's analysis.change_threshold)",
               metavar="FRACTION"),
        Option("--presence", "presence", "density counted as present, animals per km² "
               "(default 1)", metavar="DENSITY"),
        Option("--zones", "zones", "zones for the table: GeoJSON polygons or a class raster "
               "(default: the habitat classes)", type=Path, metavar="FILE", setting=False),
        Option("--zone-field", "zone_field", "polygon property naming the zones (default "
               "'name')", type=str, metavar="PROPERTY", setting=False),
    ),
    out_help="compare-<BASE>-<ALT...> beside the first alternative",
)

LEVEL_COLOURS = {-2: "#08519c", -1: "#9ecae1", 1: "#fcae91", 2: "#a50f15"}  # ours
LEVEL_LABELS = {-2: "gone (present before, absent now)", -1: "fewer", 1: "more",
                2: "new (absent before, present now)"}
ONLY_COLOURS = {1: "#2b2b2b", 2: "#1b7837", 3: "#f3efe4"}  # arrival status (ours)
NO_CHANGE = "#f3efe4"  # cells without a clear change: light, unlike the grey of no data
MEANINGFUL_DELAY = 1e-3  # years (about nine hours): shorter delays get no map


@dataclass(frozen=True)
class ComparisonOutput(Written):
    """What :func:`write_comparison` wrote.

    Attributes
    ----------
    record : dict
        The contents of ``comparison.json``.
    base : str
        The reference run's name.
    alternatives : tuple of str
        The alternatives' names.
    species : tuple of str
        The species compared (``("prey",)`` for runs of prey alone).
    """

    record: dict = field(default_factory=dict)
    base: str = ""
    alternatives: tuple[str, ...] = ()
    species: tuple[str, ...] = SPECIES

    @property
    def ranking(self) -> list[dict]:
        """The rows of ``ranking.csv``."""
        return self.record["ranking"]

    def summary_lines(self) -> list[str]:
        from preyscape.analysis.compare_report import summary_lines

        return summary_lines(self)

    def report_parts(self) -> list[Part]:
        from preyscape.analysis.compare_report import report_parts

        return report_parts(self)

    def headlines(self) -> list[str]:
        from preyscape.analysis.compare_report import headlines

        return headlines(self)


def default_out(runs: Sequence) -> Path:
    """``compare-<BASE>-<ALT1>[-<ALT2>...]`` beside the first alternative."""
    names = "-".join(Path(r.path).name for r in runs)
    return Path(runs[1].path).parent / f"compare-{names}"


def write(runs: Sequence, settings: AnalysisSettings, out: Path, *, overwrite: bool = False,
          zones: Path | None = None, zone_field: str | None = None) -> ComparisonOutput:
    """The registry's entry point: :func:`write_comparison` of the first run and the others."""
    from preyscape.errors import InputError

    if len(runs) < 2:
        raise InputError("compare takes the reference run folder and at least one run to "
                         "compare with it", "preyscape compare")
    return write_comparison(runs[0], list(runs[1:]), out, settings=settings, zones=zones,
                            zone_field=zone_field, overwrite=overwrite)


def write_comparison(base, alternatives, out: str | Path, *,
                     settings: AnalysisSettings | None = None, zones: Path | None = None,
                     zone_field: str | None = None, overwrite: bool = False,
                     ) -> ComparisonOutput:
    """Compare alternatives with a reference run and write maps, tables and a record.

    Parameters
    ----------
    base : RunResults or path
        The reference run (the landscape as it is).
    alternatives : RunResults, path, or a sequence of them
        The runs to compare with it (same grid).
    out : str or pathlib.Path
        Output folder, created atomically.
    settings : AnalysisSettings, optional
        Window (``years``), ``change_threshold``, ``presence``, ``goal``;
        default the reference run's own.
    zones : pathlib.Path, optional
        Zones for the tables (:func:`preyscape.analysis.compare.load_zones`);
        default the habitat classes, by name.
    zone_field : str, optional
        Polygon attribute naming the zones.
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    ComparisonOutput

    Raises
    ------
    InputError
        If the runs are on different grids, share no snapshot in the window,
        the zone file is unusable, or ``out`` exists and ``overwrite`` is False.
    FileProblem
        If a folder is not a finished run.
    """
    from preyscape.analysis.compare import _open, compare
    from preyscape.store import refuse_existing

    refuse_existing(Path(out), overwrite)
    alts = [alternatives] if isinstance(alternatives, (str, Path)) or hasattr(
        alternatives, "ds") else list(alternatives)
    runs = [_open(base)] + [_open(a) for a in alts]
    result = compare(runs[0], runs[1:], settings=settings, zones=zones, zone_field=zone_field)
    with output_folder(out, overwrite=overwrite) as tmp:
        files = write_tables(tmp, result)
        files += write_maps(tmp, result, runs)
        labels = [result.base, *result.alternatives]
        totals_plot(tmp / "totals.png", [r.times for r in runs],
                    [{sp: r.totals(sp) for sp in result.species} for r in runs], labels,
                    runs[0].species_names, result.window, species=result.species)
        files.append(FileRecord("totals.png", "figure", "Landscape totals of every run",
                                key="totals"))
        files.append(FileRecord("comparison.json", "record", "Window, runs, settings, "
                                "warnings and ranking"))
        record = _record(result, runs, zones, files)
        write_json(tmp / "comparison.json", record)
    return ComparisonOutput(Path(out), tuple(files), record, result.base, result.alternatives,
                            result.species)


def _clean(v):
    if isinstance(v, (float, np.floating)):
        return None if math.isnan(v) else ("inf" if math.isinf(v) else float(v))
    if isinstance(v, np.integer):
        return int(v)
    if isinstance(v, np.bool_):
        return bool(v)
    return v


def _rows(frame) -> list[dict]:
    return [{k: _clean(v) for k, v in row.items()} for row in frame.to_dict("records")]


def _record(result, runs, zones, files) -> dict:
    w = result.window
    s = result.settings
    return {
        "base": result.base, "alternatives": list(result.alternatives),
        "runs": {lab: str(r.path.resolve()) for lab, r in
                 zip([result.base, *result.alternatives], runs, strict=True)},
        "title": runs[0].title,
        "species": {sp: runs[0].species_names[sp] for sp in result.species},
        "species_present": list(result.species),
        "window": {"start_years": w.start, "end_years": w.end, "snapshots": int(w.times.size),
                   "first_time": float(w.times[0]), "same_times": bool(w.same_times)},
        "settings": {"change_threshold": s.change_threshold,
                     "presence_animals_per_km2": s.presence, "goal": s.goal,
                     "years": None if s.years is None else list(s.years),
                     "arrival_threshold": {sp: s.arrival_threshold(sp)
                                           for sp in result.species},
                     "zones": None if zones is None else str(zones)},
        "cell_area_km2": runs[0].grid.cell_area_km2,
        "area_km2": runs[0].grid.n_cells * runs[0].grid.cell_area_km2,
        "warnings": list(result.warnings),
        "ranking": _rows(result.ranking),
        "fences": _rows(result.fences),
        "sides": _rows(result.sides),
        "definitions": {
            "difference": "alternative - base, window means (animals per km2)",
            "margin": "max((R_base + R_alt)/n, threshold * max(mean_base, presence)); R: range "
                      "of cumulative departures from the window mean (Hurst 1951)",
            "level_change": {"-2": "gone", "-1": "fewer", "0": "no clear change", "1": "more",
                             "2": "new"},
            "arrival_delay": "first time at the arrival density, alternative - base (years)",
        },
        "files": [f.name for f in files],
    }


def write_tables(tmp: Path, result) -> list[FileRecord]:
    """``ranking.csv``, ``zones.csv``, ``sides.csv`` and ``fences.csv``."""
    files = []
    fences = result.fences.drop(columns=["open_end_points"])
    for name, frame, title in (("ranking.csv", result.ranking, "Ranking of the alternatives"),
                               ("zones.csv", result.zones, "Per habitat class or zone"),
                               ("sides.csv", result.sides, "Per side of each fence"),
                               ("fences.csv", fences, "Fences: length, open ends")):
        rows = [[_csv(v) for v in row] for row in frame.itertuples(index=False)]
        write_csv(tmp / name, list(frame.columns), rows)
        files.append(FileRecord(name, "table", title, key=name[:-4]))
    return files


def _csv(v):
    if isinstance(v, (float, np.floating)):
        return float(v)
    if v is None:
        return ""
    return _clean(v)


def _limit(arrays) -> float:
    vals = [np.abs(a[np.isfinite(a)]) for a in arrays]
    top = max((float(v.max()) for v in vals if v.size), default=0.0)
    return top if top > 0 else 1e-12


def write_maps(tmp: Path, result, runs) -> list[FileRecord]:
    """Every alternative's maps, each quantity on one colour scale across alternatives."""
    maps = result.maps
    grid = runs[0].grid
    habitat = runs[0].habitat
    names = runs[0].species_names
    files: list[FileRecord] = []
    lims = {}
    for sp in result.species:
        for key in ("difference", "arrival_delay", "ratio"):
            lims[sp, key] = _limit([maps[f"{sp}_{key}"].values])
        lims[sp, "ratio"] = max(lims[sp, "ratio"], 1.5)  # |ratio| > 1 is a clear change
        lims[sp, "persistence_difference"] = 1.0  # a difference of shares
    for k, alt in enumerate(result.alternatives):
        folder = slug(alt)
        (tmp / folder).mkdir()
        outlines = runs[k + 1].overlays()
        mine = result.fences[result.fences["alternative"] == alt]
        ends = [p for pts in mine["open_end_points"] for p in pts]
        for sp in result.species:
            who = f"{sp} ({names[sp]})" if names[sp] != sp else sp
            files += _species_maps(tmp, folder, maps, alt, sp, who, grid, habitat,
                                   (outlines, ends), lims, result)
    return files


# long: one block per file, in the order the folder lists them
def _species_maps(tmp, folder, maps, alt, sp, who, grid, habitat, drawn, lims,
                  result) -> list[FileRecord]:
    from preyscape.analysis.change import ARRIVAL_CODES, LEVEL_CODES, NO_DATA

    outlines, ends = drawn

    def get(key):
        return maps[f"{sp}_{key}"].sel(alternative=alt).values

    files = []
    when = result.window.label()
    head = f"{result.base} → {alt}, {when}"
    rel = f"{folder}/{sp}"
    tags = {"base": result.base, "alternative": alt, "window": when}
    cls = get("level_change")
    write_raster(tmp / f"{rel}_level_change.tif", grid, cls.astype(np.int8), nodata=NO_DATA,
                 dtype="int8", description=f"level change of {who}, {head}",
                 units="class code", tags=tags, categories=LEVEL_CODES,
                 colours={**LEVEL_COLOURS, 0: NO_CHANGE})
    level_map(grid, cls, f"{who}: where the level changes\n{head}",
              tmp / f"{rel}_level_change.png", outlines=outlines, underlay=habitat,
              open_ends=ends)
    title = f"{who.capitalize()}: level change, {alt}"
    files += [FileRecord(f"{rel}_level_change.tif", "raster", title, sp,
                         key=f"{alt}:level_change"),
              FileRecord(f"{rel}_level_change.png", "map", title, sp, key=f"{alt}:level_change")]
    for key, units, what in (("difference", "animals per km²", "window mean, alternative − base"),
                             ("ratio", "1", "difference / margin"),
                             ("persistence_difference", "1", "persistence, alternative − base")):
        write_raster(tmp / f"{rel}_{key}.tif", grid, get(key), description=what, units=units,
                     tags=tags)
        files.append(FileRecord(f"{rel}_{key}.tif", "raster", f"{who}: {what}", sp,
                                key=f"{alt}:{key}"))
    for key, units, what in (  # a picture for every GeoTIFF (the difference is drawn below)
            ("ratio", "difference / margin (beyond ±1: a clear change)",
             "difference against the timing margin"),
            ("persistence_difference", "share of snapshots present, alternative − base",
             "difference in how often present")):
        difference_map(grid, get(key), f"{who}: {what}\n{head}", tmp / f"{rel}_{key}.png",
                       units, lim=lims[sp, key], outlines=outlines, open_ends=ends)
        files.append(FileRecord(f"{rel}_{key}.png", "map", f"{who.capitalize()}: {what}, "
                                f"{alt}", sp, key=f"{alt}:{key}"))
    lim = lims[sp, "difference"]
    difference_map(grid, get("difference"), f"{who}: window mean, alternative − base\n{head}",
                   tmp / f"{rel}_difference.png", "animals per km²", lim=lim, outlines=outlines,
                   open_ends=ends)
    files.append(FileRecord(f"{rel}_difference.png", "map", f"{who.capitalize()}: difference "
                            f"of window means, {alt}", sp, key=f"{alt}:difference"))
    status = get("arrival_status")
    write_raster(tmp / f"{rel}_arrival_delay.tif", grid, get("arrival_delay"),
                 description="arrival delay, alternative − base", units="years", tags=tags)
    write_raster(tmp / f"{rel}_arrival_status.tif", grid, status.astype(np.int8),
                 nodata=NO_DATA, dtype="int8", description=f"where {who} arrive, {head}",
                 units="class code", tags=tags, categories=ARRIVAL_CODES,
                 colours={0: "#c2a5cf", 4: "#ffffff", **ONLY_COLOURS})
    files += [FileRecord(f"{rel}_arrival_delay.tif", "raster", f"{who}: arrival delay", sp,
                         key=f"{alt}:arrival_delay"),
              FileRecord(f"{rel}_arrival_status.tif", "raster", f"{who}: where it arrives",
                         sp, key=f"{alt}:arrival_status")]
    delay = np.abs(get("arrival_delay"))
    big = bool(np.any(delay[np.isfinite(delay)] >= MEANINGFUL_DELAY))
    if big or np.isin(status, (1, 2)).any():
        delay_map(grid, get("arrival_delay"), status, f"{who}: arrival delay\n{head}",
                  tmp / f"{rel}_arrival_delay.png", lim=lims[sp, "arrival_delay"],
                  outlines=outlines, underlay=habitat, open_ends=ends)
        files.append(FileRecord(f"{rel}_arrival_delay.png", "map", f"{who.capitalize()}: "
                                f"arrival delay, {alt}", sp, key=f"{alt}:arrival_delay"))
    return files


# --- figures -------------------------------------------------------------------------
def _second_legend(ax, handles, *, below: bool = False) -> None:
    """A legend beside (or below) the map, keeping the measures' legend map_figure drew."""
    first = ax.get_legend()
    where = (dict(loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=len(handles))
             if below else dict(loc="upper left", bbox_to_anchor=(1.01, 1)))
    ax.legend(handles=handles, fontsize=8, frameon=False, **where)
    if first is not None:
        ax.add_artist(first)


def _mark_open_ends(ax, ends) -> None:
    """Circle each open end of a fence, with the width of the way round."""
    lims = ax.get_xlim(), ax.get_ylim()
    for x, y, width in ends or ():
        ax.plot([x / 1e3], [y / 1e3], marker="o", ms=13, mfc="none", mec="#d62728", mew=2.0)
        ax.annotate(f"open end:\n{width:.0f} m way round", (x / 1e3, y / 1e3),
                    xytext=(10, 8), textcoords="offset points", fontsize=7, color="#d62728",
                    bbox={"boxstyle": "round,pad=0.2", "fc": "white", "ec": "none",
                          "alpha": 0.8})
    ax.set_xlim(*lims[0])
    ax.set_ylim(*lims[1])


def level_map(grid, classes: np.ndarray, title: str, path: Path, *, outlines=None,
              underlay=None, open_ends=()) -> Path:
    """Gains and losses of a level (classes −2..2); no clear change shows the habitat."""
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.patches import Patch

    from preyscape.plots import NO_DATA, finish_map, map_figure

    codes = np.asarray(classes)
    shown = np.where(codes < -2, np.nan, codes).astype(float)
    cmap = ListedColormap([LEVEL_COLOURS.get(k, NO_CHANGE) for k in range(-2, 3)])
    fig, ax, _ = map_figure(grid, shown, title, cmap, norm=BoundaryNorm(np.arange(-2.5, 3), 5),
                            outlines=outlines, underlay=underlay)
    handles = [Patch(facecolor=LEVEL_COLOURS[k], edgecolor="#808080", label=LEVEL_LABELS[k])
               for k in (2, 1, -1, -2)]
    handles += [Patch(facecolor=NO_CHANGE, edgecolor="#808080", label="no clear change"),
                Patch(facecolor=NO_DATA, edgecolor="#808080", label="no data")]
    _second_legend(ax, handles)
    _mark_open_ends(ax, open_ends)
    return finish_map(fig, path)


def difference_map(grid, diff: np.ndarray, title: str, path: Path,
                   units: str = "animals per km²", *, lim: float | None = None,
                   outlines=None, open_ends=()) -> Path:
    """A difference map on a diverging scale centred on zero (``±lim``, shared if given)."""
    from matplotlib.colors import TwoSlopeNorm

    from preyscape.plots import finish_map, map_figure

    lim = lim if lim is not None else _limit([np.asarray(diff)])
    fig, ax, _ = map_figure(grid, diff, title, "RdBu_r",
                            norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim), units=units,
                            outlines=outlines)
    _mark_open_ends(ax, open_ends)
    return finish_map(fig, path)


def delay_map(grid, delay: np.ndarray, status: np.ndarray, title: str, path: Path, *,
              lim: float, outlines=None, underlay=None, open_ends=()) -> Path:
    """Arrival delay (years; later is orange, earlier purple) and where it arrives in one run."""
    from matplotlib.colors import ListedColormap, TwoSlopeNorm
    from matplotlib.patches import Patch

    from preyscape.plots import _extent_km, _shown, finish_map, map_figure

    fig, ax, _ = map_figure(grid, delay, title, "PuOr_r",
                            norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim),
                            units="years later (+) or earlier (−) with the alternative",
                            outlines=outlines, underlay=underlay)
    st = np.asarray(status)
    only = np.where(np.isin(st, (1, 2)), st, np.where(np.isin(st, (3, 4)), 3, np.nan))
    ax.imshow(_shown(grid, only.astype(float)), extent=_extent_km(grid),
              interpolation="nearest", vmin=0.5, vmax=3.5,
              cmap=ListedColormap([ONLY_COLOURS[1], ONLY_COLOURS[2], ONLY_COLOURS[3]]))
    handles = [Patch(facecolor=ONLY_COLOURS[1], label="arrives only without it"),
               Patch(facecolor=ONLY_COLOURS[2], label="arrives only with it"),
               Patch(facecolor=ONLY_COLOURS[3], edgecolor="#808080",
                     label="present from the start, or never")]
    _second_legend(ax, handles, below=True)
    _mark_open_ends(ax, open_ends)
    return finish_map(fig, path)


def totals_plot(path: Path, times: Sequence[np.ndarray], totals: Sequence[dict],
                labels: Sequence[str], names: dict, window=None, *,
                species: Sequence[str] = SPECIES) -> Path:
    """Landscape totals (animals) of each species in every run against time (years).

    One panel per species of ``species`` (prey alone: one panel).
    """
    from preyscape.plots import _new, _save

    fig = _new((7.0, 5.4 if len(species) > 1 else 3.2))
    axes = []
    styles = ["-", "--", ":", "-.", (0, (5, 1)), (0, (3, 1, 1, 1, 1, 1))]
    for k, sp in enumerate(species):
        ax = fig.add_subplot(len(species), 1, k + 1, sharex=axes[0] if axes else None)
        axes.append(ax)
        for j, (t, tot, lab) in enumerate(zip(times, totals, labels, strict=True)):
            ax.plot(t, tot[sp], lw=1.8 if j == 0 else 1.4, ls=styles[j % len(styles)],
                    color="#333333" if j == 0 else f"C{j - 1}", label=lab)
        if window is not None:
            ax.axvspan(window.start, window.end, color="#e8e8e8", zorder=0)
        ax.set_ylabel(f"{sp} ({names.get(sp) or sp})\n(animals)", fontsize=9)
        ax.legend(fontsize=8, loc="best")
        ax.grid(alpha=0.3)
    axes[-1].set_xlabel("time (years); shaded: the window compared")
    axes[0].set_title("Landscape totals of every run", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


__all__ = ["COMMAND", "ComparisonOutput", "default_out", "delay_map", "difference_map",
           "level_map", "totals_plot", "write", "write_comparison"]
