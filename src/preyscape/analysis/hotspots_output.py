"""Hotspots written out: places, classes, Gi*, persistence, maps and tables.

:func:`write_hotspots` runs :func:`preyscape.analysis.hotspots.hotspots_of_run`
for both species of a run and writes, into a new output folder::

    prey_hotspot_class.tif            uint8: 0 neither, 1 hotspot, 2 coldspot, 255 no data
                                      (category names and attribute table in .aux.xml)
    prey_hotspots.png                 the hotspot places, numbered, coloured by persistence
    prey_hotspot_persistence.tif/.png share of snapshots as hotspot, 0-1 (float32, NaN)
    prey_gi_star.tif/.png             Gi* z-score of the time-mean density (float32, NaN)
    (the same for predator)
    hotspots.csv                      one row per species
    hotspot_places.csv                one row per place and species
    hotspot_bands.csv                 the hotspots with half and twice the band

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
    help="hotspots of both species: the few places where animals are markedly denser",
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
    "species", "band_m", "alpha", "floor_sd", "n_cells", "hot_cells", "hot_share_of_landscape",
    "hot_area_km2", "hot_share_of_animals", "lasting_hot_cells", "cold_cells",
    "significant_hot_cells", "significant_cold_cells", "places",
]
PLACES_HEADER = ["species", "place", "where", "cells", "area_km2", "x_m", "y_m", "habitat",
                 "ratio_to_landscape_mean", "persistence", "share_of_animals"]
BANDS_HEADER = ["species", "band_m", "hot_cells", "hot_share_of_landscape",
                "overlap_with_band_used"]
CLASS_COLOURS = {0: "#f0f0f0", 1: "#b2182b", 2: "#2166ac"}  # the ends of ColorBrewer RdBu
COLD = "#2166ac"
BAND_FACTORS = (0.5, 2.0)
PLACES_SHOWN = 9  # places numbered on the map and listed in the report


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
    hot_share_of_landscape : float
        Share (0–1) of the data cells that are hotspots.
    lasting_cells : int
        Hotspot cells that are hotspots in at least half the snapshots.
    significant_hot_cells, significant_cold_cells : int
        What plain Gi* with the FDR marks (for comparison).
    places : tuple of Place
        The hotspot places, largest first.
    bands : tuple of BandCheck
        The hotspots with other bands.
    """

    name: str
    n_cells: int
    hot_cells: int
    cold_cells: int
    hot_area_km2: float
    hot_share_of_animals: float
    hot_share_of_landscape: float = 0.0
    lasting_cells: int = 0
    significant_hot_cells: int = 0
    significant_cold_cells: int = 0
    places: tuple = ()
    bands: tuple = ()


@dataclass(frozen=True)
class HotspotsOutput(Written):
    """What :func:`write_hotspots` wrote.

    Attributes
    ----------
    band_m : float
        Neighbourhood radius used, metres.
    alpha : float
        False discovery rate used.
    floor_sd : float
        Effect-size floor, landscape standard deviations.
    species : dict
        Species key to :class:`SpeciesHotspots`.
    classes : dict
        Habitat class code to name (empty for suitability).
    """

    band_m: float = 0.0
    alpha: float = 0.05
    floor_sd: float = 1.0
    species: dict[str, SpeciesHotspots] = field(default_factory=dict)
    classes: dict = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        lines = [f"hotspots (distance band {self.band_m:g} m): {self.folder}"]
        for sp, d in self.species.items():
            lines.append(f"  {sp:<9} {d.hot_cells} hotspot cells ({d.hot_area_km2:.4g} km², "
                         f"{100 * d.hot_share_of_landscape:.1f} % of the landscape) in "
                         f"{len(d.places)} place{'' if len(d.places) == 1 else 's'}, "
                         f"{100 * d.hot_share_of_animals:.1f} % of the animals")
            if not d.hot_cells:
                lines.append(f"            {_none_reason(d)}")
        if "predator" not in self.species:
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def headlines(self) -> list[str]:
        return [_headline(sp, d, self.classes) for sp, d in self.species.items()]

    def report_parts(self) -> list[Part]:
        return _parts(self)


