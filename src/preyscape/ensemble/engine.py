"""Running an ensemble's members on dask.distributed, streaming them into the store.

:func:`run_ensemble` plans the members (:mod:`.design`), builds each variant's
landscape once (:func:`~preyscape.ensemble.members.prepare_variant`) and
sends it to every worker once (``Client.scatter(..., broadcast=True)``), then
submits one task per member that is not yet stored. Results are written to
the member store as they arrive (``distributed.as_completed``), one at a
time, so the client's memory does not grow with the number of members.

Where members run:

* by default on a :class:`distributed.LocalCluster` of worker *processes*
  on 127.0.0.1, one thread each, no dashboard unless asked; the workers'
  compiled kernels use one thread (``NUMBA_NUM_THREADS=1`` in the worker
  environment, and :func:`numba.set_num_threads` in each task), so two
  workers on two cores do not compete;
* on an existing scheduler given by address (``tcp://host:8786``): its
  workers must have the same preyscape installed;
* or one after another in this process (``in_process=True``), the reference
  the tests compare with.

dask does the scheduling and the recovery: a task whose worker dies is
moved to another worker (the scheduler's ``allowed-failures``, 3 by default,
before it gives up), and a task that raises is retried once (``retries=1``).
A member that fails on its values is not an error of the task: it comes back
as a :class:`~preyscape.ensemble.members.MemberFailure`, is recorded with its
message and does not stop the others.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import sys
import time
from collections.abc import Callable
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape import __version__
from preyscape.ensemble.design import Design, parameters_of, plan_design
from preyscape.ensemble.members import MemberFailure, MemberResult, prepare_variant, run_member
from preyscape.ensemble.store import MemberStore
from preyscape.errors import InputError
from preyscape.scenario import BASELINE, Scenario, load_scenario, sobol_members_problem
from preyscape.store import SPECIES

__all__ = ["EnsemblePlan", "EnsembleRun", "dask_client", "plan_ensemble", "run_ensemble"]

STORE = "members.zarr"
PARAMETERS = "parameters.csv"
FAILURES = "failures.csv"
RECORD = "ensemble.json"


@dataclass(frozen=True, eq=False)
class EnsemblePlan:
    """What an ensemble will run (checked before anything runs).

    Attributes
    ----------
    scenario : Scenario
        The scenario (baseline).
    variants : tuple of str
        ``"baseline"`` and the alternatives, in order.
    design : Design
        Every member's values and seed.
    presence : float
        Presence threshold, animals/km².
    thresholds : dict
        Arrival density per species, animals/km².
    change_threshold : float
        Relative change that counts (0.1 = 10 %).
    agreement : float
        Share of members that must agree for a robust change.
    digest : str
        SHA-256 of everything the stored members depend on.
    """

    scenario: Scenario
    variants: tuple[str, ...]
    design: Design
    presence: float
    thresholds: dict
    change_threshold: float
    agreement: float
    digest: str

    @property
    def times(self) -> np.ndarray:
        """Snapshot times, years."""
        run = self.scenario.run
        return np.arange(round(run.years / run.save_every) + 1) * run.save_every


def plan_ensemble(scenario: Scenario | str | Path, *, members: int | None = None,
                  variants: list[str] | None = None) -> EnsemblePlan:
    """Check a scenario's ``[uncertainty]`` section and draw every member.

    Parameters
    ----------
    scenario : Scenario or path
        A scenario with an ``[uncertainty]`` section.
    members : int, optional
        Number of members (default ``uncertainty.members``).
    variants : list of str, optional
        Alternatives to run besides the baseline (default
        ``uncertainty.variants``, else every variant).

    Raises
    ------
    InputError
        Without an ``[uncertainty]`` section, for an unknown variant, or a
        number of members that does not fit the design.
    """
    from preyscape.analysis.settings import AnalysisSettings

    sc = scenario if isinstance(scenario, Scenario) else load_scenario(scenario)
    spec = sc.uncertainty
    if spec is None:
        raise InputError("the scenario has no [uncertainty] section: add one with "
                         "[[uncertainty.parameters]] entries (key, range, distribution); "
                         "see docs/ensembles.md", str(sc.path))
    n = spec.members if members is None else int(members)
    if n < 2:
        raise InputError(f"an ensemble needs at least 2 members, not {n}", "--members")
    if spec.design == "sobol":
        why = sobol_members_problem(n, len(spec.parameters))
        if why:
            raise InputError(why, "--members" if members is not None else
                             f"{sc.path}: uncertainty.members")
    names = list(variants or spec.variants or sc.variant_names())
    chosen = [BASELINE] + [v for v in dict.fromkeys(names) if v != BASELINE]
    for name in chosen:
        sc.for_variant(name)  # an unknown name or a bad override is reported here
    settings = AnalysisSettings.build(sc.analysis.model_dump(mode="json"),
                                      stored_as=f"{sc.path}: analysis")
    seed = spec.seed if spec.seed is not None else sc.run.seed
    design = plan_design(parameters_of(spec), members=n, design=spec.design, seed=seed)
    thresholds = {sp: settings.arrival_threshold(sp) for sp in SPECIES}
    h = hashlib.sha256()
    h.update(json.dumps({"scenario": sc.digest(), "variants": chosen, "design": spec.design,
                         "seed": seed, "keys": design.keys, "seeds": list(design.seeds),
                         "presence": settings.presence, "thresholds": thresholds},
                        sort_keys=True).encode())
    h.update(np.ascontiguousarray(design.values).tobytes())
    return EnsemblePlan(sc, tuple(chosen), design, settings.presence, thresholds,
                        settings.change_threshold, spec.agreement, h.hexdigest())


@dataclass
class EnsembleRun:
    """What :func:`run_ensemble` did.

    Attributes
    ----------
    folder : pathlib.Path
        The ensemble folder.
    plan : EnsemblePlan
        The plan.
    ran : int
        Members run by this call (the others were already stored).
    skipped : int
        Members found stored (or failed) and not run again.
    failures : list of MemberFailure
        Members that failed on their values (this call and earlier ones).
    lost : list of str
        Members whose task could not complete (workers died repeatedly);
        running the same command again retries them.
    seconds : float
        Wall time, seconds.
    where : str
        Where the members ran (``"in-process"``, the local cluster, or the
        scheduler address).
    summary : object
        The summary output (:class:`~preyscape.ensemble.output.EnsembleOutput`),
        or None when members are missing.
    """

    folder: Path
    plan: EnsemblePlan
    ran: int = 0
    skipped: int = 0
    failures: list = field(default_factory=list)
    lost: list = field(default_factory=list)
    seconds: float = 0.0
    where: str = ""
    summary: object = None
    member_seconds: list = field(default_factory=list)


def default_workers(memory_per_member_mb: float) -> int:
    """Local workers: one per core, fewer if their members would not fit in memory."""
    import psutil

    cores = os.cpu_count() or 1
    free_mb = psutil.virtual_memory().available / 1e6
    return max(1, min(cores, int(0.8 * free_mb // max(memory_per_member_mb, 1.0))))


@contextmanager
def dask_client(scheduler: str | None = None, *, workers: int = 2, threads: int = 1,
                dashboard: bool = False):
    """A dask client: to ``scheduler`` by address, or to a new local cluster of processes.

    The local cluster listens on 127.0.0.1 only; ``dashboard=True`` serves
    the dashboard on 127.0.0.1:8787.
    """
    import dask
    import distributed

    if scheduler:
        try:
            # the connect timeout is dask's (distributed.comm.timeouts.connect, 30 s)
            client = distributed.Client(
                scheduler, timeout=dask.config.get("distributed.comm.timeouts.connect"))
        except (OSError, TimeoutError, ValueError) as exc:
            raise InputError(f"cannot reach a dask scheduler at {scheduler!r} ({exc}); start "
                             "one (dask scheduler) or leave out --scheduler to use a local "
                             "cluster", "--scheduler") from None
        try:
            yield client
        finally:
            client.close()
        return
    env = {"NUMBA_NUM_THREADS": str(threads), "OMP_NUM_THREADS": "1",
           "OPENBLAS_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    with dask.config.set({"distributed.scheduler.allowed-failures": 3,
                          "distributed.worker.daemon": False}):
        # without a dashboard the scheduler still serves its health routes over HTTP:
        # on 127.0.0.1 too, on a free port
        web = ({"dashboard_address": "127.0.0.1:8787"} if dashboard else
               {"dashboard": False, "dashboard_address": "127.0.0.1:0"})
        cluster = distributed.LocalCluster(
            n_workers=workers, threads_per_worker=1, processes=True, host="127.0.0.1",
            dashboard_address=None, scheduler_kwargs=web, silence_logs=logging.ERROR,
            env=env)
        client = distributed.Client(cluster)
        try:
            yield client
        finally:
            client.close()
            cluster.close()


def _prepare_folder(plan: EnsemblePlan, out: Path, overwrite: bool) -> MemberStore:
    """The member store of ``out``: new, or the one of an earlier run of the same plan."""
    import shutil

    from preyscape.analysis.output import write_csv

    path = out / STORE
    if out.exists() and overwrite:
        shutil.rmtree(out)
    if path.exists():
        store = MemberStore.open(path)
        if store.attrs.get("plan") != plan.digest:
            raise InputError("this folder holds an ensemble with other settings (scenario, "
                             "variants, members, design or seed); choose another --out or "
                             "pass --overwrite to replace it", str(out))
    else:
        ours = {PARAMETERS, FAILURES, RECORD, "summary"}
        if out.exists() and any(p.name not in ours and not p.name.startswith(".")
                                for p in out.iterdir()):
            raise InputError("folder exists and is not an ensemble folder; choose another "
                             "with --out or pass --overwrite to replace it", str(out))
        out.mkdir(parents=True, exist_ok=True)
        sc = plan.scenario
        attrs = {"plan": plan.digest, "title": sc.title or sc.path.stem,
                 "source": f"preyscape {__version__}", "design": plan.design.design,
                 "seed": plan.design.seed, "presence": plan.presence,
                 "arrival_thresholds": json.dumps(plan.thresholds),
                 "species_names": json.dumps({"prey": sc.prey.name,
                                              "predator": sc.predator.name
                                              if sc.has_predator else None}),
                 "Conventions": "CF-1.8"}
        store = MemberStore.create(path, grid=_grid_of(sc), variants=list(plan.variants),
                                   design=plan.design, times=plan.times, attrs=attrs)
    if not (out / PARAMETERS).is_file():
        d = plan.design
        write_csv(out / PARAMETERS, ["member", "seed", *d.keys],
                  [[m, d.seeds[m], *(repr(float(x)) for x in d.values[m])]
                   for m in range(d.members)])
    return store


def _grid_of(sc: Scenario):
    from preyscape.landscape.io import read_habitat

    ls = sc.landscape
    grid, _ = read_habitat(sc.resolve(ls.habitat), ls.values, ls.cell_size,
                           source=f"{sc.path}: landscape.habitat ({ls.habitat})")
    return grid


def _read_failures(out: Path) -> list[MemberFailure]:
    import csv

    path = out / FAILURES
    if not path.is_file():
        return []
    with open(path, newline="") as fh:
        return [MemberFailure(r["variant"], int(r["member"]), r["message"])
                for r in csv.DictReader(fh)]


def _write_failures(out: Path, failures: list[MemberFailure]) -> None:
    from preyscape.analysis.output import write_csv

    rows = sorted({(f.variant, f.index): f for f in failures}.values(),
                  key=lambda f: (f.variant, f.index))
    write_csv(out / FAILURES, ["variant", "member", "message"],
              [[f.variant, f.index, f.message] for f in rows])


def _bar(total: int, done: int, progress: bool | None):
    show = sys.stderr.isatty() if progress is None else progress
    if not show:
        return None
    from tqdm import tqdm

    return tqdm(total=total, initial=done, unit="member", desc="members", file=sys.stderr)


def _run_members(lands: dict, todo: list, design: Design, handle: Callable, *,
                 client, threads: int, lost: list) -> None:
    """Run ``todo`` members on ``client`` (or in this process without one)."""
    if client is None:
        import numba

        before = numba.get_num_threads()
        try:
            for v, m in todo:
                handle(run_member(lands[v], m, design.member_values(m), design.seeds[m],
                                  threads=threads))
        finally:
            numba.set_num_threads(before)  # the setting is this thread's: put it back
        return
    import distributed

    shared = {v: client.scatter(land, broadcast=True, hash=False) for v, land in lands.items()}
    token = hashlib.sha256(os.urandom(8)).hexdigest()[:8]
    futures = [client.submit(run_member, shared[v], m, design.member_values(m),
                             design.seeds[m], threads=threads, key=f"member-{v}-{m}-{token}",
                             pure=False, retries=1) for v, m in todo]
    # the client's own loop: with several clients in a process the default one may differ
    queue = distributed.as_completed(futures, loop=client.loop)
    del futures  # only the queue holds them: each is dropped once written
    for fut in queue:
        try:
            result = fut.result()
        except Exception as exc:  # the task itself could not complete (workers died)
            lost.append(f"{fut.key}: {type(exc).__name__}: {exc}")
        else:
            handle(result)
        fut.release()
        del fut


# long: the one place that ties plan, folder, cluster, store and summaries together
def run_ensemble(scenario: Scenario | str | Path, out: str | Path, *,
                 members: int | None = None, variants: list[str] | None = None,
                 scheduler: str | None = None, workers: int | None = None,
                 in_process: bool = False, threads: int | None = None,
                 dashboard: bool = False,
                 overwrite: bool = False, progress: bool | None = None,
                 on_stored: Callable | None = None, summarise: bool = True,
                 maps: bool = True, rank_by: str = "prey_total_change") -> EnsembleRun:
    """Run an ensemble into a folder (or continue one), then summarise it.

    Parameters
    ----------
    scenario : Scenario or path
        A scenario with an ``[uncertainty]`` section.
    out : str or pathlib.Path
        The ensemble folder. If it holds an ensemble of the same plan, the
        stored members are skipped and the others run (resume).
    members, variants
        As for :func:`plan_ensemble`.
    scheduler : str, optional
        Address of an existing dask scheduler; default a local cluster.
    workers : int, optional
        Local cluster size (default: one per core, fewer if memory is short).
    in_process : bool
        Run the members one after another in this process (no dask).
    threads : int, optional
        Kernel threads per member: default 1 on a cluster's workers, and
        numba's own setting (every core) in this process.
    dashboard : bool
        Serve the local cluster's dashboard on 127.0.0.1:8787.
    overwrite : bool
        Replace an existing folder of another plan (or any existing folder).
    progress : bool, optional
        Progress bar counting members; default only on a terminal.
    on_stored : callable, optional
        Called with each stored or failed member's result (for tests and tools).
    summarise : bool
        Write the summaries across members when every member has run.
    maps : bool
        Draw the summaries' PNG maps and figures.
    rank_by : str
        Ranking column for the alternatives
        (:func:`preyscape.ensemble.summaries.ranking`).

    Returns
    -------
    EnsembleRun
    """
    t0 = time.perf_counter()
    plan = plan_ensemble(scenario, members=members, variants=variants)
    out = Path(out)
    store = _prepare_folder(plan, out, overwrite)
    todo = store.todo()
    run = EnsembleRun(out, plan, skipped=len(plan.variants) * plan.design.members - len(todo),
                      failures=_read_failures(out))
    bar = _bar(len(plan.variants) * plan.design.members, run.skipped, progress)

    def handle(result) -> None:
        if isinstance(result, MemberResult):
            store.write(result)
            run.member_seconds.append(result.seconds)
        else:
            store.fail(result)
            run.failures.append(result)
            _write_failures(out, run.failures)
        run.ran += 1
        if bar is not None:
            bar.update(1)
        if on_stored is not None:
            on_stored(result)

    try:
        if todo:
            lands = {v: prepare_variant(plan.scenario.for_variant(v), plan.design.keys,
                                        presence=plan.presence, thresholds=plan.thresholds)
                     for v in dict.fromkeys(v for v, _ in todo)}
            if in_process:
                run.where = "in-process"
                _run_members(lands, todo, plan.design, handle, client=None,
                             threads=threads or 0, lost=run.lost)
            else:
                mb = _member_memory_mb(next(iter(lands.values())))
                n = workers or default_workers(mb)
                k = max(threads or 1, 1)
                with dask_client(scheduler, workers=n, threads=k,
                                 dashboard=dashboard) as client:
                    run.where = scheduler or f"local cluster of {n} worker processes"
                    _run_members(lands, todo, plan.design, handle, client=client,
                                 threads=k, lost=run.lost)
    finally:
        if bar is not None:
            bar.close()
    run.seconds = time.perf_counter() - t0
    if summarise and not run.lost:
        from preyscape.ensemble.output import write_summaries

        run.summary = write_summaries(out, rank_by=rank_by, threshold=plan.change_threshold,
                                      agreement=plan.agreement, failures=run.failures,
                                      maps=maps)
    _write_record(out, run)
    return run


def _member_memory_mb(land) -> float:
    """Estimated memory of one worker running a member, MB (Python and libraries included)."""
    cells = land.setup.grid.ny * land.setup.grid.nx
    # a run's ~180 B per cell, the shared landscape (~120 B) and the summaries (~190 B at
    # their peak, the timing margin's passes), plus ~300 MB for a worker with the libraries
    return 300.0 + cells * 490 / 1e6


def _write_record(out: Path, run: EnsembleRun) -> None:
    from preyscape.store import now_iso, write_json

    plan = run.plan
    secs = run.member_seconds
    write_json(out / RECORD, {
        "preyscape_version": __version__,
        "scenario": str(plan.scenario.path),
        "scenario_sha256": plan.scenario.digest(),
        "plan_sha256": plan.digest,
        "variants": list(plan.variants),
        "members": plan.design.members,
        "design": plan.design.design,
        "seed": plan.design.seed,
        "parameters": [{"key": p.key, "distribution": p.distribution, "range": [p.low, p.high],
                        "mean": p.mean, "sd": p.sd} for p in plan.design.parameters],
        "presence": plan.presence,
        "arrival_thresholds": plan.thresholds,
        "change_threshold": plan.change_threshold,
        "agreement": plan.agreement,
        "where": run.where,
        "ran": run.ran,
        "skipped": run.skipped,
        "failed": len(run.failures),
        "lost": run.lost,
        "wall_time_s": round(run.seconds, 3),
        "member_time_s_mean": round(float(np.mean(secs)), 4) if secs else None,
        "store": STORE,
        "finished": now_iso(),
    })
