"""The parts of a report a planner reads first, and the model explained for a modeller.

:func:`summary_part` builds the plain-language summary that opens every
report: what was run, what changes where and by how much (the ``headlines()``
of every analysis output), how sure the numbers are and what the model cannot
say. It uses no modelling jargon: words such as "Hopf", "Holling",
"Fickian", "motility", "Fisher–KPP" or "Gi*" belong in :func:`model_part`,
which explains them, after the details.

Examples
--------
>>> from preyscape.analysis.results import open_run
>>> with open_run(run_folder) as run:
...     part = summary_part(run, [], [])
>>> part.place, part.title
('summary', 'Summary')
>>> any(w in str(part).lower() for w in JARGON)
False
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from preyscape.analysis.output import Bullets, Facts, Paragraph, Part, Table
from preyscape.store import SPECIES

__all__ = ["JARGON", "model_part", "run_sentence", "summary_part"]

JARGON = ("hopf", "holling", "fickian", "motility", "fisher", "kpp", "gi*", "getis",
          "rosenzweig", "beddington", "lotka", "diffusivity", "z-score", "fdr")
"""Words that must not appear in the summary (they are explained in the model part)."""


def _name(run, sp: str) -> str:
    return run.species_names[sp]


def _measure_list(records: Sequence[dict]) -> str:
    if not records:
        return "no fences, corridors or refuges"
    items = [f"the {m['name']} (a {m['kind']})" if m["kind"] not in m["name"] else
             f"the {m['name']}" for m in records]
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def difference_words(run, other) -> str:
    """What an alternative changes against the reference run, in words."""
    mine = {m["name"]: m for m in run.measures}
    theirs = {m["name"]: m for m in other.measures}
    added = [theirs[n] for n in theirs if n not in mine]
    removed = [mine[n] for n in mine if n not in theirs]
    words = []
    if added:
        words.append("adds " + _measure_list(added))
    if removed:
        words.append("removes " + _measure_list(removed))
    return "; ".join(words) or "the same measures, other settings"


def run_sentence(run, others: Sequence) -> str:
    """What was run, in one paragraph of plain words."""
    info = run.info
    g = info["grid"]
    dx, dy = g["cell_size_m"]
    area = g["cells_with_data"] * dx * dy / 1e6
    who = (f"{_name(run, 'prey')} (the prey) and {_name(run, 'predator')} (the predator)"
           if "predator" in run.species else f"{_name(run, 'prey')} (the prey, on its own)")
    text = (f"This report looks at {info['years']:g} years of {who} on {run.title}: "
            f"{area:.3g} km² of habitat, mapped in cells of {dx:g} × {dy:g} m. The reference "
            f"run, '{run.label}', has {_measure_list(run.measures)}.")
    if others:
        alts = "; ".join(f"'{o.label}' {difference_words(run, o)}" for o in others)
        n = len(others)
        text += f" It is compared with {n} alternative{'s' if n > 1 else ''}: {alts}."
    return text


def _fallback_headline(out, names: dict) -> str | None:
    """A comparison's headline from its record, if the output gives none."""
    rec = getattr(out, "record", None) or {}
    tot = rec.get("time_mean_totals_animals") or {}
    if not tot:
        return None
    bits = []
    for sp in (sp for sp in SPECIES if sp in tot):  # the species the record holds
        a, b = (tot.get(sp) or {}).get("a"), (tot.get(sp) or {}).get("b")
        if a and b is not None and math.isfinite(a) and math.isfinite(b):
            bits.append(f"{b:,.0f} instead of {a:,.0f} {names.get(sp, sp)} ({sp}) on average "
                        f"({100 * (b - a) / a:+.0f} %)")
    text = (f"'{rec.get('variant_b', 'B')}' against '{rec.get('variant_a', 'A')}': "
            + "; ".join(bits) if bits else "")
    cells = rec.get("changed_cells") or {}
    total = sum(cells.values())
    if total and "no change" in cells:
        share = 100 * (total - cells["no change"]) / total
        text += (f"; the outcome changes by more than {rec['settings']['threshold']:.0%} on "
                 f"{share:.2g} % of the landscape")
    return (text + ".").replace(",", " ") if text else None