def _label(sp: str, name: str) -> str:
    return f"{sp} ({name})" if name and name != sp else sp


def _none_reason(d: SpeciesHotspots) -> str:
    if d.significant_hot_cells:
        return (f"no place stands out: plain Gi* marks {d.significant_hot_cells} cells as "
                "significant, but none is far enough above the landscape mean to count")
    return "no place stands out: the density is too even for any cell to be significant"


def _headline(sp: str, d: SpeciesHotspots, classes: dict) -> str:
    who = _label(sp, d.name)
    who = who[0].upper() + who[1:]
    if not d.places:
        return f"{who}: {_none_reason(d)}."
    big = d.places[0]
    hab = f", mostly {classes.get(big.habitat, 'class ' + str(big.habitat))}" \
        if big.habitat is not None and classes else ""
    lasting = sum(1 for p in d.places if (p.persistence or 0) >= 0.5)
    n = len(d.places)
    text = (f"{who} is concentrated in {n} place{'s' if n > 1 else ''} covering "
            f"{100 * d.hot_share_of_landscape:.0f} % of the landscape ({d.hot_area_km2:.3g} km²) "
            f"and holding {100 * d.hot_share_of_animals:.0f} % of the animals; "
            f"{'the largest' if n > 1 else 'it'} lies in the {big.where} ({big.area_km2:.3g} "
            f"km²{hab}) at {big.ratio:.2g} times the landscape's mean density.")
    if n == 1:
        return text + (" It stands out in at least half of the snapshots." if lasting else
                       " It stands out in fewer than half of the snapshots: it comes and goes "
                       "with the population cycles.")
    if lasting == 0:
        return text + (" None of them stands out in at least half of the snapshots: they "
                       "come and go with the population cycles.")
    return text + f" {lasting} of them stand{'s' if lasting == 1 else ''} out in at least " \
        "half of the snapshots."


