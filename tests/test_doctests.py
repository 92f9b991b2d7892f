"""The Examples sections of the public API's docstrings run, on a real tiny run.

Design requirement (DEVELOPERS.md): every public API function shows a short example
that runs. The examples use these names, made here: ``scenario_path`` (a scenario
with a refuge in the baseline and two variants, ``fenced`` and ``no-refuge``),
``run_folder`` (its baseline run), ``other_run`` (its ``fenced`` run) and
``out_folder`` (an empty folder for outputs).
"""

from __future__ import annotations

import doctest
import importlib

import pytest

DOCTESTED = [
    "preyscape.errors",
    "preyscape.names",
    "preyscape.scenario",
    "preyscape.landscape.placed",
    "preyscape.landscape.topology",
    "preyscape.model.landscape_theory",
    "preyscape.store",
    "preyscape.limits",
    "preyscape.assemble",
    "preyscape.solve.extinction",
    "preyscape.plausibility",
    "preyscape.preview",
    "preyscape.runfolder",
    "preyscape.run_maps",
    "preyscape.analysis.settings",
    "preyscape.analysis.output",
    "preyscape.analysis.commands",
    "preyscape.analysis.results",
    "preyscape.analysis.gi_star",
    "preyscape.analysis.hotspots",
    "preyscape.analysis.change",
    "preyscape.analysis.hotspot_places",
    "preyscape.analysis.compare",
    "preyscape.analysis.ranking",
    "preyscape.analysis.compare_report",
    "preyscape.analysis.front_predictions",
    "preyscape.analysis.hotspots_output",
    "preyscape.analysis.waves_output",
    "preyscape.analysis.effects_output",
    "preyscape.analysis.compare_output",
    "preyscape.plots",
    "preyscape.plots.palettes",
    "preyscape.report.run_report",
    "preyscape.ensemble.design",
    "preyscape.ensemble.store",
    "preyscape.ensemble.summaries",
    "preyscape.ensemble.sensitivity",
    "preyscape.report.summary",
]


@pytest.fixture(scope="module")
def names(tmp_path_factory):
    from test_cli import write_variant_scenario

    from preyscape.runfolder import simulate_variants

    folder = tmp_path_factory.mktemp("doctests")
    scenario = write_variant_scenario(folder)
    runs = simulate_variants(scenario, folder / "runs", variants=["baseline", "fenced"],
                             maps=False, progress=False)
    return {"scenario_path": scenario, "run_folder": runs["baseline"],
            "other_run": runs["fenced"], "folder": folder}


@pytest.mark.parametrize("module", DOCTESTED)
def test_examples_run(module, names, tmp_path):
    mod = importlib.import_module(module)
    globs = {k: v for k, v in names.items() if k != "folder"} | {"out_folder": tmp_path}
    result = doctest.testmod(mod, extraglobs=globs, optionflags=doctest.ELLIPSIS
                             | doctest.NORMALIZE_WHITESPACE, report=True, verbose=False)
    assert result.attempted > 0, f"{module} has no example"
    assert result.failed == 0, f"{result.failed} example(s) of {module} failed (see output)"