def headlines(outputs: Sequence, names: dict | None = None) -> list[str]:
    """Every output's plain-language findings, answers first."""
    lines: list[str] = []
    for out in outputs:
        found = list(out.headlines()) if hasattr(out, "headlines") else []
        if not found:
            fb = _fallback_headline(out, names or {})
            found = [fb] if fb else []
        lines += found
    return lines


def _how_sure(run, others: Sequence, extra: Sequence[str]) -> list[str]:
    n = 1 + len(others)
    text = [(f"These are predictions of a simulation, one run per alternative ({n} in all) "
             "with one set of parameters; they are not measurements. The parameters are "
             "estimates, so treat differences of a few per cent between alternatives as "
             "'about the same'.")]
    if run.predictions.get("stable") is False:
        text.append("In the best habitat the two populations rise and crash in cycles "
                    f"(about every {run.predictions.get('period_years') or 0:.2g} years), so a "
                    "map of one moment can look very different from another; the maps here "
                    "show averages over the run unless they say otherwise, and the hotspot "
                    "maps say how often each place stands out.")
    text += list(extra)
    if not extra:
        text.append("No uncertainty analysis was run for this report: how much the numbers "
                    "would move with other plausible parameters is not shown.")
    return text


CANNOT_SAY = (
    "what happens to wildlife, livestock and people the model leaves out (access, grazing, "
    "farming, drainage);",
    "whether the habitat map and the parameters match the real place: the model takes them "
    "as given;",
    "the effect of weather, disease, hunting or management that the scenario does not "
    "describe;",
    "whether a measure is allowed, affordable or acceptable: ask the responsible wildlife "
    "authority, the people who use the land and licensed professionals.",
)


def summary_part(run, others: Sequence, outputs: Sequence, *,
                 how_sure: Sequence[str] = ()) -> Part:
    """The plain-language summary that opens the report (place ``summary``).

    Parameters
    ----------
    run : RunResults
        The reference run.
    others : sequence of RunResults
        The alternatives compared with it.
    outputs : sequence of Written
        Every analysis output, answers first (their ``headlines()``).
    how_sure : sequence of str
        Sentences on how sure the results are (e.g. from an uncertainty
        analysis); without them the summary says none was run.
    """
    found = headlines(outputs, run.species_names)
    blocks: list[Any] = [Paragraph("What was run. " + run_sentence(run, others))]
    blocks.append(Paragraph("What changes, where and by how much:"))
    blocks.append(Bullets(tuple(found) if found else (
        "No analysis found a change or a concentration to report.",)))
    blocks.append(Paragraph("How sure. " + " ".join(_how_sure(run, others, how_sure))))
    blocks.append(Paragraph("What the model cannot say:"))
    blocks.append(Bullets(CANNOT_SAY))
    return Part("Summary", tuple(blocks), "summary", place="summary")


# --- the model, for a modeller ----------------------------------------------------------
FORMS = {
    "lotka-volterra": "Lotka–Volterra: each predator kills prey at a rate proportional to "
                      "prey density (attack rate a), and prey grow without limit (Lotka "
                      "1925; Volterra 1926).",
    "logistic-prey": "Lotka–Volterra with logistic prey: prey growth slows as density nears "
                     "the habitat's capacity K.",
    "holling-ii": "Holling type II (Rosenzweig–MacArthur): each kill takes a handling time "
                  "h, so a predator's kill rate a·N/(1 + a·h·N) levels off when prey are "
                  "plentiful; prey grow logistically to capacity K.",
    "beddington-deangelis": "Beddington–DeAngelis: as Holling type II, and predators also "
                            "get in each other's way (interference c).",
}
MOVES = {
    "fickian": "Fickian diffusion: animals move at random with diffusivity D (km²/yr); "
               "they spread from dense to sparse places at a rate D sets.",
    "ecological": "ecological diffusion: animals leave a cell at a rate set by its "
                  "motility μ (km²/yr), so they move quickly through habitat where μ is "
                  "high and collect where it is low (Turchin 1998; Garlick et al. 2011).",
}


