"""One ensemble member: its setup derived from the variant's landscape, its run, its summaries.

The landscape of a variant (grid, habitat, multipliers, placed measures,
fields, movement operators, initial densities) is built once on the client
by :func:`prepare_variant` and sent to the workers once. A member's
:class:`~preyscape.assemble.Setup` is derived from it by
:func:`derive_setup`, rebuilding only what its uncertain keys change
(:func:`preyscape.ensemble.design.rebuild_of`); no raster or GeoJSON is read
again. :func:`run_member` runs the member in memory and keeps only its
summaries (:class:`SummarySink`), so a member's memory is that of one run
without its snapshots: the snapshots the timing margin needs a second time
are kept on disk, in a temporary file of the worker's local folder, while
the member runs.

A member that fails on its values (an invalid combination, densities that
stop being finite) returns a :class:`MemberFailure` with the message instead
of raising, so it does not sink the others.
"""

from __future__ import annotations

import math
import sys
import tempfile
import time
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from preyscape.analysis.change import window_statistics
from preyscape.assemble import Setup, _predator, epoch_state, interaction_of, prepare
from preyscape.ensemble.design import rebuild_of
from preyscape.errors import FileProblem
from preyscape.landscape.placed import combine
from preyscape.model.fields import build_fields, multipliers_from_classes
from preyscape.scenario import Scenario
from preyscape.store import SPECIES, used_snapshots

__all__ = ["MAPS", "MemberFailure", "MemberResult", "ScratchProblem", "SummarySink",
           "VariantLandscape", "derive_setup", "prepare_variant", "run_member"]

MAPS = ("mean", "margin", "persistence", "final", "arrival")
"""Per-member maps of each species: time-mean density (animals/km²), timing margin
(R/n of :func:`preyscape.analysis.change.window_statistics`, animals/km²), persistence
(share of snapshots present, 0–1), final density (animals/km²), arrival time (years;
NaN: never). Mean, margin and persistence are over the snapshots after the start."""


@dataclass(frozen=True, eq=False)
class VariantLandscape:
    """A variant's landscape, built once and shared by all its members.

    Attributes
    ----------
    variant : str
        The variant's name.
    setup : Setup
        :func:`preyscape.assemble.prepare` of the variant with the scenario's
        own values (measure geometries dropped: members need cells and faces only).
    start_multipliers : dict
        Habitat multipliers with the measures of the first epoch applied
        (for members that only rescale the fields).
    keys : tuple of str
        The uncertain keys.
    presence : float
        Presence threshold, animals/km².
    thresholds : dict
        Arrival density per species, animals/km².
    """

    variant: str
    setup: Setup
    start_multipliers: dict
    keys: tuple[str, ...]
    presence: float
    thresholds: dict

    @property
    def rebuilds(self) -> set[str]:
        """What members rebuild (:data:`preyscape.ensemble.design.REBUILDS`)."""
        out = {rebuild_of(k) for k in self.keys}
        sc = self.setup.scenario
        if sc.start.noise > 0:
            out.add("start")  # every member has its own seed
        if sc.start.prey == "capacity" and out & {"fields", "operators"}:
            out.add("start")  # prey start at a capacity that may change
        return out


def prepare_variant(sc: Scenario, keys: Iterable[str], *, presence: float,
                    thresholds: dict) -> VariantLandscape:
    """Build a variant's landscape once (reads the rasters and GeoJSON files).

    Parameters
    ----------
    sc : Scenario
        The variant's scenario (:meth:`Scenario.for_variant`).
    keys : iterable of str
        The uncertain keys.
    presence : float
        Presence threshold, animals/km².
    thresholds : dict
        Arrival density per species, animals/km².
    """
    setup = prepare(sc)
    setup = replace(setup, measures=tuple(replace(m, shapes=()) for m in setup.measures))
    first = [m for m in setup.measures if m.name in setup.epochs[0][2]]
    mult = combine(first, setup.multipliers).multipliers
    return VariantLandscape(sc.variant, setup, mult, tuple(keys), float(presence),
                            {sp: float(thresholds[sp]) for sp in SPECIES})


