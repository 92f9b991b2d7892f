"""What a comparison of alternatives says, in words: summary lines, report parts, headlines.

Built from a :class:`~preyscape.analysis.compare_output.ComparisonOutput`
(its ``comparison.json`` record and the files it names), so the command line,
the report and a reader of the folder see the same numbers. Only the species
compared (the record's ``species_present``) are named: for runs of prey alone
the summary says once that there is no predator, and the report parts say
nothing about predators (the report says it once, in its settings).

Examples
--------
>>> _signed(-31.24, "%"), _signed(0.0, "%"), _area(0.0123)
('−31 %', '±0 %', '0.012 km²')
"""

from __future__ import annotations

import math

from preyscape.analysis.output import Bullets, Figure, Paragraph, Part, Table, pick
from preyscape.analysis.results import NO_PREDATOR
from preyscape.store import SPECIES

__all__ = ["METHOD", "headlines", "report_parts", "summary_lines"]

METHOD = (
    "A cell counts as changed only where the difference of the window means is larger than "
    "the timing margin and larger than the relative threshold. The timing margin is the sum, "
    "over both runs, of the range of the cumulative departures from the cell's window mean "
    "divided by the number of snapshots (Hurst's adjusted range; Hurst 1951, Trans Am Soc "
    "Civ Eng 116:770): for populations that repeat a cycle, it bounds how far a window mean "
    "can move when only the timing of the cycles changes, as long as the window holds at "
    "least one whole cycle. So a measure that only shifts the cycles marks nothing, and gains "
    "and losses are counted apart. Timing is read separately from the arrival delay: when "
    "each species first reaches its arrival density in each run. A model is not a field "
    "survey: these are differences between model runs, not predictions of what a real fence "
    "or corridor will do."
)


def _signed(x, unit: str = "", digits: int = 2) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    if round(x, 9) == 0:
        return f"±0 {unit}".strip()
    text = f"{abs(x):.0f}" if abs(x) >= 10 ** digits else f"{abs(x):.{digits}g}"
    return f"{'+' if x > 0 else '−'}{text} {unit}".strip()


def _area(x) -> str:
    return "n/a" if x is None else f"{x:.2g} km²" if x < 10 else f"{x:.3g} km²"


def _delay_text(v) -> str:
    """A change of colonisation time in words (years)."""
    if v == "inf":
        return "never"
    if v is None or not math.isfinite(v):
        return "n/a"
    if abs(v) < 0.005:
        return "as before"
    return f"{abs(v):.2g} yr {'later' if v > 0 else 'earlier'}"


def _pair(a: float, b: float) -> str:
    return f"{a:.3g} / {b:.3g}"


def _name(out, sp: str) -> str:
    n = (out.record.get("species") or {}).get(sp) or sp
    return n if n != sp else sp


def _many(out, sp: str) -> str:
    """The species' name in the plural, for sentences ("least weasels", "prey")."""
    n = _name(out, sp)
    return n if n == "prey" or n.endswith("s") else n + "s"


def _species(out, order: tuple[str, ...] = SPECIES) -> tuple[str, ...]:
    """The species compared (``comparison.json`` ``species_present``), in ``order``."""
    present = out.record.get("species_present") or SPECIES
    return tuple(sp for sp in order if sp in present)


def _predators_first(out) -> tuple[str, ...]:
    """The species compared, predators first (the order of sentences and the table)."""
    return _species(out, ("predator", "prey"))


def _timing(out, cycles: str = "the cycles") -> str:
    """What the timing margin stands for: population ``cycles`` need a predator."""
    return (f"a shift in the timing of {cycles}" if "predator" in _species(out)
            else "a shift in timing alone")


def _num(x) -> float:
    return math.nan if x is None or x == "inf" else (math.inf if x == "inf" else float(x))


