"""``preyscape ensemble``: members across parameter ranges, on dask, and how sure each answer is."""

from __future__ import annotations

import argparse
from pathlib import Path


def _positive_int(text: str) -> int:
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, not {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, not {v}")
    return v


def add_parsers(sub) -> None:
    """Register ``ensemble``."""
    e = sub.add_parser(
        "ensemble", help="run the scenario's [uncertainty] ensemble (baseline and variants) "
        "on a dask cluster and summarise how sure each answer is",
        description="Run every member of the baseline and of the chosen variants, drawing "
        "the parameters of the scenario's [uncertainty] section, on a local dask cluster "
        "(or an existing scheduler), then write the summaries across members. Running the "
        "same command again continues an interrupted ensemble.")
    e.add_argument("scenario", type=Path, help="scenario file (TOML) with an [uncertainty] "
                   "section")
    e.add_argument("--members", type=_positive_int, metavar="N",
                   help="members per variant (default: uncertainty.members)")
    e.add_argument("--out", type=Path, help="ensemble folder (default: ensembles/<scenario "
                   "name>); an unfinished ensemble of the same settings there is continued")
    e.add_argument("--scheduler", metavar="ADDRESS",
                   help="address of a running dask scheduler, such as tcp://127.0.0.1:8786 "
                   "(default: start a local cluster)")
    e.add_argument("--workers", type=_positive_int, metavar="N",
                   help="worker processes of the local cluster (default: one per core, "
                   "fewer if memory is short)")
    e.add_argument("--variant", action="append", metavar="NAME",
                   help="run this variant besides the baseline (repeat for several; "
                   "default: uncertainty.variants, else every variant)")
    e.add_argument("--in-process", action="store_true",
                   help="run the members one after another in this process, without dask "
                   "(the kernels use every core)")
    e.add_argument("--dashboard", action="store_true",
                   help="serve the local cluster's dashboard on 127.0.0.1:8787")
    e.add_argument("--rank-by", default="prey_total_change", metavar="COLUMN",
                   help="ranking column of the alternatives, highest first (default: "
                   "prey_total_change; also predator_total_change, <species>_area_gained_km2, "
                   "...)")
    e.add_argument("--no-maps", action="store_true", help="write the GeoTIFFs and tables "
                   "but no PNG maps or figures")
    e.add_argument("--overwrite", action="store_true",
                   help="replace an existing folder instead of continuing it")
    e.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    e.set_defaults(handler=ensemble)


def ensemble(args) -> int:
    """Run (or continue) an ensemble and print what it found."""
    from preyscape.cautions import CAUTION
    from preyscape.ensemble.engine import run_ensemble
    from preyscape.ensemble.summaries import RANKING_COLUMNS
    from preyscape.errors import InputError

    cols = [f"{sp}_{c}" for sp in ("prey", "predator") for c in RANKING_COLUMNS]
    if args.rank_by not in cols:
        raise InputError(f"must be one of {', '.join(cols)}, not {args.rank_by!r}",
                         "--rank-by")
    if args.in_process and args.scheduler:
        raise InputError("give either --in-process or --scheduler, not both", "--in-process")
    out = args.out or Path("ensembles") / args.scenario.stem
    run = run_ensemble(args.scenario, out, members=args.members, variants=args.variant,
                       scheduler=args.scheduler, workers=args.workers,
                       in_process=args.in_process, dashboard=args.dashboard,
                       overwrite=args.overwrite, progress=False if args.quiet else None,
                       maps=not args.no_maps, rank_by=args.rank_by)
    for f in run.failures:
        print(f"member {f.index} of {f.variant} failed: {f.message}")
    if run.lost:
        print(f"{len(run.lost)} members could not run (their workers died repeatedly); run "
              "the same command again to retry them:")
        print("\n".join(f"  {x}" for x in run.lost[:10]))
        return 1
    if not args.quiet:
        print(f"ensemble folder: {out} ({run.ran} members run, {run.skipped} already stored; "
              f"{run.where or 'nothing to run'}; {run.seconds:.1f} s)")
        if run.summary is not None:
            print("\n".join(run.summary.summary_lines()))
        print(f"  {CAUTION}")
    return 0
