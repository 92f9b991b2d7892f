"""preyscape: predator and prey populations moving across habitat rasters.

The public API (imported lazily so ``preyscape --help`` stays fast)::

    from preyscape import load_scenario, simulate, open_run
    sc = load_scenario("landscapes/veldrun_moor.toml")
    folder = simulate(sc, "runs/baseline")
    run = open_run(folder)          # run.ds is an xarray.Dataset; run.time_mean("prey")
"""

from __future__ import annotations

__version__ = "0.2.0"

_LAZY = {
    "load_scenario": "preyscape.scenario",
    "simulate": "preyscape.runfolder",
    "simulate_variants": "preyscape.runfolder",
    "prepare": "preyscape.assemble",
    "derived": "preyscape.preview",
    "open_run": "preyscape.analysis.results",
    "compare": "preyscape.analysis.compare",
    "AnalysisSettings": "preyscape.analysis.settings",
    "write_report": "preyscape.report.run_report",
    "PreyscapeError": "preyscape.errors",
    "InputError": "preyscape.errors",
    "FileProblem": "preyscape.errors",
}

__all__ = [*_LAZY, "__version__"]


def __getattr__(name: str):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name]), name)
    raise AttributeError(f"module 'preyscape' has no attribute {name!r}")
