"""Change between two runs that holds for cycling populations: level, timing, window.

Pure functions on snapshots (read one at a time) and maps. Densities are
animals/km², times years.

Why not "the time mean changed by more than 10 %"
-------------------------------------------------
Predator–prey populations cycle. A measure that only shifts the timing of
the cycles (a fence that delays the predators' arrival by a few months)
moves every cell's mean over a window that does not hold whole cycles, so a
relative-change rule marks nearly the whole landscape as changed. The
statistics here separate three things a planner needs apart:

**Level** (:func:`level_change`). The difference of the window means,
Δ = m_B − m_A, counts only where it is larger than the **timing margin**
M = (R_A + R_B)/n, and larger than ``threshold`` × m_A. R is the range of
the cumulative departures from the window mean of each run in that cell,
R = max_k C_k − min_k C_k with C_k = Σ_{j≤k} (u_j − ū) and C_0 = 0 (the
adjusted range of Hurst 1951, Trans. Am. Soc. Civ. Eng. 116:770), and n the
snapshots in the window. For a population that repeats a cycle, the mean
over a window that holds at least one whole cycle differs from the mean
over whole cycles by at most about R/n: the departures of a part-cycle at
the end of the window add up to no more than the largest excursion of their
running sum. So where two runs differ only in the timing of the same cycle,
|Δ| stays below M, and a cell is marked only where the level itself moves.
This is tested on sinusoids and on a Rosenzweig–MacArthur limit cycle
(``tests/test_analysis_change.py``: a half-period shift gives |Δ| < 0.75 M
for every window of one to four periods). A window shorter than one cycle
cannot tell level from timing: there the margin does not hold, and a shift
in timing counts as a change in what happens in those years.

**Gains and losses** are kept apart in every map and table: classes −2
(present in A, absent in B: *gone*), −1 (*fewer*), 0 (no clear change), 1
(*more*), 2 (absent in A, present in B: *new*); absent means a window mean
below the presence threshold.

**Timing** (:func:`arrival_delay`): per cell, the time the species first
reaches its arrival density in B minus that in A, in years (what a fence
does to an invasion), with the cells reached in only one run coded apart.

**Windows** (:func:`window_of`): a planner can ask about years A to B; both
runs are read at their common snapshot times only.

Examples
--------
Two cells over one period of a cycle: the first only shifted by half a period,
the second halved:

>>> t = np.arange(1, 9) / 8.0
>>> a = 10 + 8 * np.sin(2 * np.pi * t)
>>> frames_a = [np.array([[v, v]]) for v in a]
>>> frames_b = [np.array([[10 - 8 * np.sin(2 * np.pi * s), v / 2]]) for s, v in zip(t, a)]
>>> sa = window_statistics(frames_a, presence=1.0)
>>> sb = window_statistics(frames_b, presence=1.0)
>>> level_change(sa, sb, threshold=0.1, presence=1.0).classes.tolist()
[[0, -1]]
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["ARRIVAL_CODES", "LEVEL_CODES", "NO_DATA", "ArrivalDelay", "LevelChange",
           "Window", "WindowStatistics", "arrival_delay", "first_crossing", "level_change",
           "window_of",
           "window_statistics"]

NO_DATA = -128
"""Code of cells without data in the int8 class maps (the GeoTIFFs' no-data value)."""

LEVEL_CODES = {-2: "gone", -1: "fewer", 0: "no clear change", 1: "more", 2: "new"}
"""Classes of :func:`level_change` (int8; :data:`NO_DATA` off the data mask)."""

ARRIVAL_CODES = {0: "arrives in both", 1: "arrives only without the measure",
                 2: "arrives only with the measure", 3: "present from the start in both",
                 4: "never arrives"}
"""Classes of :func:`arrival_delay` (int8; :data:`NO_DATA` off the data mask). "Without
the measure" is run A (the reference), "with the measure" run B."""

TIME_TOLERANCE = 1e-9
"""Snapshot times closer than this (years) are the same time."""


# --- windows -----------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Window:
    """The snapshots two or more runs are compared on.

    Attributes
    ----------
    start, end : float
        The window asked for, years (``end`` is the last common time when open).
    times : numpy.ndarray
        The common snapshot times in the window (after the start, t = 0), years.
    upto : numpy.ndarray
        Every common time from the first to the window's end (for arrival times).
    indices : tuple of tuple of int
        Per run, the indices of ``times`` in its own snapshots.
    upto_indices : tuple of tuple of int
        Per run, the indices of ``upto``.
    same_times : bool
        Whether all runs hold exactly the same snapshot times.
    """

    start: float
    end: float
    times: np.ndarray
    upto: np.ndarray
    indices: tuple[tuple[int, ...], ...]
    upto_indices: tuple[tuple[int, ...], ...]
    same_times: bool

    @property
    def years(self) -> float:
        """Length of the window, years."""
        return self.end - self.start

    def label(self) -> str:
        """``"years 0–4"``."""
        return f"years {self.start:g}–{self.end:g}"


def window_of(times: Sequence[np.ndarray], years: tuple[float, float | None] | None = None,
              ) -> Window:
    """The common snapshots of several runs within a window of years.

    Parameters
    ----------
    times : sequence of numpy.ndarray
        Each run's snapshot times, years (increasing).
    years : (float, float or None), optional
        The window ``(start, end)`` in years; None or an open end: to the
        last common time. Snapshots at ``t = 0`` (the start, chosen by the
        user) are left out of the window unless it holds nothing else, as for
        every time mean (:mod:`preyscape.analysis.results`).

    Returns
    -------
    Window

    Raises
    ------
    ValueError
        If the runs share no snapshot time in the window (the message says
        which times they do share).
    """
    ts = [np.asarray(t, dtype=float) for t in times]
    common = ts[0]
    for t in ts[1:]:
        keep = np.abs(t[None, :] - common[:, None]).min(axis=1, initial=np.inf) <= TIME_TOLERANCE
        common = common[keep]
    same = all(t.shape == ts[0].shape and np.allclose(t, ts[0], rtol=0, atol=TIME_TOLERANCE)
               for t in ts[1:])
    if common.size == 0:
        raise ValueError("the runs share no snapshot time")
    start = 0.0 if years is None else float(years[0])
    end = float(common[-1]) if years is None or years[1] is None else float(years[1])
    tol = TIME_TOLERANCE
    sel = (common >= start - tol) & (common <= end + tol)
    inside = sel & (common > tol) if (sel & (common > tol)).any() else sel
    if not inside.any():
        raise ValueError(f"no common snapshot lies in years {start:g}–{end:g}; the runs share "
                         f"times from {common[0]:g} to {common[-1]:g} years")
    upto = common[common <= end + tol]

    def idx(t: np.ndarray, want: np.ndarray) -> tuple[int, ...]:
        return tuple(int(np.argmin(np.abs(t - w))) for w in want)

    wt = common[inside]
    return Window(start, min(end, float(common[-1])), wt, upto,
                  tuple(idx(t, wt) for t in ts), tuple(idx(t, upto) for t in ts), same)


# --- per-cell statistics of one run ------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class WindowStatistics:
    """Per-cell statistics of one species in one run over a window.

    Attributes
    ----------
    mean : numpy.ndarray
        Window mean, animals/km² (float64, NaN off the data mask).
    margin : numpy.ndarray
        Adjusted range of the cumulative departures from the mean over the
        number of snapshots, R/n, animals/km²: how far the window mean could
        move if only the timing of the cell's fluctuations changed.
    persistence : numpy.ndarray
        Share (0–1) of the window's snapshots at or above the presence threshold.
    snapshots : int
        Snapshots in the window.
    zone_sums : tuple of numpy.ndarray
        For each zoning given, the sum of the densities over each zone's cells
        at each snapshot, shape (snapshots, zones), animals/km² × cells
        (times the cell area: animals).
    """

    mean: np.ndarray
    margin: np.ndarray
    persistence: np.ndarray
    snapshots: int
    zone_sums: tuple[np.ndarray, ...] = ()


def window_statistics(frames: Iterable[np.ndarray] | Callable[[], Iterable[np.ndarray]], *,
                      presence: float, mask: np.ndarray | None = None,
                      zones: Sequence[np.ndarray] = ()) -> WindowStatistics:
    """Window mean, timing margin and persistence per cell.

    Parameters
    ----------
    frames : iterable of numpy.ndarray, or a callable returning one
        Densities at the window's snapshots, animals/km². The margin needs a
        second pass over them: give a callable that yields them again (from
        the file, one at a time) to keep memory O(grid); a plain iterable is
        read into a list.
    presence : float
        Presence threshold, animals/km² (keyword only).
    mask : numpy.ndarray of bool, optional
        Cells with data; other cells get NaN.
    zones : sequence of numpy.ndarray of int
        Zonings to total at each snapshot: zone of each cell, 0..k−1, −1 none
        (cells off ``mask`` are left out).

    Returns
    -------
    WindowStatistics
    """
    again = frames if callable(frames) else (lambda kept=list(frames): kept)
    acc = occ = None
    n = 0
    # per zoning, once: the flat indices of its cells, their zones, the number of zones
    sel = []
    for lab in (np.asarray(z) for z in zones):
        idx = np.flatnonzero(lab >= 0 if mask is None else (lab >= 0) & np.asarray(mask, bool))
        sel.append((idx, lab.ravel()[idx], int(lab.max()) + 1))
    sums: list[list[np.ndarray]] = [[] for _ in sel]
    for u in again():
        u = _finite(u)
        if acc is None:
            acc, occ = np.zeros(u.shape), np.zeros(u.shape)
        acc += u
        occ += u >= presence
        for k, (idx, lab, nz) in enumerate(sel):
            sums[k].append(np.bincount(lab, weights=u.ravel()[idx], minlength=nz))
        n += 1
    if n == 0:
        raise ValueError("the window holds no snapshots")
    mean = acc / n
    run = np.zeros(mean.shape)
    hi, lo = np.zeros(mean.shape), np.zeros(mean.shape)
    for u in again():
        run += _finite(u) - mean
        np.maximum(hi, run, out=hi)
        np.minimum(lo, run, out=lo)
    m = np.ones(mean.shape, bool) if mask is None else np.asarray(mask, bool)

    def out(a: np.ndarray) -> np.ndarray:
        return np.where(m, a, np.nan)

    return WindowStatistics(out(mean), out((hi - lo) / n), out(occ / n), n,
                            tuple(np.array(z) for z in sums))


def _finite(u) -> np.ndarray:
    """``u`` as float64 with NaN as 0 and infinities as the largest floats (nan_to_num);
    as it is, without a copy, when all is finite (snapshots from store.frames are)."""
    u = np.asarray(u, dtype=np.float64)
    return u if np.isfinite(u).all() else np.nan_to_num(u, nan=0.0)


# --- level ----------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class LevelChange:
    """Change of the level of one species between runs A and B, per cell.

    Attributes
    ----------
    difference : numpy.ndarray
        m_B − m_A of the window means, animals/km².
    margin : numpy.ndarray
        What the difference must exceed: max(timing margin M, threshold · m_A),
        animals/km² (with m_A at least the presence threshold).
    ratio : numpy.ndarray
        difference / margin: beyond ±1 the level changed (dimensionless).
    classes : numpy.ndarray of int8
        :data:`LEVEL_CODES`; :data:`NO_DATA` off the data mask.
    """

    difference: np.ndarray
    margin: np.ndarray
    ratio: np.ndarray
    classes: np.ndarray


def level_change(a: WindowStatistics, b: WindowStatistics, *, threshold: float,
                 presence: float) -> LevelChange:
    """Gains and losses of the level of a species that timing alone cannot explain.

    A cell counts as *more* when m_B − m_A > max(M, threshold · max(m_A,
    presence)) and the species is present in B (m_B ≥ presence), and as
    *fewer* for the same drop with the species present in A; the timing
    margin M = (R_A + R_B)/n is the sum of both runs' margins (see the
    module docstring). *More* becomes *new* where m_A < presence, and
    *fewer* becomes *gone* where m_B < presence.

    Parameters
    ----------
    a, b : WindowStatistics
        Runs A (reference) and B over the same window.
    threshold : float
        Smallest relative change that matters (0.1 = 10 % of m_A).
    presence : float
        Presence threshold, animals/km².

    Returns
    -------
    LevelChange
    """
    ma, mb = a.mean, b.mean
    ok = np.isfinite(ma) & np.isfinite(mb)
    diff = mb - ma
    floor = threshold * np.maximum(np.nan_to_num(ma), presence)
    margin = np.maximum(a.margin + b.margin, floor)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(ok, diff / margin, np.nan)
        more = ok & (ratio > 1.0) & (mb >= presence)
        fewer = ok & (ratio < -1.0) & (ma >= presence)
    cls = np.zeros(ma.shape, dtype=np.int8)
    cls[more] = 1
    cls[more & (ma < presence)] = 2
    cls[fewer] = -1
    cls[fewer & (mb < presence)] = -2
    cls[~ok] = NO_DATA
    return LevelChange(np.where(ok, diff, np.nan), np.where(ok, margin, np.nan), ratio, cls)


# --- timing ---------------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class ArrivalDelay:
    """When a species arrives in B compared with A, per cell.

    Attributes
    ----------
    delay : numpy.ndarray
        Arrival time in B minus that in A, years (positive: later with B);
        NaN unless the species arrives in both runs after the start.
    status : numpy.ndarray of int8
        :data:`ARRIVAL_CODES`; :data:`NO_DATA` off the data mask.
    """

    delay: np.ndarray
    status: np.ndarray


def arrival_delay(arrival_a: np.ndarray, arrival_b: np.ndarray, mask: np.ndarray,
                  first_time: float = 0.0) -> ArrivalDelay:
    """Arrival delay and status per cell from two arrival-time maps.

    Parameters
    ----------
    arrival_a, arrival_b : numpy.ndarray
        First time each cell reaches the arrival density in runs A and B,
        years; NaN where it never does
        (:func:`preyscape.analysis.waves.arrival_time`).
    mask : numpy.ndarray of bool
        Cells with data.
    first_time : float
        The first snapshot compared, years: arrival at this time means
        present from the start.

    Returns
    -------
    ArrivalDelay
    """
    ta = np.asarray(arrival_a, dtype=np.float64)
    tb = np.asarray(arrival_b, dtype=np.float64)
    m = np.asarray(mask, dtype=bool)
    got_a, got_b = np.isfinite(ta), np.isfinite(tb)
    start = math.fsum([first_time, TIME_TOLERANCE])
    at_start = got_a & got_b & (ta <= start) & (tb <= start)
    status = np.full(ta.shape, 4, dtype=np.int8)
    status[got_a & got_b] = 0
    status[at_start] = 3
    status[got_a & ~got_b] = 1
    status[~got_a & got_b] = 2
    status[~m] = NO_DATA
    delay = np.where(status == 0, tb - ta, np.nan)
    return ArrivalDelay(delay, status)


def first_crossing(times: Sequence[float], shares: Sequence[float], share: float) -> float:
    """First time a share (0–1) reaches ``share``, interpolated linearly, years; NaN never.

    The rule of :func:`preyscape.analysis.effects.colonisation_time`: a patch
    counts as colonised when at least ``share`` of its cells are occupied; a
    patch occupied at the first time is colonised then.
    """
    prev_t = prev_f = math.nan
    for k, (t, f) in enumerate(zip(times, shares, strict=True)):
        if f >= share:
            if k == 0:
                return float(t)
            return float(prev_t + (share - prev_f) / (f - prev_f) * (t - prev_t))
        prev_t, prev_f = float(t), float(f)
    return math.nan
