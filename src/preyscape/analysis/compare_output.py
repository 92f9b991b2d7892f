"""Two runs compared and written out: difference maps, change classes, zones, totals.

Run A is the reference and run B the variant; every difference is B − A.
Both runs must lie on the same grid
(:func:`preyscape.analysis.compare.check_same_grid`); their snapshot times may
differ, each run's statistics being taken over its own snapshots used. The
output folder holds::

    prey_mean_difference.tif/.png          time-mean density, B − A (animals/km²)
    predator_mean_difference.tif/.png
    prey_persistence_difference.tif/.png   persistence, B − A (fraction of snapshots)
    predator_persistence_difference.tif/.png
    prey_relative_change.tif               (B − A)/A where A >= presence
    predator_relative_change.tif
    change.tif, change.png                 0 none, 1 prey only, 2 predator only,
                                           3 both, -1 no data (int8)
    zones.csv                              per zone and species: A, B and B − A
    totals.png                             landscape totals of both runs
    comparison.json                        settings, runs, changed cells and areas

Examples
--------
``run_folder`` and ``other_run`` are finished runs of one scenario (its baseline and a
variant); ``out_folder`` is a folder for outputs:

>>> out = write_comparison(run_folder, other_run, out_folder / "compare")
>>> out.label_a, out.label_b
('baseline', 'fenced')
>>> sorted(out.changed_cells)
['both', 'no change', 'predator only', 'prey only']
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape.analysis.commands import Command, Option
from preyscape.analysis.output import (
    Figure,
    FileRecord,
    Paragraph,
    Part,
    Table,
    Written,
    output_folder,
    write_csv,
    write_raster,
)
from preyscape.analysis.results import NO_PREDATOR
from preyscape.analysis.settings import AnalysisSettings
from preyscape.errors import InputError
from preyscape.store import SPECIES, write_json

COMMAND = Command(
    name="compare",
    help="map where run B differs from run A",
    runs="several",
    options=(
        Option("--threshold", "change_threshold", "relative change of time-mean density that "
               "counts as a change (default 0.10 = 10%%, or the scenario's "
               "analysis.change_threshold)", metavar="FRACTION"),
        Option("--presence", "presence", "density counted as present, animals per km² "
               "(default 1)", metavar="DENSITY"),
        Option("--zones", "zones", "zones for the table: GeoJSON polygons or a class raster "
               "(default: the habitat classes)", type=Path, metavar="FILE", setting=False),
        Option("--zone-field", "zone_field", "polygon property naming the zones (default "
               "'name')", type=str, metavar="PROPERTY", setting=False),
    ),
    out_help="compare-<A>-<B> beside RUN_B",
)

CHANGE_COLOURS = {
    0: "#f2f0e6",  # no change
    1: "#2a788e",  # prey only
    2: "#b5367a",  # predator only
    3: "#e0a84f",  # both
}
CHANGE_LABELS = {0: "no change", 1: "prey only", 2: "predator only", 3: "both"}


@dataclass(frozen=True)
class ComparisonOutput(Written):
    """What :func:`write_comparison` wrote.

    Attributes
    ----------
    record : dict
        The contents of ``comparison.json``.
    label_a, label_b : str
        The two runs' names (variant names).
    """

    record: dict = field(default_factory=dict)
    label_a: str = "A"
    label_b: str = "B"

    @property
    def changed_cells(self) -> dict[str, int]:
        """Cells per change class."""
        return self.record["changed_cells"]

    @property
    def changed_area_km2(self) -> dict[str, float]:
        """Area per change class, km²."""
        return self.record["changed_area_km2"]

    def summary_lines(self) -> list[str]:
        lines = [f"comparison: {self.folder}"]
        for k, v in self.changed_area_km2.items():
            lines.append(f"  {k:<16} {self.changed_cells[k]:>9} cells  {v:10.4g} km²")
        if "predator" not in self.record.get("species", SPECIES):
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def report_parts(self) -> list[Part]:
        rec = self.record
        thr = rec["settings"]["threshold"]
        blocks: list = [Paragraph(
            f"Run A is {rec['run_a']}; run B is {rec['run_b']}. Differences are B − A. A "
            f"cell changes when its time-mean density changes by more than {thr:.0%} of run "
            "A's, or when a species becomes present or absent there."),
            Table(("change", "cells", "area (km²)"),
                  tuple((k, self.changed_cells[k], self.changed_area_km2[k])
                        for k in self.changed_cells))]
        rows = []
        for sp, v in (rec.get("time_mean_totals_animals") or {}).items():
            a, b = v.get("a"), v.get("b")
            rows.append((sp, a, b, 100.0 * (b - a) / a if a else None))
        if rows:
            blocks.append(Table(("species", "run A (animals)", "run B (animals)", "change (%)"),
                                tuple(rows), caption="Time-mean animals in the whole landscape",
                                numeric_format="{:,.0f}"))
        for key in ("change", "prey_mean_difference", "predator_mean_difference", "totals"):
            for f in self.files:
                if f.key == key and f.role in ("map", "figure"):
                    blocks.append(Figure(self.path(f), f.title, f.title))
        return [Part(f"Change: {self.label_a} → {self.label_b}", tuple(blocks))]


def default_out(runs: Sequence) -> Path:
    """``compare-<A>-<B>`` beside run B."""
    a, b = Path(runs[0].path), Path(runs[1].path)
    return b.parent / f"compare-{a.name}-{b.name}"


def write(runs: Sequence, settings: AnalysisSettings, out: Path, *, overwrite: bool = False,
          zones: Path | None = None, zone_field: str | None = None) -> ComparisonOutput:
    """The registry's entry point: :func:`write_comparison` of the reference and one other run."""
    if len(runs) != 2:
        raise InputError(f"compare takes two run folders (the reference and one other), not "
                         f"{len(runs)}", "preyscape compare")
    return write_comparison(runs[0], runs[1], out, settings=settings, zones=zones,
                            zone_field=zone_field, overwrite=overwrite)


