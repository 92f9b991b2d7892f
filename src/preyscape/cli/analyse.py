"""The analysis commands (one per entry of the registry) and ``preyscape report``.

Every analysis sub-command is built from its
:class:`~preyscape.analysis.commands.Command`: the run folder(s), ``--out``,
``--overwrite`` and its own options. Options that override a shared setting
go to :meth:`~preyscape.analysis.results.RunResults.settings`, which
validates them and names the option the user typed; the others are passed to
the writer. The command prints the output's summary lines.
"""

from __future__ import annotations

import argparse
from pathlib import Path


def add_parsers(sub, argv: list[str] | None = None) -> None:
    """Register one sub-command per registered analysis, and ``report``.

    Only the analysis chosen in ``argv`` (its first word) has its writer imported
    for its options: listing the commands imports no numerical library.
    """
    import sys

    from preyscape.analysis.commands import REGISTRY, module_of

    argv = sys.argv[1:] if argv is None else argv
    chosen = next((a for a in argv if not a.startswith("-")), None)  # the sub-command
    for entry in REGISTRY:
        q = sub.add_parser(entry.name, help=entry.help)
        q.set_defaults(handler=analyse, analysis=entry.name)
        if entry.name != chosen:
            q.add_argument("rest", nargs=argparse.REMAINDER, help=argparse.SUPPRESS)
            continue
        cmd = module_of(entry.name).COMMAND
        if cmd.runs == "one":
            q.add_argument("runs", type=Path, nargs=1, metavar="RUN", help="run folder")
        else:
            q.add_argument("runs", type=Path, nargs="+", metavar="RUN",
                           help="the reference run folder, then one or more runs to compare "
                           "with it")
        q.add_argument("--out", type=Path, help=f"folder to create (default: {cmd.out_help})")
        q.add_argument("--overwrite", action="store_true", help="replace an existing --out")
        for o in cmd.options:
            q.add_argument(o.flag, dest=o.dest, type=o.type, metavar=o.metavar, help=o.help)

    rp = sub.add_parser("report", help="one self-contained HTML report of a run")
    rp.add_argument("run", type=Path, metavar="RUN", help="run folder")
    rp.add_argument("others", type=Path, nargs="*", metavar="RUN_B",
                    help="runs to compare with RUN (same grid)")
    rp.add_argument("--out", type=Path, help="HTML file to write (default: RUN/report.html)")
    rp.add_argument("--overwrite", action="store_true", help="replace an existing report")
    rp.add_argument("--no-animation", action="store_true", help="leave out the animated GIF")
    rp.add_argument("--ensemble", type=Path, metavar="DIR",
                    help="add the uncertainty section of a finished 'preyscape ensemble' folder")
    rp.set_defaults(handler=report)


def _named(exc, inputs: dict[str, Path | None]):
    """``exc`` with its source prefixed by the option that named the file, when it is one."""
    for flag, path in inputs.items():
        if path is not None and exc.source and str(path) in exc.source and flag not in exc.source:
            return type(exc)(exc.message, f"{flag} {exc.source}")
    return exc


def _damaged(folders) -> None:
    """After a failed read: raise the FileProblem naming the damaged run folder, if one is."""
    from preyscape.analysis.results import find_damage

    problem = find_damage([f for f in folders if f is not None])
    if problem is not None:
        raise problem


def analyse(args) -> int:
    """Run one registered analysis on the run folders given and print its summary."""
    from preyscape.analysis.commands import module_of
    from preyscape.analysis.output import provenance
    from preyscape.analysis.results import map_layers_of, open_run
    from preyscape.errors import InputError, PreyscapeError
    from preyscape.plots import map_context
    from preyscape.store import check_output

    mod = module_of(args.analysis)
    cmd = mod.COMMAND
    if cmd.runs == "several" and len(args.runs) < 2:
        raise InputError("give the reference run folder and at least one run to compare "
                         "with it", f"preyscape {cmd.name}")
    runs = [open_run(p) for p in args.runs]
    paths = {o.flag: getattr(args, o.dest) for o in cmd.options if o.type is Path}
    try:
        overrides = {o.dest: getattr(args, o.dest) for o in cmd.options if o.setting}
        spelled = {o.dest: o.flag for o in cmd.options}
        settings = runs[0].settings(overrides, spelled)
        inputs = {o.dest: getattr(args, o.dest) for o in cmd.options if not o.setting}
        out = args.out or mod.default_out(runs)
        check_output(out, args.overwrite, "output folder",
                     protect=[*args.runs, *(v for v in paths.values() if v is not None)])
        # every map and GeoTIFF the writer makes names the run(s) and shows their measures
        with map_context(**map_layers_of(runs)), provenance(**runs[0].provenance()):
            written = mod.write(runs, settings, out, overwrite=args.overwrite, **inputs)
    except PreyscapeError as exc:
        raise _named(exc, paths) from None
    except (OSError, RuntimeError, KeyError, ValueError):
        _damaged([*args.runs, *paths.values()])  # a results file that breaks mid-read
        raise
    finally:
        for r in runs:
            r.close()
    print("\n".join(written.summary_lines()))
    return 0


def report(args) -> int:
    """Write the HTML report of a run (compared with the other runs given)."""
    from preyscape.analysis.results import open_run
    from preyscape.errors import FileProblem
    from preyscape.report.run_report import write_report
    from preyscape.store import check_output, stale_partials

    for r in (args.run, *args.others):
        with open_run(r) as run:  # a damaged or foreign folder: one message before any work
            if "years" not in run.info:
                raise FileProblem("run.json has no 'years'; the folder is damaged or was not "
                                  "written by preyscape", str(r))
    out = args.out or args.run / "report.html"
    check_output(out, args.overwrite, "report file", kind="file",
                 protect=[r / name for r in (args.run, *args.others)
                          for name in ("run.json", "results.nc")])
    for stale in stale_partials(out, ".tmp-", files=True):
        stale.unlink(missing_ok=True)
    try:
        path = write_report(args.run, args.out, args.others, overwrite=args.overwrite,
                            animate=not args.no_animation, ensemble=args.ensemble)
    except (OSError, RuntimeError, KeyError, ValueError) as exc:
        from preyscape.errors import PreyscapeError

        if not isinstance(exc, PreyscapeError):
            _damaged([args.run, *args.others])
        raise
    print(f"report: {path}")
    return 0
