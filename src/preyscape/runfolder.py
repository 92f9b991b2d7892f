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

A run stopped by Ctrl-C or SIGTERM after its first save point keeps its
temporary folder with the checkpoint; ``resume=True`` continues it (and, for
variants, keeps the ones finished before):

>>> interrupted_run(out_folder / "runs" / "baseline") is None
True
>>> again = simulate_variants(scenario_path, out_folder / "runs", maps=False,
...                           progress=False, resume=True)  # all finished: nothing to run
>>> again == folders
True
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from preyscape import __version__, store
from preyscape.assemble import Setup, check_variant_measures, place_targets, prepare
from preyscape.errors import FileProblem, InputError
from preyscape.landscape.grid import Grid
from preyscape.names import slug
from preyscape.preview import fence_topology, predictions
from preyscape.run_maps import draw_run_maps, draw_shared
from preyscape.scenario import Scenario, load_scenario
from preyscape.solve.run import NonFiniteDensities, schedule
from preyscape.solve.stepper import Stepper, StepStats

__all__ = ["RunInterrupted", "interrupted_run", "plan_variants", "simulate",
           "simulate_variants"]

PARTIAL_RECORD = "partial.json"
"""What an interrupted run folder was made from (removed when the run completes)."""


class RunInterrupted(KeyboardInterrupt):
    """A run stopped by Ctrl-C or SIGTERM; its message says what was kept.

    Attributes
    ----------
    kept : pathlib.Path or None
        The temporary folder kept for :func:`simulate` with ``resume=True``.
    resumable : bool
        Whether ``resume=True`` would save work (a kept folder, or finished variants).
    """

    def __init__(self, message: str, kept: Path | None = None,
                 resumable: bool | None = None) -> None:
        super().__init__(message)
        self.kept = kept
        self.resumable = kept is not None if resumable is None else resumable


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
    """Where the run loop puts snapshots (``results.nc``) and checkpoints.

    A checkpoint also records what a resumed run needs to finish exactly as
    an uninterrupted one would: the step, the positivity clip total so far,
    the time reached and the wall time spent.
    """

    def __init__(self, writer, folder: Path, dt: float, stats: StepStats,
                 clock: Callable[[], float]) -> None:
        self.writer = writer
        self.folder = folder
        self.dt = dt
        self.stats = stats
        self.clock = clock

    def write(self, t, N, P):
        self.writer.write(t, N, P)

    def checkpoint(self, step, N, P):
        store.save_checkpoint(self.folder / "checkpoint.npz", step, N, P,
                              {"dt": self.dt, "clipped": self.stats.clipped,
                               "floored": self.stats.floored,
                               "years": step * self.dt, "elapsed_s": self.clock()})


def _write_targets(tmp: Path, sc: Scenario, grid: Grid) -> list[dict]:
    from preyscape.landscape.io import write_geotiff

    targets = []
    for name, cells in place_targets(sc, grid):
        (tmp / "targets").mkdir(exist_ok=True)
        f = f"targets/{slug(name)}.tif"
        write_geotiff(tmp / f, grid, np.where(grid.mask, cells, 255).astype(np.uint8),
                      nodata=255, dtype="uint8", description=f"cells of the target patch "
                      f"{name!r}", units="class code",
                      categories={0: "outside", 1: f"target: {name}"})
        targets.append({"name": name, "cells": int(cells.sum()), "cells_file": f})
    return targets


def _integrate(tmp: Path, setup: Setup, N: np.ndarray, P: np.ndarray, sink: _FolderSink,
               progress, start_step: int = 0) -> None:
    """Run every epoch from ``N``, ``P`` (advanced in place) from ``start_step``,
    saving snapshots, checkpoints and each epoch's operators."""
    from preyscape.solve.run import integrate_epochs

    epochs = setup.epochs

    def make_stepper(k: int) -> Stepper:
        st = setup.epoch_stepper(k, sink.stats)
        store.save_operators(tmp / "operators" / f"epoch_{k}.npz", epochs[k][:2],
                             st.prey_movement, st.predator_movement)
        return st

    try:
        integrate_epochs(make_stepper, [e[:2] for e in epochs], N, P,
                         setup.scenario.run.save_every, setup.dt, sink, start_step,
                         progress=progress)
    finally:
        sink.writer.close()