def _zone_rows(tables: dict, zone_names: list[str]) -> tuple[list[str], list[list]]:
    from preyscape.analysis.compare import ZONE_STATISTICS

    header = ["zone", "species", "area_km2"]
    for stat in ZONE_STATISTICS:
        header += [f"{stat}_a", f"{stat}_b", f"{stat}_b_minus_a"]
    rows = []
    for k in range(len(zone_names)):
        for sp in tables:
            a, b = tables[sp][0][k], tables[sp][1][k]
            row = [a["zone"], sp, a["area_km2"]]
            for stat in ZONE_STATISTICS:
                row += [a[stat], b[stat], b[stat] - a[stat]]
            rows.append(row)
    return header, rows


def _species(ra, rb) -> tuple[str, ...]:
    """The species both runs model (prey alone in either: prey only)."""
    return tuple(sp for sp in ra.species if sp in rb.species)


def _record(ra, rb, maps, grid, settings: AnalysisSettings, zones, zone_field, zone_kind,
            zone_names) -> dict:
    from preyscape.analysis.compare import CHANGE_CODES

    change = maps["change"].values
    area = grid.cell_area_km2
    codes = range(4) if "predator" in _species(ra, rb) else range(2)
    counts = {CHANGE_CODES[k]: int(np.count_nonzero(change == k)) for k in codes}
    return {
        "run_a": str(ra.path.resolve()), "run_b": str(rb.path.resolve()),
        "title_a": ra.info.get("title"), "title_b": rb.info.get("title"),
        "variant_a": ra.label, "variant_b": rb.label,
        "settings": {"threshold": settings.change_threshold,
                     "presence_animals_per_km2": settings.presence,
                     "zones": str(zones) if zones is not None else None,
                     "zone_field": zone_field, "zone_source": zone_kind},
        "definitions": {
            "difference": "B - A",
            "time_mean": "mean over the snapshots after t = 0 (each run its own)",
            "persistence": "fraction of snapshots after t = 0 with density >= presence",
            "change": "|B - A| > threshold * A where A >= presence; B >= presence where "
                      "A < presence",
            "change_codes": {str(k): CHANGE_CODES[k] for k in codes},
        },
        "same_snapshot_times": bool(maps.attrs["same_times"]),
        "snapshots_used": {"a": int(maps.attrs["prey_snapshots_a"]),
                           "b": int(maps.attrs["prey_snapshots_b"])},
        "cell_area_km2": area,
        "cells_with_data": int(grid.mask.sum()),
        "changed_cells": counts,
        "changed_area_km2": {k: v * area for k, v in counts.items()},
        "time_mean_totals_animals": {sp: {"a": ra.mean_total(sp), "b": rb.mean_total(sp)}
                                     for sp in _species(ra, rb)},
        "species": list(_species(ra, rb)),
        "zones": zone_names,
    }


