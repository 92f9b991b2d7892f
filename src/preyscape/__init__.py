"""preyscape: predator and prey populations moving across habitat rasters.

The public API (imported lazily so ``preyscape --help`` stays fast)::

    from preyscape import load_scenario, simulate, open_run
    sc = load_scenario("landscapes/veldrun_moor.toml")
    folder = simulate(sc, "runs/baseline")
    run = open_run(folder)          # run.results is an xarray.Dataset
"""

from __future__ import annotations

__version__ = "0.2.0"

__all__ = ["load_scenario", "simulate", "simulate_variants", "open_run", "prepare", "derived",
           "__version__"]


def __getattr__(name: str):
    if name == "load_scenario":
        from preyscape.scenario import load_scenario

        return load_scenario
    if name in ("simulate", "simulate_variants", "prepare", "derived"):
        from preyscape import pipeline

        return getattr(pipeline, name)
    if name == "open_run":
        from preyscape.store import open_run

        return open_run
    raise AttributeError(f"module 'preyscape' has no attribute {name!r}")
