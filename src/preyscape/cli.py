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

    d = sub.add_parser("demo", help="run, compare and report the bundled Veldrun Moor scenario")
    d.add_argument("--out", type=Path,
                   help="folder to create (default: preyscape-demo, or the next free "
                   "preyscape-demo-N)")
    d.add_argument("--overwrite", action="store_true", help="replace an existing --out folder")
    d.add_argument("--quiet", action="store_true", help="no progress bar or summary")

    def out_opts(q, default: str) -> None:
        q.add_argument("--out", type=Path, help=f"folder to create (default: {default})")
        q.add_argument("--overwrite", action="store_true", help="replace an existing --out")

    m = sub.add_parser("compare", help="map where run B differs from run A")
    m.add_argument("run_a", type=Path, metavar="RUN_A", help="reference run folder")
    m.add_argument("run_b", type=Path, metavar="RUN_B", help="run folder to compare with it")
    out_opts(m, "compare-<A>-<B> beside RUN_B")
    m.add_argument("--threshold", type=float, default=None,
                   help="relative change of time-mean density that counts as a change "
                   "(default 0.10 = 10%%, or the scenario's analysis.change_threshold)")
    m.add_argument("--presence", type=float, default=None,
                   help="density counted as present, animals per km² (default 1)")
    m.add_argument("--zones", type=Path,
                   help="zones for the table: GeoJSON polygons or a class raster (default: "
                   "the habitat classes)")
    m.add_argument("--zone-field", help="polygon property naming the zones (default 'name')")

    h = sub.add_parser("hotspots", help="Getis–Ord Gi* hotspots of both species")
    h.add_argument("run", type=Path, metavar="RUN", help="run folder")
    out_opts(h, "RUN/hotspots")
    h.add_argument("--distance", type=float,
                   help="neighbourhood radius in metres (default: the scenario's "
                   "analysis.hotspot_distance, else a size from the grid)")
    h.add_argument("--fdr", type=float, default=None,
                   help="false discovery rate for significance (default 0.05)")

    w = sub.add_parser("waves", help="arrival times, front speeds and periodic waves")
    w.add_argument("run", type=Path, metavar="RUN", help="run folder")
    out_opts(w, "RUN/waves")
    w.add_argument("--transects", type=Path,
                   help="GeoJSON lines to measure fronts along (default: the scenario's "
                   "analysis.transects, else one drawn from the arrival map)")
    w.add_argument("--prey-threshold", type=float, help="prey arrival density, per km²")
    w.add_argument("--predator-threshold", type=float,
                   help="predator arrival density, per km²")

    e = sub.add_parser("effects", help="refuge, corridor and transect effects")
    e.add_argument("run", type=Path, metavar="RUN", help="run folder")
    out_opts(e, "RUN/effects")
    e.add_argument("--without", type=Path, metavar="RUN_WITHOUT",
                   help="the run without the refuges (default: found beside RUN if there)")
    e.add_argument("--targets", type=Path, help="GeoJSON polygons of target patches")
    e.add_argument("--transects", type=Path, help="GeoJSON lines to count animals across")

    rp = sub.add_parser("report", help="one self-contained HTML report of a run")
    rp.add_argument("run", type=Path, metavar="RUN", help="run folder")
    rp.add_argument("others", type=Path, nargs="*", metavar="RUN_B",
                    help="runs to compare with RUN (same grid)")
    rp.add_argument("--out", type=Path, help="HTML file to write (default: RUN/report.html)")
    rp.add_argument("--overwrite", action="store_true", help="replace an existing report")
    rp.add_argument("--no-animation", action="store_true", help="leave out the animated GIF")
    from preyscape import cli_landscape  # command groups in the new shape (handler=...)

    cli_landscape.add_parsers(sub)
    return p


def _transects(path: Path | None, run: Path) -> list[dict] | None:
    """Transects from a GeoJSON file of lines, in the run grid's CRS."""
    if path is None:
        return None
    from preyscape.landscape.measures import read_geometry
    from preyscape.store import open_run

    grid = open_run(run).grid
    out = []
    for k, shape in enumerate(read_geometry(path, grid, source=str(path))):
        g = shape.geometry
        lines = list(g.geoms) if hasattr(g, "geoms") else [g]
        for j, line in enumerate(lines):
            if line.geom_type != "LineString":
                continue
            name = str(shape.properties.get("name") or f"transect {k + 1}")
            if len(lines) > 1:
                name += f" {j + 1}"
            out.append({"name": name, "points": [list(p) for p in line.coords]})
    if not out:
        from preyscape.errors import InputError

        raise InputError("no LineString in the file; transects are lines", str(path))
    return out