def model_part(run) -> Part:
    """The model explained for a modeller (place ``method``): equations, forms, predictions.

    A run of prey alone gets the prey's equation and prediction only
    (:func:`_prey_model_part`).
    """
    if "predator" not in run.species:
        return _prey_model_part(run)
    st = run.info.get("settings") or {}
    it = st.get("interaction") or {}
    pr = run.predictions
    facts = [("equations", "dN/dt = movement of prey + g(N) − f(N, P)·P·(1 − refuge); "
                           "dP/dt = movement of predators + e·f(N, P)·P·(1 − refuge) − m·P "
                           "(N prey and P predators per km², per cell)")]
    if it.get("form") in FORMS:
        facts.append(("interaction", FORMS[it["form"]]))
    for sp in SPECIES:
        mv = (st.get(sp) or {}).get("movement")
        if mv in MOVES:
            facts.append((f"movement of {sp}", MOVES[mv]))
    eq = pr.get("equilibrium") or [None, None]
    rows = [("equilibrium in the best habitat (prey, predators per km²)",
             _pair(eq), "where both populations would settle without movement"),
            ("Hopf capacity (prey per km²)", pr.get("hopf_capacity"),
             "habitat whose prey capacity is above this makes the local populations cycle "
             "instead of settling (Rosenzweig 1971)"),
            ("cycle period (years)", pr.get("period_years"),
             "period of small cycles around the equilibrium"),
            ("prey front speed (km/yr)", pr.get("prey_front_speed"),
             "Fisher–KPP minimal speed 2√(rD) of prey spreading into empty habitat (Fisher "
             "1937; Kolmogorov, Petrovsky & Piskunov 1937)"),
            ("predator front speed (km/yr)", pr.get("predator_front_speed"),
             "minimal speed of predators spreading into prey at capacity (Dunbar 1983)")]
    blocks = (Paragraph("How the model works. Each cell of the habitat map holds a density "
                        "of prey and of predators; the populations grow, eat and die in each "
                        "cell and move between neighbouring cells."),
              Facts(tuple(facts)),
              Table(("prediction", "value", "meaning"), tuple(rows),
                    caption="Predictions of published theory for the best habitat; the "
                            "analyses above set their results against them"))
    return Part("How the model works", blocks, "model", place="method")


def _prey_model_part(run) -> Part:
    """The model of a run of prey alone: growth and movement, and the front speed."""
    st = run.info.get("settings") or {}
    form = (st.get("interaction") or {}).get("form")
    growth = ("exponential growth: g(N) = r·N, without a limit (the form 'lotka-volterra')"
              if form == "lotka-volterra" else
              "logistic growth: g(N) = r·N·(1 − N/K), which slows as the density nears the "
              "habitat's capacity K (Verhulst 1838, from memory)")
    facts = [("equation", "dN/dt = movement of prey + g(N) (N prey per km², per cell)"),
             ("growth", growth)]
    mv = (st.get("prey") or {}).get("movement")
    if mv in MOVES:
        facts.append(("movement of prey", MOVES[mv]))
    rows = (("prey front speed (km/yr)", run.predictions.get("prey_front_speed"),
             "Fisher–KPP minimal speed 2√(rD) of prey spreading into empty habitat (Fisher "
             "1937; Kolmogorov, Petrovsky & Piskunov 1937)"),)
    blocks = (Paragraph("How the model works. Each cell of the habitat map holds a density "
                        "of prey; the population grows in each cell and moves between "
                        "neighbouring cells. This scenario models the prey on its own."),
              Facts(tuple(facts)),
              Table(("prediction", "value", "meaning"), rows,
                    caption="Prediction of published theory for the best habitat; the "
                            "analyses above set their results against it"))
    return Part("How the model works", blocks, "model", place="method")


def _pair(eq) -> str:
    if not eq or eq[0] is None:
        return "none"
    return f"{eq[0]:.4g}, {eq[1]:.4g}"