def _measures_of(setup: Setup, sc: Scenario) -> tuple:
    out = []
    for m in setup.measures:
        spec = sc.measure(m.name)
        out.append(replace(
            m, permeability=spec.permeability.model_dump() if spec.permeability else {},
            protected_fraction=spec.protected_fraction,
            sets=spec.sets() if spec.kind == "corridor" else {}))
    return tuple(out)


def derive_setup(land: VariantLandscape, sc: Scenario) -> Setup:
    """A member's setup: the variant's landscape with the member's values.

    Only what the uncertain keys change is rebuilt (see
    :func:`preyscape.ensemble.design.rebuild_of`); the result equals
    :func:`preyscape.assemble.prepare` of the member's scenario.

    Parameters
    ----------
    land : VariantLandscape
        The variant's landscape (not modified).
    sc : Scenario
        The member's scenario (the variant with the member's values and seed).
    """
    from preyscape.assemble import initial_state, time_step  # the same rules as prepare

    base = land.setup
    need = land.rebuilds
    grid = base.grid
    inter = interaction_of(sc)
    setup = replace(base, scenario=sc, interaction=inter)
    fields, mv_n, mv_p, refuge = (base.fields, base.prey_movement, base.predator_movement,
                                  base.refuge)
    if "operators" in need:
        mult = base.multipliers
        if any(k.startswith("landscape.classes.") for k in land.keys):
            table = {c.code: c.model_dump() for c in sc.landscape.classes}
            mult = {k: np.asarray(v, dtype=np.float32) for k, v in
                    multipliers_from_classes(base.habitat, grid.mask, table).items()}
        setup = replace(setup, multipliers=mult, measures=_measures_of(base, sc))
        fields, mv_n, mv_p, refuge = epoch_state(setup, base.epochs[0][2])
    elif "fields" in need:
        fields = build_fields(land.start_multipliers, grid.mask, sc.prey.growth,
                              sc.prey.capacity, _predator(sc).mortality,
                              sc.prey.move_coefficient, _predator(sc).move_coefficient,
                              inter.logistic)
    if "start" in need:
        N0, P0 = initial_state(sc, grid, fields)
    else:
        N0, P0 = base.N0.copy(), base.P0.copy()  # the shared landscape is never changed
    setup = replace(setup, fields=fields, prey_movement=mv_n, predator_movement=mv_p,
                    refuge=refuge, N0=N0, P0=P0)
    return replace(setup, dt=time_step(sc, setup, fields, inter, P0))


class ScratchProblem(FileProblem):
    """A member's temporary snapshot files could not be written or read back.

    A full or vanished temporary folder is not the member's fault: unlike a
    :class:`MemberFailure` it is raised, so dask retries the task elsewhere and
    a later run of the same command runs the member again.
    """


@contextmanager
def _scratch_io(path: str | Path) -> Iterator[None]:
    """Turn an I/O error on a member's temporary files into a :class:`ScratchProblem`."""
    try:
        yield
    except OSError as exc:
        raise ScratchProblem(f"cannot write or read a member's temporary snapshots "
                             f"({exc.strerror or exc}); the timing margin needs 4 bytes per "
                             "cell and snapshot of each species in the temporary folder "
                             "(TMPDIR, or the dask worker's local directory)",
                             str(path)) from None


