"""Ensemble benchmarks: members per hour, parallel efficiency, overhead per member, memory.

    python benchmarks/ensemble.py                      # about 15 minutes on 2 idle cores
    python benchmarks/ensemble.py --only rate --members 4
    python benchmarks/ensemble.py --json benchmarks/ensemble_results.json

Every number is measured in this process (or its child processes) on this machine:

rate
    The demo scenario (Veldrun Moor, 400 x 400 cells, 8 years) with its [uncertainty]
    section, baseline and fence variant: members per hour run one after another in this
    process (kernels on 1 thread, and on every core as ``preyscape run`` does), and on a
    local dask cluster of 1 and 2 worker processes. Parallel efficiency = rate with 2
    workers / (2 x rate with 1 worker).
overhead
    Scheduling, sending and storing a member: a tiny landscape (24 x 30 cells, half a
    year) where the run itself takes milliseconds; the wall time per member on a
    1-worker cluster minus the members' own run time, and the in-process equivalent.
memory
    Peak resident memory of ``preyscape ensemble`` (the client and its workers, sampled
    every 0.1 s) for 8 and 64 members of the demo landscape run for half a year.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
LAND = ROOT / "landscapes"


def demo_copy(folder: Path, years: float | None = None) -> Path:
    """The demo scenario in ``folder`` (its files linked), optionally with another run length."""
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("veldrun_moor_habitat.tif", "veldrun_moor_measures"):
        if not (folder / name).exists():
            os.symlink(LAND / name, folder / name)
    text = (LAND / "veldrun_moor.toml").read_text()
    if years is not None:
        text = re.sub(r"^years = 8$", f"years = {years!r}", text, flags=re.M)
    path = folder / "veldrun_moor.toml"
    path.write_text(text)
    return path


def tiny_scenario(folder: Path, members: int) -> Path:
    sys.path.insert(0, str(ROOT / "tests"))
    from ensemble_cases import ensemble_scenario

    return ensemble_scenario(folder, members=members)


def _ensemble(scenario: Path, out: Path, **kw):
    from preyscape.ensemble.engine import run_ensemble

    shutil.rmtree(out, ignore_errors=True)
    t0 = time.perf_counter()
    run = run_ensemble(scenario, out, progress=False, summarise=False, **kw)
    wall = time.perf_counter() - t0
    return wall, run


def bench_rate(members: int, tmp: Path) -> dict:
    import numba

    from preyscape.solve.kernels import warm_up

    warm_up()
    scenario = demo_copy(tmp / "demo")
    n = 2 * members  # baseline and fence
    out = {"members_per_variant": members, "runs": n}
    for label, kw in (("in_process_1_thread", {"in_process": True, "threads": 1}),
                      ("in_process_all_threads", {"in_process": True, "threads": 0}),
                      ("cluster_1_worker", {"workers": 1}),
                      ("cluster_2_workers", {"workers": 2})):
        if label == "in_process_all_threads":
            numba.set_num_threads(numba.config.NUMBA_NUM_THREADS)
        wall, run = _ensemble(scenario, tmp / label, members=members, **kw)
        out[label] = {"wall_s": round(wall, 2), "members_per_hour": round(3600 * n / wall, 1),
                      "member_run_s_mean": round(sum(run.member_seconds) / n, 2)}
        print(f"  {label:<24} {wall:8.1f} s  {3600 * n / wall:8.1f} members/hour", flush=True)
    one, two = out["cluster_1_worker"]["wall_s"], out["cluster_2_workers"]["wall_s"]
    out["parallel_efficiency_2_workers"] = round(one / (2 * two), 3)
    out["speedup_2_workers_vs_in_process_all_threads"] = round(
        out["in_process_all_threads"]["wall_s"] / two, 3)
    return out


def bench_overhead(tmp: Path, members: int = 64) -> dict:
    scenario = tiny_scenario(tmp / "tiny", members)
    _ensemble(scenario, tmp / "tiny-warm", members=4, in_process=True)  # compile, caches
    n = 2 * members
    res = {}
    for label, kw in (("in_process", {"in_process": True}), ("cluster_1_worker",
                                                             {"workers": 1})):
        wall, run = _ensemble(scenario, tmp / f"tiny-{label}", **kw)
        own = sum(run.member_seconds)
        res[label] = {"wall_s": round(wall, 2), "members": n,
                      "overhead_per_member_s": round((wall - own) / n, 4),
                      "member_run_s_mean": round(own / n, 4)}
        print(f"  {label:<24} {wall:8.2f} s for {n} members: "
              f"{(wall - own) / n:.3f} s overhead per member", flush=True)
    return res


def _peak_rss_mb(cmd: list[str]) -> tuple[float, float]:
    import psutil

    t0 = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    top = psutil.Process(proc.pid)
    peak = 0.0
    while proc.poll() is None:
        try:
            procs = [top, *top.children(recursive=True)]
            rss = sum(p.memory_info().rss for p in procs if p.is_running())
            peak = max(peak, rss / 1e6)
        except psutil.Error:
            pass
        time.sleep(0.1)
    if proc.returncode != 0:
        raise RuntimeError(f"{cmd} exited with {proc.returncode}")
    return peak, time.perf_counter() - t0


def bench_memory(tmp: Path) -> dict:
    scenario = demo_copy(tmp / "short", years=0.5)
    exe = str(Path(sys.executable).with_name("preyscape"))
    res = {}
    for n in (8, 64):
        out = tmp / f"mem-{n}"
        peak, wall = _peak_rss_mb([exe, "ensemble", str(scenario), "--members", str(n),
                                   "--workers", "2", "--out", str(out), "--quiet"])
        res[f"members_{n}"] = {"peak_rss_mb": round(peak), "wall_s": round(wall, 1)}
        print(f"  {n:3d} members: peak {peak:7.0f} MB (client and workers), {wall:.0f} s",
              flush=True)
    res["ratio_64_to_8"] = round(res["members_64"]["peak_rss_mb"]
                                 / res["members_8"]["peak_rss_mb"], 3)
    return res


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--only", default="rate,overhead,memory",
                   help="comma-separated subset of: rate, overhead, memory")
    p.add_argument("--members", type=int, default=4, help="members per variant for 'rate'")
    p.add_argument("--json", type=Path, default=HERE / "ensemble_results.json")
    args = p.parse_args(argv)
    import platform

    res = {"machine": {"cores": os.cpu_count(), "python": platform.python_version(),
                       "load_average_at_start": os.getloadavg()}}
    with tempfile.TemporaryDirectory(prefix="preyscape-ensemble-bench-") as d:
        tmp = Path(d)
        for name in args.only.split(","):
            print(f"{name}:", flush=True)
            res[name] = {"rate": lambda: bench_rate(args.members, tmp),
                         "overhead": lambda: bench_overhead(tmp),
                         "memory": lambda: bench_memory(tmp)}[name]()
    res["machine"]["load_average_at_end"] = os.getloadavg()
    old = json.loads(args.json.read_text()) if args.json.is_file() else {}
    for name in args.only.split(","):  # a subset keeps the other benchmarks' numbers
        old[name] = {**res[name], "machine": res["machine"]}
    args.json.write_text(json.dumps(old, indent=2) + "\n")
    print(f"written: {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