def _record(sc: Scenario, grid: Grid, dt: float, epochs, stats: StepStats, n_snapshots: int,
            measures: list, targets: list, preds: dict, wall: float, compiled: float,
            topology: list | None = None) -> dict:
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
        "fence_topology": topology or [],
        "targets": targets,
        "epochs": [{"start_year": a, "end_year": b, "measures": list(n)}
                   for a, b, n in epochs],
        "predictions": preds,
        "analysis": sc.analysis.model_dump(mode="json"),
        "settings": {k: sc.model_dump(mode="json")[k]
                     for k in ("prey", "predator", "interaction", "start", "run")},
        "classes": ({str(c.code): c.name for c in sc.landscape.classes}
                    if sc.landscape.values == "classes" else None),
        "class_colours": _class_colours(sc),
        "positivity_clip_total": stats.clipped,
        "extinction_removed_animals": stats.floored * grid.cell_area_km2,
        "wall_time_s": round(wall, 3),
        "compile_or_cache_load_s": round(compiled, 3),
        "finished": store.now_iso(),
    }


def _resumable(folder: Path) -> bool:
    """Whether a temporary run folder can be continued (a checkpoint, not yet complete).

    A run stopped while its maps are drawn already has ``run.json`` (the maps
    are drawn from it); it is continued from its last checkpoint like any other.
    """
    return (folder / "checkpoint.npz").is_file() and (folder / PARTIAL_RECORD).is_file()


def interrupted_run(out: str | Path) -> Path | None:
    """The kept temporary folder of an interrupted run into ``out``, or None.

    Newest first, when there are several (see :func:`preyscape.store.stale_partials`).
    """
    return next((p for p in store.stale_partials(out) if _resumable(p)), None)


def _reached(folder: Path) -> float:
    """Years reached by the checkpoint of ``folder`` (NaN if unreadable)."""
    try:
        with np.load(folder / "checkpoint.npz") as z:
            return float(json.loads(str(z["extra"])).get("years", np.nan))
    except (OSError, ValueError, KeyError):
        return float("nan")


def _partial_to_continue(sc: Scenario, out: Path, *, overwrite: bool,
                         resume: bool) -> Path | None:
    """The interrupted run of ``out`` to continue, after checking it may be continued.

    Raises
    ------
    InputError
        When an interrupted run is kept and neither ``resume`` nor
        ``overwrite`` says what to do with it, or when it was made from
        another version of the scenario or of its input files.
    """
    found = interrupted_run(out)
    if found is None or (overwrite and not resume):
        return None  # an unwanted one is removed with the other stale folders
    if not resume:
        raise InputError(
            f"an interrupted run into this folder is kept in {found} (it reached t = "
            f"{_reached(found):g} of {sc.run.years:g} yr); continue it with --resume, or "
            "pass --overwrite to start again", str(out))
    try:
        made_from = json.loads((found / PARTIAL_RECORD).read_text()).get("scenario_sha256")
    except (OSError, ValueError, AttributeError):
        made_from = None
    if made_from != sc.digest():
        if overwrite:
            return None
        raise InputError(
            f"the interrupted run kept in {found} was made from another version of the "
            "scenario or of its input files, so it cannot be continued with this one; pass "
            "--overwrite to start again", str(out))
    return found


