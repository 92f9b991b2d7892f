"""From a scenario to a run: the one place that knows every layer.

:func:`prepare` turns a validated :class:`~preyscape.scenario.Scenario` into
plain values (grid, fields, movement operators, initial densities, step);
:func:`derived` computes the numbers ``check`` prints; :func:`simulate` runs
into a run folder, writing to a temporary folder that is renamed only when
everything is complete.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape import __version__, store
from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.model import theory
from preyscape.model.fields import (
    Fields,
    build_fields,
    multipliers_from_classes,
    multipliers_from_suitability,
)
from preyscape.model.movement import Movement, build_movement
from preyscape.model.reactions import Interaction
from preyscape.scenario import MeasureSpec, Scenario, load_scenario
from preyscape.solve.stepper import Stepper, StepStats, auto_step


@dataclass(eq=False)
class MeasureLayer:
    """A measure placed on the grid.

    Attributes
    ----------
    spec : MeasureSpec
        The measure's settings.
    cells : numpy.ndarray of bool or None
        Cells a corridor or refuge covers.
    faces : tuple of numpy.ndarray or None
        Faces a fence acts on, ``(between columns (rows, cols+1), between rows
        (rows+1, cols))``; for a refuge closed to predators, its outline.
    shapes : list
        The geometries in the grid's CRS (empty for a raster measure).
    """

    spec: MeasureSpec
    cells: np.ndarray | None
    faces: tuple[np.ndarray, np.ndarray] | None
    shapes: list

    def summary(self, grid: Grid) -> dict:
        """Name, kind, timing and size on the grid (cells, km², faces) for ``run.json``."""
        m = self.spec
        out = {"name": m.name, "kind": m.kind, "start_year": m.start_year,
               "end_year": m.end_year, "source": m.geometry or m.raster}
        if self.cells is not None:
            n = int(self.cells.sum())
            out.update(cells=n, area_km2=round(n * grid.cell_area_km2, 6))
        if self.faces is not None:
            out["faces"] = int(self.faces[0].sum() + self.faces[1].sum())
        if m.kind == "fence":
            out["permeability"] = m.permeability.model_dump()
            out["gaps"] = [g.model_dump() for g in m.gaps]
        elif m.kind == "refuge":
            out.update(protected_fraction=m.protected_fraction,
                       closed_to_predators=m.closed_to_predators)
        else:
            out["sets"] = m.sets()
        return out


@dataclass(eq=False)
class Setup:
    """Everything a run needs, as plain values.

    Attributes
    ----------
    scenario : Scenario
        The validated settings.
    grid : Grid
        The run grid (metres).
    habitat : numpy.ndarray
        Class codes or suitability on the grid.
    fields : Fields
        Per-cell parameters.
    prey_movement, predator_movement : Movement
        Movement operators (1/yr).
    interaction : Interaction
        Local interaction.
    N0, P0 : numpy.ndarray
        Initial densities, animals/km².
    dt : float
        Step, years.
    refuge : numpy.ndarray or None
        Share of prey shielded from predation per cell (0–1) at the start.
    layers : list of MeasureLayer
        The measures of this variant, placed on the grid.
    epochs : list of (float, float, tuple of str)
        ``(t0, t1, names of the measures acting)`` in years.
    mult : dict
        Habitat multipliers before measures (kept to rebuild later epochs).
    """

    scenario: Scenario
    grid: Grid
    habitat: np.ndarray
    fields: Fields
    prey_movement: Movement
    predator_movement: Movement
    interaction: Interaction
    N0: np.ndarray
    P0: np.ndarray
    dt: float
    refuge: np.ndarray | None = None
    layers: list[MeasureLayer] = field(default_factory=list)
    epochs: list[tuple[float, float, tuple[str, ...]]] = field(default_factory=list)
    mult: dict | None = None

    def release_build_arrays(self) -> None:
        """Drop the arrays only needed to build a run (capacity and movement fields, start).

        The stepper keeps what it uses (growth, inverse capacity, mortality and
        the movement operators); :func:`derived` needs a fresh :func:`prepare`.
        """
        f = self.fields
        empty = np.zeros((0, 0), dtype=np.float32)
        self.fields = Fields(empty, f.r, f.inv_K, f.m, empty, empty)
        self.N0 = self.P0 = np.zeros((0, 0))
        if len(self.epochs) <= 1:
            self.mult = None

    def stepper(self, stats: StepStats | None = None) -> Stepper:
        """A fresh :class:`Stepper` for the start of the run (epoch 0)."""
        f = self.fields
        return Stepper(
            self.grid.mask, self.prey_movement, self.predator_movement, f.r, f.inv_K, f.m,
            self.interaction, self.dt, refuge=self.refuge, scheme=self.scenario.run.scheme,
            stats=stats if stats is not None else StepStats(),
        )

    def epoch_stepper(self, k: int, stats: StepStats) -> Stepper:
        """The :class:`Stepper` of epoch ``k`` (measures switched on or off at its start)."""
        if k == 0:
            return self.stepper(stats)
        fields, mv_n, mv_p, refuge = assemble(self, self.epochs[k][2])
        return Stepper(
            self.grid.mask, mv_n, mv_p, fields.r, fields.inv_K, fields.m, self.interaction,
            self.dt, refuge=refuge, scheme=self.scenario.run.scheme, stats=stats,
        )


def _source(sc: Scenario, key: str) -> str:
    return f"{sc.path}: {key}"


def interaction_of(sc: Scenario) -> Interaction:
    """The :class:`Interaction` a scenario describes."""
    i = sc.interaction
    return Interaction(i.form, i.attack_rate, i.handling_time, i.efficiency, i.interference)


def prepare(sc: Scenario) -> Setup:
    """Load the landscape and build fields, operators and the initial state.

    Raises
    ------
    InputError
        For unreadable rasters, habitat codes without a table row, release
        points outside the landscape, or invalid initial densities.
    """
    from preyscape.landscape.io import read_habitat, read_layer_onto

    ls = sc.landscape
    path = sc.resolve(ls.habitat)
    grid, habitat = read_habitat(
        path, ls.values, ls.cell_size, source=_source(sc, f"landscape.habitat ({ls.habitat})")
    )
    if ls.values == "classes":
        table = {c.code: c.model_dump() for c in ls.classes}
        try:
            mult = multipliers_from_classes(habitat, grid.mask, table)
        except KeyError as exc:
            code = exc.args[0]
            n = int((habitat[grid.mask] == code).sum())
            raise InputError(
                f"habitat code {code} occurs in {n} cells of '{ls.habitat}' but has no row "
                f"in the class table; add a [[landscape.classes]] entry with code = {code} "
                f"(codes in the table: {sorted(table)})",
                _source(sc, "landscape.classes"),
            ) from None
    else:
        mult = multipliers_from_suitability(habitat, grid.mask)
        habitat = habitat.astype(np.float32)  # kept for output only
    inter = interaction_of(sc)
    mult = {k: np.asarray(v, dtype=np.float32) for k, v in mult.items()}
    layers = place_measures(sc, grid)
    epochs = measure_epochs(sc, layers)
    setup = Setup(sc, grid, habitat, None, None, None, inter, np.zeros((0, 0)),
                  np.zeros((0, 0)), 0.0, None, layers, epochs, mult)
    fields, mv_n, mv_p, refuge = assemble(setup, epochs[0][2])
    setup.fields, setup.prey_movement, setup.predator_movement = fields, mv_n, mv_p
    setup.refuge = refuge

    # initial state
    st = sc.start
    mask = grid.mask
    if st.prey == "capacity":
        N0 = fields.K.astype(float)
    elif st.prey == "uniform":
        N0 = np.where(mask, float(st.prey_density), 0.0)
    else:
        layer = read_layer_onto(
            sc.resolve(st.prey_raster), grid, "average",
            source=_source(sc, f"start.prey_raster ({st.prey_raster})"),
        )
        layer = np.where(mask, np.nan_to_num(layer, nan=0.0), 0.0)
        if np.any(layer < 0):
            r, c = np.argwhere(layer < 0)[0]
            raise InputError(
                f"negative prey density {layer[r, c]:g} at row {r}, col {c}; densities "
                "must be ≥ 0 animals/km²", _source(sc, "start.prey_raster"),
            )
        N0 = layer
    P0 = np.where(mask, st.predator_density, 0.0)
    for k, rel in enumerate(st.releases):
        if not grid.contains(rel.x, rel.y):
            left, bottom, right, top = grid.bounds
            raise InputError(
                f"release point ({rel.x:g}, {rel.y:g}) m lies outside the landscape or on a "
                f"no-data cell; the landscape spans x {left:g}–{right:g} m, "
                f"y {bottom:g}–{top:g} m in its CRS",
                _source(sc, f"start.releases[{k}]"),
            )
        disc = (grid.distance_to(rel.x, rel.y) <= rel.radius) & mask
        disc[grid.rowcol(rel.x, rel.y)] = True  # at least the cell holding the point
        target = N0 if rel.species == "prey" else P0
        target[disc] += rel.density
    if st.noise > 0:
        rng = np.random.default_rng(sc.run.seed)
        N0 *= 1.0 + st.noise * rng.uniform(-1, 1, N0.shape)
        P0 *= 1.0 + st.noise * rng.uniform(-1, 1, P0.shape)
    N0 = np.ascontiguousarray(np.where(mask, N0, 0.0))
    P0 = np.ascontiguousarray(np.where(mask, P0, 0.0))

    if sc.run.step != "auto":
        dt = float(sc.run.step)
    else:  # the shortest step any epoch needs (a corridor may raise growth or capacity)
        dt = _auto_dt(sc, fields, inter, P0)
        for _, _, names in epochs[1:]:
            dt = min(dt, _auto_dt(sc, assemble(setup, names)[0], inter, P0))
    if sc.run.step != "auto":
        n = sc.run.save_every / dt
        if abs(n - round(n)) > 1e-9 * n:
            raise InputError(
                f"step {dt:g} yr does not divide save_every {sc.run.save_every:g} yr into whole "
                "steps; choose a step such as "
                f"{sc.run.save_every / max(1, math.ceil(n)):g}",
                _source(sc, "run.step"),
            )
    setup.N0, setup.P0, setup.dt = N0, P0, dt
    return setup


def place_measures(sc: Scenario, grid: Grid) -> list[MeasureLayer]:
    """Read the geometry or raster of each measure of the scenario's variant onto ``grid``.

    Raises
    ------
    InputError
        For unreadable files, geometries outside the landscape, or a measure
        that covers no cell with data (or crosses no face).
    """
    out: list[MeasureLayer] = []
    if not sc.active_measures():
        return out
    from preyscape.landscape import measures as lm

    for m in sc.active_measures():
        k = sc.measures.index(m)
        key = f"measures[{k}].{'geometry' if m.geometry else 'raster'}"
        src = _source(sc, f"{key} ({m.geometry or m.raster})")
        shapes: list = []
        cells = faces = None
        if m.geometry:
            shapes = lm.read_geometry(sc.resolve(m.geometry), grid, crs=m.crs, source=src)
        if m.kind == "fence":
            if m.geometry:
                gaps = [(g.x, g.y, g.width) for g in m.gaps]
                faces = lm.fence_faces(shapes, grid, gaps=gaps)
            else:
                faces = lm.outline_faces(lm.cells_from_raster(sc.resolve(m.raster), grid, src)
                                         & grid.mask)
            if not (faces[0].any() or faces[1].any()):
                raise InputError("the fence crosses no cell face inside the landscape; check "
                                 "its coordinates and CRS", src)
        else:
            if m.geometry:
                cells = lm.cells_covered(shapes, grid, buffer_m=m.buffer)
            else:
                cells = lm.cells_from_raster(sc.resolve(m.raster), grid, src)
            cells = cells & grid.mask
            if not cells.any():
                raise InputError(f"the {m.kind} covers no cell with habitat data; check its "
                                 "coordinates and CRS", src)
            if m.kind == "refuge" and m.closed_to_predators:
                faces = lm.outline_faces(cells)
        out.append(MeasureLayer(m, cells, faces, shapes))
    return out


def place_targets(sc: Scenario, grid: Grid) -> list[tuple[str, np.ndarray]]:
    """The target patches of ``[analysis]`` on the grid: ``(name, cells)`` pairs.

    Raises
    ------
    InputError
        For unreadable files or a target with no cell with data.
    """
    out: list[tuple[str, np.ndarray]] = []
    if not sc.analysis.targets:
        return out
    from preyscape.landscape import measures as lm

    for k, t in enumerate(sc.analysis.targets):
        key = f"analysis.targets[{k}].{'geometry' if t.geometry else 'raster'}"
        src = _source(sc, f"{key} ({t.geometry or t.raster})")
        if t.geometry:
            cells = lm.cells_covered(lm.read_geometry(sc.resolve(t.geometry), grid, crs=t.crs,
                                                      source=src), grid)
        else:
            cells = lm.cells_from_raster(sc.resolve(t.raster), grid, src)
        cells = cells & grid.mask
        if not cells.any():
            raise InputError("the target covers no cell with habitat data", src)
        out.append((t.name, cells))
    return out


def measure_epochs(sc: Scenario, layers: list[MeasureLayer]) -> list[
        tuple[float, float, tuple[str, ...]]]:
    """Split the run at the times measures switch on or off.

    Returns ``(t0, t1, names of the measures acting in [t0, t1))`` in years,
    consecutive from 0 to ``run.years``.
    """
    years = sc.run.years
    cuts = {0.0, years}
    for layer in layers:
        m = layer.spec
        for t in (m.start_year, m.end_year):
            if t is not None and 0.0 < t < years:
                cuts.add(float(t))
    times = sorted(cuts)
    out = []
    for t0, t1 in zip(times[:-1], times[1:], strict=True):
        names = tuple(x.spec.name for x in layers if x.spec.active(t0, t1))
        if out and out[-1][2] == names:
            out[-1] = (out[-1][0], t1, names)
        else:
            out.append((t0, t1, names))
    return out


def assemble(setup: Setup, names: tuple[str, ...]) -> tuple[
        Fields, Movement, Movement, np.ndarray | None]:
    """Fields, movement operators and refuge share with the named measures acting.

    Corridors replace the habitat multipliers (or suitability) on their cells,
    fences multiply the permeability of the faces they cross (two fences on one
    face act in series), and refuges shield ``protected_fraction`` of prey;
    overlapping refuges combine as ``1 - (1 - f1)(1 - f2)``.
    """
    sc, grid = setup.scenario, setup.grid
    on = [x for x in setup.layers if x.spec.name in names]
    mult = {k: np.array(v, dtype=float) for k, v in setup.mult.items()}
    for x in on:
        if x.spec.kind != "corridor":
            continue
        for key, value in x.spec.sets().items():
            target = "prey_capacity" if key == "suitability" else key
            mult[target][x.cells] = value
    fields = build_fields(
        mult, grid.mask, sc.prey.growth, sc.prey.capacity, sc.predator.mortality,
        sc.prey.move_coefficient, sc.predator.move_coefficient, setup.interaction.logistic,
    )
    del mult
    ny, nx = grid.shape
    perm = {sp: [np.ones((ny, nx + 1)), np.ones((ny + 1, nx))] for sp in ("prey", "predator")}
    refuge = None
    for x in on:
        m = x.spec
        if m.kind == "fence":
            for sp in ("prey", "predator"):
                p = getattr(m.permeability, sp)
                perm[sp][0][x.faces[0]] *= p
                perm[sp][1][x.faces[1]] *= p
        elif m.kind == "refuge":
            if refuge is None:
                refuge = np.zeros(grid.shape)
            refuge[x.cells] = 1.0 - (1.0 - refuge[x.cells]) * (1.0 - m.protected_fraction)
            if x.faces is not None:
                perm["predator"][0][x.faces[0]] = 0.0
                perm["predator"][1][x.faces[1]] = 0.0
    ls = sc.landscape
    mvs = [
        build_movement(coef, grid.mask, grid.dx, grid.dy, spec.movement, ls.edge, ls.nodata,
                       perm_x=perm[sp][0], perm_y=perm[sp][1])
        for sp, coef, spec in (("prey", fields.prey_move, sc.prey),
                               ("predator", fields.predator_move, sc.predator))
    ]
    return fields, mvs[0], mvs[1], refuge


def _best(sc: Scenario, fields: Fields) -> dict[str, float]:
    """Best-habitat parameter values (maximum capacity over the landscape)."""
    mask = fields.K > 0
    K = float(fields.K.max()) if mask.any() else (sc.prey.capacity or math.nan)
    return {
        "r": sc.prey.growth,
        "K": K,
        "m": sc.predator.mortality,
        "D_N": sc.prey.move_coefficient,
        "D_P": sc.predator.move_coefficient,
    }


def _auto_dt(sc: Scenario, fields: Fields, inter: Interaction, P0: np.ndarray) -> float:
    b = _best(sc, fields)
    n_eq, p_eq = theory.equilibrium(inter, b["r"], b["K"] if inter.logistic else None, b["m"])
    p_scale = max(float(P0.max()), p_eq if math.isfinite(p_eq) else 0.0)
    K = b["K"] if math.isfinite(b["K"]) else 0.0
    rates = [
        float(np.abs(fields.r).max()),
        float(fields.m.max()),
        inter.attack_rate * p_scale,  # per-capita predation on rare prey
        inter.efficiency * inter.attack_rate * K / (1 + inter.attack_rate * inter.h * K),
    ]
    period = theory.local_stability(inter, b["r"], b["K"] if inter.logistic else None,
                                    b["m"])["period"]
    return auto_step(rates, period, sc.run.save_every)


def _predictions(setup: Setup) -> dict:
    """The published predictions a report sets results against (from :func:`derived`)."""
    d = derived(setup)
    keys = ("equilibrium", "stable", "period_years", "hopf_capacity", "lv_period_years",
            "prey_front_speed", "predator_front_speed", "best_habitat")
    out = {k: d[k] for k in keys}
    out["equilibrium"] = [None if not math.isfinite(v) else v for v in out["equilibrium"]]
    b = d["best_habitat"]
    it = setup.interaction
    out["predator_growth_at_capacity"] = (
        it.efficiency * it.attack_rate * b["K"] / (1 + it.attack_rate * it.h * b["K"]) - b["m"]
        if math.isfinite(b["K"]) else None)
    out["growth"] = setup.scenario.prey.growth
    out["prey_movement"] = setup.scenario.prey.move_coefficient
    out["predator_movement"] = setup.scenario.predator.move_coefficient
    return out


def derived(setup: Setup) -> dict:
    """Numbers that describe a scenario before it runs (printed by ``check``).

    Returns a dict with the grid, the step, per-species movement numbers
    (cells crossed per step), best-habitat equilibria and stability, the
    Rosenzweig–MacArthur Hopf capacity, predicted front speeds, critical patch
    sizes, and estimates of memory and disk use.
    """
    sc, g, inter = setup.scenario, setup.grid, setup.interaction
    b = _best(sc, setup.fields)
    K_arg = b["K"] if inter.logistic else None
    stab = theory.local_stability(inter, b["r"], K_arg, b["m"])
    n_steps = round(sc.run.years / setup.dt)
    n_snap = round(sc.run.years / sc.run.save_every) + 1
    h_km2 = (min(g.dx, g.dy) / 1000.0) ** 2
    cells = g.ny * g.nx
    growth_P = inter.efficiency * inter.attack_rate * b["K"] / (
        1 + inter.attack_rate * inter.h * b["K"]
    ) - b["m"]
    return {
        "grid": {
            "rows": g.ny, "cols": g.nx, "cells_with_data": g.n_cells,
            "cell_size_m": (g.dx, g.dy), "extent_km": (g.width_m / 1e3, g.height_m / 1e3),
        },
        "step_years": setup.dt,
        "steps": n_steps,
        "scheme": sc.run.scheme,
        "movement_per_step": {
            "prey": b["D_N"] * setup.dt / h_km2,
            "predator": b["D_P"] * setup.dt / h_km2,
        },
        "best_habitat": b,
        "equilibrium": stab["equilibrium"],
        "stable": stab["stable"],
        "period_years": stab["period"],
        "hopf_capacity": theory.hopf_capacity(inter, b["m"]) if inter.h > 0 else None,
        "lv_period_years": theory.lv_period(b["r"], b["m"]),
        "prey_front_speed": theory.fisher_speed(b["r"], b["D_N"]),
        "predator_front_speed": theory.predator_speed(inter, b["K"], b["m"], b["D_P"]),
        "critical_patch_prey": theory.critical_patch(b["r"], b["D_N"]),
        "critical_patch_predator": theory.critical_patch(growth_P, b["D_P"]),
        # per cell during the run: state and transposed work (32 B), reaction fields (12),
        # per species faces and weights in two orientations (24) and pivots (32), unit
        # weights (8), habitat (4), start and output buffers: ~180 B; plus ~250 MB for
        # Python and the libraries (measured: benchmarks/run.py --only memory)
        "memory_mb": 250 + cells * 180 / 1e6,
        "disk_mb": n_snap * cells * 2 * 4 / 1e6,  # float32 snapshots before compression
        "snapshots": n_snap,
        "measures": [x.summary(g) for x in setup.layers],
        "variants": [
            {"name": v.name, "add": list(v.add), "remove": list(v.remove), "set": dict(v.set)}
            for v in sc.variants
        ],
    }


# ---------------------------------------------------------------------------
# running into a run folder
# ---------------------------------------------------------------------------
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
    def __init__(self, writer, folder: Path, dt: float) -> None:
        self.writer = writer
        self.folder = folder
        self.dt = dt

    def write(self, t, N, P):
        self.writer.write(t, N, P)

    def checkpoint(self, step, N, P):
        from preyscape.store import save_checkpoint

        save_checkpoint(self.folder / "checkpoint.npz", step, N, P, {"dt": self.dt})


def simulate(
    scenario: Scenario | str | Path,
    out: str | Path,
    overwrite: bool = False,
    progress: bool | None = None,
    maps: bool = True,
) -> Path:
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
    from preyscape.solve.run import integrate_epochs

    _return_freed_memory()
    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    out = Path(out)
    store.refuse_existing(out, overwrite, "run folder")  # before any work
    setup = prepare(sc)
    t0 = time.perf_counter()
    with store.output_folder(out, overwrite, "run folder") as tmp:
        warm_up()
        compiled = time.perf_counter() - t0
        names = {"prey": sc.prey.name, "predator": sc.predator.name}
        digest = sc.digest()
        writer = store.ResultWriter(
            tmp / "results.nc", setup.grid, names,
            {"title": sc.title or sc.path.stem, "source": f"preyscape {__version__}",
             "scenario_sha256": digest, "history": f"{store.now_iso()} preyscape run"},
            habitat=setup.habitat,
        )
        predictions = _predictions(setup)
        layers = store.write_measures(tmp / "measures", setup.grid, setup.layers)
        targets = []
        for name, cells in place_targets(sc, setup.grid):
            (tmp / "targets").mkdir(exist_ok=True)
            from preyscape.landscape.io import write_geotiff

            f = f"targets/{store.slug(name)}.tif"
            write_geotiff(tmp / f, setup.grid,
                          np.where(setup.grid.mask, cells, 255).astype(np.uint8),
                          nodata=255, dtype="uint8")
            targets.append({"name": name, "cells": int(cells.sum()), "cells_file": f})
        N, P = setup.N0, setup.P0  # this setup is private to the run: no copies
        setup.release_build_arrays()  # memory: one copy of each field during the run
        grid, habitat = setup.grid, setup.habitat
        stats = StepStats()
        epochs = setup.epochs
        build = setup.epoch_stepper

        def make_stepper(k: int) -> Stepper:
            st = build(k, stats)
            store.save_operators(tmp / "operators" / f"epoch_{k}.npz", epochs[k][:2],
                                 st.prey_movement, st.predator_movement)
            return st

        try:
            integrate_epochs(make_stepper, [e[:2] for e in epochs], N, P, sc.run.save_every,
                             setup.dt, _FolderSink(writer, tmp, setup.dt), progress=progress)
        finally:
            writer.close()
        finals = {k: np.where(grid.mask, v, np.nan) for k, v in (("prey", N), ("predator", P))}
        dt, n_snapshots = setup.dt, writer.n
        del N, P, writer  # free the run's arrays before the summaries
        setup = build = None  # (the stepper closure holds them otherwise)
        means = store.time_means(tmp / "results.nc", grid.mask)
        store.write_summaries(tmp / "summary", grid, means, finals)
        if maps:
            from preyscape import plots

            plots.draw_run(tmp, sc, grid, habitat, means, finals, layers)
        wall = time.perf_counter() - t0
        record = {
            "preyscape_version": __version__,
            "scenario": str(sc.path),
            "variant": sc.variant,
            "scenario_sha256": digest,
            "title": sc.title,
            "seed": sc.run.seed,
            "step_years": dt,
            "steps": stats.steps,
            "scheme": sc.run.scheme,
            "years": sc.run.years,
            "save_every_years": sc.run.save_every,
            "snapshots": n_snapshots,
            "grid": {"rows": grid.ny, "cols": grid.nx,
                     "cell_size_m": [grid.dx, grid.dy],
                     "cells_with_data": grid.n_cells},
            "species": names,
            "measures": layers,
            "targets": targets,
            "epochs": [{"start_year": a, "end_year": b, "measures": list(n)}
                       for a, b, n in epochs],
            "predictions": predictions,
            "analysis": sc.analysis.model_dump(mode="json"),
            "settings": {k: sc.model_dump(mode="json")[k]
                         for k in ("prey", "predator", "interaction", "start", "run")},
            "classes": ({str(c.code): c.name for c in sc.landscape.classes}
                        if sc.landscape.values == "classes" else None),
            "positivity_clip_total": stats.clipped,
            "wall_time_s": round(wall, 3),
            "compile_or_cache_load_s": round(compiled, 3),
            "finished": store.now_iso(),
        }
        store.write_json(tmp / "run.json", record)
    return out


def plan_variants(
    scenario: Scenario | str | Path,
    out: str | Path,
    variants: list[str] | None = None,
    overwrite: bool = False,
) -> dict[str, tuple[Scenario, Path]]:
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


def check_variant_measures(scenarios: list[Scenario]) -> list[dict]:
    """Place every variant's measures and targets on the grid once, before any run.

    A measure that only a variant adds is otherwise read when that variant
    starts, after the earlier variants have run; this finds its mistakes first.

    Returns
    -------
    list of dict
        Summaries (see ``MeasureLayer.summary``) of the measures that are not
        in the baseline, each with ``variants``: the variants that use it.

    Raises
    ------
    InputError
        For the first measure or target that cannot be placed.
    """
    from preyscape.landscape.io import read_habitat

    if not scenarios:
        return []
    sc = scenarios[0]
    ls = sc.landscape
    grid, _ = read_habitat(sc.resolve(ls.habitat), ls.values, ls.cell_size,
                           source=_source(sc, f"landscape.habitat ({ls.habitat})"))
    extra: dict[str, dict] = {}
    for v in scenarios:
        for layer in place_measures(v, grid):
            if not layer.spec.baseline:
                rec = extra.setdefault(layer.spec.name, {**layer.summary(grid), "variants": []})
                rec["variants"].append(v.variant)
        place_targets(v, grid)
    return list(extra.values())


def simulate_variants(
    scenario: Scenario | str | Path,
    out: str | Path,
    variants: list[str] | None = None,
    overwrite: bool = False,
    progress: bool | None = None,
    maps: bool = True,
) -> dict[str, Path]:
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
    plan = plan_variants(scenario, out, variants, overwrite)
    return {name: simulate(sc, folder, overwrite=overwrite, progress=progress, maps=maps)
            for name, (sc, folder) in plan.items()}
