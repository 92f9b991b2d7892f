"""Tests for preyscape.ensemble.engine on real dask clusters (processes, 127.0.0.1 only).

Every cluster here is a ``distributed.LocalCluster`` of worker processes bound to the
loopback address, or a scheduler and worker started as subprocesses on 127.0.0.1. The
members are tiny (24 x 30 cells, half a year), so the cost is the clusters' start-up.
"""

from __future__ import annotations

import os
import signal

import numpy as np
import pytest
from conftest import X0
from ensemble_cases import ensemble_scenario, store_files

from preyscape.ensemble.engine import dask_client, plan_ensemble, run_ensemble
from preyscape.ensemble.members import MemberResult
from preyscape.ensemble.store import open_members
from preyscape.errors import InputError


@pytest.fixture(scope="module")
def case(tmp_path_factory):
    """The scenario and its in-process ensemble: the reference of the cluster runs."""
    folder = tmp_path_factory.mktemp("engine")
    scenario = ensemble_scenario(folder / "scenario", members=4)
    ref = run_ensemble(scenario, folder / "in-process", in_process=True, progress=False,
                       maps=False)
    return {"folder": folder, "scenario": scenario, "ref": ref}


def test_in_process_ensemble_stores_every_member(case):
    ref = case["ref"]
    assert ref.ran == 8 and ref.skipped == 0 and not ref.failures and not ref.lost
    ds = open_members(ref.folder / "members.zarr")
    assert (ds["status"].values == 1).all()
    assert list(ds["variant"].values) == ["baseline", "fenced"]
    assert np.isfinite(ds["prey_mean"].values[:, :, ~np.isnan(ds["prey_mean"].values[0, 0])]
                       ).all()
    assert (ref.folder / "parameters.csv").is_file() and (ref.folder / "ensemble.json").is_file()
    assert (ref.folder / "summary" / "prcc.csv").is_file()


def test_members_get_distinct_seeds_and_their_drawn_values(case):
    ds = open_members(case["ref"].folder / "members.zarr")
    seeds = [int(s) for s in ds["seed"].values]
    assert len(set(seeds)) == len(seeds) == 4
    plan = plan_ensemble(case["scenario"])
    assert seeds == list(plan.design.seeds)
    np.testing.assert_array_equal(ds["value"].values, plan.design.values)
    # different values give different members; member i of both variants shares values
    means = ds["prey_mean"].sel(variant="baseline").values
    assert len({means[m].tobytes() for m in range(4)}) == 4


@pytest.mark.parametrize("workers", [1, 2])
def test_cluster_store_is_bitwise_the_in_process_store(case, workers):
    # design requirement (determinism): the same ensemble gives the same bytes on one
    # worker, on two, and in this process
    out = case["folder"] / f"cluster-{workers}"
    run = run_ensemble(case["scenario"], out, workers=workers, progress=False, maps=False)
    assert run.where == f"local cluster of {workers} worker processes" and run.ran == 8
    assert store_files(out / "members.zarr") == store_files(
        case["ref"].folder / "members.zarr")


def test_local_cluster_workers_use_one_kernel_thread_on_loopback():
    with dask_client(workers=2) as client:
        info = client.scheduler_info()
        assert all(a.startswith("tcp://127.0.0.1:") for a in info["workers"])
        assert info["address"].startswith("tcp://127.0.0.1:")
        assert client.run(lambda: os.environ.get("NUMBA_NUM_THREADS")) == {
            a: "1" for a in info["workers"]}
        assert all(w["nthreads"] == 1 for w in info["workers"].values())
        http = client.run_on_scheduler(
            lambda dask_scheduler: (dask_scheduler.http_server.address,
                                    "/status" in str(dask_scheduler.http_application
                                                     .wildcard_router.rules)))
        assert http == ("127.0.0.1", False)  # health routes on loopback, no dashboard


def test_killing_a_worker_mid_ensemble_loses_nothing(case, tmp_path):
    # a member whose worker dies is run again elsewhere (dask's allowed-failures): the
    # result equals the undisturbed ensemble, bitwise
    import distributed

    scenario = ensemble_scenario(tmp_path / "s", members=6, years=2.0)
    ref = run_ensemble(scenario, tmp_path / "ref", in_process=True, progress=False,
                       summarise=False)
    killed = []
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, host="127.0.0.1",
                                  dashboard_address=None, processes=True) as cluster:

        def pids():
            return {n.process.pid for n in cluster.workers.values() if n.process}

        def kill_one(result):
            if not killed:  # after the first member: the other worker is mid-member
                pid = min(pids())
                os.kill(pid, signal.SIGKILL)
                killed.append(pid)

        run = run_ensemble(scenario, tmp_path / "killed", scheduler=cluster.scheduler_address,
                           progress=False, on_stored=kill_one, summarise=False)
        after = pids()
    assert killed and killed[0] not in after  # the nanny started a new worker process
    assert run.ran == 12 and not run.lost and not run.failures
    assert store_files(tmp_path / "killed" / "members.zarr") == store_files(
        ref.folder / "members.zarr")


