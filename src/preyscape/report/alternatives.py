"""The alternatives of a report side by side: maps on shared colour scales and a table.

:func:`alternatives_parts` gives the report's answer when runs are compared:
the time-mean density of each species in every run, on ONE colour scale per
species shared by all panels (so equal colours mean equal densities), each
panel with its own run's measures; and, unless a comparison already gives the
answer (a part of place ``answer``, such as a ranking), a table of the
alternatives at a glance. Only the species every run models are shown (no
predator maps or columns for runs of prey alone).
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from preyscape.analysis.compare import shared_species
from preyscape.analysis.output import Figure, Paragraph, Part, Table

__all__ = ["alternatives_parts"]


def _changed_area(out) -> float | None:
    rec = getattr(out, "record", None) or {}
    area = rec.get("changed_area_km2") or {}
    if not area or "no change" not in area:
        return None
    return float(sum(v for k, v in area.items() if k != "no change"))


def _glance(run, others: Sequence, outputs: Sequence) -> Table:
    from preyscape.report.summary import difference_words

    by_label = {}
    for out in outputs:
        rec = getattr(out, "record", None) or {}
        if rec.get("variant_b") is not None:
            by_label[rec["variant_b"]] = out
    species = shared_species([run, *others])
    base = {sp: run.mean_total(sp) for sp in species}
    rows = [(f"{run.label} (reference)", "—", *(v for sp in species for v in (
        round(base[sp]), None)), None)]
    for o in others:
        tot = {sp: o.mean_total(sp) for sp in species}
        change = {sp: (100 * (tot[sp] - base[sp]) / base[sp] if base[sp] else None)
                  for sp in species}
        area = _changed_area(by_label[o.label]) if o.label in by_label else None
        rows.append((o.label, difference_words(run, o),
                     *(v for sp in species for v in (round(tot[sp]), change[sp])), area))
    names = run.species_names
    return Table(("alternative", "what it changes",
                  *(h for sp in species for h in (f"{names[sp]} on average (animals)",
                                                  "change (%)")),
                  "area where the outcome changes (km²)"), tuple(rows),
                 caption="The alternatives at a glance: animals in the whole landscape, "
                         "averaged over the run, against the reference",
                 numeric_format="{:.3g}")


def alternatives_parts(run, others: Sequence, outputs: Sequence, work: Path, *,
                       has_answer: bool) -> list[Part]:
    """The alternatives side by side (place ``answer``); empty without alternatives.

    Parameters
    ----------
    run : RunResults
        The reference run.
    others : sequence of RunResults
        The alternatives.
    outputs : sequence of Written
        The analysis outputs (comparisons give the changed areas).
    work : pathlib.Path
        A folder for the figures.
    has_answer : bool
        Whether a comparison already answers with its own parts (then no table).
    """
    from preyscape import plots

    if not others:
        return []
    runs = [run, *others]
    grid = run.grid
    names = run.species_names
    blocks: list = [Paragraph(
        "Each alternative's average density over the run, one map per alternative. Each "
        "species has one colour scale shared by all its maps, so equal colours mean equal "
        "densities; each map shows that alternative's own measures.")]
    for sp in shared_species(runs):
        layers = [(f"{r.label}" + (" (reference)" if r is run else ""), r.time_mean(sp))
                  for r in runs]
        top = max(float(np.nanmax(v, initial=0.0)) for _, v in layers) or 1.0
        label = f"{names[sp]} ({sp})" if names[sp] != sp else sp
        path = plots.map_panels(
            grid, layers, f"Time-mean density of {label} in each alternative",
            work / f"alternatives_{sp}.png", cmap=plots.SPECIES_CMAP[sp], vmin=0.0, vmax=top,
            units="animals per km²", panel_outlines=[r.overlays() for r in runs],
            run=", ".join(r.label for r in runs),
            note="One colour scale for all panels of this species (shared by the "
                 "alternatives).")
        blocks.append(Figure(path, f"Time-mean density of {label}, every alternative on one "
                                   "colour scale", f"maps of {label} in each alternative"))
    if not has_answer:
        blocks.insert(1, _glance(run, others, outputs))
    return [Part("The alternatives side by side", tuple(blocks), "alternatives",
                 place="answer")]
