"""The tables and maps of a comparison of alternatives: ranking, zones, sides, fences.

Helpers of :func:`preyscape.analysis.compare.compare`, on the statistics it
gathered: plain values in, :class:`xarray.Dataset` and
:class:`pandas.DataFrame` out. Densities are animals/km², areas km², times
years, lengths metres.

Examples
--------
>>> import pandas as pd
>>> table = pd.DataFrame({"alternative": ["north", "south", "leaky"],
...                       "predator_window_change_pct": [-31.0, -25.0, -4.0]})
>>> list(rank(table, "fewer-predators")["alternative"])
['north', 'south', 'leaky']
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from preyscape.analysis.change import (
    LEVEL_CODES,
    NO_DATA,
    arrival_delay,
    level_change,
    window_of,
)
from preyscape.analysis.settings import GOALS, AnalysisSettings, check_goal
from preyscape.store import SPECIES

__all__ = ["change_maps", "cycle_length", "fence_table", "fence_warnings", "rank",
           "ranking_table", "time_warnings", "zone_tables"]


# --- maps --------------------------------------------------------------------------------
def change_maps(grid, per_run: Sequence[dict], labels: Sequence[str],
                settings: AnalysisSettings, window, *,
                species: Sequence[str] = SPECIES) -> Any:
    """Per-cell change maps of every alternative against the reference (first) run.

    Returns the :class:`xarray.Dataset` described in
    :class:`preyscape.analysis.compare.Comparison` (``maps``), with the
    variables of the ``species`` compared only.
    """
    import xarray as xr

    dims = ("alternative", "y", "x")
    data: dict[str, Any] = {}
    for sp in species:
        a = per_run[0][sp]
        stacks: dict[str, list] = {k: [] for k in (
            "mean", "difference", "margin", "ratio", "level_change", "persistence_difference",
            "arrival_delay", "arrival_status")}
        for run in per_run[1:]:
            b = run[sp]
            lc = level_change(a.stats, b.stats, threshold=settings.change_threshold,
                              presence=settings.presence)
            ad = arrival_delay(a.arrival, b.arrival, grid.mask, float(window.upto[0]))
            for key, arr in (("mean", b.stats.mean), ("difference", lc.difference),
                             ("margin", lc.margin), ("ratio", lc.ratio),
                             ("persistence_difference",
                              b.stats.persistence - a.stats.persistence),
                             ("arrival_delay", ad.delay)):
                stacks[key].append(np.asarray(arr, dtype=np.float32))
            stacks["level_change"].append(lc.classes)
            stacks["arrival_status"].append(ad.status)
        units = {"mean": "km-2", "difference": "km-2", "margin": "km-2", "ratio": "1",
                 "persistence_difference": "1", "arrival_delay": "year"}
        for key, arrs in stacks.items():
            attrs = {"units": units[key]} if key in units else {
                "flag_values": np.array(sorted(_codes(key)), dtype=np.int8),
                "flag_meanings": " ".join(_codes(key)[k].replace(" ", "_")
                                          for k in sorted(_codes(key))),
                "missing_value": np.int8(NO_DATA)}
            data[f"{sp}_{key}"] = (dims, np.stack(arrs), attrs)
        data[f"{sp}_mean_base"] = (("y", "x"), a.stats.mean.astype(np.float32),
                                   {"units": "km-2"})
    coords = {"alternative": list(labels[1:]), "y": grid.y, "x": grid.x}
    attrs = {"base": labels[0], "window_start_years": window.start,
             "window_end_years": window.end, "snapshots": int(window.times.size),
             "presence": settings.presence, "threshold": settings.change_threshold}
    return xr.Dataset(data, coords=coords, attrs=attrs)


def _codes(key: str) -> dict[int, str]:
    from preyscape.analysis.change import ARRIVAL_CODES

    return LEVEL_CODES if key == "level_change" else ARRIVAL_CODES


# --- fences -------------------------------------------------------------------------------
def _placed(run, species: Sequence[str] = SPECIES) -> list:
    """The run's fences and closed refuges as placed measures (faces and lines).

    A line stops only the ``species`` compared: the permeability of any other
    species is dropped (a missing species passes), and a refuge closed to
    predators is no line at all when predators are not compared.
    """
    from shapely.geometry import LineString

    from preyscape.landscape.placed import PlacedMeasure

    out = []
    for m in run.measures:
        closed = bool(m.get("closed_to_predators")) and "predator" in species
        if m["kind"] == "refuge" and not closed:
            continue
        faces = run.faces_of(m)
        if faces is None:
            continue
        lines = run.lines_of(m) if m["kind"] == "fence" else []
        perm = {sp: v for sp, v in (m.get("permeability") or {}).items() if sp in species}
        out.append(PlacedMeasure(
            str(m["name"]), str(m["kind"]), None, faces,
            shapes=tuple(LineString(v) for v in lines if len(v) >= 2),
            permeability=perm, gaps=tuple(m.get("gaps") or ()), closed_to_predators=closed))
    return out


FENCE_COLUMNS = ("alternative", "fence", "kind", "species", "length_m", "faces", "open_ends",
                 "way_round_m", "open_end_at", "separates", "sides_km2", "warning",
                 "open_end_points")


def fence_table(runs: Sequence, labels: Sequence[str], *,
                species: Sequence[str] = SPECIES) -> Any:
    """Topology of every fence and closed refuge of each alternative (a DataFrame).

    One row per alternative, line and species of ``species`` it stops (a line
    that stops none of them completely: one row with its length; a refuge
    closed to predators is left out when predators are not compared,
    :func:`_placed`). ``open_ends`` counts the
    ends animals can walk round that are not drawn gates; ``way_round_m``
    is the narrowest of them (metres), ``open_end_at`` says where they are
    and ``open_end_points`` lists them as ``(x, y, way round)`` in metres.
    """
    import pandas as pd

    from preyscape.landscape.topology import measure_topologies, place_text

    rows = []
    for run, label in zip(runs, labels, strict=True):
        names = run.species_names
        who = {"prey": f"prey ({names['prey']})", "predator": f"predators ({names['predator']})"}
        for t in measure_topologies(run.grid, _placed(run, species), who):
            leaks = [e for e in t["open_ends"] if not e["at_gap"]]
            rows.append({
                "alternative": label, "fence": t["name"], "kind": t["kind"],
                "species": t["species"] or "", "length_m": t["length_m"], "faces": t["faces"],
                "open_ends": len(leaks),
                "way_round_m": min((e["way_round_m"] for e in leaks), default=math.nan),
                "open_end_at": "; ".join(place_text(e["x"], e["y"]) for e in leaks),
                "open_end_points": [(e["x"], e["y"], e["way_round_m"]) for e in leaks],
                "separates": bool(t["separates"]),
                "sides_km2": " / ".join(f"{a:.3g}" for a in t["sides_km2"]),
                "warning": t["warning"] or ""})
    return pd.DataFrame(rows, columns=list(FENCE_COLUMNS))


def fence_warnings(fences) -> list[str]:
    """The fences' warnings, each once, naming the alternative."""
    out: list[str] = []
    for _, r in fences.iterrows():
        text = f"In '{r['alternative']}': {r['warning']}" if r["warning"] else ""
        if text and text not in out:
            out.append(text)
    return out