def _parts(out: HotspotsOutput) -> list[Part]:
    text = (
        "A hotspot is a place whose surroundings (every cell within "
        f"{out.band_m:g} m) hold markedly more animals than the landscape as a whole, over the "
        "run. Two things must hold: the excess is statistically clear (Getis–Ord Gi*, with "
        f"the false discovery rate held at {out.alpha:g}), and it is large, at least "
        f"{out.floor_sd:g} standard deviation of the landscape's densities above its mean. "
        "Hotspot cells that touch form a place; the maps number the places and colour them "
        "by the share of snapshots in which they stand out (each snapshot tested the same "
        "way), so a place in dark red lasts and a pale one comes and goes with the cycles.")
    rows = tuple((_label(sp, d.name), d.hot_area_km2, 100 * d.hot_share_of_landscape,
                  len(d.places), 100 * d.hot_share_of_animals,
                  100 * d.lasting_cells / d.n_cells if d.n_cells else 0.0,
                  100 * d.significant_hot_cells / d.n_cells if d.n_cells else 0.0)
                 for sp, d in out.species.items())
    places = tuple((_label(sp, d.name), p.number, p.where, p.area_km2,
                    out.classes.get(p.habitat, "") if p.habitat is not None else "",
                    p.ratio, None if p.persistence is None else 100 * p.persistence)
                   for sp, d in out.species.items() for p in d.places[:PLACES_SHOWN])
    blocks: list = [
        Paragraph(text),
        Table(("species", "hotspot area (km²)", "share of the landscape (%)", "places",
               "animals on hotspots (%)", "hotspot at least half the time (% of landscape)",
               "plain Gi* would mark (% of landscape)"), rows,
              caption="Hotspots of the time-mean density"),
    ]
    if places:
        blocks.append(Table(("species", "place", "where", "area (km²)", "main habitat",
                             "density / landscape mean", "snapshots as hotspot (%)"), places,
                            caption="The hotspot places (numbered as on the maps)"))
    blocks += [Figure(out.path(f), f.title, f.title) for f in out.files
               if f.role == "map" and f.key == "places"]
    bands = tuple((_label(sp, d.name), b.band_m, 100 * b.share, 100 * b.overlap)
                  for sp, d in out.species.items() for b in d.bands)
    method: list = [Paragraph(
        "Why not simply every significant cell: modelled densities are smooth, so with a "
        "neighbourhood of hundreds of cells almost any excess is significant, and plain Gi* "
        "marks most of the landscape (last column above). Requiring the excess to be at "
        "least one landscape standard deviation (the floor of Santora & Veit 2013) keeps the "
        "places that stand out, and makes them depend little on the distance band: the "
        "table below repeats the analysis with half and twice the band.")]
    if bands:
        method.append(Table(("species", "distance band (m)", "hotspots (% of landscape)",
                             "overlap with the band used (%)"), bands,
                            caption=f"The hotspots with other distance bands (band used: "
                                    f"{out.band_m:g} m; overlap: cells hot with both over "
                                    "cells hot with either)"))
    method += [Figure(out.path(f), f.title, f.title) for f in out.files
               if f.role == "map" and f.key in ("persistence", "gi_star")]
    return [Part("Hotspots: where the animals concentrate", tuple(blocks), "hotspots"),
            Part("Hotspots: the statistics", tuple(method), "hotspot-method", place="method")]


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
    Gi* and a two-sided Benjamini–Hochberg FDR test, and a hotspot must also
    stand out by :data:`~preyscape.analysis.hotspots.EFFECT_FLOOR_SD`
    landscape standard deviations; each snapshot used is tested the same way
    for the persistence. Hotspot cells are grouped into places.

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
    from preyscape.analysis.hotspots import EFFECT_FLOOR_SD, default_band_m, hotspots_of_run
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
            species[sp] = _summarise(run, res, names[sp])
            files += _write_species(tmp, run, res, species[sp], _label(sp, names[sp]))
        files += _write_tables(tmp, species, band, alpha, EFFECT_FLOOR_SD, run.classes or {})
    return HotspotsOutput(Path(out), tuple(files), band, float(alpha), EFFECT_FLOOR_SD, species,
                          dict(run.classes or {}))


def _summarise(run, res, name: str) -> SpeciesHotspots:
    from preyscape.analysis.hotspot_places import band_sensitivity, find_places

    grid = run.grid
    places = find_places(res.hot, res.mean, res.persistence, grid,
                         habitat=run.habitat if run.classes else None)
    # a place smaller than a tenth of a neighbourhood is a speck of the band's edge, not a
    # place to plan for: its cells stay hotspots, it is not listed (common practice, no
    # source)
    small = max(1, int(np.pi * (res.band_m / grid.dx) * (res.band_m / grid.dy) / 10))
    places = tuple(p for p in places if p.cells >= small)
    bands = band_sensitivity(res.mean, grid.mask, grid.dx, grid.dy,
                             [res.band_m * f for f in BAND_FACTORS], res.hot, alpha=res.alpha,
                             floor_sd=res.floor_sd)
    lasting = int(np.count_nonzero(res.hot & (np.nan_to_num(res.persistence) >= 0.5))) \
        if res.persistence is not None else 0
    return SpeciesHotspots(
        name, int(res.data.sum()), int(res.hot.sum()), int(res.cold.sum()),
        float(res.hot.sum() * grid.cell_area_km2), res.hot_share_of_animals,
        res.hot_share_of_landscape, lasting, int(res.significant_hot.sum()),
        int(res.significant_cold.sum()), places, bands)


