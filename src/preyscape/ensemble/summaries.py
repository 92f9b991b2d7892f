"""Summaries across members: persistence and change probabilities, robust change, ranking.

Definitions (densities animals/km², areas km², times years):

presence at the end
    A member's final density at or above the presence threshold.
probability of persistence
    Per cell, the share of a variant's stored members with the species
    present at the end.
change of a member pair
    Member *i* of an alternative against member *i* of the baseline (same
    drawn values, same seed) by :func:`change_classes`, the rule of the run
    comparison (``preyscape compare``,
    :func:`preyscape.analysis.change.level_change`): the difference of the
    time means over the snapshots after the start counts only where it
    exceeds both the timing margin (R_A + R_B)/n, the adjusted range of the
    cumulative departures of each member (Hurst 1951, Trans. Am. Soc. Civ.
    Eng. 116:770) over the number of snapshots, and the change threshold times
    the baseline's mean. A cell gains where the classes are above 0 (*more*,
    *new*) and loses where they are below 0 (*fewer*, *gone*). A measure that
    only shifts the timing of population cycles moves the means by less than
    the margin, so it is no change; the earlier rule (the mean changes by
    more than 10 %) counted it as one nearly everywhere.
probability of a gain (loss)
    Per cell, the share of member pairs classed as a gain (loss).
robust change
    Cells where at least the agreement share of member pairs agree on the
    direction: +1 robust gain, −1 robust loss, 0 otherwise.
ranking columns
    Per member pair and species: the relative change of the landscape total
    (the mean over the snapshots after the start, 0.1 = 10 %), the area gained
    and lost, and the change of the area occupied at the end.

Every statistic streams over members (one member's maps in memory at a
time), so memory does not grow with the number of members.

Examples
--------
Four cells over one period of a cycle: in member B the first cell cycles half a
period later, the second at half the level, the third at twice the level, and
the fourth cell's species appears:

>>> from preyscape.analysis.change import window_statistics
>>> t = np.arange(1, 9) / 8.0
>>> c = 10 + 8 * np.sin(2 * np.pi * t)
>>> a = window_statistics([np.array([[v, v, v, 0.0]]) for v in c], presence=1.0)
>>> b = window_statistics([np.array([[20 - v, v / 2, 2 * v, 5.0]]) for v in c],
...                       presence=1.0)
>>> change_classes(a, b, threshold=0.1, presence=1.0).tolist()
[[0, -1, 1, 2]]
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from preyscape.analysis.change import NO_DATA, WindowStatistics, level_change
from preyscape.store import SPECIES, used_snapshots

__all__ = ["NO_DATA", "RANKING_COLUMNS", "Summaries", "change_classes", "member_outcomes",
           "member_statistics", "ranking", "summarise"]

# NO_DATA (-128): code of change_classes and the robust change maps for cells without data

RANKING_COLUMNS = ("total_change", "area_gained_km2", "area_lost_km2", "occupied_change_km2")
"""Per-species ranking columns, named ``<species>_<column>``."""


def change_classes(a: WindowStatistics, b: WindowStatistics, *, threshold: float,
                   presence: float) -> np.ndarray:
    """Level change of member B against member A per cell, by the comparison's rule.

    The classes of :func:`preyscape.analysis.change.level_change`: −2 gone,
    −1 fewer, 0 no clear change, 1 more, 2 new; a gain is a class above 0, a
    loss one below 0 (other than :data:`NO_DATA`).

    Parameters
    ----------
    a, b : WindowStatistics
        Window mean and timing margin of each member (animals/km², over the
        same snapshots), for example :func:`member_statistics`.
    threshold : float
        Smallest relative change of the mean that counts (0.1 = 10 % of A's), ≥ 0.
    presence : float
        Presence threshold, animals/km², > 0.

    Returns
    -------
    numpy.ndarray of int8
        The classes; :data:`NO_DATA` where either mean is not finite.
    """
    if not (np.isfinite(presence) and presence > 0):
        raise ValueError(f"presence must be a positive density, not {presence!r}")
    if not (np.isfinite(threshold) and threshold >= 0):
        raise ValueError(f"threshold must be a non-negative fraction, not {threshold!r}")
    if a.mean.shape != b.mean.shape:
        raise ValueError(f"maps have shapes {a.mean.shape} and {b.mean.shape}")
    return level_change(a, b, threshold=threshold, presence=presence).classes


def _read(ds, name: str, v: int, m: int) -> np.ndarray:
    return np.asarray(ds[name].isel(variant=v, member=m).values)


def member_statistics(ds, species: str, v: int, m: int) -> WindowStatistics:
    """One stored member's window statistics of ``species`` (float64 of the float32 maps).

    Parameters
    ----------
    ds : xarray.Dataset
        The member store.
    species : str
        ``"prey"`` or ``"predator"``.
    v, m : int
        Variant and member positions.
    """
    def get(k: str) -> np.ndarray:
        return _read(ds, f"{species}_{k}", v, m).astype(np.float64)

    return WindowStatistics(get("mean"), get("margin"), get("persistence"),
                            len(used_snapshots(ds.sizes["time"])))


def _used_mean(totals: np.ndarray) -> float:
    return float(np.mean(totals[list(used_snapshots(totals.size))]))


def member_outcomes(ds, v: int, m: int, *, presence: float, area_km2: float) -> dict:
    """Landscape outcomes of one stored member (the sensitivity analysis's outputs).

    Returns ``<species>_total`` (animals in the landscape, mean over the
    snapshots after the start), ``<species>_occupied_km2`` (area present at
    the end) and ``<species>_reached_km2`` (area the species reached at its
    arrival density at some time).
    """
    out = {}
    for sp in SPECIES:
        out[f"{sp}_total"] = _used_mean(_read(ds, f"{sp}_total", v, m))
        final = _read(ds, f"{sp}_final", v, m)
        out[f"{sp}_occupied_km2"] = float(np.sum(final >= presence) * area_km2)
        out[f"{sp}_reached_km2"] = float(np.sum(np.isfinite(_read(ds, f"{sp}_arrival", v, m)))
                                         * area_km2)
    return out


@dataclass(frozen=True, eq=False)
class Summaries:
    """Everything summarised across members.

    Attributes
    ----------
    persistence : dict
        ``(variant, species)`` to the probability of persistence per cell
        (0–1, float32, NaN off the data mask).
    gain, loss : dict
        ``(alternative, species)`` to the probability of a gain or loss per
        cell against the baseline (0–1, float32, NaN off the data mask).
    robust : dict
        ``(alternative, species)`` to the robust change map (int8: 1, −1, 0,
        :data:`NO_DATA`).
    stored : dict
        Variant to the number of stored members; ``pairs``: alternative to
        the number of member pairs compared.
    pairs : dict
        Alternative to the number of member pairs.
    outcomes : dict
        ``(variant, member)`` to :func:`member_outcomes` of stored members.
    changes : dict
        ``(alternative, member)`` to the ranking columns of that member pair.
    agreement : float
        The share of members that must agree for a robust change.
    """

    persistence: dict
    gain: dict
    loss: dict
    robust: dict
    stored: dict
    pairs: dict
    outcomes: dict
    changes: dict
    agreement: float


def _pair(ds, base: int, v: int, m: int, *, presence, threshold, area, out_counts, mask):
    """Classify one member pair; add to the gain/loss counts; return its ranking columns."""
    cols = {}
    for sp in SPECIES:
        cls = change_classes(member_statistics(ds, sp, base, m),
                             member_statistics(ds, sp, v, m), threshold=threshold,
                             presence=presence)
        gain, loss = (cls > 0) & mask, (cls < 0) & (cls != NO_DATA) & mask
        out_counts[sp][0] += gain
        out_counts[sp][1] += loss
        ta = _used_mean(_read(ds, f"{sp}_total", base, m))
        tb = _used_mean(_read(ds, f"{sp}_total", v, m))
        cols[f"{sp}_total_change"] = (tb - ta) / ta if ta > 0 else np.nan
        cols[f"{sp}_area_gained_km2"] = float(gain.sum() * area)
        cols[f"{sp}_area_lost_km2"] = float(loss.sum() * area)
        fa = _read(ds, f"{sp}_final", base, m) >= presence
        fb = _read(ds, f"{sp}_final", v, m) >= presence
        cols[f"{sp}_occupied_change_km2"] = float((fb.sum() - fa.sum()) * area)
    return cols


def summarise(ds, *, presence: float, threshold: float, agreement: float,
              baseline: str = "baseline") -> Summaries:
    """Summaries across the stored members of a member store.

    Parameters
    ----------
    ds : xarray.Dataset
        The member store (:func:`preyscape.ensemble.store.open_members`).
    presence : float
        Presence threshold, animals/km².
    threshold : float
        Smallest relative change of the time mean that counts (0.1 = 10 % of
        the baseline's), besides the timing margin (:func:`change_classes`).
    agreement : float
        Share of member pairs (0.5–1] that must agree on a robust change.
    baseline : str
        The variant the others are compared with.
    """
    from preyscape.store import grid_of

    grid = grid_of(ds)
    mask, area = grid.mask, grid.cell_area_km2
    status = np.asarray(ds["status"].values)
    variants = [str(v) for v in ds["variant"].values]
    persistence, gain, loss, robust, stored, pairs = {}, {}, {}, {}, {}, {}
    outcomes, changes = {}, {}
    for v, name in enumerate(variants):
        ok = [m for m in range(status.shape[1]) if status[v, m] == 1]
        stored[name] = len(ok)
        counts = {sp: np.zeros(mask.shape) for sp in SPECIES}
        for m in ok:
            outcomes[(name, m)] = member_outcomes(ds, v, m, presence=presence, area_km2=area)
            for sp in SPECIES:
                counts[sp] += _read(ds, f"{sp}_final", v, m) >= presence
        for sp in SPECIES:
            p = counts[sp] / len(ok) if ok else np.full(mask.shape, np.nan)
            persistence[(name, sp)] = np.where(mask, p, np.nan).astype(np.float32)
    if baseline in variants:
        b = variants.index(baseline)
        for v, name in enumerate(variants):
            if name == baseline:
                continue
            both = [m for m in range(status.shape[1]) if status[v, m] == 1 and
                    status[b, m] == 1]
            pairs[name] = len(both)
            cnt = {sp: [np.zeros(mask.shape), np.zeros(mask.shape)] for sp in SPECIES}
            for m in both:
                changes[(name, m)] = _pair(ds, b, v, m, presence=presence,
                                           threshold=threshold, area=area, out_counts=cnt,
                                           mask=mask)
            n = max(len(both), 1)
            for sp in SPECIES:
                pg, pl = cnt[sp][0] / n, cnt[sp][1] / n
                if not both:
                    pg = pl = np.full(mask.shape, np.nan)
                gain[(name, sp)] = np.where(mask, pg, np.nan).astype(np.float32)
                loss[(name, sp)] = np.where(mask, pl, np.nan).astype(np.float32)
                code = np.where(pg >= agreement, 1, np.where(pl >= agreement, -1, 0))
                code = np.where(mask & bool(both), code, NO_DATA)
                robust[(name, sp)] = code.astype(np.int8)
    return Summaries(persistence, gain, loss, robust, stored, pairs, outcomes, changes,
                     float(agreement))


def ranking(summaries: Summaries, *, rank_by: str = "prey_total_change",
            quantiles: tuple[float, float] = (0.05, 0.95)) -> list[dict]:
    """The alternatives ranked, with the median and interval of every ranking column.

    In each member pair the alternatives are ranked by ``rank_by`` (highest
    first, rank 1); an alternative's rows give, per column, the median and
    the ``quantiles`` across member pairs (numpy's default linear
    interpolation between order statistics).

    Parameters
    ----------
    summaries : Summaries
        From :func:`summarise`.
    rank_by : str
        A ranking column (``"<species>_<column>"``, :data:`RANKING_COLUMNS`).
    quantiles : (float, float)
        Lower and upper quantile of the interval.

    Returns
    -------
    list of dict
        One per alternative, sorted by the median rank then the median of
        ``rank_by`` (highest first): ``alternative``, ``pairs``, and for
        ``"rank"`` and every column ``<name>_median``, ``<name>_low``,
        ``<name>_high``; ``share_best``: share of member pairs in which the
        alternative ranks first.
    """
    alts = sorted({a for a, _ in summaries.changes})
    cols = [f"{sp}_{c}" for sp in SPECIES for c in RANKING_COLUMNS]
    if rank_by not in cols:
        raise ValueError(f"rank_by must be one of {cols}, not {rank_by!r}")
    members = sorted({m for _, m in summaries.changes})
    ranks: dict[str, list[float]] = {a: [] for a in alts}
    for m in members:
        here = [(summaries.changes[(a, m)][rank_by], a) for a in alts
                if (a, m) in summaries.changes]
        here = [(v if np.isfinite(v) else -np.inf, a) for v, a in here]
        for k, (_, a) in enumerate(sorted(here, key=lambda t: -t[0])):
            ranks[a].append(k + 1.0)
    lo, hi = quantiles
    rows = []
    for a in alts:
        row = {"alternative": a, "pairs": summaries.pairs.get(a, 0)}
        series = {"rank": np.asarray(ranks[a])}
        series.update({c: np.asarray([summaries.changes[(a, m)][c] for m in members
                                      if (a, m) in summaries.changes]) for c in cols})
        for c, vals in series.items():
            vals = vals[np.isfinite(vals)]
            q = np.quantile(vals, [0.5, lo, hi]) if vals.size else [np.nan] * 3
            row[f"{c}_median"], row[f"{c}_low"], row[f"{c}_high"] = (float(x) for x in q)
        row["share_best"] = float(np.mean(series["rank"] == 1)) if ranks[a] else np.nan
        rows.append(row)
    rows.sort(key=lambda r: (r["rank_median"], -np.nan_to_num(r[f"{rank_by}_median"],
                                                                nan=-np.inf)))
    return rows