def _analysis_settings(run: Path) -> dict:
    from preyscape.store import open_run

    return open_run(run).info.get("analysis") or {}


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
    for m in d.get("variant_measures", []):
        size = (f"{m['cells']} cells, {m['area_km2']:.3g} km²" if "cells" in m else "")
        if "faces" in m:
            size += (", " if size else "") + f"{m['faces']} cell faces"
        lines.append(f"measure             {m['kind']} '{m['name']}': {size} "
                     f"(in variants {', '.join(m['variants'])})")
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
        if getattr(args, "handler", None):
            return args.handler(args)
        if args.command == "check":
            from preyscape.pipeline import check_variant_measures, derived, prepare
            from preyscape.scenario import load_scenario

            sc = load_scenario(args.scenario)
            d = derived(prepare(sc))
            d["variant_measures"] = check_variant_measures(
                [sc.for_variant(n) for n in sc.variant_names()[1:]])
            if args.json:
                print(json.dumps(d, indent=2, default=str))
            else:
                _print_check(args.scenario, d)
            return 0
        if args.command in ("compare", "hotspots", "waves", "effects", "report"):
            return _analyse(args)

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
            from preyscape.demo import run_demo

            out = _demo_out(args.out)
            done = run_demo(out, overwrite=args.overwrite,
                            progress=False if args.quiet else None,
                            log=None if args.quiet else print)
            if not args.quiet:
                for folder in done["runs"].values():
                    _summary(folder)
                for name, folder in done["comparisons"].items():
                    print(f"comparison baseline → {name}: {folder}")
            print(f"report: {done['report']}")
            if not args.quiet:
                print(f"  {CAUTION}")
            return 0
    except InputError as exc:
        print(f"preyscape: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("preyscape: interrupted; no run folder was written", file=sys.stderr)
        return 130


def _analyse(args) -> int:
    """The analysis commands: compare, hotspots, waves, effects, report."""
    if args.command == "compare":
        from preyscape.products.compare import write_comparison

        st = _analysis_settings(args.run_a)
        out = args.out or args.run_b.parent / f"compare-{args.run_a.name}-{args.run_b.name}"
        rec = write_comparison(
            args.run_a, args.run_b, out,
            args.threshold if args.threshold is not None else st.get("change_threshold", 0.1),
            args.presence if args.presence is not None else st.get("presence", 1.0),
            args.zones, args.zone_field, args.overwrite)
        print(f"comparison: {rec['folder']}")
        for k, v in rec["changed_area_km2"].items():
            print(f"  {k:<16} {rec['changed_cells'][k]:>9} cells  {v:10.4g} km²")
    elif args.command == "hotspots":
        from preyscape.products.hotspots import write_hotspots

        st = _analysis_settings(args.run)
        rec = write_hotspots(args.run, args.out or args.run / "hotspots",
                             args.distance if args.distance is not None
                             else st.get("hotspot_distance"),
                             args.fdr if args.fdr is not None else st.get("significance", 0.05),
                             args.overwrite)
        print(f"hotspots (distance band {rec['band_m']:g} m): {args.out or args.run / 'hotspots'}")
        for sp, d in rec["species"].items():
            print(f"  {sp:<9} {d['hot_cells']} hotspot cells ({d['hot_area_km2']:.4g} km²), "
                  f"{100 * d['hot_share_of_animals']:.1f} % of the animals")
    elif args.command == "waves":
        from preyscape.products.waves import write_waves
        from preyscape.store import open_run

        info = open_run(args.run).info
        st = info.get("analysis") or {}
        pr = info.get("predictions") or {}
        tr = _transects(args.transects, args.run) or st.get("transects") or None
        thr = {"prey": args.prey_threshold if args.prey_threshold is not None
               else st.get("prey_threshold"),
               "predator": args.predator_threshold if args.predator_threshold is not None
               else st.get("predator_threshold")}
        thr = {k: v for k, v in thr.items() if v is not None} or None
        rec = write_waves(args.run, args.out or args.run / "waves", tr, thr,
                          {"prey": pr.get("prey_front_speed"),
                           "predator": pr.get("predator_front_speed")}, args.overwrite)
        print(f"waves: {rec['out']}")
        settled = {sp for sp, a in rec.get("arrival", {}).items()
                   if (a or {}).get("present_at_start_fraction", 0) > 0.5}
        for sp in sorted(settled):
            print(f"  {sp}: present on most of the landscape from the start, so no front")
        for f in rec["fronts"]:
            if f["species"] in settled:
                continue
            print(f"  {f['transect']}, {f['species']}: front {_fmt(f['speed_km_yr'], 'km/yr')}"
                  f" (predicted minimal {_fmt(f['predicted_km_yr'], 'km/yr')})")
    elif args.command == "effects":
        from preyscape.products.effects import write_effects
        from preyscape.products.run_report import find_without_refuge
        from preyscape.store import open_run

        without = args.without or find_without_refuge(args.run, open_run(args.run).info)
        rec = write_effects(args.run, args.out or args.run / "effects", without,
                            args.targets, _transects(args.transects, args.run),
                            overwrite=args.overwrite)
        print(f"effects: {rec['folder']}")
        if without is not None:
            print(f"  compared with the run without refuges: {without}")
        elif rec["refuges"]:
            print("  no run without the refuges was found or given (--without): the decay "
                  "length below is that of the time-mean prey profile, not the refuge's own "
                  "effect")
        for r in rec["refuges"]:
            print(f"  refuge {r['name']}: spill-over decay length "
                  f"{_fmt(r.get('decay_length_km'), 'km')}")
        for t in rec["targets"]:
            print(f"  target {t['name']}: predators colonised in year "
                  f"{_fmt(t.get('predator_colonised_year'))}")
    else:
        from preyscape.products.run_report import write_report

        path = write_report(args.run, args.out, args.others, args.overwrite,
                            animate=not args.no_animation)
        print(f"report: {path}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
