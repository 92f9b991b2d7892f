"""Commands for landscapes: ``preyscape landscape ...`` and ``preyscape starter``.

A command group in the shape every group of the command line has:
:func:`add_parsers` registers the sub-commands on an argparse subparsers
object and sets ``handler=<function(args) -> int>`` on each; the main entry
dispatches to ``args.handler(args)`` and turns
:class:`~preyscape.errors.InputError` into one message and exit status 2.
Heavy libraries are imported inside the handlers so ``preyscape --help``
stays fast.
"""

from __future__ import annotations

import argparse
import json
import shlex
from pathlib import Path

from preyscape.cautions import CAUTION

__all__ = ["add_parsers"]


_VALUES_HELP = ("what the raster holds: class codes or suitability 0-1 (default: integer "
                "rasters hold classes; fractional values in [0, 1] are suitability)")


def add_parsers(sub) -> None:
    """Register ``landscape`` (with its sub-commands) and ``starter`` on ``sub``.

    Parameters
    ----------
    sub : argparse._SubParsersAction
        The subparsers object of the main parser.
    """
    land = sub.add_parser(
        "landscape",
        help="make, edit, measure and reproject habitat rasters",
        description="Make neutral landscapes, paint corridors, roads and lakes, print "
                    "landscape metrics and reproject rasters into metres. Every raster "
                    "written gets its metrics beside it (NAME.metrics.json).",
    )
    lsub = land.add_subparsers(dest="landscape_command", required=True, metavar="ACTION")

    # --- make ---------------------------------------------------------------
    mk = lsub.add_parser(
        "make", help="generate a neutral landscape (random, fractal or clusters)",
        description="Generate a neutral landscape and write it as a GeoTIFF, with its "
                    "metrics beside it. Classes are cut at exactly the requested area "
                    "fractions (to the nearest cell); class 1 is the best habitat.",
        epilog="patterns: random = independent cells (site percolation); fractal = spectral "
               "synthesis of a fractional Brownian surface, Hurst exponent H (Saupe 1988); "
               "clusters = modified random clusters (Saura & Martínez-Millán 2000, Landscape "
               "Ecology 15:661). A made-up landscape is not a survey of any place.")
    mk.add_argument("pattern", choices=("random", "fractal", "clusters"),
                    help="the kind of pattern")
    mk.add_argument("out", type=Path, metavar="OUT", help="GeoTIFF to write")
    mk.add_argument("--rows", type=int, default=200, help="rows (default 200)")
    mk.add_argument("--cols", type=int, default=200, help="columns (default 200)")
    mk.add_argument("--cell-size", type=float, default=50.0, metavar="M",
                    help="cell size in metres (default 50)")
    mk.add_argument("--seed", type=int, default=0,
                    help="random seed (default 0); the same seed gives the same raster")
    mk.add_argument("--crs", default="EPSG:3035",
                    help="projected CRS in metres (default EPSG:3035, ETRS89 / LAEA Europe: "
                         "equal-area)")
    mk.add_argument("--corner", metavar="X,Y",
                    help="south-west corner in metres of the CRS (default 4321000,3210000 "
                         "with EPSG:3035, the projection's origin; else 0,0)")
    kind = mk.add_mutually_exclusive_group()
    kind.add_argument("--habitat", type=float, metavar="SHARE",
                      help="share of habitat (class 1); the rest is matrix (class 2); "
                           "default 0.5")
    kind.add_argument("--classes", metavar="F1,F2,...",
                      help="area fractions of classes 1, 2, ... (class 1 best), adding up to 1")
    kind.add_argument("--suitability", action="store_true",
                      help="write continuous suitability 0-1 instead of classes")
    mk.add_argument("--hurst", type=float, default=0.5, metavar="H",
                    help="fractal: Hurst exponent 0-1, from rough (0) to smooth (1); default "
                         "0.5")
    mk.add_argument("--marked", type=float, default=0.45, metavar="P",
                    help="clusters: share of cells marked in the first step, 0-1; near "
                         "0.59 patches are large and irregular, around 0.2-0.3 the map is "
                         "most fragmented, small values give compact blobs; default 0.45")
    mk.add_argument("--overwrite", action="store_true", help="replace existing files")
    mk.set_defaults(handler=_make)

    # --- metrics ------------------------------------------------------------
    me = lsub.add_parser(
        "metrics", help="print landscape metrics and store them beside the raster",
        description="Per class: share, number of patches (4-neighbour), largest and mean "
                    "patch area, edge density, and whether a patch spans the map. Stored as "
                    "NAME.metrics.json beside the raster.")
    me.add_argument("raster", type=Path, metavar="RASTER", help="habitat raster")
    me.add_argument("--values", choices=("classes", "suitability"), help=_VALUES_HELP)
    me.add_argument("--threshold", type=float, default=0.5, metavar="Q",
                    help="suitability rasters: cells with suitability >= Q count as habitat "
                         "(default 0.5)")
    me.add_argument("--json", action="store_true", help="print the metrics as JSON")
    me.add_argument("--overwrite", action="store_true",
                    help="replace an existing metrics file")
    me.set_defaults(handler=_metrics)

    # --- edits --------------------------------------------------------------
    for name, what, default in (
        ("corridor", "paint a corridor of habitat along a line",
         "class 1, or suitability 1.0"),
        ("road", "cut a road through the map along a line",
         "a new class code (one above the largest), or suitability 0.0"),
    ):
        ed = lsub.add_parser(
            name, help=what,
            description=f"{what[0].upper()}{what[1:]}: cells whose centre lies within half "
                        "the width of the line (or inside a polygon) get a new value. Write "
                        "the edited raster (--out), the line as GeoJSON for a scenario's "
                        "[[measures]] (--measure), or both.",
            epilog=CAUTION)
        _shape_options(ed, point=False)
        ed.add_argument("--width", type=float, metavar="M", help="width in metres")
        ed.add_argument("--value", type=float,
                        help=f"class code or suitability to set (default: {default})")
        ed.add_argument("--out", type=Path, help="edited GeoTIFF to write")
        ed.add_argument("--measure", type=Path, metavar="GEOJSON",
                        help="GeoJSON of the line to write, for a scenario's [[measures]]")
        ed.add_argument("--name", help=f"name of the measure (default '{name}')")
        ed.add_argument("--values", choices=("classes", "suitability"), help=_VALUES_HELP)
        ed.add_argument("--overwrite", action="store_true", help="replace existing files")
        ed.set_defaults(handler=_edit, edit=name)

    lk = lsub.add_parser(
        "lake", help="add a lake (no-data cells)",
        description="Turn the cells of a disc (--at X,Y --radius M) or of polygons "
                    "(--shape FILE) into no-data, and write the edited raster.")
    _shape_options(lk, point=True)
    lk.add_argument("--radius", type=float, metavar="M", help="radius in metres (with --at)")
    lk.add_argument("--out", type=Path, required=True, help="edited GeoTIFF to write")
    lk.add_argument("--values", choices=("classes", "suitability"), help=_VALUES_HELP)
    lk.add_argument("--overwrite", action="store_true", help="replace existing files")
    lk.set_defaults(handler=_edit, edit="lake", width=None, value=None, measure=None,
                    name=None)

    # --- reproject ----------------------------------------------------------
    rp = lsub.add_parser(
        "reproject", help="reproject a raster into a projected CRS in metres",
        description="Warp a habitat raster (in degrees, feet, rotated, or without a CRS) onto "
                    "a north-up grid in a projected CRS in metres. Classes: nearest cell, or "
                    "the majority when the new cells are larger. Suitability: bilinear, or "
                    "the area-weighted average when the new cells are larger.")
    rp.add_argument("raster", type=Path, metavar="RASTER", help="raster to reproject")
    rp.add_argument("out", type=Path, metavar="OUT", help="GeoTIFF to write")
    rp.add_argument("--crs", help="target CRS, projected in metres (default: the UTM zone of "
                                  "the raster's centre, or its own CRS if already in metres)")
    rp.add_argument("--cell-size", type=float, metavar="M",
                    help="cell size in metres (default: about the raster's own resolution)")
    rp.add_argument("--source-crs", metavar="CRS",
                    help="the CRS of the raster's coordinates, if the file has none "
                         "(e.g. EPSG:4326 for longitude/latitude)")
    rp.add_argument("--values", choices=("classes", "suitability"), help=_VALUES_HELP)
    rp.add_argument("--overwrite", action="store_true", help="replace existing files")
    rp.set_defaults(handler=_reproject)

    # --- starter ------------------------------------------------------------
    st = sub.add_parser(
        "starter", help="write a starter scenario for a habitat raster",
        description="List the raster's classes and write a commented scenario with every "
                    "required key, one class row per class and the parameters of a "
                    "predator-prey pair (with ranges and sources). It runs as written.",
        epilog=CAUTION)
    st.add_argument("raster", type=Path, metavar="RASTER", help="habitat raster")
    st.add_argument("--out", type=Path,
                    help="scenario file to write (default: RASTER with .toml)")
    st.add_argument("--pair", default="vole-weasel",
                    choices=("vole-weasel", "hare-lynx", "aphid-ladybird"),
                    help="parameter set: small mammals (default), larger mammals or "
                         "invertebrates")
    st.add_argument("--values", choices=("classes", "suitability"), help=_VALUES_HELP)
    st.add_argument("--prey-only", action="store_true",
                    help="prey alone: no predator; prey released near the centre on empty land")
    st.add_argument("--edge", choices=("closed", "hostile"), default="closed",
                    help="what lies beyond the map edge: closed (default) or hostile (lethal)")
    st.add_argument("--overwrite", action="store_true", help="replace an existing file")
    st.set_defaults(handler=_starter)


