"""Tests for ``preyscape ensemble`` (preyscape.cli.ensemble): options, messages, a scheduler
and a worker started separately as subprocesses on 127.0.0.1."""

from __future__ import annotations

import json
import subprocess
import sys
import time

import pytest
from ensemble_cases import ensemble_scenario, store_files

from preyscape.cli import main


def one_error(capsys, status, *needles):
    err = capsys.readouterr().err
    assert status == 2 and err.count("preyscape: error:") == 1 and "Traceback" not in err
    for n in needles:
        assert n in err
    return err


def test_a_scenario_without_an_uncertainty_section_is_refused(tmp_path, capsys):
    from conftest import make_landscape

    path = make_landscape(tmp_path)
    status = main(["ensemble", str(path), "--out", str(tmp_path / "e")])
    one_error(capsys, status, str(path), "no [uncertainty] section")
    assert not (tmp_path / "e").exists()


def test_option_mistakes_name_the_option(tmp_path, capsys):
    path = ensemble_scenario(tmp_path / "s", design="sobol", members=20)
    status = main(["ensemble", str(path), "--members", "30", "--out", str(tmp_path / "e")])
    one_error(capsys, status, "--members", "N x 5 with N a power of two", "20 or 40")
    status = main(["ensemble", str(path), "--rank-by", "fun", "--out", str(tmp_path / "e")])
    one_error(capsys, status, "--rank-by", "prey_total_change")
    status = main(["ensemble", str(path), "--in-process", "--scheduler", "tcp://127.0.0.1:1"])
    one_error(capsys, status, "--in-process")
    status = main(["ensemble", str(path), "--variant", "nope", "--out", str(tmp_path / "e")])
    one_error(capsys, status, "no variant named 'nope'")
    assert not (tmp_path / "e").exists()
    with pytest.raises(SystemExit):
        main(["ensemble", str(path), "--members", "0"])


@pytest.fixture
def scheduler(tmp_path):
    """A dask scheduler and one worker started as subprocesses on 127.0.0.1."""
    file = tmp_path / "scheduler.json"
    procs = [subprocess.Popen(
        [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
         "--port", "0", "--dashboard-address", "127.0.0.1:0", "--scheduler-file", str(file)],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)]
    try:
        for _ in range(300):
            if file.is_file() and file.read_text().strip():
                break
            time.sleep(0.1)
        address = json.loads(file.read_text())["address"]
        procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_worker", address, "--nthreads", "1",
             "--nworkers", "1", "--host", "127.0.0.1", "--no-dashboard"],
            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
            env={**__import__("os").environ, "NUMBA_NUM_THREADS": "1"}))
        yield address
    finally:
        for p in reversed(procs):
            p.terminate()
        for p in procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()


def test_scheduler_address_runs_the_ensemble_on_separate_processes(tmp_path, scheduler,
                                                                   capsys):
    # the ensemble runs on a scheduler and worker started on their own, and stores exactly
    # what the in-process ensemble stores (determinism across where members run)
    assert scheduler.startswith("tcp://127.0.0.1:")
    path = ensemble_scenario(tmp_path / "s", members=4)
    status = main(["ensemble", str(path), "--scheduler", scheduler, "--out",
                   str(tmp_path / "remote"), "--no-maps"])
    out = capsys.readouterr().out
    assert status == 0, out
    assert (f"ensemble folder: {tmp_path / 'remote'} (8 members run, 0 already stored; "
            f"{scheduler}") in out
    assert "fenced: prey total" in out and "A model is not a field survey" in out
    assert main(["ensemble", str(path), "--in-process", "--quiet", "--no-maps", "--out",
                 str(tmp_path / "local")]) == 0
    assert store_files(tmp_path / "remote" / "members.zarr") == store_files(
        tmp_path / "local" / "members.zarr")
    record = json.loads((tmp_path / "remote" / "ensemble.json").read_text())
    assert record["where"] == scheduler and record["ran"] == 8
