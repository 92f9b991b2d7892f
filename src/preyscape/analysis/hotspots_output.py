"""Hotspots written out: Gi* rasters, hotspot classes, persistence, maps, a table.

:func:`write_hotspots` runs :func:`preyscape.analysis.hotspots.hotspots_of_run`
for both species of a run and writes, into a new output folder::

    prey_gi_star.tif                  Gi* z-score of the time-mean density (float32, NaN)
    prey_hotspot_class.tif            int8: 1 hot, -1 cold, 0 neither, -128 no data
    prey_hotspot_persistence.tif      share of snapshots as hotspot, 0-1 (float32, NaN)
    prey_hotspots.png                 map of Gi* with significant cells marked
    prey_hotspot_persistence.png      map of the persistence
    (the same for predator)
    hotspots.csv                      one row per species

Examples
--------
``run_folder`` is a finished run folder; ``out_folder`` a folder for outputs:

>>> out = write_hotspots(run_folder, out_folder / "hotspots")
>>> [f.name for f in out.files if f.role == "map"][:2]
['prey_hotspots.png', 'prey_hotspot_persistence.png']
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

COMMAND = Command(
    name="hotspots",
    help="Getis–Ord Gi* hotspots of both species",
    runs="one",
    options=(
        Option("--distance", "hotspot_distance", "neighbourhood radius in metres (default: "
               "the scenario's analysis.hotspot_distance, else a size from the grid)",
               metavar="METRES"),
        Option("--fdr", "significance", "false discovery rate for significance (default "
               "0.05, or the scenario's analysis.significance)", metavar="RATE"),
    ),
    out_help="RUN/hotspots",
)

CSV_HEADER = [
    "species", "band_m", "alpha", "n_cells", "hot_cells", "cold_cells", "hot_area_km2",
    "hot_share_of_animals",
]

HOT = "#67001f"  # dark ends of the RdBu colour map, so outlines read as its extremes
COLD = "#053061"


@dataclass(frozen=True)
class SpeciesHotspots:
    """Key numbers of one species' hotspots.

    Attributes
    ----------
    name : str
        Common name of the species.
    n_cells, hot_cells, cold_cells : int
        Cells with data, hotspot cells and coldspot cells.
    hot_area_km2 : float
        Area of the hotspot cells, km².
    hot_share_of_animals : float
        Share (0–1) of the time-mean animals on hotspot cells.
    """

    name: str
    n_cells: int
    hot_cells: int
    cold_cells: int
    hot_area_km2: float
    hot_share_of_animals: float


@dataclass(frozen=True)
class HotspotsOutput(Written):
    """What :func:`write_hotspots` wrote.

    Attributes
    ----------
    band_m : float
        Neighbourhood radius used, metres.
    alpha : float
        False discovery rate used.
    species : dict
        Species key to :class:`SpeciesHotspots`.
    """

    band_m: float = 0.0
    alpha: float = 0.05
    species: dict[str, SpeciesHotspots] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        lines = [f"hotspots (distance band {self.band_m:g} m): {self.folder}"]
        for sp, d in self.species.items():
            lines.append(f"  {sp:<9} {d.hot_cells} hotspot cells ({d.hot_area_km2:.4g} km²), "
                         f"{100 * d.hot_share_of_animals:.1f} % of the animals")
        if "predator" not in self.species:
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def report_parts(self) -> list[Part]:
        text = (
            f"Getis–Ord Gi* z-scores of the time-mean density, with every cell within "
            f"{self.band_m:g} m as a neighbour (binary distance band, the cell itself "
            "included). A cell is a significant hotspot (or coldspot) when its two-sided "
            "p-value passes the Benjamini–Hochberg false-discovery-rate test at "
            f"{self.alpha:g}. On smooth density fields large parts of the landscape pass: "
            "read hotspots as where animals cluster, not as rare anomalies. Persistence is "
            "the share of snapshots in which a cell is a hotspot.")
        rows = tuple((_label(sp, d.name), d.n_cells, d.hot_cells, d.hot_area_km2,
                      d.cold_cells, 100.0 * d.hot_share_of_animals)
                     for sp, d in self.species.items())
        blocks = [Paragraph(text),
                  Table(("species", "cells", "hotspot cells", "hotspot area (km²)",
                         "coldspot cells", "animals on hotspots (%)"), rows)]
        blocks += [Figure(self.path(f), f.title, f.title) for f in self.files if f.role == "map"]
        return [Part("Hotspots", tuple(blocks))]


def _label(sp: str, name: str) -> str:
    return f"{sp} ({name})" if name and name != sp else sp


def default_out(runs: Sequence) -> Path:
    """``RUN/hotspots``."""
    return Path(runs[0].path) / "hotspots"


def write(runs: Sequence, settings: AnalysisSettings, out: Path, *,
          overwrite: bool = False) -> HotspotsOutput:
    """The registry's entry point: :func:`write_hotspots` of the one run."""
    return write_hotspots(runs[0], out, settings=settings, overwrite=overwrite)