def _shape_options(p: argparse.ArgumentParser, point: bool) -> None:
    p.add_argument("raster", type=Path, metavar="RASTER", help="habitat raster to edit")
    if point:
        p.add_argument("--at", metavar="X,Y", help="centre of the lake, metres")
    else:
        p.add_argument("--line", nargs="+", metavar="X,Y",
                       help="points of the line, metres in the raster's CRS")
    p.add_argument("--shape", type=Path, metavar="GEOJSON",
                   help="the shape as a GeoJSON file instead (lines or polygons)")


# --- handlers -----------------------------------------------------------------
def _provenance(args) -> str:
    """The generating command, spelt out with every setting, for the raster's tags."""
    parts = ["preyscape landscape make", args.pattern, Path(args.out).name,
             f"--rows {args.rows}", f"--cols {args.cols}", f"--cell-size {args.cell_size:g}",
             f"--seed {args.seed}", f"--crs {args.crs}"]
    if args.corner:
        parts.append(f"--corner {args.corner}")
    if args.suitability:
        parts.append("--suitability")
    elif args.classes:
        parts.append(f"--classes {args.classes}")
    else:
        parts.append(f"--habitat {0.5 if args.habitat is None else args.habitat:g}")
    if args.pattern == "fractal":
        parts.append(f"--hurst {args.hurst:g}")
    if args.pattern == "clusters":
        parts.append(f"--marked {args.marked:g}")
    return " ".join(shlex.quote(p) if " " not in p else p for p in parts)