def write_comparison(run_a, run_b, out: str | Path, *, settings: AnalysisSettings | None = None,
                     zones: Path | None = None, zone_field: str | None = None,
                     overwrite: bool = False) -> ComparisonOutput:
    """Compare run B with run A and write maps, tables and a record into ``out``.

    Parameters
    ----------
    run_a, run_b : RunResults or path
        Finished runs; A is the reference.
    out : str or pathlib.Path
        Output folder, created atomically.
    settings : AnalysisSettings, optional
        ``change_threshold`` (0.1 = 10 %) and ``presence`` (animals/km²);
        default run A's own.
    zones : pathlib.Path, optional
        Zones for the table (:func:`preyscape.analysis.compare.load_zones`);
        default the habitat classes of run A.
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
        If the runs are on different grids, the zone file is unusable, or
        ``out`` exists and ``overwrite`` is False.
    FileProblem
        If a folder is not a finished run.
    """
    from preyscape.analysis.compare import compare_runs, load_zones, zone_table
    from preyscape.analysis.results import RunResults, open_run

    ra = run_a if isinstance(run_a, RunResults) else open_run(run_a)
    rb = run_b if isinstance(run_b, RunResults) else open_run(run_b)
    settings = settings or ra.settings()
    presence = settings.presence
    maps = compare_runs(ra.ds, rb.ds, threshold=settings.change_threshold, presence=presence,
                        names=(f"A ({ra.path})", f"B ({rb.path})"))
    grid = ra.grid
    labels, zone_names, zone_kind = load_zones(zones, zone_field, grid, ra.ds)
    species = _species(ra, rb)
    tables = {sp: (zone_table(ra.ds, labels, zone_names, sp, presence=presence),
                   zone_table(rb.ds, labels, zone_names, sp, presence=presence))
              for sp in species}
    record = _record(ra, rb, maps, grid, settings, zones, zone_field, zone_kind, zone_names)
    with output_folder(out, overwrite=overwrite) as tmp:
        files = _write_maps(tmp, grid, maps, ra.species_names, settings.change_threshold,
                            species)
        write_csv(tmp / "zones.csv", *_zone_rows(tables, zone_names))
        files.append(FileRecord("zones.csv", "table", "Zone statistics of both runs"))
        totals_compare_plot(ra.times, {sp: ra.totals(sp) for sp in species}, rb.times,
                            {sp: rb.totals(sp) for sp in species},
                            [f"A: {ra.title}", f"B: {rb.title}"], ra.species_names,
                            tmp / "totals.png")
        files.append(FileRecord("totals.png", "figure", "Landscape totals of both runs",
                                key="totals"))
        files.append(FileRecord("comparison.json", "record", "Settings and changed areas"))
        record["files"] = [f.name for f in files]
        write_json(tmp / "comparison.json", record)
    return ComparisonOutput(Path(out), tuple(files), record, ra.label, rb.label)


