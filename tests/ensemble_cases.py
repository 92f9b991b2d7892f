"""Small ensemble scenarios for the ensemble tests (tiny grid, few members, short runs).

The scenario is the variant scenario of ``test_cli.write_variant_scenario`` (the
24 x 30 test landscape with a refuge in the baseline and a predator fence added by
the variant ``fenced``) with an ``[uncertainty]`` section appended.
"""

from __future__ import annotations

from pathlib import Path

PARAMETERS = (
    '{ key = "predator.mortality", range = [0.8, 1.2] }',
    '{ key = "prey.growth", range = [2.0, 5.0], distribution = "log-uniform" }',
    '{ key = "measures.predator fence.permeability.predator", range = [0.0, 0.3] }',
)


def ensemble_scenario(folder: Path, *, members: int = 4, years: float = 0.5,
                      parameters: tuple[str, ...] = PARAMETERS, design: str = "latin-hypercube",
                      variants: tuple[str, ...] = ("fenced",), seed: int = 5,
                      extra: str = "") -> Path:
    """Write the variant scenario with an ``[uncertainty]`` section into ``folder``."""
    from test_cli import write_variant_scenario

    folder.mkdir(parents=True, exist_ok=True)
    path = write_variant_scenario(folder)
    text = path.read_text().replace("years = 0.5", f"years = {years!r}")
    names = ", ".join(f'"{v}"' for v in variants)
    text += (f"\n[uncertainty]\nmembers = {members}\ndesign = \"{design}\"\nseed = {seed}\n"
             f"variants = [{names}]\nparameters = [\n  " + ",\n  ".join(parameters)
             + "\n]\n" + extra)
    path.write_text(text)
    return path


def store_files(folder: Path) -> dict[str, bytes]:
    """Every file of a member store, relative path to bytes (for bitwise comparisons)."""
    return {str(p.relative_to(folder)): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file()}