def write_hotspots(run, out: str | Path, *, settings: AnalysisSettings | None = None,
                   overwrite: bool = False) -> HotspotsOutput:
    """Hotspot analysis of both species of a run, written into ``out``.

    Each species' time-mean density (snapshots used) is tested with Getis–Ord
    Gi* and a two-sided Benjamini–Hochberg FDR test; each snapshot used is
    tested the same way for the persistence.

    Parameters
    ----------
    run : RunResults or path
        A finished run (:func:`preyscape.analysis.results.open_run`).
    out : str or pathlib.Path
        The output folder to create (atomically).
    settings : AnalysisSettings, optional
        ``hotspot_distance`` (metres; default from the grid) and
        ``significance`` (the false discovery rate); default the run's own.
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    HotspotsOutput

    Raises
    ------
    FileProblem
        If ``run`` is not a finished run folder.
    InputError
        If ``out`` exists and ``overwrite`` is False.
    """
    from preyscape.analysis.hotspots import default_band_m, hotspots_of_run
    from preyscape.analysis.results import RunResults, open_run

    run = run if isinstance(run, RunResults) else open_run(run)
    settings = settings or run.settings()
    grid = run.grid
    band = default_band_m(grid) if settings.hotspot_distance is None \
        else settings.hotspot_distance
    alpha = settings.significance
    names = run.species_names
    files: list[FileRecord] = []
    species: dict[str, SpeciesHotspots] = {}
    with output_folder(out, overwrite) as tmp:
        for sp in run.species:
            res = hotspots_of_run(run.ds, sp, band_m=band, alpha=alpha, persistent=True)
            files += _write_species(tmp, grid, res, _label(sp, names[sp]))
            species[sp] = SpeciesHotspots(
                names[sp], int(res.data.sum()), int(res.hot.sum()), int(res.cold.sum()),
                float(res.hot.sum() * grid.cell_area_km2), res.hot_share_of_animals)
        rows = [[sp, band, float(alpha), d.n_cells, d.hot_cells, d.cold_cells,
                 d.hot_area_km2, d.hot_share_of_animals] for sp, d in species.items()]
        write_csv(tmp / "hotspots.csv", CSV_HEADER, rows)
        files.append(FileRecord("hotspots.csv", "table", "Hotspot counts per species"))
    return HotspotsOutput(Path(out), tuple(files), band, float(alpha), species)


