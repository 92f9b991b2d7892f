"""Running a scenario into a run folder, atomically.

:func:`simulate` prepares a scenario (:func:`preyscape.assemble.prepare`),
runs it epoch by epoch (:func:`preyscape.solve.run.integrate_epochs`) and
writes a run folder: ``results.nc``, summary GeoTIFFs, maps, the measures,
targets and movement operators, a checkpoint and ``run.json``. Everything is
written to a temporary folder beside the destination that is renamed only
when complete. :func:`simulate_variants` runs a scenario's baseline and
variants, each into its own folder, after checking all of them first.

Examples
--------
``scenario_path`` is a scenario file with variants; ``out_folder`` a folder for outputs:

>>> folders = simulate_variants(scenario_path, out_folder / "runs", maps=False,
...                             progress=False)
>>> sorted(folders)
['baseline', 'fenced', 'no-refuge']
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np

from preyscape import __version__, store
from preyscape.assemble import Setup, check_variant_measures, place_targets, predictions, prepare
from preyscape.landscape.grid import Grid
from preyscape.landscape.placed import Outline, PlacedMeasure
from preyscape.names import slug
from preyscape.scenario import Scenario, load_scenario
from preyscape.solve.stepper import Stepper, StepStats

__all__ = ["plan_variants", "simulate", "simulate_variants"]


def _return_freed_memory() -> None:
    """Have glibc give large freed blocks back to the system at once (Linux; else no-op).

    glibc raises its mmap threshold after the first large free, so later grid
    arrays (a few tens of MB) come from the heap and stay resident after they
    are freed; a fixed threshold keeps peak memory near what is in use.
    """
    try:
        import ctypes

        ctypes.CDLL("libc.so.6").mallopt(-3, 1 << 20)  # M_MMAP_THRESHOLD = 1 MiB
    except (OSError, AttributeError):
        pass


class _FolderSink:
    """Where the run loop puts snapshots (``results.nc``) and checkpoints."""

    def __init__(self, writer, folder: Path, dt: float) -> None:
        self.writer = writer
        self.folder = folder
        self.dt = dt

    def write(self, t, N, P):
        self.writer.write(t, N, P)

    def checkpoint(self, step, N, P):
        store.save_checkpoint(self.folder / "checkpoint.npz", step, N, P, {"dt": self.dt})


def _outline(m: PlacedMeasure) -> Outline:
    lines = []
    for s in m.shapes:
        g = s.geometry
        for part in getattr(g, "geoms", [g]):
            if part.geom_type == "Polygon":
                lines += [np.asarray(part.exterior.coords)[:, :2]]
                lines += [np.asarray(r.coords)[:, :2] for r in part.interiors]
            elif part.geom_type in ("LineString", "LinearRing"):
                lines.append(np.asarray(part.coords)[:, :2])
    return Outline(m.name, m.kind, tuple(lines), m.cells, m.faces)


def _write_targets(tmp: Path, sc: Scenario, grid: Grid) -> list[dict]:
    from preyscape.landscape.io import write_geotiff

    targets = []
    for name, cells in place_targets(sc, grid):
        (tmp / "targets").mkdir(exist_ok=True)
        f = f"targets/{slug(name)}.tif"
        write_geotiff(tmp / f, grid, np.where(grid.mask, cells, 255).astype(np.uint8),
                      nodata=255, dtype="uint8")
        targets.append({"name": name, "cells": int(cells.sum()), "cells_file": f})
    return targets


def _integrate(tmp: Path, setup: Setup, N: np.ndarray, P: np.ndarray, writer,
               stats: StepStats, progress) -> None:
    """Run every epoch from ``N``, ``P`` (advanced in place), saving snapshots,
    checkpoints and each epoch's operators."""
    from preyscape.solve.run import integrate_epochs

    epochs = setup.epochs

    def make_stepper(k: int) -> Stepper:
        st = setup.epoch_stepper(k, stats)
        store.save_operators(tmp / "operators" / f"epoch_{k}.npz", epochs[k][:2],
                             st.prey_movement, st.predator_movement)
        return st

    try:
        integrate_epochs(make_stepper, [e[:2] for e in epochs], N, P,
                         setup.scenario.run.save_every, setup.dt,
                         _FolderSink(writer, tmp, setup.dt), progress=progress)
    finally:
        writer.close()


