"""From a scenario to the plain values a run needs: grid, fields, movement, epochs.

:func:`prepare` reads the habitat raster and the measures of a validated
:class:`~preyscape.scenario.Scenario` and returns an immutable
:class:`Setup`: the grid, per-cell fields, movement operators, initial
densities, the step, the measures placed on the grid and the epochs (spans
of time between measure switches). :func:`derived` gives the numbers
``check`` prints. Nothing here writes files; the run folder is written by
:mod:`preyscape.runfolder`.

Examples
--------
``scenario_path`` is a scenario file (such as ``landscapes/veldrun_moor.toml``):

>>> from preyscape.scenario import load_scenario
>>> setup = prepare(load_scenario(scenario_path))
>>> setup.N0.shape == setup.grid.shape and setup.dt > 0
True
>>> setup.epochs[0][:2] == (0.0, setup.scenario.run.years)
True
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from preyscape import limits
from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.landscape.placed import PlacedMeasure, combine
from preyscape.model import theory
from preyscape.model.fields import (
    Fields,
    build_fields,
    multipliers_from_classes,
    multipliers_from_suitability,
)
from preyscape.model.movement import Movement, build_movement
from preyscape.model.reactions import Interaction
from preyscape.scenario import LARGEST, MeasureSpec, PredatorSpec, Scenario
from preyscape.solve.stepper import Stepper, StepStats, auto_step

__all__ = ["Epoch", "Setup", "check_variant_measures", "epoch_state", "extinction_of",
           "initial_state", "interaction_of", "measure_epochs", "place_measures",
           "place_targets", "prepare", "release_cells", "time_step"]

Epoch = tuple[float, float, tuple[str, ...]]
"""``(t0, t1, names of the measures acting in [t0, t1))``, years."""


@dataclass(frozen=True, eq=False)
class Setup:
    """Everything a run needs, as plain values (immutable; build by keyword).

    Attributes
    ----------
    scenario : Scenario
        The validated settings (for the run record and :func:`derived`).
    grid : Grid
        The run grid (metres).
    habitat : numpy.ndarray
        Class codes or suitability on the grid.
    multipliers : dict
        Habitat multiplier maps before measures (float32), to build each epoch.
    fields : Fields
        Per-cell parameters of epoch 0.
    prey_movement, predator_movement : Movement
        Movement operators of epoch 0 (1/yr).
    refuge : numpy.ndarray or None
        Share of prey shielded from predation per cell (0–1) in epoch 0.
    interaction : Interaction
        Local interaction.
    N0, P0 : numpy.ndarray
        Initial densities, animals/km².
    dt : float
        Step, years.
    measures : tuple of PlacedMeasure
        The measures of this variant on the grid.
    epochs : tuple of Epoch
        Spans between measure switches, consecutive from 0 to the run length.
    extinction : tuple of float or None
        Prey and predator extinction thresholds, animals/km² (0: none for that
        species; None: neither species has one).
    """

    scenario: Scenario
    grid: Grid
    habitat: np.ndarray
    multipliers: dict
    fields: Fields
    prey_movement: Movement
    predator_movement: Movement
    refuge: np.ndarray | None
    interaction: Interaction
    N0: np.ndarray
    P0: np.ndarray
    dt: float
    measures: tuple[PlacedMeasure, ...] = ()
    epochs: tuple[Epoch, ...] = ()
    extinction: tuple[float, float] | None = None

    @property
    def layers(self) -> tuple[PlacedMeasure, ...]:
        """The placed measures (another name for :attr:`measures`)."""
        return self.measures

    def without_build_arrays(self) -> Setup:
        """A copy without the arrays only needed to build a run (memory during the run).

        Keeps what steppers use (growth, inverse capacity, mortality, the
        operators of epoch 0, the multipliers when there are later epochs);
        :func:`derived` needs a fresh :func:`prepare`.
        """
        f = self.fields
        empty = np.zeros((0, 0), dtype=np.float32)
        return replace(self, fields=Fields(empty, f.r, f.inv_K, f.m, empty, empty),
                       N0=np.zeros((0, 0)), P0=np.zeros((0, 0)),
                       multipliers=self.multipliers if len(self.epochs) > 1 else {})

    def epoch_stepper(self, k: int, stats: StepStats | None = None) -> Stepper:
        """A fresh :class:`Stepper` for epoch ``k`` (measures switched at its start)."""
        stats = stats if stats is not None else StepStats()
        if k == 0:
            f, mv_n, mv_p, refuge = (self.fields, self.prey_movement, self.predator_movement,
                                     self.refuge)
        else:
            f, mv_n, mv_p, refuge = epoch_state(self, self.epochs[k][2])
        return Stepper(self.grid.mask, mv_n, mv_p, f.r, f.inv_K, f.m, self.interaction,
                       self.dt, refuge=refuge, scheme=self.scenario.run.scheme, stats=stats,
                       extinction=self.extinction)

    def stepper(self, stats: StepStats | None = None) -> Stepper:
        """The :class:`Stepper` of the start of the run (epoch 0)."""
        return self.epoch_stepper(0, stats)


def _source(sc: Scenario, key: str) -> str:
    return f"{sc.path}: {key}"


def interaction_of(sc: Scenario) -> Interaction:
    """The :class:`Interaction` a scenario describes.

    Prey alone: the form's prey growth with no predation (attack rate 0).
    """
    i = sc.interaction
    if not sc.has_predator:
        return Interaction(sc.form, 0.0, 0.0, 0.0, 0.0)
    return Interaction(i.form, i.attack_rate, i.handling_time, i.efficiency, i.interference)


# prey alone: a predator that is nowhere, does not move, and neither eats nor dies
NO_PREDATOR = PredatorSpec.model_construct(name="", movement="fickian", diffusivity=0.0,
                                           motility=None, mortality=0.0,
                                           extinction_threshold=None,
                                           extinction_threshold_per_cell=None)


def _predator(sc: Scenario) -> PredatorSpec:
    return sc.predator if sc.predator is not None else NO_PREDATOR


def extinction_of(sc: Scenario, cell_area_km2: float) -> tuple[float, float] | None:
    """Extinction thresholds of prey and predator, animals/km² (0: none); None if neither.

    A threshold per cell is converted with the cell area (km²).
    """
    thr = tuple(spec.extinction_per_km2(cell_area_km2) or 0.0
                for spec in (sc.prey, _predator(sc)))
    return thr if any(thr) else None


def _multipliers(sc: Scenario, grid: Grid, habitat: np.ndarray) -> tuple[dict, np.ndarray]:
    """Habitat multiplier maps (float32) and the habitat layer kept for output."""
    ls = sc.landscape
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
    return {k: np.asarray(v, dtype=np.float32) for k, v in mult.items()}, habitat


def prepare(sc: Scenario, *, allow_large: bool = False) -> Setup:
    """Load the landscape and build fields, operators and the initial state.

    Parameters
    ----------
    sc : Scenario
        A validated scenario (:func:`preyscape.scenario.load_scenario`).
    allow_large : bool
        Skip the limits: a memory estimate beyond the available memory
        (checked from the raster's header, before reading it) and more than
        :data:`~preyscape.limits.MAX_STEPS` steps (:mod:`preyscape.limits`).

    Returns
    -------
    Setup

    Raises
    ------
    InputError
        For unreadable rasters, habitat codes without a table row, release
        points outside the landscape, invalid initial densities, per-cell
        values beyond 32-bit floats, or a run beyond the limits.
    """
    from preyscape.landscape.io import read_habitat

    ls = sc.landscape
    if not allow_large:
        limits.check_memory(sc)
    grid, habitat = read_habitat(
        sc.resolve(ls.habitat), ls.values, ls.cell_size,
        source=_source(sc, f"landscape.habitat ({ls.habitat})"))
    mult, habitat = _multipliers(sc, grid, habitat)
    measures = place_measures(sc, grid)
    epochs = measure_epochs(sc, measures)
    inter = interaction_of(sc)
    setup = Setup(scenario=sc, grid=grid, habitat=habitat, multipliers=mult, fields=None,
                  prey_movement=None, predator_movement=None, refuge=None, interaction=inter,
                  N0=np.zeros((0, 0)), P0=np.zeros((0, 0)), dt=0.0, measures=measures,
                  epochs=epochs)
    fields, mv_n, mv_p, refuge = epoch_state(setup, epochs[0][2])
    N0, P0 = initial_state(sc, grid, fields)
    dt = time_step(sc, setup, fields, inter, P0)
    setup = replace(setup, fields=fields, prey_movement=mv_n, predator_movement=mv_p,
                    refuge=refuge, N0=N0, P0=P0, dt=dt,
                    extinction=extinction_of(sc, grid.cell_area_km2))
    if not allow_large:
        _check_steps(setup)
    return setup


def _density_raster(sc: Scenario, grid: Grid, key: str) -> np.ndarray:
    """A start density raster (``start.<key>``) on the grid, animals/km² (0 off data)."""
    from preyscape.landscape.io import read_layer_onto

    rel = getattr(sc.start, key)
    layer = read_layer_onto(sc.resolve(rel), grid, "average",
                            source=_source(sc, f"start.{key} ({rel})"))
    layer = np.where(grid.mask, np.nan_to_num(layer, nan=0.0), 0.0)
    if np.any(layer < 0):
        r, c = np.argwhere(layer < 0)[0]
        what = key.split("_")[0]
        raise InputError(
            f"negative {what} density {layer[r, c]:g} at row {r}, col {c}; densities "
            "must be ≥ 0 animals/km²", _source(sc, f"start.{key}"),
        )
    return layer


def release_cells(grid: Grid, x: float, y: float, radius: float) -> np.ndarray:
    """Cells a release at ``(x, y)`` (map metres) of ``radius`` (metres) adds animals to.

    Every data cell whose centre lies within ``radius`` of the point, and
    always the cell that holds the point (bool, rows × cols).
    """
    disc = (grid.distance_to(x, y) <= radius) & grid.mask
    disc[grid.rowcol(x, y)] = True
    return disc


def initial_state(sc: Scenario, grid: Grid, fields: Fields) -> tuple[np.ndarray, np.ndarray]:
    """Initial prey and predator densities, animals/km² (float64, C order, 0 off data)."""
    st = sc.start
    mask = grid.mask
    if st.prey == "capacity":
        N0 = fields.K.astype(float)
    elif st.prey == "uniform":
        N0 = np.where(mask, float(st.prey_density), 0.0)
    else:
        N0 = _density_raster(sc, grid, "prey_raster")
    if st.predator == "raster":
        P0 = _density_raster(sc, grid, "predator_raster")
    else:
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
        target = N0 if rel.species == "prey" else P0
        target[release_cells(grid, rel.x, rel.y, rel.radius)] += rel.density
    if st.noise > 0:
        rng = np.random.default_rng(sc.run.seed)
        N0 *= 1.0 + st.noise * rng.uniform(-1, 1, N0.shape)
        P0 *= 1.0 + st.noise * rng.uniform(-1, 1, P0.shape)
    for name, u in (("prey", N0), ("predator", P0)):
        top = float(np.max(np.where(mask, u, 0.0)))
        if not top <= LARGEST:
            raise InputError(f"the start gives {name} densities up to {top:g} per km², beyond "
                             f"what a run can hold (at most {LARGEST:g} per km²)",
                             _source(sc, "start"))
    return (np.ascontiguousarray(np.where(mask, N0, 0.0)),
            np.ascontiguousarray(np.where(mask, P0, 0.0)))


def time_step(sc: Scenario, setup: Setup, fields: Fields, inter: Interaction,
          P0: np.ndarray) -> float:
    """The time step, years: the scenario's, or the shortest any epoch needs."""
    if sc.run.step == "auto":
        dt = _auto_dt(sc, fields, inter, P0)
        for _, _, names in setup.epochs[1:]:  # a corridor may raise growth or capacity
            dt = min(dt, _auto_dt(sc, epoch_state(setup, names)[0], inter, P0))
        return dt
    dt = float(sc.run.step)
    n = sc.run.save_every / dt
    if abs(n - round(n)) > 1e-9 * n:
        raise InputError(
            f"step {dt:g} yr does not divide save_every {sc.run.save_every:g} yr into whole "
            f"steps; choose a step such as {sc.run.save_every / max(1, math.ceil(n)):g}",
            _source(sc, "run.step"),
        )
    return dt


def _placed(sc: Scenario, m: MeasureSpec, cells, faces, shapes) -> PlacedMeasure:
    return PlacedMeasure(
        name=m.name, kind=m.kind, cells=cells, faces=faces, shapes=tuple(shapes),
        start_year=m.start_year, end_year=m.end_year, baseline=m.baseline,
        source=m.geometry or m.raster or "",
        permeability=m.permeability.model_dump() if m.permeability else {},
        gaps=tuple(g.model_dump() for g in m.gaps),
        protected_fraction=m.protected_fraction, closed_to_predators=m.closed_to_predators,
        sets=m.sets() if m.kind == "corridor" else {})


def place_measures(sc: Scenario, grid: Grid) -> tuple[PlacedMeasure, ...]:
    """Read the geometry or raster of each measure of the scenario's variant onto ``grid``.

    Raises
    ------
    InputError
        For unreadable files, geometries outside the landscape, or a measure
        that covers no cell with data (or crosses no face).
    """
    if not sc.active_measures():
        return ()
    from preyscape.landscape import measures as lm

    out = []
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
                faces = lm.fence_faces(shapes, grid, gaps=[(g.x, g.y, g.width) for g in m.gaps])
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
        out.append(_placed(sc, m, cells, faces, shapes))
    return tuple(out)


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


def measure_epochs(sc: Scenario, measures) -> tuple[Epoch, ...]:
    """Split the run at the times measures switch on or off.

    Returns ``(t0, t1, names of the measures acting in [t0, t1))`` in years,
    consecutive from 0 to ``run.years``; neighbouring spans with the same
    measures are merged.
    """
    years = sc.run.years
    cuts = {0.0, years}
    for m in measures:
        for t in (m.start_year, m.end_year):
            if t is not None and 0.0 < t < years:
                cuts.add(float(t))
    times = sorted(cuts)
    out: list[Epoch] = []
    for t0, t1 in zip(times[:-1], times[1:], strict=True):
        names = tuple(m.name for m in measures if m.active(t0, t1))
        if out and out[-1][2] == names:
            out[-1] = (out[-1][0], t1, names)
        else:
            out.append((t0, t1, names))
    return tuple(out)


def epoch_state(setup: Setup, names: tuple[str, ...]) -> tuple[
        Fields, Movement, Movement, np.ndarray | None]:
    """Fields, movement operators and refuge share with the named measures acting.

    The rules for measures acting together are
    :func:`preyscape.landscape.placed.combine`.
    """
    sc, grid = setup.scenario, setup.grid
    on = combine([m for m in setup.measures if m.name in names], setup.multipliers)
    with np.errstate(over="ignore", invalid="ignore"):  # overflow is refused just below
        fields = build_fields(
            on.multipliers, grid.mask, sc.prey.growth, sc.prey.capacity,
            _predator(sc).mortality, sc.prey.move_coefficient, _predator(sc).move_coefficient,
            setup.interaction.logistic,
        )
    ls = sc.landscape
    limits.check_fields(fields, lambda key: _source(sc, key))
    with np.errstate(over="ignore", invalid="ignore"):
        mvs = [
            build_movement(coef, grid.mask, grid.dx, grid.dy, spec.movement, ls.edge,
                           ls.nodata, perm_x=on.permeability[sp][0],
                           perm_y=on.permeability[sp][1])
            for sp, coef, spec in (("prey", fields.prey_move, sc.prey),
                                   ("predator", fields.predator_move, _predator(sc)))
        ]
    limits.check_movement(mvs, lambda key: _source(sc, key))
    return fields, mvs[0], mvs[1], on.refuge


def _best(sc: Scenario, fields: Fields) -> dict[str, float]:
    """Best-habitat parameter values (maximum capacity over the landscape)."""
    mask = fields.K > 0
    K = float(fields.K.max()) if mask.any() else (sc.prey.capacity or math.nan)
    return {"r": sc.prey.growth, "K": K, "m": _predator(sc).mortality,
            "D_N": sc.prey.move_coefficient, "D_P": _predator(sc).move_coefficient}


def _rates(sc: Scenario, fields: Fields, inter: Interaction,
           P0: np.ndarray) -> tuple[dict[str, float], float | None]:
    """The rates (1/yr) and local period (yr) the automatic step follows, by what sets them."""
    b = _best(sc, fields)
    K_arg = b["K"] if inter.logistic else None
    n_eq, p_eq = theory.equilibrium(inter, b["r"], K_arg, b["m"])
    p_scale = max(float(P0.max()), p_eq if math.isfinite(p_eq) else 0.0)
    K = b["K"] if math.isfinite(b["K"]) else 0.0
    rates = {
        "prey.growth (times its largest multiplier)": float(np.abs(fields.r).max()),
        "predator.mortality (times its largest multiplier)": float(fields.m.max()),
        # per-capita predation on rare prey
        "interaction.attack_rate times the predator density": inter.attack_rate * p_scale,
        # predator gain at capacity
        "the predators' growth on prey at capacity (interaction.efficiency, attack_rate, "
        "prey.capacity)": theory.predator_growth_at_capacity(inter, K, 0.0),
    }
    period = theory.local_stability(inter, b["r"], K_arg, b["m"])["period"]
    return rates, period


def _auto_dt(sc: Scenario, fields: Fields, inter: Interaction, P0: np.ndarray) -> float:
    rates, period = _rates(sc, fields, inter, P0)
    return auto_step(list(rates.values()), period, sc.run.save_every)


def _check_steps(setup: Setup) -> None:
    """Refuse an absurd number of steps (:func:`preyscape.limits.check_steps`)."""
    sc = setup.scenario
    explicit = (max(setup.prey_movement.max_rate, setup.predator_movement.max_rate)
                if sc.run.scheme == "explicit" else None)
    limits.check_steps(
        years=sc.run.years, dt=setup.dt, step=sc.run.step, save_every=sc.run.save_every,
        cells=setup.grid.ny * setup.grid.nx, explicit_rate=explicit,
        rates=lambda: _rates(sc, setup.fields, setup.interaction, setup.P0),
        source=lambda key: _source(sc, key))


def check_variant_measures(scenarios: list[Scenario]) -> list[dict]:
    """Place every variant's measures and targets on the grid once, before any run.

    A measure that only a variant adds is otherwise read when that variant
    starts, after the earlier variants have run; this finds its mistakes first.

    Returns
    -------
    list of dict
        Summaries (:meth:`PlacedMeasure.summary`) of the measures that are not
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
        for m in place_measures(v, grid):
            if not m.baseline:
                rec = extra.setdefault(m.name, {**m.summary(grid.cell_area_km2),
                                                "variants": []})
                rec["variants"].append(v.variant)
        place_targets(v, grid)
    return list(extra.values())
