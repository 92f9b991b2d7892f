"""The summary folder of an ensemble and the report's uncertainty section.

:func:`write_summaries` reads the member store one member at a time and writes
``ENSEMBLE/summary`` atomically (a temporary folder renamed into place):

- ``persistence_<variant>_<species>.tif`` / ``.png``: probability of persistence;
- ``gain_<alternative>_<species>.tif``, ``loss_...``: probability of a gain or a
  loss against the baseline (beyond the timing margin: the rule of
  :func:`preyscape.analysis.change.level_change`), and
  ``robust_<alternative>_<species>.tif``: robust change (int8: 1 gain, −1 loss,
  0 none, −128 no data), each with a PNG map;
- ``ranking.csv`` / ``ranking.png``: the alternatives with the median and 5–95 %
  interval of every ranking column;
- ``outcomes.csv``: every stored member's landscape outcomes and values;
- ``prcc.csv`` / ``prcc.png``: partial rank correlation coefficients with p-values;
- ``sobol.csv`` / ``sobol.png``: first-order and total Sobol' indices (Sobol' design);
- ``summary.json``: the record :func:`open_ensemble` reads back.

:class:`EnsembleOutput` names every file with its role and builds the report's
uncertainty section (:meth:`EnsembleOutput.report_parts`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from preyscape.analysis.output import (
    Bullets,
    Figure,
    FileRecord,
    Paragraph,
    Part,
    Table,
    Written,
    output_folder,
    pick,
    write_csv,
    write_raster,
)
from preyscape.cautions import CAUTION
from preyscape.ensemble import figures
from preyscape.ensemble.sensitivity import prcc, sobol_indices
from preyscape.ensemble.summaries import NO_DATA, Summaries, ranking, summarise
from preyscape.errors import FileProblem
from preyscape.names import slug
from preyscape.store import SPECIES, grid_of

__all__ = ["EnsembleOutput", "OUTCOMES", "SOURCES", "open_ensemble", "write_summaries"]

OUTCOMES = {"total": "animals in the landscape (time mean)",
            "occupied_km2": "area occupied at the end (km²)",
            "reached_km2": "area reached (km²)",
            "total_change": "change of the landscape total against the baseline (fraction)"}
"""Landscape outcomes of the sensitivity analysis, per species (``<species>_<outcome>``)."""

SOURCES = [
    "Change beyond the timing of population cycles: the adjusted range of cumulative "
    "departures, Hurst 1951, Trans Am Soc Civ Eng 116:770 (from memory).",
    "Latin hypercube sampling: McKay, Beckman & Conover 1979, Technometrics 21:239 "
    "(scipy.stats.qmc).",
    "Partial rank correlation coefficients and their t-test: Marino, Hogue, Ray & "
    "Kirschner 2008, J Theor Biol 254:178.",
    "Sobol' indices from the Saltelli design: Saltelli et al. 2010, Comput Phys Commun "
    "181:259 (SALib: Herman & Usher 2017, J Open Source Softw 2(9):97).",
]

_SIGNIFICANT = 0.05  # p-value below which a PRCC is drawn solid (common practice, no source)


@dataclass(frozen=True)
class EnsembleOutput(Written):
    """What :func:`write_summaries` wrote.

    Attributes
    ----------
    record : dict
        The contents of ``summary.json``: settings, members stored per
        variant, failures, ranking rows, PRCC and Sobol' rows, headline numbers.
    """

    record: dict = field(default_factory=dict)

    @property
    def ranking(self) -> list[dict]:
        """The ranking rows (:func:`preyscape.ensemble.summaries.ranking`)."""
        return self.record.get("ranking", [])

    def summary_lines(self) -> list[str]:
        rec = self.record
        lines = [f"ensemble summary: {self.folder}",
                 f"  {rec['members']} members per variant ({rec['design']}); stored: "
                 + ", ".join(f"{v} {n}" for v, n in rec["stored"].items())]
        for r in self.ranking:
            lines.append(f"  {r['alternative']}: prey total {_pct(r, 'prey_total_change')}, "
                         f"predator total {_pct(r, 'predator_total_change')} (median, 5–95 %)")
        if rec["failures"]:
            lines.append(f"  {len(rec['failures'])} members failed (failures.csv)")
        return lines

    def headlines(self) -> list[str]:
        rec = self.record
        out = []
        for r in self.ranking:
            out.append(f"Across {r['pairs']} ensemble members, '{r['alternative']}' changes the "
                       f"prey's landscape total by {_pct(r, 'prey_total_change')} and the "
                       f"predator's by {_pct(r, 'predator_total_change')} (median, with the "
                       "5–95 % range of the members).")
        for alt, areas in rec.get("robust_km2", {}).items():
            for sp, (g, lo) in areas.items():
                if g or lo:
                    out.append(f"'{alt}': {sp} gain robustly on {g:.3g} km² and lose robustly "
                               f"on {lo:.3g} km² (at least {rec['agreement']:.0%} of members "
                               "agree).")
        return out

    def _figs(self, role: str, key: str | None = None, species: str | None = None):
        return [Figure(self.path(f), f.title, f.title)
                for f in pick(self.files, role=role, key=key, species=species)]

    def report_parts(self) -> list[Part]:
        return [self._answer_part(), self._persistence_part(), self._sensitivity_part(),
                self._method_part()]

    def _answer_part(self) -> Part:
        rec = self.record
        blocks: list = [Paragraph(
            f"{rec['members']} members per variant drew the uncertain parameters from their "
            f"ranges; member i of each alternative uses the same values and seed as member i "
            f"of the baseline, so each alternative is compared with the baseline member by "
            f"member. A cell gains (loses) when its mean density over the run rises (falls) "
            f"by more than {rec['change_threshold']:.0%} and by more than the timing margin "
            "of the two members' population cycles, or the species appears (disappears): "
            "the rule of the run comparison, so a measure that only shifts the timing of "
            "the cycles is no change. A robust change is one at least "
            f"{rec['agreement']:.0%} of the member pairs agree on.")]
        if self.ranking:
            blocks.append(_ranking_table(self.ranking, rec["rank_by"]))
            blocks += self._figs("figure", key="ranking")
        for alt in rec["alternatives"]:
            for sp in SPECIES:
                blocks += self._figs("map", key=f"robust:{alt}", species=sp)
        if rec["failures"]:
            blocks.append(Bullets(tuple(f"{f['variant']} member {f['member']}: {f['message']}"
                                        for f in rec["failures"][:20])))
        blocks.append(Paragraph(CAUTION))
        return Part("Uncertainty: how sure each answer is", tuple(blocks),
                    anchor="uncertainty", place="answer")

    def _persistence_part(self) -> Part:
        blocks: list = [Paragraph(
            "Probability of persistence: the share of members in which the species is "
            "present at the end of the run. Probability of a gain or loss: the share of "
            "member pairs in which the cell gains or loses against the baseline beyond what "
            "the timing of population cycles alone explains.")]
        for sp in SPECIES:
            blocks += self._figs("map", key="persistence", species=sp)
        for alt in self.record["alternatives"]:
            for sp in SPECIES:
                blocks += self._figs("map", key=f"gain:{alt}", species=sp)
                blocks += self._figs("map", key=f"loss:{alt}", species=sp)
        return Part("Uncertainty: persistence and change across members", tuple(blocks),
                    anchor="uncertainty-maps", place="detail")

    def _sensitivity_part(self) -> Part:
        rec = self.record
        rows = tuple((r["variant"], r["outcome"], r["parameter"], r["prcc"], r["p_value"])
                     for r in rec["prcc"])
        blocks: list = [Paragraph(
            "Partial rank correlation (PRCC) of each landscape outcome with each parameter, "
            "the others held fixed: near ±1 the outcome rises or falls steadily with the "
            f"parameter; bars with p ≥ {_SIGNIFICANT} are hatched."),
            Table(("variant", "outcome", "parameter", "PRCC", "p-value"), rows,
                  caption="Partial rank correlation coefficients (Marino et al. 2008)")]
        blocks += self._figs("figure", key="prcc")
        if rec.get("sobol"):
            srows = tuple((r["variant"], r["outcome"], r["parameter"], r["S1"], r["S1_conf"],
                           r["ST"], r["ST_conf"]) for r in rec["sobol"])
            blocks.append(Table(("variant", "outcome", "parameter", "S1", "± (95 %)", "ST",
                                 "± (95 %)"), srows,
                                caption="First-order (S1) and total (ST) Sobol' indices"))
            blocks += self._figs("figure", key="sobol")
        return Part("Uncertainty: which parameters matter", tuple(blocks),
                    anchor="uncertainty-sensitivity", place="detail")

    def _method_part(self) -> Part:
        rec = self.record
        items = [f"{p['key']}: {p['distribution']} on [{p['range'][0]:g}, {p['range'][1]:g}]"
                 + (f", mean {p['mean']:g}, sd {p['sd']:g}" if p.get("mean") is not None
                    else "") for p in rec["parameters"]]
        return Part("Uncertainty: the ensemble", (
            Paragraph(f"Design: {rec['design']}, {rec['members']} members, ensemble seed "
                      f"{rec['seed']}; each member's run.seed is derived from the ensemble "
                      "seed and its index. Parameters and ranges:"),
            Bullets(tuple(items)), Bullets(tuple(SOURCES))),
            anchor="uncertainty-method", place="method")


def _pct(row: dict, col: str) -> str:
    m, lo, hi = (row.get(f"{col}_{k}") for k in ("median", "low", "high"))
    if m is None or not np.isfinite(m):
        return "n/a"
    return f"{100 * m:+.1f} % ({100 * lo:+.1f} to {100 * hi:+.1f} %)"


def _ranking_table(rows: list[dict], rank_by: str) -> Table:
    def iv(r, c, scale=1.0):
        return (f"{scale * r[f'{c}_median']:.3g} [{scale * r[f'{c}_low']:.3g}, "
                f"{scale * r[f'{c}_high']:.3g}]") if np.isfinite(r[f"{c}_median"]) else "n/a"

    header = ("alternative", "rank", "best in", "prey total (%)", "predator total (%)",
              "prey gained / lost (km²)", "predator gained / lost (km²)")
    body = tuple((r["alternative"], iv(r, "rank"), f"{r['share_best']:.0%}",
                  iv(r, "prey_total_change", 100), iv(r, "predator_total_change", 100),
                  f"{iv(r, 'prey_area_gained_km2')} / {iv(r, 'prey_area_lost_km2')}",
                  f"{iv(r, 'predator_area_gained_km2')} / {iv(r, 'predator_area_lost_km2')}")
                 for r in rows)
    return Table(header, body, caption=f"Alternatives ranked by {rank_by} (highest first): "
                 "median [5 %, 95 %] across member pairs; 'best in' is the share of members "
                 "in which the alternative ranks first")


def _maps(tmp: Path, grid, s: Summaries, names: dict, draw: bool) -> list[FileRecord]:
    files = []
    for (v, sp), p in s.persistence.items():
        base = f"persistence_{slug(v)}_{sp}"
        title = f"Probability of persistence: {names[sp]} in {v} ({s.stored[v]} members)"
        write_raster(tmp / f"{base}.tif", grid, p, description=title, units="1")
        files.append(FileRecord(f"{base}.tif", "raster", title, sp, "persistence"))
        if draw:
            figures.probability_map(grid, p, title, tmp / f"{base}.png", cmap="YlGn")
            files.append(FileRecord(f"{base}.png", "map", title, sp, "persistence"))
    for (alt, sp), p in s.gain.items():
        for what, arr, cmap in (("gain", p, "Blues"), ("loss", s.loss[(alt, sp)], "Oranges")):
            base = f"{what}_{slug(alt)}_{sp}"
            title = f"Probability of a {what}: {names[sp]}, {alt} vs baseline"
            write_raster(tmp / f"{base}.tif", grid, arr, description=title, units="1")
            files.append(FileRecord(f"{base}.tif", "raster", title, sp, f"{what}:{alt}"))
            if draw:
                figures.probability_map(grid, arr, title, tmp / f"{base}.png", cmap=cmap)
                files.append(FileRecord(f"{base}.png", "map", title, sp, f"{what}:{alt}"))
        base = f"robust_{slug(alt)}_{sp}"
        title = (f"Robust change: {names[sp]}, {alt} vs baseline (≥ {s.agreement:.0%} of "
                 f"{s.pairs[alt]} member pairs agree)")
        write_raster(tmp / f"{base}.tif", grid, s.robust[(alt, sp)], description=title,
                     nodata=NO_DATA, dtype="int8")
        files.append(FileRecord(f"{base}.tif", "raster", title, sp, f"robust:{alt}"))
        if draw:
            figures.robust_map(grid, s.robust[(alt, sp)], title, tmp / f"{base}.png")
            files.append(FileRecord(f"{base}.png", "map", title, sp, f"robust:{alt}"))
    return files


def _outcome_series(s: Summaries, variant: str, members: list[int]) -> dict[str, np.ndarray]:
    """Each outcome of ``variant`` over ``members`` (NaN where a member is missing)."""
    keys = [f"{sp}_{o}" for sp in SPECIES for o in ("total", "occupied_km2", "reached_km2")]
    out = {k: np.array([s.outcomes.get((variant, m), {}).get(k, np.nan) for m in members])
           for k in keys}
    if variant in s.pairs:
        for sp in SPECIES:
            k = f"{sp}_total_change"
            out[k] = np.array([s.changes.get((variant, m), {}).get(k, np.nan)
                               for m in members])
    return out


def _sensitivity(ds, s: Summaries, design: str, seed: int) -> tuple[list[dict], list[dict]]:
    values = np.asarray(ds["value"].values, dtype=float)
    keys = [str(k) for k in ds["parameter"].values]
    members = list(range(values.shape[0]))
    prcc_rows, sobol_rows = [], []
    for v in (str(x) for x in ds["variant"].values):
        for outcome, y in _outcome_series(s, v, members).items():
            ok = np.isfinite(y)
            r, p = prcc(values[ok], y[ok]) if ok.sum() > len(keys) + 1 else (
                np.full(len(keys), np.nan), np.full(len(keys), np.nan))
            prcc_rows += [{"variant": v, "outcome": outcome, "parameter": k, "prcc": float(a),
                           "p_value": float(b), "members": int(ok.sum())}
                          for k, a, b in zip(keys, r, p, strict=True)]
            if design == "sobol":
                ix = sobol_indices(y, len(keys), seed=seed)
                sobol_rows += [{"variant": v, "outcome": outcome, "parameter": k,
                                **{n: float(ix[n][j]) for n in ("S1", "S1_conf", "ST",
                                                                "ST_conf")}}
                               for j, k in enumerate(keys)]
    return prcc_rows, sobol_rows


def _tables(tmp: Path, ds, s: Summaries, rank: list[dict], prcc_rows, sobol_rows,
            names: dict, draw: bool) -> list[FileRecord]:
    files = []
    if rank:
        cols = list(rank[0])
        write_csv(tmp / "ranking.csv", cols, [[r[c] for c in cols] for r in rank])
        files.append(FileRecord("ranking.csv", "table", "Ranking of the alternatives with "
                                "intervals", key="ranking"))
    if rank and draw:
        figures.interval_plot(rank, [("prey_total_change", f"{names['prey']}: total (%)", 100),
                                     ("predator_total_change",
                                      f"{names['predator']}: total (%)", 100)],
                              "Change against the baseline: median and 5–95 % of members",
                              tmp / "ranking.png")
        files.append(FileRecord("ranking.png", "figure", "Change of the landscape totals "
                                "against the baseline (median and 5–95 % of members)",
                                key="ranking"))
    keys = [str(k) for k in ds["parameter"].values]
    values = np.asarray(ds["value"].values, dtype=float)
    out_cols = sorted({k for o in s.outcomes.values() for k in o})
    write_csv(tmp / "outcomes.csv", ["variant", "member", *out_cols, *keys],
              [[v, m, *(o[c] for c in out_cols), *values[m]]
               for (v, m), o in sorted(s.outcomes.items())])
    files.append(FileRecord("outcomes.csv", "table", "Landscape outcomes of every member",
                            key="outcomes"))
    for name, rows in (("prcc", prcc_rows), ("sobol", sobol_rows)):
        if rows:
            write_csv(tmp / f"{name}.csv", list(rows[0]), [list(r.values()) for r in rows])
            files.append(FileRecord(f"{name}.csv", "table", f"Sensitivity: {name}", key=name))
    if draw:
        files += _sensitivity_figures(tmp, keys, prcc_rows, sobol_rows)
    return files


def _sensitivity_figures(tmp: Path, keys: list[str], prcc_rows, sobol_rows):
    """PRCC and Sobol' figures: the baseline's outcomes and each alternative's changes.

    Outcomes that do not vary across members (all coefficients undefined) are left out.
    """
    files = []

    def series(rows, variant, outcome, name):
        return np.array([r[name] for r in rows if r["variant"] == variant
                         and r["outcome"] == outcome], dtype=float)

    base = prcc_rows[0]["variant"] if prcc_rows else None
    pairs = list(dict.fromkeys((r["variant"], r["outcome"]) for r in prcc_rows
                               if r["variant"] == base or r["outcome"].endswith("_change")))
    shown = [(v, o) for v, o in pairs if np.isfinite(series(prcc_rows, v, o, "prcc")).any()]
    left = "" if len(shown) == len(pairs) else "; outcomes that do not vary are left out"
    if shown:
        panels = [(f"{v}: {o}", series(prcc_rows, v, o, "prcc"),
                   series(prcc_rows, v, o, "p_value") < _SIGNIFICANT) for v, o in shown]
        title = f"PRCC of landscape outcomes; hatched: p ≥ {_SIGNIFICANT}{left}"
        figures.sensitivity_plot(keys, panels, title, tmp / "prcc.png")
        files.append(FileRecord("prcc.png", "figure", title, key="prcc"))
    shown = [(v, o) for v, o in pairs if np.isfinite(series(sobol_rows, v, o, "S1")).any()]
    if sobol_rows and shown:
        panels = [(f"{v}: {o}", series(sobol_rows, v, o, "S1"), np.ones(len(keys), bool),
                   series(sobol_rows, v, o, "ST")) for v, o in shown]
        title = "Sobol' indices of landscape outcomes" + left
        figures.sensitivity_plot(keys, panels, title, tmp / "sobol.png", label="index",
                                 limits=(0.0, 1.05), legend=("first order S1", "total ST"))
        files.append(FileRecord("sobol.png", "figure", title, key="sobol"))
    return files


def write_summaries(folder: str | Path, *, threshold: float, agreement: float,
                    rank_by: str = "prey_total_change", failures=(),
                    maps: bool = True) -> EnsembleOutput:
    """Summarise an ensemble folder's member store into ``folder/summary`` (replaced).

    Parameters
    ----------
    folder : str or pathlib.Path
        The ensemble folder (with ``members.zarr`` and ``ensemble.json``).
    threshold : float
        Smallest relative change of the time mean that counts (0.1 = 10 %), besides
        the timing margin (:func:`preyscape.ensemble.summaries.change_classes`).
    agreement : float
        Share of member pairs that must agree for a robust change.
    rank_by : str
        Ranking column of the alternatives.
    failures : iterable of MemberFailure
        Failed members, listed in the record.
    maps : bool
        Draw the PNG maps and figures (the GeoTIFFs and tables are always written).

    Returns
    -------
    EnsembleOutput
    """
    from preyscape.ensemble.store import open_members

    folder = Path(folder)
    ds = open_members(folder / "members.zarr")
    grid = grid_of(ds)
    presence = float(ds.attrs["presence"])
    sp_names = ds.attrs.get("species_names") or {}
    names = {sp: (f"{sp} ({sp_names[sp]})" if sp_names.get(sp) else sp) for sp in SPECIES}
    s = summarise(ds, presence=presence, threshold=threshold, agreement=agreement)
    rank = ranking(s, rank_by=rank_by) if s.changes else []
    design, seed = str(ds.attrs.get("design")), int(ds.attrs.get("seed", 0))
    prcc_rows, sobol_rows = _sensitivity(ds, s, design, seed)
    plan = json.loads((folder / "ensemble.json").read_text()) if (
        folder / "ensemble.json").is_file() else {}
    record = {
        "members": int(ds.sizes["member"]), "design": design, "seed": seed,
        "variants": [str(v) for v in ds["variant"].values],
        "alternatives": sorted(s.pairs), "stored": s.stored, "pairs": s.pairs,
        "presence": presence, "change_threshold": threshold, "agreement": agreement,
        "rank_by": rank_by, "parameters": plan.get("parameters") or [
            {"key": str(k), "distribution": "?", "range": [np.nan, np.nan]}
            for k in ds["parameter"].values],
        "failures": [{"variant": f.variant, "member": f.index, "message": f.message}
                     for f in failures],
        "ranking": rank, "prcc": prcc_rows, "sobol": sobol_rows,
        "robust_km2": {alt: {sp: [float((s.robust[(alt, sp)] == k).sum() * grid.cell_area_km2)
                                  for k in (1, -1)] for sp in SPECIES} for alt in s.pairs},
    }
    with output_folder(folder / "summary", True, "summary folder") as tmp:
        files = _maps(tmp, grid, s, names, maps)
        files += _tables(tmp, ds, s, rank, prcc_rows, sobol_rows, names, maps)
        record["files"] = [vars(f) for f in files]
        (tmp / "summary.json").write_text(json.dumps(record, indent=1, default=_json) + "\n")
    ds.close()
    return EnsembleOutput(folder / "summary", tuple(files), record)


def _json(x):
    if isinstance(x, (np.floating, np.integer)):
        return x.item()
    raise TypeError(type(x).__name__)


def open_ensemble(folder: str | Path) -> EnsembleOutput:
    """The summaries of a finished ensemble folder (for the report), without recomputing.

    Raises
    ------
    FileProblem
        If ``folder`` has no summary (the ensemble has not finished).
    """
    folder = Path(folder)
    path = folder / "summary" / "summary.json"
    if not path.is_file():
        raise FileProblem("no ensemble summary here (summary/summary.json); run "
                          "'preyscape ensemble' to the end first", str(folder))
    record = json.loads(path.read_text())
    files = tuple(FileRecord(**f) for f in record.get("files", []))
    return EnsembleOutput(folder / "summary", files, record)