def summary_lines(out) -> list[str]:
    """What ``preyscape compare`` prints: the window, the ranking, the warnings."""
    rec = out.record
    w = rec["window"]
    lines = [f"comparison of {len(out.alternatives)} alternative"
             f"{'s' if len(out.alternatives) != 1 else ''} with {out.base}, years "
             f"{w['start_years']:g}–{w['end_years']:g} ({w['snapshots']} common snapshots): "
             f"{out.folder}"]
    sps = _species(out)
    # column widths (total, area) per species; one species gets room for the headings
    cols = [(sp, 9 if sp == "prey" else 11, 14) for sp in sps] if len(sps) > 1 else [
        (sp, 17, 25) for sp in sps]
    lines.append(f"  {'':<27}{'landscape total':^{sum(c[1] for c in cols)}}"
                 f"{'area more / fewer (km²)':^{sum(c[2] for c in cols)}}")
    lines.append(f"  {'rank':<5}{'alternative':<22}"
                 + "".join(f"{sp:>{t}}" for sp, t, _ in cols)
                 + "".join(f"{sp:>{a}}" for sp, _, a in cols)
                 + f"{'fence (km)':>12}{'open ends':>11}")
    for r in out.ranking:
        rank = "" if r["rank"] is None else str(r["rank"])
        lines.append(
            f"  {rank:<5}{r['alternative'][:21]:<22}"
            + "".join(f"{_signed(r[f'{sp}_window_change_pct'], '%'):>{t}}" for sp, t, _ in cols)
            + "".join(f"{_pair(r[f'{sp}_gain_km2'], r[f'{sp}_loss_km2']):>{a}}"
                      for sp, _, a in cols)
            + f"{r['fence_length_m'] / 1000:>12.3g}{r['open_ends']:>11}")
    if "predator" not in sps:
        lines.append(f"  {NO_PREDATOR}")
    lines += [f"  warning: {w_}" for w_ in rec["warnings"]]
    return lines


def _alternative_sentence(out, r: dict) -> str:
    """One plain sentence about what an alternative changes, where and how much."""
    bits = []
    order = _predators_first(out)
    for sp in order:
        name = _many(out, sp)
        gain, loss, gone = r[f"{sp}_gain_km2"], r[f"{sp}_loss_km2"], r[f"{sp}_gone_km2"]
        if gain < 0.01 and loss < 0.01:
            bits.append(f"no clear change of {name} anywhere")
            continue
        part = []
        if loss >= 0.01:
            part.append(f"fewer {name} on {_area(loss)}"
                        + (" (none left there)" if gone >= 0.99 * loss else
                           f" (none left on {_area(gone)})" if gone >= 0.01 else ""))
        if gain >= 0.01:
            part.append(f"more {name} on {_area(gain)}")
        bits.append(" and ".join(part))
    sure = [_num(r[f"{sp}_clarity"]) for sp in order if r.get(f"{sp}_clarity") is not None]
    if sure:
        top = max(sure)
        bits.append("these changes are " + ("far beyond" if top > 3 else "beyond")
                    + f" what {_timing(out)} could produce"
                    + (f" (typically {top:.2g} times that margin)" if math.isfinite(top) else ""))
    whole = ", ".join(f"{_many(out, sp)} {_signed(r[f'{sp}_window_change_pct'], '%')}"
                      for sp in order)
    return (f"'{r['alternative']}' against '{out.base}': " + "; ".join(bits)
            + f"; in the whole landscape {whole}.")


def headlines(out) -> list[str]:
    """Plain-language findings: the ranking's winner, each alternative, each leaky fence."""
    rec = out.record
    w = rec["window"]
    when = f"years {w['start_years']:g}–{w['end_years']:g}"
    lines = []
    rows = out.ranking
    goal = rec["settings"].get("goal")
    if goal and len(rows) > 1:
        sp = "predator" if "predator" in goal else "prey"
        first, last = rows[0], rows[-1]
        lines.append(
            f"Ranked by '{goal}' over {when}: '{first['alternative']}' does best "
            f"({_many(out, sp)} {_signed(first[f'{sp}_window_change_pct'], '%')} in the "
            f"whole landscape), '{last['alternative']}' least "
            f"({_signed(last[f'{sp}_window_change_pct'], '%')}).")
    lines += [_alternative_sentence(out, r) for r in rows]
    for f in rec["fences"]:
        if f["warning"]:
            lines.append(f"In '{f['alternative']}': {f['warning']}")
    lines.append(f"Changes are counted only where they exceed what "
                 f"{_timing(out, 'the population cycles')} could "
                 f"produce ({when}); a model is not a field survey.")
    return lines


def _fence_text(r: dict) -> str:
    if not r["fence_length_m"]:
        return "none"
    ends = r["open_ends"]
    return (f"{r['fence_length_m'] / 1000:.3g} km, "
            + ("closed" if not ends else f"{ends} open end{'s' if ends > 1 else ''}"))


