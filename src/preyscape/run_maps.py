"""The standard maps of a run folder, drawn from the folder itself.

:func:`draw_run_maps` draws a finished run's habitat, density, totals and
snapshot maps into ``maps/`` following the map standard of
:mod:`preyscape.plots`; :func:`draw_shared` redraws several runs meant to be
compared on one colour scale per species. Both read only the run folder
(:func:`preyscape.analysis.results.open_run`), so maps of any run, new or
old, look the same.

Examples
--------
``run_folder`` is a finished run folder:

>>> paths = draw_run_maps(run_folder)
>>> sorted(p.name for p in paths if p.name.startswith("prey"))
['prey_final.png', 'prey_mean.png', 'prey_snapshots.png']
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from preyscape.landscape.placed import Outline

__all__ = ["draw_run_maps", "draw_shared"]


def draw_run_maps(folder: str | Path, *, vmax: dict[str, float] | None = None,
                  shared_with: tuple[str, ...] = ()) -> list[Path]:
    """Draw the standard maps of a finished run into ``folder/maps``.

    Habitat with the measures, time-mean and final density of each species,
    landscape totals, and snapshot panels; densities in animals/km². Every
    map follows the map standard of :mod:`preyscape.plots` (measures, scale
    bar, north arrow, CRS caption, the run's name in the title). The
    snapshot panels of a species use a log scale from the presence threshold
    when its densities present span more than two orders of magnitude
    (:func:`preyscape.plots.choose_scale`).

    Parameters
    ----------
    folder : path
        A run folder with ``run.json`` and ``results.nc``.
    vmax : dict, optional
        Top of the colour scale of each species' density maps, animals/km²
        (default: the largest value of this run). Pass the same values to the
        runs meant to be compared.
    shared_with : tuple of str
        The runs whose maps share ``vmax``, named in the captions.
    """
    from preyscape import plots
    from preyscape.analysis.results import open_run

    run = open_run(folder)
    try:
        return _draw(run, Path(folder) / "maps", vmax or {}, shared_with, plots)
    finally:
        run.close()


def _draw(run, maps: Path, vmax: dict, shared_with: tuple, plots) -> list[Path]:
    names, grid = run.species_names, run.grid
    last = len(run.times) - 1
    tops = vmax or {sp: _top(run, sp) for sp in run.species}
    note = ("One colour scale per species for its time-mean, final and snapshot maps"
            + (f", shared by the runs {', '.join(shared_with)}." if shared_with else
               " of this run."))
    out = []
    layers = run.map_layers()
    targets = [Outline(name, "target", (), cells, None) for name, cells in run.targets()]
    with plots.map_context(**layers):
        out.append(plots.habitat_map(grid, run.habitat, run.classes,
                                     "Habitat, measures and target patches",
                                     maps / "habitat.png", colours=run.class_colours,
                                     outlines=[*layers["outlines"], *targets]))
    with plots.map_context(**layers, note=note):
        for sp in run.species:  # prey alone: no empty predator maps
            label = f"{sp} ({names[sp]})" if names[sp] != sp else sp
            out.append(plots.density_map(grid, run.time_mean(sp), f"Time-mean {label} density",
                                         maps / f"{sp}_mean.png", cmap=plots.SPECIES_CMAP[sp],
                                         vmax=tops[sp]))
            out.append(plots.density_map(
                grid, run.frame(sp, last), f"Final {label} density, t = {run.times[-1]:g} yr",
                maps / f"{sp}_final.png", cmap=plots.SPECIES_CMAP[sp], vmax=tops[sp]))
        predators = run.totals("predator") if "predator" in run.species else None
        out.append(plots.totals_plot(run.times, run.totals("prey"), predators, names,
                                     maps / "totals.png"))
        pick = np.unique(np.linspace(0, last, 5).round().astype(int))
        floor = run.settings().presence  # a log scale shows an invading front (issue 15)
        for sp in run.species:  # prey alone: no empty predator maps
            out.append(plots.snapshot_panels(grid, run.times[pick],
                                             [run.frame(sp, int(k)) for k in pick], sp,
                                             names[sp], maps / f"{sp}_snapshots.png",
                                             vmax=tops[sp], note=note, scale="auto",
                                             floor=floor))
    return out


def _top(run, species: str) -> float:
    """The largest density of a run's time mean, last snapshot and snapshot panels."""
    last = len(run.times) - 1
    pick = np.unique(np.linspace(0, last, 5).round().astype(int))
    tops = [float(np.nanmax(run.time_mean(species), initial=0.0))]
    tops += [float(np.nanmax(run.frame(species, int(k)), initial=0.0)) for k in pick]
    return max(tops) or 1.0


def draw_shared(folders: dict[str, Path]) -> None:
    """Redraw the maps of runs meant to be compared on one colour scale per species."""
    from preyscape.analysis.results import open_run

    tops = {"prey": 0.0, "predator": 0.0}
    for f in folders.values():
        with open_run(f) as run:
            for sp in tops:
                tops[sp] = max(tops[sp], _top(run, sp))
    for f in folders.values():
        draw_run_maps(f, vmax=tops, shared_with=tuple(folders))