def _write_tables(tmp: Path, species: dict, band: float, alpha: float, floor: float,
                  classes: dict) -> list[FileRecord]:
    rows = [[sp, band, float(alpha), floor, d.n_cells, d.hot_cells, d.hot_share_of_landscape,
             d.hot_area_km2, d.hot_share_of_animals, d.lasting_cells, d.cold_cells,
             d.significant_hot_cells, d.significant_cold_cells, len(d.places)]
            for sp, d in species.items()]
    write_csv(tmp / "hotspots.csv", CSV_HEADER, rows)
    prow = [[sp, p.number, p.where, p.cells, p.area_km2, p.x_m, p.y_m,
             "" if p.habitat is None else classes.get(p.habitat, str(p.habitat)), p.ratio,
             "" if p.persistence is None else p.persistence, p.share_of_animals]
            for sp, d in species.items() for p in d.places]
    write_csv(tmp / "hotspot_places.csv", PLACES_HEADER, prow)
    brow = [[sp, b.band_m, b.hot_cells, b.share, b.overlap] for sp, d in species.items()
            for b in d.bands]
    write_csv(tmp / "hotspot_bands.csv", BANDS_HEADER, brow)
    return [FileRecord("hotspots.csv", "table", "Hotspot counts per species"),
            FileRecord("hotspot_places.csv", "table", "Hotspot places per species",
                       key="places"),
            FileRecord("hotspot_bands.csv", "table", "Hotspots with other distance bands",
                       key="bands")]


def _write_species(tmp: Path, run, res, summary: SpeciesHotspots,
                   label: str) -> list[FileRecord]:
    from preyscape.analysis.hotspots import CLASS_NAMES, CLASS_NODATA

    sp, grid = res.species, run.grid
    band = f"band {res.band_m:g} m"
    write_raster(tmp / f"{sp}_gi_star.tif", grid, res.gi_star,
                 description=f"Getis-Ord Gi* z-score of the time-mean {label} density, {band}",
                 units="z-score")
    write_raster(tmp / f"{sp}_hotspot_class.tif", grid, res.classes, nodata=CLASS_NODATA,
                 dtype="uint8", description=f"hotspot class of {label} ({band}, FDR "
                 f"{res.alpha:g}, floor {res.floor_sd:g} SD)", units="class code",
                 categories=dict(enumerate(CLASS_NAMES)), colours=CLASS_COLOURS)
    write_raster(tmp / f"{sp}_hotspot_persistence.tif", grid, res.persistence,
                 description=f"share of snapshots in which the cell is a {label} hotspot",
                 units="share of snapshots (0-1)")
    title = f"Where {label} stand out: hotspot places"
    places_map(grid, res, summary.places, title, tmp / f"{sp}_hotspots.png")
    ptitle = f"How often each cell is a {label} hotspot"
    persistence_map(grid, res.persistence, ptitle, tmp / f"{sp}_hotspot_persistence.png",
                    note=f"{res.snapshots} snapshots after the start; {band}.")
    gtitle = f"Gi* z-score of time-mean {label} density"
    gi_star_map(grid, res, gtitle, tmp / f"{sp}_gi_star.png")
    return [
        FileRecord(f"{sp}_hotspots.png", "map", title, sp, key="places"),
        FileRecord(f"{sp}_hotspot_persistence.png", "map", ptitle, sp, key="persistence"),
        FileRecord(f"{sp}_gi_star.png", "map", gtitle, sp, key="gi_star"),
        FileRecord(f"{sp}_hotspot_class.tif", "raster", f"Hotspot class of {label}", sp),
        FileRecord(f"{sp}_hotspot_persistence.tif", "raster", ptitle, sp),
        FileRecord(f"{sp}_gi_star.tif", "raster", f"Gi* z-score of time-mean {label}", sp),
    ]