def _inputs(sc: Scenario) -> list[Path]:
    """The scenario file and the files it names (never deleted by --overwrite)."""
    return [sc.path] + [sc.resolve(rel) for _, rel in sc.input_files()]


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
             progress: bool | None = None, maps: bool = True, resume: bool = False,
             allow_large: bool = False) -> Path:
    """Run a scenario into a run folder.

    The run is written to a temporary folder beside ``out`` and renamed to
    ``out`` only when complete, so an interrupted or failed run never leaves
    a half-written run folder. A run stopped by Ctrl-C or SIGTERM after its
    first save point keeps the temporary folder with its checkpoint, which
    ``resume=True`` continues to the same results, bitwise, as an
    uninterrupted run.

    Parameters
    ----------
    scenario : Scenario or path
        The scenario (or its TOML file).
    out : str or pathlib.Path
        The run folder to create.
    overwrite : bool
        Replace an existing run folder (otherwise it is refused), and discard
        an interrupted run kept for ``out``.
    progress : bool, optional
        Progress bar; default only on a terminal.
    maps : bool
        Draw PNG maps and the totals plot.
    resume : bool
        Continue the interrupted run kept for ``out``, if there is one (its
        scenario and input files must be unchanged).
    allow_large : bool
        Run even beyond the memory and step-count limits
        (:mod:`preyscape.limits`).

    Returns
    -------
    pathlib.Path
        The run folder.

    Raises
    ------
    RunInterrupted
        On Ctrl-C (or SIGTERM, when the command line turns it into Ctrl-C).
    InputError
        For bad input, and for densities that stop being finite (naming the
        likely cause); nothing is left behind.
    """
    _return_freed_memory()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    out = Path(out)
    store.check_output(out, overwrite, "run folder", protect=_inputs(sc))  # before any work
    partial = _partial_to_continue(sc, out, overwrite=overwrite, resume=resume)
    setup = prepare(sc, allow_large=allow_large)
    started = time.time()
    try:
        with store.output_folder(out, overwrite, "run folder", adopt=partial, keep=_resumable,
                                 protect=_inputs(sc)) as tmp:
            _run_into(tmp, setup, progress=progress, maps=maps)
    except KeyboardInterrupt:
        kept = interrupted_run(out)
        if kept is None and _finished_since(out, started):
            raise RunInterrupted(f"{out}: the run had finished; its run folder is complete",
                                 None, False) from None
        if kept is None:
            raise RunInterrupted(f"{out}: stopped before the first save point; nothing was "
                                 "kept") from None
        raise RunInterrupted(f"{out}: stopped at t = {_reached(kept):g} of {sc.run.years:g} "
                             f"yr; the run so far is kept in {kept} and can be continued "
                             "with --resume", kept) from None
    except NonFiniteDensities as exc:
        raise InputError(_blow_up(sc, setup.dt, exc), str(sc.path)) from None
    return out


def _finished_since(out: Path, started: float) -> bool:
    """Whether ``out`` holds a run folder completed after ``started`` (seconds since epoch).

    An interrupt that arrives while the finished folder is moved into place
    is delivered just after (see :func:`preyscape.store.commit_folder`).
    """
    try:
        return (out / "run.json").stat().st_mtime >= started - 1.0
    except OSError:
        return False


def _blow_up(sc: Scenario, dt: float, exc: NonFiniteDensities) -> str:
    """Why densities stopped being finite, in words."""
    causes = []
    if sc.interaction.form == "lotka-volterra":
        causes.append("with form = 'lotka-volterra' prey grow without limit where predators "
                      "are scarce (dN/dt = rN): use form = 'logistic-prey' with "
                      "prey.capacity, or a shorter run.years")
    if sc.run.step != "auto":
        causes.append(f"the fixed step run.step = {dt:g} yr is too long for the rates: try "
                      "step = 'auto'")
    causes.append("extreme rates, capacities or start densities (prey.growth, prey.capacity, "
                  "interaction.attack_rate, interaction.efficiency, [start])")
    return (f"the {exc.species} densities stopped being finite at t = {exc.time:g} yr (they "
            f"grew beyond {3.4e38:.3g} per km² or became undefined); likely cause: "
            + "; or ".join(causes) + ". No run folder was written")