class SummarySink:
    """Receives a member's snapshots and keeps only its summaries (memory O(cells)).

    Snapshots are rounded to float32 as a run folder stores them, so the time
    means and persistence equal those of the same run written with
    :func:`preyscape.runfolder.simulate` and read back (definitions of
    :mod:`preyscape.analysis.results`: snapshots after the start, presence
    at or above the threshold), and the timing margin equals
    :func:`preyscape.analysis.change.window_statistics` of that run over the
    same snapshots (the statistic of ``preyscape compare``).

    The margin R/n needs the window mean before its second pass over the
    snapshots, so the used snapshots of each species are appended, as
    float32, to a ``.npy`` file in ``folder`` and read back one at a time
    with plain reads: a long-lived memory map would leave every page it
    touched in the process's resident memory, which dask's nanny counts
    against the worker's memory limit. The caller removes ``folder``.

    Parameters
    ----------
    mask : numpy.ndarray of bool
        Cells with data.
    cell_area_km2 : float
        Area of one cell, km².
    n_snapshots : int
        Snapshots the run will write (the start included).
    presence : float
        Presence threshold, animals/km².
    thresholds : dict
        Arrival density per species, animals/km².
    folder : str or pathlib.Path
        An existing temporary folder for the snapshot files (keyword only);
        it needs 4 bytes per cell and used snapshot for each species.
    """

    def __init__(self, mask: np.ndarray, cell_area_km2: float, n_snapshots: int,
                 presence: float, thresholds: dict, *, folder: str | Path) -> None:
        self.mask = mask
        self.area = cell_area_km2
        self.used = used_snapshots(n_snapshots)
        self.presence = presence
        self.thresholds = thresholds
        self.k = 0
        self.sum = {sp: np.zeros(mask.shape) for sp in SPECIES}
        self.occ = {sp: np.zeros(mask.shape) for sp in SPECIES}
        self.arrival = {sp: np.full(mask.shape, np.nan) for sp in SPECIES}
        self.final = {sp: np.zeros(mask.shape, dtype=np.float32) for sp in SPECIES}
        self.totals = {sp: np.full(n_snapshots, np.nan) for sp in SPECIES}
        self.files = {sp: Path(folder) / f"{sp}_snapshots.npy" for sp in SPECIES}
        self.stored = 0
        self.offset = {}
        header = {"descr": np.lib.format.dtype_to_descr(np.dtype(np.float32)),
                  "fortran_order": False, "shape": (len(self.used), *mask.shape)}
        for sp, path in self.files.items():
            with _scratch_io(path), open(path, "wb") as fh:
                np.lib.format.write_array_header_1_0(fh, header)
                self.offset[sp] = fh.tell()

    def write(self, t: float, N: np.ndarray, P: np.ndarray) -> None:
        """Take one snapshot at time ``t`` (years), densities in animals/km²."""
        k = self.k
        for sp, u in zip(SPECIES, (N, P), strict=True):
            self.totals[sp][k] = float(np.sum(u, where=self.mask) * self.area)
            f32 = u.astype(np.float32)
            f = np.where(self.mask & np.isfinite(f32), f32.astype(np.float64), 0.0)
            if k in self.used:
                self.sum[sp] += f
                self.occ[sp] += f >= self.presence
                with _scratch_io(self.files[sp]), open(self.files[sp], "ab") as fh:
                    f.astype(np.float32).tofile(fh)  # exact: f holds float32 values
            new = np.isnan(self.arrival[sp]) & (f >= self.thresholds[sp]) & self.mask
            self.arrival[sp][new] = t
            self.final[sp] = f32
        self.stored += k in self.used
        self.k += 1

    def snapshots(self, species: str) -> Iterator[np.ndarray]:
        """The used snapshots of ``species`` again, one at a time (animals/km², float64)."""
        cells, path = self.mask.size, self.files[species]
        with _scratch_io(path), open(path, "rb") as fh:
            fh.seek(self.offset[species])
            for _ in range(self.stored):
                u = np.fromfile(fh, dtype=np.float32, count=cells)
                if u.size != cells:
                    raise OSError(f"{path} ends early")
                yield u.reshape(self.mask.shape).astype(np.float64)

    def maps(self) -> dict[str, np.ndarray]:
        """``{"<species>_<map>": float32 map}`` for :data:`MAPS`, NaN off the data mask."""
        n = max(len(self.used), 1)
        out = {}
        for sp in SPECIES:
            stats = window_statistics(lambda sp=sp: self.snapshots(sp),
                                      presence=self.presence, mask=self.mask)
            for name, a in (("mean", self.sum[sp] / n), ("margin", stats.margin),
                            ("persistence", self.occ[sp] / n),
                            ("final", self.final[sp]), ("arrival", self.arrival[sp])):
                out[f"{sp}_{name}"] = np.where(self.mask, a, np.nan).astype(np.float32)
        return out


