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