def _start_state(tmp: Path, setup: Setup) -> tuple:
    """``(writer, N, P, stats, step, elapsed)``: a new run, or the checkpoint of a kept one."""
    sc, grid = setup.scenario, setup.grid
    names = {sp: (spec.name if spec is not None else None)
             for sp, spec in (("prey", sc.prey), ("predator", sc.predator))}
    if not _resumable(tmp):
        store.write_json(tmp / PARTIAL_RECORD, {
            "scenario": str(sc.path), "variant": sc.variant, "scenario_sha256": sc.digest(),
            "years": sc.run.years, "started": store.now_iso()})
        writer = store.ResultWriter(
            tmp / "results.nc", grid, names,
            {"title": sc.title or sc.path.stem, "source": f"preyscape {__version__}",
             "scenario_sha256": sc.digest(), "history": f"{store.now_iso()} preyscape run"},
            habitat=setup.habitat,
        )
        return writer, setup.N0, setup.P0, StepStats(), 0, 0.0
    try:
        step, N, P, extra = store.load_checkpoint(tmp / "checkpoint.npz")
        per_save = schedule(sc.run.years, sc.run.save_every, setup.dt)[1]
        if extra.get("dt") != setup.dt or N.shape != grid.shape:
            raise ValueError("its step or grid differs from this scenario's")
        writer = store.ResultWriter.reopen(tmp / "results.nc", grid, step // per_save + 1)
    except (OSError, ValueError, KeyError) as err:
        raise FileProblem(f"the interrupted run kept for this folder cannot be continued "
                          f"({err}), so it was discarded; run the scenario again to start "
                          "from the beginning", str(tmp.parent / tmp.name.split(".partial-")[0][1:])
                          ) from None
    stats = StepStats(steps=step, clipped=float(extra.get("clipped", 0.0)),
                      floored=float(extra.get("floored", 0.0)))
    return writer, N, P, stats, step, float(extra.get("elapsed_s", 0.0))


def _run_into(tmp: Path, setup: Setup, *, progress, maps: bool) -> None:
    """Run (or continue) ``setup`` in the temporary run folder ``tmp`` and write its files."""
    from preyscape.solve.kernels import warm_up

    t0 = time.perf_counter()
    warm_up()
    compiled = time.perf_counter() - t0
    sc, grid, habitat = setup.scenario, setup.grid, setup.habitat
    writer, N, P, stats, step, before = _start_state(tmp, setup)
    preds = predictions(setup)
    topology = fence_topology(sc, grid, setup.measures)
    measures = store.write_measures(tmp / "measures", grid, setup.measures)
    targets = _write_targets(tmp, sc, grid)
    dt, epochs = setup.dt, setup.epochs
    start = {sp: float(np.sum(u)) * grid.cell_area_km2  # animals at t = 0, even on resume
             for sp, u in (("prey", setup.N0), ("predator", setup.P0))}
    setup = setup.without_build_arrays()  # memory: one copy of each field during the run
    sink = _FolderSink(writer, tmp, dt, stats, lambda: before + time.perf_counter() - t0)
    _integrate(tmp, setup, N, P, sink, progress, step)
    finals = {k: np.where(grid.mask, v, np.nan) for k, v in (("prey", N), ("predator", P))}
    del N, P, setup  # free the run's arrays before the summaries
    means = store.time_means(tmp / "results.nc", grid.mask)
    names = {sp: (spec.name if spec is not None else None)
             for sp, spec in (("prey", sc.prey), ("predator", sc.predator))}
    store.write_summaries(tmp / "summary", grid, means, finals, names=names,
                          tags={"source_run": sc.variant, "scenario": sc.title or "",
                                "software": f"preyscape {__version__}"})
    ends = {sp: float(np.nansum(finals[sp])) * grid.cell_area_km2 for sp in sc.species}
    del means, finals, habitat
    record = _record(sc, grid, dt, epochs, stats, writer.n, measures, targets, preds,
                     sink.clock(), compiled, topology)
    record["totals_animals"] = {sp: {"start": start[sp], "end": ends[sp]} for sp in sc.species}
    record["resumed_from_step"] = step or None
    store.write_json(tmp / "run.json", record)
    if maps:  # read back from the folder, like any run's maps (the map standard)
        draw_run_maps(tmp)
    (tmp / PARTIAL_RECORD).unlink()  # complete: nothing left to resume


def _class_colours(sc: Scenario) -> dict[str, str] | None:
    """Every habitat class's colour: the scenario's, else one by meaning (plots palette)."""
    if sc.landscape.values != "classes":
        return None
    from preyscape.plots.palettes import habitat_colours

    cols = habitat_colours({c.code: c.name for c in sc.landscape.classes},
                           {c.code: c.colour for c in sc.landscape.classes})
    return {str(k): v for k, v in cols.items()}


def _finished_digest(folder: Path) -> str | None:
    """The scenario digest a finished run folder records (None if unreadable)."""
    try:
        info = json.loads((folder / "run.json").read_text())
        return str(info["scenario_sha256"])
    except (OSError, ValueError, KeyError, TypeError):
        return None


def _finished_before(v: Scenario, folder: Path, *, overwrite: bool) -> bool:
    """With ``resume``: whether ``folder`` is this variant's finished run (checked first).

    Raises
    ------
    InputError
        When it was made from another version of the scenario (and
        ``overwrite`` is not given): the variants would not be comparable.
    """
    if not (folder / "run.json").is_file():
        return False
    if _finished_digest(folder) == v.digest():
        return True
    if overwrite:
        return False
    raise InputError(
        f"this run folder was made from another version of the scenario or of its input "
        f"files than variant '{v.variant}' now describes; continuing would mix variants "
        "computed from different versions: pass --overwrite to run them again", str(folder))


def plan_variants(scenario: Scenario | str | Path, out: str | Path,
                  variants: list[str] | None = None, *,
                  overwrite: bool = False, resume: bool = False,
                  ) -> dict[str, tuple[Scenario, Path]]:
    """The scenario and run folder of each variant to run, checked before any run starts.

    A scenario without ``[[variants]]`` (and no ``variants`` asked for) has
    one run folder, ``out`` itself. Otherwise ``out`` holds one run folder per
    variant, named after it (``out/baseline``, ``out/<variant>``).

    Raises
    ------
    InputError
        For an unknown variant name, an invalid override, an existing run
        folder when ``overwrite`` is False, an interrupted run kept for a
        folder when neither ``resume`` nor ``overwrite`` is given, or (with
        ``resume``) a finished or interrupted run of another scenario version.
    """
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    out = Path(out)
    if not sc.variants and not variants:
        plan = {sc.variant: (sc, out)}
    else:
        names = variants or sc.variant_names()
        plan = {n: (sc.for_variant(n), out / n) for n in dict.fromkeys(names)}
    for v, folder in plan.values():
        if resume and _finished_before(v, folder, overwrite=overwrite):
            continue
        store.check_output(folder, overwrite, "run folder", protect=_inputs(v))
        _partial_to_continue(v, folder, overwrite=overwrite, resume=resume)
    if len(plan) > 1:
        check_variant_measures([v for v, _ in plan.values()])
    return plan


def simulate_variants(scenario: Scenario | str | Path, out: str | Path,
                      variants: list[str] | None = None, *, overwrite: bool = False,
                      progress: bool | None = None, maps: bool = True, resume: bool = False,
                      allow_large: bool = False) -> dict[str, Path]:
    """Run the baseline and the variants of a scenario, each into its own run folder.

    Parameters
    ----------
    scenario : Scenario or path
        The scenario (or its TOML file).
    out : str or pathlib.Path
        The run folder (no variants) or the folder of run folders.
    variants : list of str, optional
        Names to run (``"baseline"`` included); default all.
    overwrite, progress, maps, allow_large
        As for :func:`simulate`.
    resume : bool
        Keep the variants finished before (from the same scenario version),
        continue the interrupted one and run the rest.

    Returns
    -------
    dict
        Variant name to run folder, in the order planned.

    Raises
    ------
    RunInterrupted
        Saying which variants finished, which one was stopped (and whether it
        was kept) and which did not start.
    """
    plan = plan_variants(scenario, out, variants, overwrite=overwrite, resume=resume)
    before = {n for n, (v, folder) in plan.items()
              if resume and _finished_before(v, folder, overwrite=overwrite)}
    done: dict[str, Path] = {}
    for name, (sc, folder) in plan.items():
        if name in before:
            done[name] = folder
            continue
        try:
            # variants are meant to be compared: their maps share one colour scale per
            # species, so they are drawn once every run is done
            done[name] = simulate(sc, folder, overwrite=overwrite, progress=progress,
                                  maps=maps and len(plan) == 1, resume=resume,
                                  allow_large=allow_large)
        except RunInterrupted as exc:
            if len(plan) == 1:
                raise
            rest = [n for n in plan if n not in done and n != name]
            raise RunInterrupted(
                f"{exc.args[0]}\n  variants finished: {', '.join(done) or 'none'}; "
                f"stopped: {name}; not started: {', '.join(rest) or 'none'}", exc.kept,
                exc.resumable or bool(done),
            ) from None
    if maps and len(plan) > 1:
        draw_shared(done)
    return done
