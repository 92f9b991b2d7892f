"""The analysis commands (one per entry of the registry) and ``preyscape report``.

Every analysis sub-command is built from its
:class:`~preyscape.analysis.commands.Command`: the run folder(s), ``--out``,
``--overwrite`` and its own options. Options that override a shared setting
go to :meth:`~preyscape.analysis.results.RunResults.settings`, which
validates them and names the option the user typed; the others are passed to
the writer. The command prints the output's summary lines.
"""

from __future__ import annotations

from pathlib import Path


def add_parsers(sub) -> None:
    """Register one sub-command per registered analysis, and ``report``."""
    from preyscape.analysis.commands import commands

    for cmd in commands():
        q = sub.add_parser(cmd.name, help=cmd.help)
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
        q.set_defaults(handler=analyse, analysis=cmd.name)

    rp = sub.add_parser("report", help="one self-contained HTML report of a run")
    rp.add_argument("run", type=Path, metavar="RUN", help="run folder")
    rp.add_argument("others", type=Path, nargs="*", metavar="RUN_B",
                    help="runs to compare with RUN (same grid)")
    rp.add_argument("--out", type=Path, help="HTML file to write (default: RUN/report.html)")
    rp.add_argument("--overwrite", action="store_true", help="replace an existing report")
    rp.add_argument("--no-animation", action="store_true", help="leave out the animated GIF")
    rp.set_defaults(handler=report)


def analyse(args) -> int:
    """Run one registered analysis on the run folders given and print its summary."""
    from preyscape.analysis.commands import module_of
    from preyscape.analysis.output import provenance
    from preyscape.analysis.results import map_layers_of, open_run
    from preyscape.errors import InputError
    from preyscape.plots import map_context

    mod = module_of(args.analysis)
    cmd = mod.COMMAND
    if cmd.runs == "several" and len(args.runs) < 2:
        raise InputError("give the reference run folder and at least one run to compare "
                         "with it", f"preyscape {cmd.name}")
    runs = [open_run(p) for p in args.runs]
    try:
        overrides = {o.dest: getattr(args, o.dest) for o in cmd.options if o.setting}
        spelled = {o.dest: o.flag for o in cmd.options}
        settings = runs[0].settings(overrides, spelled)
        inputs = {o.dest: getattr(args, o.dest) for o in cmd.options if not o.setting}
        out = args.out or mod.default_out(runs)
        # every map and GeoTIFF the writer makes names the run(s) and shows their measures
        with map_context(**map_layers_of(runs)), provenance(**runs[0].provenance()):
            written = mod.write(runs, settings, out, overwrite=args.overwrite, **inputs)
    finally:
        for r in runs:
            r.close()
    print("\n".join(written.summary_lines()))
    return 0


def report(args) -> int:
    """Write the HTML report of a run (compared with the other runs given)."""
    from preyscape.report.run_report import write_report

    path = write_report(args.run, args.out, args.others, overwrite=args.overwrite,
                        animate=not args.no_animation)
    print(f"report: {path}")
    return 0