def time_warnings(runs: Sequence, labels: Sequence[str], window,
                  years: tuple[float, float | None] | None = None) -> list[str]:
    """Plain warnings about the snapshot times compared and the window's length."""
    out = []
    if not window.same_times:
        each = "; ".join(f"'{lab}': {r.times.size} snapshots to {r.times[-1]:g} years"
                         for r, lab in zip(runs, labels, strict=True))
        out.append(f"The runs have different lengths or snapshot times ({each}). They are "
                   f"compared at their {window.upto.size} common times only, up to "
                   f"{window.upto[-1]:g} years.")
    asked = None if years is None else years[1]
    if asked is not None and asked > window.end + 1e-9:
        out.append(f"The window asked for ends at {asked:g} years, but the runs share "
                   f"snapshots only up to {window.end:g} years; compared up to there.")
    period = cycle_length(runs[0])
    if period and window.years < period:
        out.append(f"The window ({window.years:g} year{'' if window.years == 1 else 's'}) is "
                   "shorter than one population cycle "
                   f"(about {period:.2g} years in '{labels[0]}'): a change in the timing of the "
                   "cycles cannot be told from a change in their level here, and counts as a "
                   "change.")
    return out


def cycle_length(run) -> float | None:
    """About how long one population cycle lasts in a run, years (None: no cycle seen).

    The longer of the local period predicted for small cycles (``run.json``
    predictions; large cycles last longer) and the spacing of the first two
    clear peaks of the run's landscape total of predators (of prey in a run of
    prey alone; peaks standing out by at least a tenth of the total's range:
    common practice, no source).
    """
    from scipy.signal import find_peaks

    guess = [float((run.predictions or {}).get("period_years") or math.nan)]
    tot = run.totals("predator" if "predator" in run.species else "prey")
    if tot.size > 2 and np.ptp(tot) > 0:
        peaks, _ = find_peaks(tot, prominence=0.1 * float(np.ptp(tot)))
        if peaks.size >= 2:
            guess.append(float(run.times[peaks[1]] - run.times[peaks[0]]))
    good = [g for g in guess if math.isfinite(g) and g > 0]
    return max(good) if good else None


