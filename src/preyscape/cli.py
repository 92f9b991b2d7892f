"""The ``preyscape`` command line: a thin shell over the Python API.

Heavy libraries are imported inside the commands so ``--help`` is instant.
Bad input prints one message and exits with status 2.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

CAUTION = (
    "A model is not a field survey. Fences and corridors affect animals and people; "
    "defer to local regulations, the responsible wildlife authority and licensed "
    "professionals."
)


def _parser() -> argparse.ArgumentParser:
    from preyscape import __version__

    p = argparse.ArgumentParser(
        prog="preyscape",
        description="Simulate predator and prey populations moving across habitat rasters.",
        epilog=CAUTION,
    )
    p.add_argument("--version", action="version", version=f"preyscape {__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="COMMAND")

    r = sub.add_parser("run", help="run a scenario (baseline and variants) into run folders")
    r.add_argument("scenario", type=Path, help="scenario file (TOML)")
    r.add_argument("--out", type=Path,
                   help="run folder to create (default: runs/<scenario name>); with variants, "
                   "the folder that holds one run folder per variant")
    r.add_argument("--variant", action="append", metavar="NAME",
                   help="run only this variant ('baseline' for the scenario without variants); "
                   "repeat for several")
    r.add_argument("--overwrite", action="store_true", help="replace an existing run folder")
    r.add_argument("--quiet", action="store_true", help="no progress bar or summary")

    c = sub.add_parser("check", help="validate a scenario and print what it implies")
    c.add_argument("scenario", type=Path, help="scenario file (TOML)")
    c.add_argument("--json", action="store_true", help="print the numbers as JSON")

    d = sub.add_parser("demo", help="run the bundled Veldrun Moor scenario")
    d.add_argument("--out", type=Path,
                   help="run folder to create (default: preyscape-demo, or the next free "
                   "preyscape-demo-N)")
    d.add_argument("--overwrite", action="store_true", help="replace an existing --out folder")
    d.add_argument("--quiet", action="store_true", help="no progress bar or summary")
    return p


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "none" if x is None else ("unbounded" if x == math.inf else "n/a")
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _print_check(path: Path, d: dict) -> None:
    g = d["grid"]
    eq = d["equilibrium"]
    b = d["best_habitat"]
    lines = [
        f"scenario            {path}",
        f"grid                {g['rows']} rows x {g['cols']} cols, cell {g['cell_size_m'][0]:g}"
        f" x {g['cell_size_m'][1]:g} m, extent {g['extent_km'][0]:.3g} x "
        f"{g['extent_km'][1]:.3g} km",
        f"cells with data     {g['cells_with_data']}",
        f"time step           {_fmt(d['step_years'], 'yr')} ({d['steps']} steps, scheme "
        f"{d['scheme']})",
        "movement per step   prey D·dt/h² = " + _fmt(d["movement_per_step"]["prey"])
        + ", predator = " + _fmt(d["movement_per_step"]["predator"]),
        f"best habitat        r = {_fmt(b['r'], '/yr')}, K = {_fmt(b['K'], 'per km²')}, "
        f"m = {_fmt(b['m'], '/yr')}",
        f"equilibrium         prey {_fmt(eq[0], 'per km²')}, predator {_fmt(eq[1], 'per km²')}"
        + ("" if d["stable"] is None else (" (stable)" if d["stable"] else " (unstable: cycles)")),
        f"local period        {_fmt(d['period_years'], 'yr')} (Lotka–Volterra small-amplitude "
        f"2π/√(rm) = {_fmt(d['lv_period_years'], 'yr')})",
    ]
    if d["hopf_capacity"] is not None:
        lines.append(f"Hopf capacity       K_H = {_fmt(d['hopf_capacity'], 'per km²')} "
                     "(oscillations where K > K_H; Rosenzweig 1971)")
    cp, cq = d["critical_patch_prey"], d["critical_patch_predator"]
    lines += [
        f"prey front speed    {_fmt(d['prey_front_speed'], 'km/yr')} (Fisher–KPP 2√(rD))",
        f"predator front      {_fmt(d['predator_front_speed'], 'km/yr')} into prey at capacity "
        "(Dunbar 1983)",
        f"critical patch      prey: strip {_fmt(cp['strip_width'], 'km')}, square side "
        f"{_fmt(cp['square_side'], 'km')}, disc radius {_fmt(cp['disc_radius'], 'km')}",
        f"                    predator (prey at K): strip {_fmt(cq['strip_width'], 'km')}, "
        f"square side {_fmt(cq['square_side'], 'km')}, disc radius "
        f"{_fmt(cq['disc_radius'], 'km')}  (Skellam 1951; lethal surroundings)",
        f"memory estimate     {_fmt(d['memory_mb'], 'MB', 3)}",
        f"results on disk     {d['snapshots']} snapshots, at most "
        f"{_fmt(d['disk_mb'], 'MB', 3)} before compression",
    ]
    for m in d.get("measures", []):
        size = (f"{m['cells']} cells, {m['area_km2']:.3g} km²" if "cells" in m else "")
        if "faces" in m:
            size += (", " if size else "") + f"{m['faces']} cell faces"
        when = f"years {m['start_year']:g}–{'end' if m['end_year'] is None else m['end_year']}"
        lines.append(f"measure             {m['kind']} '{m['name']}': {size}; {when}")
    for v in d.get("variants", []):
        parts = [f"+{a}" for a in v["add"]] + [f"-{r}" for r in v["remove"]]
        parts += [f"{k} = {x}" for k, x in v["set"].items()]
        lines.append(f"variant             {v['name']}: {', '.join(parts) or 'as baseline'}")
    print("\n".join(lines))


def _summary(folder: Path) -> None:
    info = json.loads((folder / "run.json").read_text())
    print(f"run folder: {folder}")
    print(f"  {info['steps']} steps of {info['step_years']:.4g} yr in {info['wall_time_s']:.1f} s")
    if info.get("variant", "baseline") != "baseline" or info.get("measures"):
        ms = ", ".join(m["name"] for m in info.get("measures", [])) or "none"
        print(f"  variant {info.get('variant', 'baseline')}; measures: {ms}")
    print("  results.nc, summary/*.tif, maps/*.png, run.json")


def _demo_out(out: Path | None) -> Path:
    if out is not None:
        return out
    base = Path("preyscape-demo")
    if not base.exists():
        return base
    k = 2
    while Path(f"preyscape-demo-{k}").exists():
        k += 1
    return Path(f"preyscape-demo-{k}")


def main(argv: list[str] | None = None) -> int:
    """Entry point; returns the exit status."""
    args = _parser().parse_args(argv)
    from preyscape.errors import InputError

    try:
        if args.command == "check":
            from preyscape.pipeline import derived, prepare
            from preyscape.scenario import load_scenario

            d = derived(prepare(load_scenario(args.scenario)))
            if args.json:
                print(json.dumps(d, indent=2, default=str))
            else:
                _print_check(args.scenario, d)
            return 0
        from preyscape.pipeline import simulate

        if args.command == "run":
            from preyscape.pipeline import simulate_variants

            out = args.out or Path("runs") / args.scenario.stem
            progress = False if args.quiet else None
            folders = simulate_variants(args.scenario, out, args.variant,
                                        overwrite=args.overwrite, progress=progress)
            if not args.quiet:
                for folder in folders.values():
                    _summary(folder)
                print(f"  {CAUTION}")
            return 0
        else:  # demo
            from preyscape.demo import demo_scenario

            out = _demo_out(args.out)
            folder = simulate(demo_scenario(), out, overwrite=args.overwrite,
                              progress=False if args.quiet else None)
        if not args.quiet:
            _summary(folder)
            print(f"  {CAUTION}")
        return 0
    except InputError as exc:
        print(f"preyscape: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("preyscape: interrupted; no run folder was written", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