def _record(sc: Scenario, grid: Grid, dt: float, epochs, stats: StepStats, n_snapshots: int,
            measures: list, targets: list, preds: dict, wall: float, compiled: float) -> dict:
    return {
        "preyscape_version": __version__,
        "scenario": str(sc.path),
        "variant": sc.variant,
        "scenario_sha256": sc.digest(),
        "title": sc.title,
        "seed": sc.run.seed,
        "step_years": dt,
        "steps": stats.steps,
        "scheme": sc.run.scheme,
        "years": sc.run.years,
        "save_every_years": sc.run.save_every,
        "snapshots": n_snapshots,
        "grid": {"rows": grid.ny, "cols": grid.nx, "cell_size_m": [grid.dx, grid.dy],
                 "cells_with_data": grid.n_cells},
        "species": {"prey": sc.prey.name,
                    "predator": sc.predator.name if sc.has_predator else None},
        "species_present": list(sc.species),
        "extinction": _extinction_record(sc, grid),
        "measures": measures,
        "targets": targets,
        "epochs": [{"start_year": a, "end_year": b, "measures": list(n)}
                   for a, b, n in epochs],
        "predictions": preds,
        "analysis": sc.analysis.model_dump(mode="json"),
        "settings": {k: sc.model_dump(mode="json")[k]
                     for k in ("prey", "predator", "interaction", "start", "run")},
        "classes": ({str(c.code): c.name for c in sc.landscape.classes}
                    if sc.landscape.values == "classes" else None),
        "positivity_clip_total": stats.clipped,
        "extinction_removed_animals": stats.floored * grid.cell_area_km2,
        "wall_time_s": round(wall, 3),
        "compile_or_cache_load_s": round(compiled, 3),
        "finished": store.now_iso(),
    }


def _extinction_record(sc: Scenario, grid: Grid) -> dict:
    """Each species' extinction threshold as given and in animals/km² (None: none)."""
    out = {}
    for sp in sc.species:
        spec = getattr(sc, sp)
        per_km2 = spec.extinction_per_km2(grid.cell_area_km2)
        out[sp] = None if per_km2 is None else {
            "per_km2": per_km2, "per_cell": per_km2 * grid.cell_area_km2,
            "given_as": "per cell" if spec.extinction_threshold_per_cell is not None
            else "per km²"}
    return out


def simulate(scenario: Scenario | str | Path, out: str | Path, *, overwrite: bool = False,
             progress: bool | None = None, maps: bool = True) -> Path:
    """Run a scenario into a run folder.

    The run is written to a temporary folder beside ``out`` and renamed to
    ``out`` only when complete, so an interrupted or failed run never leaves
    a half-written run folder.

    Parameters
    ----------
    scenario : Scenario or path
        The scenario (or its TOML file).
    out : str or pathlib.Path
        The run folder to create.
    overwrite : bool
        Replace an existing run folder (otherwise it is refused).
    progress : bool, optional
        Progress bar; default only on a terminal.
    maps : bool
        Draw PNG maps and the totals plot.

    Returns
    -------
    pathlib.Path
        The run folder.
    """
    from preyscape.solve.kernels import warm_up

    _return_freed_memory()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    out = Path(out)
    store.refuse_existing(out, overwrite, "run folder")  # before any work
    setup = prepare(sc)
    t0 = time.perf_counter()
    with store.output_folder(out, overwrite, "run folder") as tmp:
        warm_up()
        compiled = time.perf_counter() - t0
        grid, habitat = setup.grid, setup.habitat
        writer = store.ResultWriter(
            tmp / "results.nc", grid,
            {"prey": sc.prey.name, "predator": sc.predator.name if sc.has_predator else ""},
            {"title": sc.title or sc.path.stem, "source": f"preyscape {__version__}",
             "scenario_sha256": sc.digest(), "history": f"{store.now_iso()} preyscape run"},
            habitat=habitat,
        )
        preds = predictions(setup)
        measures = store.write_measures(tmp / "measures", grid, setup.measures)
        outlines = [_outline(m) for m in setup.measures]
        targets = _write_targets(tmp, sc, grid)
        stats = StepStats()
        N, P = setup.N0, setup.P0  # this setup is private to the run: no copies
        start = {sp: float(np.sum(u)) * grid.cell_area_km2 for sp, u in (("prey", N),
                                                                          ("predator", P))}
        dt, epochs = setup.dt, setup.epochs
        setup = setup.without_build_arrays()  # memory: one copy of each field during the run
        _integrate(tmp, setup, N, P, writer, stats, progress)
        finals = {k: np.where(grid.mask, v, np.nan) for k, v in (("prey", N), ("predator", P))}
        del N, P, setup  # free the run's arrays before the summaries
        means = store.time_means(tmp / "results.nc", grid.mask)
        store.write_summaries(tmp / "summary", grid, means, finals)
        if maps:
            draw_run_maps(tmp, sc, grid, habitat, means, finals, outlines)
        record = _record(sc, grid, dt, epochs, stats, writer.n, measures, targets, preds,
                         time.perf_counter() - t0, compiled)
        record["totals_animals"] = {
            sp: {"start": start[sp], "end": float(np.nansum(finals[sp])) * grid.cell_area_km2}
            for sp in sc.species}
        store.write_json(tmp / "run.json", record)
    return out