def _write_maps(tmp: Path, grid, maps, names: dict, threshold: float,
                species: tuple[str, ...] = SPECIES) -> list[FileRecord]:
    files = []
    for sp in species:
        for stat, units in (("mean", "animals per km²"), ("persistence", "fraction of snapshots")):
            name = f"{sp}_{stat}_difference"
            arr = maps[name].values
            write_raster(tmp / f"{name}.tif", grid, arr)
            what = "time-mean density" if stat == "mean" else "persistence"
            title = f"{sp} ({names[sp]}) {what}: B − A"
            difference_map(grid, arr, title, tmp / f"{name}.png", units)
            short = f"{sp.capitalize()} {what}, B − A"
            files += [FileRecord(f"{name}.tif", "raster", short, sp, key=name),
                      FileRecord(f"{name}.png", "map", short, sp, key=name)]
        write_raster(tmp / f"{sp}_relative_change.tif", grid, maps[f"{sp}_relative_change"].values)
        files.append(FileRecord(f"{sp}_relative_change.tif", "raster",
                                f"Relative change of time-mean {sp}, (B − A)/A", sp))
    change = maps["change"].values
    write_raster(tmp / "change.tif", grid, change.astype(np.int8), nodata=-1, dtype="int8")
    change_map(grid, change, f"Change of the time mean by more than {threshold:.0%}",
               tmp / "change.png", listed=range(4) if "predator" in species else range(2))
    files += [FileRecord("change.tif", "raster", "Where the outcome changes", key="change"),
              FileRecord("change.png", "map", "Where the outcome changes", key="change")]
    return files


# --- figures -------------------------------------------------------------------------
def difference_map(grid, diff: np.ndarray, title: str, path: Path,
                   units: str = "animals per km²") -> Path:
    """A difference map (B − A, in ``units``) on a diverging scale centred on zero."""
    from matplotlib.colors import TwoSlopeNorm

    from preyscape.plots import _shown, finish_map, map_figure

    data = _shown(grid, diff)
    # symmetric limits, so equal gains and losses get equally strong colours
    lim = float(np.abs(data).max()) if data.count() else 0.0
    lim = lim if lim > 0 else 1e-12
    fig, _, _ = map_figure(grid, diff, title, "RdBu_r",
                           norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim), units=units)
    return finish_map(fig, path)


def change_map(grid, classes: np.ndarray, title: str, path: Path,
               listed: Sequence[int] = range(4)) -> Path:
    """The change classes (0 none, 1 prey only, 2 predator only, 3 both; −1 no data).

    ``listed``: the classes the legend lists (prey alone: 0 and 1).
    """
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.patches import Patch

    from preyscape.plots import NO_DATA, finish_map, map_figure

    codes = np.asarray(classes)
    colours = [CHANGE_COLOURS[k] for k in range(4)]
    fig, ax, _ = map_figure(grid, np.where(codes < 0, np.nan, codes).astype(float), title,
                            ListedColormap(colours), norm=BoundaryNorm(np.arange(5) - 0.5, 4))
    handles = [Patch(facecolor=CHANGE_COLOURS[k], edgecolor="#808080", label=CHANGE_LABELS[k])
               for k in listed]
    handles.append(Patch(facecolor=NO_DATA, edgecolor="#808080", label="no data"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
              frameon=False)
    return finish_map(fig, path)


def totals_compare_plot(times_a: np.ndarray, tot_a: dict, times_b: np.ndarray, tot_b: dict,
                        labels: Sequence[str], names: dict, path: Path) -> Path:
    """Landscape totals (animals) of both species in two runs against time (years)."""
    from preyscape.plots import _new, _save

    fig = _new((7.0, 5.4))
    colour = {"prey": "#2a788e", "predator": "#b5367a"}
    axes = []
    for k, sp in enumerate(tot_a):
        ax = fig.add_subplot(len(tot_a), 1, k + 1, sharex=axes[0] if axes else None)
        axes.append(ax)
        ax.plot(times_a, tot_a[sp], color=colour[sp], lw=1.6, label=labels[0])
        ax.plot(times_b, tot_b[sp], color=colour[sp], lw=1.6, ls="--", label=labels[1])
        ax.set_ylabel(f"{sp} ({names.get(sp) or sp})\n(animals)", fontsize=9)
        ax.legend(fontsize=8, loc="best")
        ax.grid(alpha=0.3)
    axes[-1].set_xlabel("time (years)")
    axes[0].set_title("Landscape totals of both runs", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)