# --- figures -------------------------------------------------------------------------
def _outline(ax, grid, cells: np.ndarray, colour: str, style) -> bool:
    """Outline the cells where ``cells`` is True; False if there are none."""
    from preyscape.plots import thin

    k = thin(grid)
    sel = np.asarray(cells, dtype=bool)[::k, ::k] & grid.mask[::k, ::k]
    if not sel.any() or sel.shape[0] < 2 or sel.shape[1] < 2:  # contours need 2 cells/axis
        return False
    ax.contour(grid.x[::k] / 1e3, grid.y[::k] / 1e3, sel.astype(float), levels=[0.5],
               colors=colour, linewidths=1.1, linestyles=[style], zorder=3)
    return True


def places_map(grid, res, places: Sequence, title: str, path: Path) -> Path:
    """The hotspot places: hotspot cells coloured by persistence (0–1), numbered, with
    the coldspots outlined; elsewhere the habitat shows faintly."""
    from matplotlib.lines import Line2D

    from preyscape.plots import add_legend_items, finish_map, map_figure

    shown = np.where(res.hot, np.nan_to_num(res.persistence, nan=0.0)
                     if res.persistence is not None else 1.0, np.nan)
    fig, ax, _ = map_figure(grid, shown, title, "YlOrRd", vmin=0.0, vmax=1.0,
                            units="share of snapshots in which it is a hotspot (0–1)",
                            undefined=None,
                            note=f"Hotspot: neighbourhood within {res.band_m:g} m significant "
                                 f"(Gi*, FDR {res.alpha:g}) and at least {res.floor_sd:g} "
                                 "landscape standard deviation above the landscape mean.")
    items = []
    if _outline(ax, grid, res.hot, "#67001f", "solid"):
        items.append(Line2D([], [], color="#67001f", lw=1.1, label="hotspot place (numbered)"))
    if _outline(ax, grid, res.cold, COLD, "dashed"):
        items.append(Line2D([], [], color=COLD, lw=1.1, ls="--", label="coldspot"))
    for p in places[:PLACES_SHOWN]:
        ax.annotate(str(p.number), (p.x_m / 1e3, p.y_m / 1e3), ha="center", va="center",
                    fontsize=8, weight="bold", zorder=7,
                    bbox={"boxstyle": "circle,pad=0.2", "fc": "white", "ec": "#67001f"})
    add_legend_items(fig, items)
    return finish_map(fig, path)


def gi_star_map(grid, res, title: str, path: Path) -> Path:
    """Gi* z-scores on a diverging scale centred on 0; the cells plain Gi* calls
    significant and the hotspots beyond the floor are outlined."""
    from matplotlib.colors import TwoSlopeNorm
    from matplotlib.lines import Line2D

    from preyscape.plots import _shown, add_legend_items, finish_map, map_figure

    data = _shown(grid, res.gi_star)
    lim = max(float(np.abs(data).max()) if data.count() else 1.0, 1.0)
    fig, ax, _ = map_figure(grid, res.gi_star, title, "RdBu_r",
                            norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim),
                            units="Gi* z-score (dimensionless)",
                            note=f"Band {res.band_m:g} m. On smooth density fields most cells "
                                 "are significant; hotspots also need the floor.")
    items = []
    if _outline(ax, grid, res.significant_hot, "#555555", "dotted"):
        items.append(Line2D([], [], color="#555555", lw=1.1, ls=":",
                            label=f"significant, z > 0 (FDR {res.alpha:g})"))
    if _outline(ax, grid, res.hot, "black", "solid"):
        items.append(Line2D([], [], color="black", lw=1.1,
                            label=f"hotspot (also ≥ {res.floor_sd:g} SD above the mean)"))
    add_legend_items(fig, items)
    return finish_map(fig, path)


def persistence_map(grid, fraction: np.ndarray, title: str, path: Path, *,
                    note: str | None = None) -> Path:
    """Map the share of snapshots (0–1, NaN off data) in which each cell is a hotspot."""
    from preyscape.plots import finish_map, map_figure

    fig, _, _ = map_figure(grid, fraction, title, "YlOrRd", vmin=0.0, vmax=1.0,
                           units="share of snapshots as hotspot (0–1)", note=note)
    return finish_map(fig, path)