def _ranking_table(out) -> Table:
    order = _predators_first(out)
    names = {sp: _many(out, sp) for sp in order}
    lead = f"{order[0]}_delay_at_"  # the predators' targets (the prey's for prey alone)
    targets = [k for k in (out.ranking[0] if out.ranking else {}) if k.startswith(lead)]
    header = ["rank", "alternative",
              "landscape total: " + " / ".join(names[sp] for sp in order)]
    header += [f"{names[sp]}: more / fewer (km²)" for sp in order]
    header += [f"{names[order[0]]} reach {k[len(lead):-3].replace('_', ' ')}" for k in targets]
    header.append("fence")
    rows = []
    for r in out.ranking:
        row = ["" if r["rank"] is None else r["rank"], r["alternative"],
               " / ".join(_signed(r[f"{sp}_window_change_pct"], "%") for sp in order)]
        row += [_pair(r[f"{sp}_gain_km2"], r[f"{sp}_loss_km2"]) for sp in order]
        row += [_delay_text(r.get(k)) for k in targets]
        row.append(_fence_text(r))
        rows.append(tuple(row))
    return Table(tuple(header), tuple(rows),
                 caption=f"Changes against '{out.base}' in the window; every column is in "
                 "ranking.csv")


def report_parts(out) -> list[Part]:
    """The ranking and each alternative's change maps (the answer), fences and tables."""
    rec = out.record
    w = rec["window"]
    when = f"years {w['start_years']:g}–{w['end_years']:g}"
    goal = rec["settings"].get("goal")
    intro = (f"Each alternative is compared with '{out.base}' over {when} "
             f"({w['snapshots']} common snapshots). "
             + (f"Ranked by the goal '{goal}'." if goal else
                "No goal is set (analysis.goal or --goal), so the rows keep the order given."))
    blocks: list = [Paragraph(intro), _ranking_table(out)]
    if rec["warnings"]:
        blocks.append(Bullets(tuple(rec["warnings"])))
    parts = [Part("Ranking of the alternatives", tuple(blocks), anchor="ranking",
                  place="answer")]
    for r in out.ranking:
        parts.append(_alternative_part(out, r, when))
    parts += _detail_parts(out)
    parts.append(Part("How change is judged", (Paragraph(METHOD),), place="method"))
    return parts


def _alternative_part(out, r: dict, when: str) -> Part:
    alt = r["alternative"]
    blocks: list = [Paragraph(_alternative_sentence(out, r))]
    for key in ("level_change", "arrival_delay", "difference"):
        for sp in _predators_first(out):
            for f in pick(out.files, role="map", species=sp, key=f"{alt}:{key}"):
                blocks.append(Figure(out.path(f), f"{f.title} ({when})", f.title))
    for f in pick(out.files, key="totals"):
        blocks.append(Figure(out.path(f), f.title, f.title))
    return Part(f"Change: {out.base} → {alt}", tuple(blocks), anchor=f"change-{alt}",
                place="answer")


def _detail_parts(out) -> list[Part]:
    rec = out.record
    parts = []
    if rec["fences"]:
        rows = tuple((f["alternative"], f["fence"], f["species"] or "none completely",
                      f["length_m"], f["open_ends"], f["way_round_m"],
                      "yes" if f["separates"] else "no", f["sides_km2"]) for f in rec["fences"])
        parts.append(Part("Fences of the alternatives", (
            Paragraph("Checked on the grid before any run: an open end is where a fence stops "
                      "without meeting the landscape edge, no-data cells or another impassable "
                      "line; the way round is the width of the gap there."),
            Table(("alternative", "fence", "stops", "length (m)", "open ends",
                   "narrowest way round (m)", "separates", "sides (km²)"), rows)),
            place="detail"))
    if rec["sides"]:
        rows = tuple((s["alternative"], s["fence"], s["side"], s["species"], s["area_km2"],
                      s["mean_density_base"], s["mean_density"], s["change_pct"],
                      s["min_animals_base"], s["min_animals"]) for s in rec["sides"])
        parts.append(Part("Each side of each fence", (Table(
            ("alternative", "fence", "side", "species", "area (km²)", "density before "
             "(per km²)", "density after (per km²)", "change (%)", "fewest animals before",
             "fewest animals after"), rows,
            caption="Window means; 'before' is the reference run"),), place="detail"))
    return parts