def _fractions(args) -> list[float] | None:
    from preyscape.errors import InputError

    if args.suitability:
        return None
    if args.classes:
        try:
            return [float(x) for x in args.classes.split(",")]
        except ValueError:
            raise InputError(f"--classes {args.classes!r} is not a list of numbers separated "
                             "by commas, e.g. 0.2,0.3,0.5") from None
    share = 0.5 if args.habitat is None else args.habitat
    if not 0.0 < share < 1.0:
        raise InputError(f"--habitat must lie between 0 and 1 (exclusive), not {share!r}")
    return [share, 1.0 - share]


def _make(args) -> int:
    from preyscape.landscape.edit import parse_point
    from preyscape.landscape.make import make_landscape
    from preyscape.landscape.metrics import format_metrics

    corner = parse_point(args.corner, "--corner") if args.corner else None
    r = make_landscape(args.out, args.pattern, rows=args.rows, cols=args.cols,
                       cell_size=args.cell_size, seed=args.seed, crs=args.crs, corner=corner,
                       fractions=_fractions(args), suitability=args.suitability,
                       hurst=args.hurst, marked=args.marked, overwrite=args.overwrite,
                       command=_provenance(args))
    print(f"landscape: {r['out']} ({args.pattern}, seed {args.seed})")
    print(f"metrics:   {r['metrics_file']}")
    print(format_metrics(r["metrics"]))
    print(f"next: preyscape starter {r['out']}")
    return 0