def _scratch_folder() -> str | None:
    """The dask worker's local folder when running on one, else None (the system's)."""
    if "distributed" not in sys.modules:  # not on a worker: do not import dask for this
        return None
    try:
        from distributed import get_worker

        return get_worker().local_directory
    except (ValueError, AttributeError):  # in the client's process: no worker
        return None


@dataclass(frozen=True, eq=False)
class MemberResult:
    """A finished member's summaries.

    Attributes
    ----------
    variant : str
        The variant.
    index : int
        The member's index.
    maps : dict
        ``"<species>_<map>"`` (:data:`MAPS`) to float32 maps.
    totals : dict
        Species to animals in the landscape at each snapshot (float64).
    dt : float
        The member's step, years.
    seconds : float
        Wall time of the member on its worker, seconds.
    """

    variant: str
    index: int
    maps: dict
    totals: dict
    dt: float
    seconds: float


@dataclass(frozen=True)
class MemberFailure:
    """A member that could not run: its variant, index and the reason."""

    variant: str
    index: int
    message: str


def _set_threads(threads: int) -> None:
    """Kernel threads of this task (numba's setting is per thread, so per task)."""
    import numba

    numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))


def run_member(land: VariantLandscape, index: int, values: dict, seed: int, *,
               threads: int = 1) -> MemberResult | MemberFailure:
    """Run one member and return its summaries (or why it failed).

    Parameters
    ----------
    land : VariantLandscape
        The variant's landscape (shared; not modified).
    index : int
        The member's index.
    values : dict
        ``{key: value}`` of the member's uncertain parameters.
    seed : int
        The member's ``run.seed``.
    threads : int
        Kernel threads for this member (1 on a cluster worker).
    """
    from preyscape.solve.run import integrate_epochs

    t0 = time.perf_counter()
    if threads:
        _set_threads(threads)
    # the snapshot files of the timing margin: removed when the member ends, however it ends
    root = _scratch_folder()
    with _scratch_io(root or tempfile.gettempdir()):
        scratch = tempfile.TemporaryDirectory(prefix="preyscape-member-", dir=root)
    with scratch as tmp:
        try:
            sc = land.setup.scenario.with_values({**values, "run.seed": int(seed)})
            setup = derive_setup(land, sc)
            n = round(sc.run.years / sc.run.save_every) + 1
            sink = SummarySink(setup.grid.mask, setup.grid.cell_area_km2, n, land.presence,
                               land.thresholds, folder=tmp)
            integrate_epochs(setup.epoch_stepper, [e[:2] for e in setup.epochs], setup.N0,
                             setup.P0, sc.run.save_every, setup.dt, sink, progress=False)
        except ScratchProblem:
            raise
        except Exception as exc:  # a member's failure is reported, not raised
            text = getattr(exc, "message", None) or str(exc) or type(exc).__name__
            return MemberFailure(land.variant, int(index), f"{type(exc).__name__}: {text}")
        if not all(math.isfinite(float(t[-1])) for t in sink.totals.values()):
            return MemberFailure(land.variant, int(index),
                                 "the run did not write every snapshot")
        maps = sink.maps()
    return MemberResult(land.variant, int(index), maps, sink.totals, setup.dt,
                        time.perf_counter() - t0)