def test_resuming_skips_stored_members_and_ends_the_same(case, tmp_path):
    # an interrupted ensemble run again with the same command runs only what is missing
    scenario = case["scenario"]
    stop = []

    def interrupt(result):
        stop.append(result)
        if len(stop) == 3:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        run_ensemble(scenario, tmp_path / "e", in_process=True, progress=False,
                     on_stored=interrupt, maps=False)
    ds = open_members(tmp_path / "e" / "members.zarr")
    assert int((ds["status"].values == 1).sum()) == 3
    assert not (tmp_path / "e" / "summary").exists()
    seen = []
    run = run_ensemble(scenario, tmp_path / "e", workers=2, progress=False,
                       on_stored=seen.append, maps=False)
    assert run.skipped == 3 and run.ran == 5 and len(seen) == 5
    assert all(isinstance(r, MemberResult) for r in seen)
    assert store_files(tmp_path / "e" / "members.zarr") == store_files(
        case["ref"].folder / "members.zarr")
    again = run_ensemble(scenario, tmp_path / "e", in_process=True, progress=False, maps=False)
    assert again.ran == 0 and again.skipped == 8
    ref_summary = (case["ref"].folder / "summary" / "prcc.csv").read_bytes()
    assert (tmp_path / "e" / "summary" / "prcc.csv").read_bytes() == ref_summary


def test_other_settings_in_the_same_folder_are_refused(case, tmp_path):
    run_ensemble(case["scenario"], tmp_path / "e", members=2, in_process=True, progress=False,
                 summarise=False)
    with pytest.raises(InputError, match="ensemble with other settings"):
        run_ensemble(case["scenario"], tmp_path / "e", members=3, in_process=True,
                     progress=False)
    run = run_ensemble(case["scenario"], tmp_path / "e", members=3, in_process=True,
                       progress=False, overwrite=True, summarise=False)
    assert run.ran == 6
    (tmp_path / "other").mkdir()
    (tmp_path / "other" / "x.txt").write_text("mine")
    with pytest.raises(InputError, match="not an ensemble folder"):
        run_ensemble(case["scenario"], tmp_path / "other", in_process=True, progress=False)
    assert (tmp_path / "other" / "x.txt").read_text() == "mine"


def test_a_failing_member_is_reported_and_the_others_are_stored(tmp_path):
    # a release drawn east of the landscape (it ends 3000 m east of X0) fails that member
    p = f'{{ key = "start.releases.0.x", range = [{X0 + 1000.0}, {X0 + 4000.0}] }}'
    scenario = ensemble_scenario(tmp_path / "s", members=4, parameters=(p,))
    run = run_ensemble(scenario, tmp_path / "e", in_process=True, progress=False, maps=False)
    xs = plan_ensemble(scenario).design.values[:, 0]
    bad = sorted(m for m in range(4) if xs[m] >= X0 + 3000.0)
    assert bad and len(bad) < 4
    assert sorted({f.index for f in run.failures}) == bad
    assert all("outside the landscape" in f.message for f in run.failures)
    st = open_members(tmp_path / "e" / "members.zarr")["status"].values
    assert all(st[:, m].tolist() == ([2, 2] if m in bad else [1, 1]) for m in range(4))
    text = (tmp_path / "e" / "failures.csv").read_text()
    assert text.count("outside the landscape") == 2 * len(bad)
    rerun = run_ensemble(scenario, tmp_path / "e", in_process=True, progress=False,
                         maps=False)
    assert rerun.ran == 0 and len(rerun.failures) == 2 * len(bad)  # kept, not rerun


def test_an_unreachable_scheduler_is_one_clear_error(case, tmp_path):
    import dask

    with dask.config.set({"distributed.comm.timeouts.connect": "2s"}), pytest.raises(
            InputError, match="cannot reach a dask scheduler"):
        run_ensemble(case["scenario"], tmp_path / "e", scheduler="tcp://127.0.0.1:1",
                     progress=False)