def _metrics(args) -> int:
    from preyscape.errors import InputError
    from preyscape.landscape import files
    from preyscape.landscape.metrics import format_metrics, landscape_metrics

    if not 0.0 <= args.threshold <= 1.0:
        raise InputError(f"--threshold must lie in [0, 1], not {args.threshold!r}")
    target = files.metrics_path(args.raster)
    h = files.read_raster(args.raster, args.values)
    m = landscape_metrics(h.grid, h.values, h.kind, threshold=args.threshold, names=h.names)
    text = json.dumps(m, indent=1) + "\n"
    # the same numbers already stored (e.g. by the command that wrote the raster) are
    # not a result to protect
    same = target.is_file() and target.read_text(encoding="utf-8") == text
    if not same:
        files.write_text(target, text, args.overwrite)
    if args.json:
        print(json.dumps(m, indent=1))
    else:
        print(f"raster:  {args.raster} ({h.kind})")
        print(f"metrics: {target}")
        print(format_metrics(m))
    return 0


def _edit(args) -> int:
    from preyscape.landscape.edit import edit_raster
    from preyscape.landscape.metrics import format_metrics

    r = edit_raster(args.raster, args.edit, out=args.out, measure=args.measure,
                    line=getattr(args, "line", None), at=getattr(args, "at", None),
                    shape=args.shape, width=args.width, radius=getattr(args, "radius", None),
                    value=args.value, name=args.name, values=args.values,
                    overwrite=args.overwrite)
    what = ("made no-data" if args.edit == "lake" else f"set to {r['value']:g}")
    print(f"{args.edit}: {r['cells']} cells ({r['area_km2']:.4g} km²) {what}")
    if r["note"]:
        print(f"note: {r['note']}")
    if r["out"] is not None:
        print(f"raster:  {r['out']}")
        print(f"metrics: {r['metrics_file']}")
        print(format_metrics(r["metrics"]))
    if r["measure"] is not None:
        print(f"measure: {r['measure']}")
        print("for a scenario beside it (values are examples: edit them):\n")
        print(r["snippet"])
    if args.edit != "lake":
        print(CAUTION)
    return 0


def _reproject(args) -> int:
    from preyscape.landscape.metrics import format_metrics
    from preyscape.landscape.reproject import reproject_habitat

    r = reproject_habitat(args.raster, args.out, values=args.values, crs=args.crs,
                          cell_size=args.cell_size, source_crs=args.source_crs,
                          overwrite=args.overwrite)
    print(f"reprojected: {r['out']} ({r['crs']}, {r['cell_size_m']:g} m cells, "
          f"{r['shape'][0]} x {r['shape'][1]}, {r['kind']}, {r['resampling']} resampling)")
    print(f"metrics:     {r['metrics_file']}")
    print(format_metrics(r["metrics"]))
    return 0


def _starter(args) -> int:
    from preyscape.starter import PAIRS, write_starter

    r = write_starter(args.raster, args.out, pair=args.pair, values=args.values,
                      prey_only=args.prey_only, edge=args.edge, overwrite=args.overwrite)
    g = r["grid"]
    print(f"raster:   {args.raster} ({r['kind']}, {g.ny} x {g.nx} cells of {g.dx:g} m, "
          f"{g.n_cells} with data)")
    if r["classes"] is not None:
        print(f"{'code':>6}  {'cells':>9}  {'share':>7}  class")
        for c in r["classes"]:
            print(f"{c['code']:>6}  {c['cells']:>9}  {100 * c['share']:6.2f}%  {c['name']}")
    title = PAIRS[args.pair].title
    if args.prey_only:
        title = f"{PAIRS[args.pair].prey} alone, no predator"
    print(f"scenario: {r['out']} ({title})")
    print(f"next:     preyscape check {r['out']}   then   preyscape run {r['out']}")
    print(CAUTION)
    return 0