def draw_run_maps(folder: Path, sc: Scenario, grid: Grid, habitat: np.ndarray, means: dict,
                  finals: dict, outlines: list[Outline]) -> list[Path]:
    """Draw the standard maps of a finished run into ``folder/maps``.

    Habitat with the measures, time-mean and final density of each species,
    landscape totals, and snapshot panels; densities in animals/km².
    """
    import xarray as xr

    from preyscape import plots

    maps = folder / "maps"
    names = {"prey": sc.prey.name or "prey",
             "predator": (sc.predator.name if sc.has_predator else "") or "predator"}
    classes = ({c.code: c.name or str(c.code) for c in sc.landscape.classes}
               if sc.landscape.values == "classes" else None)
    title = f"Habitat: {sc.title or sc.path.stem}"
    if sc.variant != "baseline":
        title += f" [{sc.variant}]"
    out = [plots.habitat_map(grid, habitat, classes, title, maps / "habitat.png",
                             outlines=outlines)]
    for sp in sc.species:  # prey alone: no empty predator maps
        out.append(plots.density_map(grid, means[sp], f"Time-mean {sp} ({names[sp]})",
                                     maps / f"{sp}_mean.png", cmap=plots.SPECIES_CMAP[sp]))
        out.append(plots.density_map(grid, finals[sp],
                                     f"Final {sp} ({names[sp]}), t = {sc.run.years:g} yr",
                                     maps / f"{sp}_final.png", cmap=plots.SPECIES_CMAP[sp]))
    with xr.open_dataset(folder / "results.nc", decode_times=False) as ds:
        t = ds["time"].values
        out.append(plots.totals_plot(t, ds["prey_total"].values,
                                     ds["predator_total"].values if sc.has_predator else None,
                                     names, maps / "totals.png"))
        pick = np.unique(np.linspace(0, len(t) - 1, 5).round().astype(int))
        for sp in sc.species:
            frames = [ds[sp].isel(time=int(k)).values for k in pick]
            out.append(plots.snapshot_panels(grid, t[pick], frames, sp, names[sp],
                                             maps / f"{sp}_snapshots.png"))
    return out


def plan_variants(scenario: Scenario | str | Path, out: str | Path,
                  variants: list[str] | None = None, *,
                  overwrite: bool = False) -> dict[str, tuple[Scenario, Path]]:
    """The scenario and run folder of each variant to run, checked before any run starts.

    A scenario without ``[[variants]]`` (and no ``variants`` asked for) has
    one run folder, ``out`` itself. Otherwise ``out`` holds one run folder per
    variant, named after it (``out/baseline``, ``out/<variant>``).

    Raises
    ------
    InputError
        For an unknown variant name, an invalid override, or an existing run
        folder when ``overwrite`` is False.
    """
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    out = Path(out)
    if not sc.variants and not variants:
        plan = {sc.variant: (sc, out)}
    else:
        names = variants or sc.variant_names()
        plan = {n: (sc.for_variant(n), out / n) for n in dict.fromkeys(names)}
    for _, folder in plan.values():
        store.refuse_existing(folder, overwrite, "run folder")
    if len(plan) > 1:
        check_variant_measures([v for v, _ in plan.values()])
    return plan


def simulate_variants(scenario: Scenario | str | Path, out: str | Path,
                      variants: list[str] | None = None, *, overwrite: bool = False,
                      progress: bool | None = None, maps: bool = True) -> dict[str, Path]:
    """Run the baseline and the variants of a scenario, each into its own run folder.

    Parameters
    ----------
    scenario : Scenario or path
        The scenario (or its TOML file).
    out : str or pathlib.Path
        The run folder (no variants) or the folder of run folders.
    variants : list of str, optional
        Names to run (``"baseline"`` included); default all.
    overwrite, progress, maps
        As for :func:`simulate`.

    Returns
    -------
    dict
        Variant name to run folder, in the order run.
    """
    plan = plan_variants(scenario, out, variants, overwrite=overwrite)
    return {name: simulate(sc, folder, overwrite=overwrite, progress=progress, maps=maps)
            for name, (sc, folder) in plan.items()}
