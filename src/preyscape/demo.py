"""The bundled demo: the invented Veldrun Moor reserve."""

from __future__ import annotations

from pathlib import Path

DEMO_SCENARIO = "veldrun_moor.toml"


def landscapes_dir() -> Path:
    """Folder with the bundled landscapes (installed package data or the source tree)."""
    here = Path(__file__).resolve().parent
    for cand in (here / "_landscapes", here.parents[1] / "landscapes"):
        if (cand / DEMO_SCENARIO).is_file():
            return cand
    raise FileNotFoundError("the bundled landscapes folder is missing from this installation")


def demo_scenario():
    """The bundled scenario, loaded and validated."""
    from preyscape.scenario import load_scenario

    return load_scenario(landscapes_dir() / DEMO_SCENARIO)


def run_demo(out: Path, overwrite: bool = False, progress: bool | None = None,
             log=None) -> dict:
    """Run the bundled scenario's baseline and variants, compare and report them.

    Parameters
    ----------
    out : pathlib.Path
        Folder to create: one run folder per variant, ``compare`` (the
        ``fence`` and ``corridor`` variants against the baseline, in one
        folder) and ``report.html``.
    overwrite : bool
        Replace an existing ``out``.
    progress : bool, optional
        Progress bars (default: on a terminal).
    log : callable, optional
        Called with a line of text before each stage.

    Returns
    -------
    dict
        ``runs`` (variant → run folder), ``comparisons`` (the compared
        variants, joined by ", " → the comparison folder) and ``report``
        (the HTML file).
    """
    from preyscape.analysis.compare_output import write_comparison
    from preyscape.analysis.output import provenance
    from preyscape.analysis.results import map_layers_of, open_run
    from preyscape.analysis.settings import AnalysisSettings
    from preyscape.plots import map_context
    from preyscape.report.run_report import write_report
    from preyscape.runfolder import simulate_variants
    from preyscape.store import output_folder, refuse_existing

    say = log or (lambda _text: None)
    out = Path(out)
    refuse_existing(out, overwrite, "folder")
    sc = demo_scenario()
    say(f"running {', '.join(sc.variant_names())} into {out} ...")
    # the runs go to a temporary folder renamed when all are complete, so a failed or
    # interrupted demo leaves an existing folder as it was
    with output_folder(out, overwrite, "folder") as tmp:
        done = simulate_variants(sc, tmp, progress=progress)
    runs = {name: out / folder.name for name, folder in done.items()}
    settings = AnalysisSettings.build(sc.analysis.model_dump(mode="json"),
                                      stored_as=f"{sc.path}: analysis")
    compared = [n for n in ("fence", "corridor") if n in runs]
    comparisons = {}
    if compared:
        say(f"comparing baseline with {' and '.join(compared)} ...")
        opened = [open_run(runs[n]) for n in ("baseline", *compared)]
        try:
            with map_context(**map_layers_of(opened)), provenance(**opened[0].provenance()):
                done = write_comparison(opened[0], opened[1:], out / "compare",
                                        settings=settings)
        finally:
            for r in opened:
                r.close()
        comparisons[", ".join(compared)] = done.folder
    say("writing the report ...")
    report = write_report(runs["baseline"], out / "report.html", [runs[n] for n in compared])
    return {"runs": runs, "comparisons": comparisons, "report": report}