# --- zones and sides ----------------------------------------------------------------------------
def zone_tables(zonings: Sequence, per_run: Sequence[dict], labels: Sequence[str], grid,
                presence: float, *, species: Sequence[str] = SPECIES) -> dict[str, Any]:
    """Per zone (habitat class or user zone) and per side of each fence: before and after.

    Returns ``{"zones": DataFrame, "sides": DataFrame}``; one row per
    alternative, zone and species of ``species``, with the reference run's
    values (``..._base``) and the alternative's.
    """
    import pandas as pd

    out: dict[str, list] = {"zones": [], "sides": []}
    area = grid.cell_area_km2
    for z_index, zoning in enumerate(zonings):
        lab = np.where(grid.mask, zoning.labels, -1)
        cells = np.bincount(lab[lab >= 0], minlength=len(zoning.names))
        for k, alt in enumerate(labels[1:], start=1):
            if alt not in zoning.alternatives:
                continue
            for sp in species:
                a, b = per_run[0][sp].stats, per_run[k][sp].stats
                rows = _zone_rows(zoning, z_index, lab, cells, a, b, area, presence)
                for row in rows:
                    row.update(alternative=alt, species=sp)
                out["sides" if zoning.kind == "side" else "zones"] += rows
    return {key: pd.DataFrame(rows, columns=list(ZONE_COLUMNS if key == "zones"
                                                 else SIDE_COLUMNS))
            for key, rows in out.items()}


ZONE_COLUMNS = ("alternative", "zoning", "zone", "species", "area_km2", "mean_density_base",
                "mean_density", "change_pct", "mean_animals_base", "mean_animals",
                "min_animals_base", "min_animals", "persistence_base", "persistence")
SIDE_COLUMNS = ("alternative", "fence", "side", "species", "area_km2", "mean_density_base",
                "mean_density", "change_pct", "mean_animals_base", "mean_animals",
                "min_animals_base", "min_animals", "persistence_base", "persistence")


def _zone_rows(zoning, z_index: int, lab: np.ndarray, cells: np.ndarray, a, b, area: float,
               presence: float) -> list[dict]:
    rows = []
    for z, name in enumerate(zoning.names):
        if cells[z] == 0:
            continue
        in_zone = lab == z
        row: dict[str, Any] = {"zoning": zoning.kind, "zone": name, "fence": zoning.fence,
                               "side": name, "area_km2": float(cells[z] * area)}
        for suffix, st in (("_base", a), ("", b)):
            animals = st.zone_sums[z_index][:, z] * area
            row[f"mean_animals{suffix}"] = float(animals.mean())
            row[f"min_animals{suffix}"] = float(animals.min())
            row[f"mean_density{suffix}"] = float(animals.mean() / row["area_km2"])
            row[f"persistence{suffix}"] = float(np.mean(st.persistence[in_zone]))
        base = row["mean_animals_base"]
        row["change_pct"] = (100.0 * (row["mean_animals"] - base) / base
                             if base > presence * 1e-6 else math.nan)
        rows.append(row)
    return rows


# --- the ranking ---------------------------------------------------------------------------------
def _measures_text(base, run) -> str:
    have = {m["name"] for m in base.measures}
    now = {m["name"] for m in run.measures}
    parts = [f"+{n}" for n in sorted(now - have)] + [f"−{n}" for n in sorted(have - now)]
    return ", ".join(parts) or "as the reference"


def _pct(after: float, before: float) -> float:
    return 100.0 * (after - before) / before if before else math.nan