def _write_species(tmp: Path, grid, res, label: str) -> list[FileRecord]:
    from preyscape.analysis.hotspots import CLASS_NODATA

    sp = res.species
    write_raster(tmp / f"{sp}_gi_star.tif", grid, res.gi_star)
    write_raster(tmp / f"{sp}_hotspot_class.tif", grid, res.classes, nodata=CLASS_NODATA,
                 dtype="int8")
    write_raster(tmp / f"{sp}_hotspot_persistence.tif", grid, res.persistence)
    title = f"Hotspots of time-mean {label}"
    hotspot_map(grid, res.gi_star, res.hot, res.cold,
                f"{title}\nGi*, band {res.band_m:g} m, FDR {res.alpha:g}",
                tmp / f"{sp}_hotspots.png")
    ptitle = f"Hotspot persistence of {label}"
    persistence_map(grid, res.persistence,
                    f"{ptitle}\n{res.snapshots} snapshots, band {res.band_m:g} m",
                    tmp / f"{sp}_hotspot_persistence.png")
    return [
        FileRecord(f"{sp}_gi_star.tif", "raster", f"Gi* z-score of time-mean {label}", sp),
        FileRecord(f"{sp}_hotspot_class.tif", "raster", f"Hotspot class of {label}", sp),
        FileRecord(f"{sp}_hotspot_persistence.tif", "raster", ptitle, sp),
        FileRecord(f"{sp}_hotspots.png", "map", title, sp),
        FileRecord(f"{sp}_hotspot_persistence.png", "map", ptitle, sp),
    ]


# --- figures -------------------------------------------------------------------------
def _mark(ax, grid, cells: np.ndarray, colour: str, hatch: str) -> bool:
    """Outline and hatch the cells where ``cells`` is True; False if there are none."""
    from preyscape.plots import thin

    k = thin(grid)
    sel = np.asarray(cells, dtype=bool)[::k, ::k] & grid.mask[::k, ::k]
    if not sel.any() or sel.shape[0] < 2 or sel.shape[1] < 2:  # contours need 2 cells/axis
        return False
    x, y = grid.x[::k] / 1e3, grid.y[::k] / 1e3
    f = sel.astype(float)
    ax.contourf(x, y, f, levels=[0.5, 1.5], colors="none", hatches=[hatch])
    ax.contour(x, y, f, levels=[0.5], colors=colour, linewidths=0.9)
    return True


def hotspot_map(grid, z: np.ndarray, hot: np.ndarray, cold: np.ndarray, title: str,
                path: Path) -> Path:
    """Map Gi* z-scores on a diverging scale centred on 0, significant cells marked.

    Significant hotspots are outlined in dark red and hatched ``///``,
    coldspots outlined in dark blue and hatched ``\\\\``; no-data cells are
    grey; axes are map coordinates in km. ``z`` is dimensionless (NaN off
    data); ``hot`` and ``cold`` are boolean. Returns ``path`` (a PNG).
    """
    from matplotlib.colors import TwoSlopeNorm
    from matplotlib.patches import Patch

    from preyscape.plots import NO_DATA, _shown, finish_map, map_figure

    data = _shown(grid, z)
    lim = float(np.abs(data).max()) if data.count() else 1.0
    lim = max(lim, 1.0)  # a flat field still gets a readable scale of ±1
    fig, ax, _ = map_figure(grid, z, title, "RdBu_r",
                            norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim),
                            units="Gi* z-score")
    handles = []
    if _mark(ax, grid, hot, HOT, "///"):
        handles.append(Patch(facecolor="none", edgecolor=HOT, hatch="///",
                             label="hotspot (FDR)"))
    if _mark(ax, grid, cold, COLD, "\\\\"):
        handles.append(Patch(facecolor="none", edgecolor=COLD, hatch="\\\\",
                             label="coldspot (FDR)"))
    handles.append(Patch(color=NO_DATA, label="no data"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.0, -0.12), ncol=3,
              fontsize=7, frameon=False)
    return finish_map(fig, path)


def persistence_map(grid, fraction: np.ndarray, title: str, path: Path) -> Path:
    """Map the share of snapshots (0–1, NaN off data) in which each cell is a hotspot."""
    from preyscape.plots import finish_map, map_figure

    fig, _, _ = map_figure(grid, fraction, title, "YlOrRd", vmin=0.0, vmax=1.0,
                           units="share of snapshots as hotspot (0–1)")
    return finish_map(fig, path)
