"""``preyscape run`` and ``preyscape demo``."""

from __future__ import annotations

import json
from pathlib import Path


def add_parsers(sub) -> None:
    """Register ``run`` and ``demo``."""
    r = sub.add_parser("run", help="run a scenario (baseline and variants) into run folders")
    r.add_argument("scenario", type=Path, help="scenario file (TOML)")
    r.add_argument("--out", type=Path,
                   help="run folder to create (default: runs/<scenario name>); with variants, "
                   "the folder that holds one run folder per variant")
    r.add_argument("--variant", action="append", metavar="NAME",
                   help="run only this variant ('baseline' for the scenario without variants); "
                   "repeat for several")
    r.add_argument("--overwrite", action="store_true",
                   help="replace existing run folders (files in them are deleted) and discard "
                   "interrupted runs kept for them")
    r.add_argument("--resume", action="store_true",
                   help="continue an interrupted run: keep the variants finished before, "
                   "continue the one that was stopped, run the rest")
    r.add_argument("--allow-large", action="store_true",
                   help="run even when the memory estimate exceeds the available memory or "
                   "the run needs more than a million steps")
    r.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    r.set_defaults(handler=run)

    d = sub.add_parser("demo", help="run, compare and report the bundled Veldrun Moor scenario")
    d.add_argument("--out", type=Path,
                   help="folder to create (default: preyscape-demo, or the next free "
                   "preyscape-demo-N)")
    d.add_argument("--overwrite", action="store_true", help="replace an existing --out folder")
    d.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    d.set_defaults(handler=demo)


def summary(folder: Path) -> list[str]:
    """A few lines about a finished run folder."""
    info = json.loads((folder / "run.json").read_text())
    lines = [f"run folder: {folder}",
             f"  {info['steps']} steps of {info['step_years']:.4g} yr in "
             f"{info['wall_time_s']:.1f} s"]
    if info.get("variant", "baseline") != "baseline" or info.get("measures"):
        ms = ", ".join(m["name"] for m in info.get("measures", [])) or "none"
        lines.append(f"  variant {info.get('variant', 'baseline')}; measures: {ms}")
    for sp, tot in (info.get("totals_animals") or {}).items():
        lines.append(f"  {sp}: {tot['start']:.4g} animals at the start, {tot['end']:.4g} at the "
                     f"end (t = {info['years']:g} yr)")
    if info.get("species_present") == ["prey"]:
        lines.append("  no predator in this scenario")
    lines.append("  results.nc, summary/*.tif, maps/*.png, run.json")
    return lines


def resume_command(args, out: Path) -> str:
    """The command line that continues an interrupted ``run``."""
    import shlex

    words = ["preyscape", "run", str(args.scenario), "--out", str(out)]
    for v in args.variant or ():
        words += ["--variant", v]
    words += ["--allow-large"] if args.allow_large else []
    return shlex.join(words + ["--resume"])


def run(args) -> int:
    """Run a scenario's baseline and variants."""
    from preyscape.cautions import CAUTION
    from preyscape.runfolder import RunInterrupted, simulate_variants

    out = args.out or Path("runs") / args.scenario.stem
    progress = False if args.quiet else None
    try:
        folders = simulate_variants(args.scenario, out, args.variant, overwrite=args.overwrite,
                                    progress=progress, resume=args.resume,
                                    allow_large=args.allow_large)
    except RunInterrupted as exc:
        if not exc.resumable:
            raise
        raise RunInterrupted(f"{exc.args[0]}\n  continue with: {resume_command(args, out)}",
                             exc.kept, True) from None
    if not args.quiet:
        for folder in folders.values():
            print("\n".join(summary(folder)))
        print(f"  {CAUTION}")
    return 0


def demo_out(out: Path | None) -> Path:
    """``--out``, else ``preyscape-demo`` or the next free ``preyscape-demo-N``."""
    if out is not None:
        return out
    base = Path("preyscape-demo")
    if not base.exists():
        return base
    k = 2
    while Path(f"preyscape-demo-{k}").exists():
        k += 1
    return Path(f"preyscape-demo-{k}")


def demo(args) -> int:
    """Run, compare and report the bundled scenario."""
    from preyscape.cautions import CAUTION
    from preyscape.demo import run_demo

    try:
        done = run_demo(demo_out(args.out), overwrite=args.overwrite,
                        progress=False if args.quiet else None,
                        log=None if args.quiet else print)
    except KeyboardInterrupt:  # the demo keeps nothing, not even a run to resume
        raise KeyboardInterrupt from None
    if not args.quiet:
        for folder in done["runs"].values():
            print("\n".join(summary(folder)))
        for name, folder in done["comparisons"].items():
            print(f"comparison baseline → {name}: {folder}")
    print(f"report: {done['report']}")
    if not args.quiet:
        print(f"  {CAUTION}")
    return 0