def ranking_table(runs: Sequence, labels: Sequence[str], per_run: Sequence[dict], maps,
                  window, fences, settings: AnalysisSettings, *,
                  species: Sequence[str] = SPECIES) -> Any:
    """One row per alternative, with the columns a planner reads (a DataFrame).

    Columns, for each species ``sp`` of ``species`` (the species compared;
    no predator columns for prey alone): ``{sp}_total_change_pct`` (change of
    the landscape's mean number of animals over every common snapshot after
    the start, %), ``{sp}_window_change_pct`` (the same in the window),
    ``{sp}_gain_km2`` and ``{sp}_loss_km2`` (area where the level rose or fell
    beyond the margin, :mod:`preyscape.analysis.change`), ``{sp}_gone_km2``
    (area where it is no longer present), ``{sp}_clarity`` (median of
    |difference| / margin over the changed cells: how far beyond what timing
    and the threshold allow the changes typically are; > 1 by construction,
    infinite where a species vanishes from a steady cell),
    ``{sp}_persistence_change``
    (landscape mean, −1 to 1), ``{sp}_median_delay_yr`` (median arrival
    delay where it arrives in both runs), ``{sp}_never_km2`` (area it reaches
    only without the alternative), and ``{sp}_delay_at_<target>_yr`` (change
    of the colonisation time of each target patch; inf: never colonised with
    the alternative). Then ``fence_length_m``, ``open_ends`` (ends that can
    be walked round), ``leaky`` (names of such lines), ``measures`` and
    ``rank`` (by ``settings.goal``; 1 is best; empty without a goal).
    """
    import pandas as pd

    whole = window_of([r.times for r in runs], None)
    area = runs[0].grid.cell_area_km2
    rows = []
    for k, (run, label) in enumerate(zip(runs[1:], labels[1:], strict=True), start=1):
        row: dict[str, Any] = {"alternative": label,
                               "measures": _measures_text(runs[0], run)}
        for sp in species:
            row.update(_species_columns(runs[0], run, k, sp, whole, window, maps, area,
                                        label))
            for name, t_base in per_run[0][sp].targets.items():
                t_alt = per_run[k][sp].targets.get(name, math.nan)
                delay = (t_alt - t_base if math.isfinite(t_alt) else math.inf) if math.isfinite(
                    t_base) else math.nan
                row[f"{sp}_delay_at_{_slug(name)}_yr"] = delay
        mine = fences[fences["alternative"] == label] if len(fences) else fences
        row["fence_length_m"] = float(mine.drop_duplicates("fence")["length_m"].sum()
                                      ) if len(mine) else 0.0
        row["open_ends"] = int(mine["open_ends"].sum()) if len(mine) else 0
        row["leaky"] = ", ".join(sorted(set(mine.loc[mine["open_ends"] > 0, "fence"]))
                                 ) if len(mine) else ""
        rows.append(row)
    return rank(pd.DataFrame(rows), settings.goal)


def _species_columns(base, run, k: int, sp: str, whole, window, maps, area: float,
                     label: str) -> dict[str, float]:
    tb, ta = base.totals(sp), run.totals(sp)
    cls = maps[f"{sp}_level_change"].sel(alternative=label).values
    status = maps[f"{sp}_arrival_status"].sel(alternative=label).values
    delay = maps[f"{sp}_arrival_delay"].sel(alternative=label).values
    pers = maps[f"{sp}_persistence_difference"].sel(alternative=label).values
    ratio = np.abs(maps[f"{sp}_ratio"].sel(alternative=label).values)
    changed = (cls != 0) & (cls != NO_DATA) & np.isfinite(ratio)
    mask = base.mask
    return {
        f"{sp}_total_change_pct": _pct(float(ta[list(whole.indices[k])].mean()),
                                       float(tb[list(whole.indices[0])].mean())),
        f"{sp}_window_change_pct": _pct(float(ta[list(window.indices[k])].mean()),
                                        float(tb[list(window.indices[0])].mean())),
        f"{sp}_gain_km2": float(np.count_nonzero(cls > 0) * area),
        f"{sp}_loss_km2": float(np.count_nonzero((cls < 0) & (cls != NO_DATA)) * area),
        f"{sp}_gone_km2": float(np.count_nonzero(cls == -2) * area),
        f"{sp}_clarity": float(np.median(ratio[changed])) if changed.any() else math.nan,
        f"{sp}_persistence_change": float(np.nanmean(pers[mask])),
        f"{sp}_median_delay_yr": (float(np.nanmedian(delay)) if np.isfinite(delay).any()
                                  else math.nan),
        f"{sp}_never_km2": float(np.count_nonzero(status == 1) * area),
    }


def _slug(name: str) -> str:
    from preyscape.names import slug

    return slug(name).replace("-", "_")


def rank(table, goal: str | None) -> Any:
    """Order alternatives by ``goal`` (:data:`~preyscape.analysis.settings.GOALS`).

    The goal names a species and a direction; alternatives are ranked by the
    change of that species' landscape total in the window
    (``<species>_window_change_pct``), the best first, with a ``rank``
    column (1 = best). Without a goal the order is kept and ``rank`` is empty.

    Raises
    ------
    InputError
        If the goal's species has no column (runs of prey alone,
        :func:`~preyscape.analysis.settings.check_goal`).
    """
    out = table.copy()
    if goal is None or not len(out):
        out.insert(0, "rank", [None] * len(out))
        return out
    sp, sign = GOALS[goal]
    if f"{sp}_window_change_pct" not in out:
        check_goal(goal, [s for s in SPECIES if f"{s}_window_change_pct" in out])
    key = out[f"{sp}_window_change_pct"] * sign
    out = out.assign(_key=key).sort_values("_key", ascending=False, kind="stable",
                                          na_position="last").drop(columns="_key")
    out.insert(0, "rank", list(range(1, len(out) + 1)))
    return out.reset_index(drop=True)
