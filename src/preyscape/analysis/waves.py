"""Travelling fronts and periodic travelling waves in run results.

An invasion front is where a species' density first reaches a threshold
(animals/km²). This module measures it three ways:

- **arrival time** per cell (years): when the density first reaches the
  threshold, interpolated linearly between the two snapshots around the
  crossing; computed from a stream of snapshots, one at a time;
- **local front speed** (km/yr): ``1/|grad T|`` of the arrival-time map;
- **front speed along a transect** (km/yr): the front position (km along a
  polyline) regressed on time, reported next to the minimal speed that theory
  predicts (Fisher 1937, Ann Eugen 7:355; Kolmogorov, Petrovsky & Piskunov
  1937; Dunbar 1983, J Math Biol 17:11; see :mod:`preyscape.model.theory`).

Behind a predator invasion the populations may settle into periodic
travelling waves (Sherratt, Lewis & Fowler 1995, PNAS 92:2524). Their
wavelength (km) and period (years) are read from the dominant peak of the
spatial and temporal power spectra (:func:`wavelength_along`,
:func:`period_at`, :func:`wave_summary`).

Map coordinates are metres; distances along transects are km; times are
years; densities are animals per km². All functions are pure: they take
numpy arrays, xarray objects or a :class:`~preyscape.landscape.grid.Grid`
and return new values.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from preyscape.analysis.transects import (
    SampledTransect,
    TransectSeries,
    _as_series,
    _frames_of,
    _times_of,
    front_position,
    front_positions,
    profile,
    sample_transect,
    transect_series,
)
from preyscape.analysis.wavetrains import WaveSummary, period_at, wave_summary, wavelength_along

__all__ = [
    "ArrivalClock",
    "FrontFit",
    "SampledTransect",
    "TransectSeries",
    "WaveSummary",
    "arrival_and_profiles",
    "arrival_time",
    "arrival_time_of_run",
    "front_position",
    "front_positions",
    "front_speed",
    "local_front_speed",
    "period_at",
    "profile",
    "sample_transect",
    "transect_series",
    "wave_summary",
    "wavelength_along",
]


# ---------------------------------------------------------------------------
# arrival time
# ---------------------------------------------------------------------------
def arrival_time(
    frames: Iterable[np.ndarray],
    times: Iterable[float],
    threshold: float,
    *,
    mask: np.ndarray | None = None,
) -> np.ndarray:
    """First time each cell's density reaches ``threshold``, years.

    The snapshots are read one at a time (memory stays O(cells) however many
    there are). Between the two snapshots that bracket the crossing the
    density is taken to change linearly in time, so the arrival time is
    ``t0 + (threshold - u0) / (u1 - u0) * (t1 - t0)``.

    Parameters
    ----------
    frames : iterable of numpy.ndarray
        Density snapshots, animals/km², each of shape ``(rows, cols)``, NaN on
        no-data cells. A generator is fine.
    times : iterable of float
        Time of each snapshot, years, strictly increasing, as many as frames.
    threshold : float
        Density that counts as arrived, animals/km².
    mask : numpy.ndarray of bool, optional
        Cells with data; other cells get NaN. Default: all cells.

    Returns
    -------
    numpy.ndarray
        Arrival time per cell, years (float64). Cells at or above the
        threshold in the first snapshot get that snapshot's time (0 for a run
        read from its start). NaN where the threshold is never reached and on
        no-data cells.

    Raises
    ------
    ValueError
        If there are no frames, frames and times differ in number, the
        frames change shape, the times do not increase, or the threshold is
        not finite.
    """
    clock = ArrivalClock(threshold)
    for frame, t in zip(frames, times, strict=True):
        clock.add(frame, t)
    return clock.result(mask)


class ArrivalClock:
    """:func:`arrival_time` one snapshot at a time: :meth:`add` each, then :meth:`result`.

    Holds two grids (the arrival times and the previous snapshot), so several
    analyses can share one pass over the snapshots.

    Parameters
    ----------
    threshold : float
        Density that counts as arrived, animals/km².
    """

    def __init__(self, threshold: float) -> None:
        threshold = float(threshold)
        if not math.isfinite(threshold):
            raise ValueError("threshold must be a finite density (animals/km²)")
        self.threshold = threshold
        self.arrival: np.ndarray | None = None
        self.prev: np.ndarray | None = None
        self.t_prev = -math.inf

    def add(self, frame: np.ndarray, t: float) -> None:
        """Take the snapshot at time ``t`` (years; later than the one before)."""
        threshold = self.threshold
        u = np.asarray(frame, dtype=float)
        t = float(t)
        if u.ndim != 2:
            raise ValueError(f"each frame must be 2-D (rows, cols), not shape {u.shape}")
        if not t > self.t_prev:
            raise ValueError("snapshot times must increase strictly")
        with np.errstate(invalid="ignore"):
            above = u >= threshold  # NaN (no data) compares False
        arrival, prev, t_prev = self.arrival, self.prev, self.t_prev
        if arrival is None:
            arrival = self.arrival = np.full(u.shape, np.nan)
            arrival[above] = t
        else:
            if u.shape != arrival.shape:
                raise ValueError(f"frame shape {u.shape} differs from {arrival.shape}")
            new = above & np.isnan(arrival)
            if new.any():
                u0 = prev[new]  # below the threshold (or NaN) by construction
                u1 = u[new]
                with np.errstate(invalid="ignore", divide="ignore"):
                    frac = (threshold - u0) / (u1 - u0)
                # no usable previous value (no data then): the snapshot time itself
                frac = np.where(np.isfinite(frac), np.clip(frac, 0.0, 1.0), 1.0)
                arrival[new] = t_prev + frac * (t - t_prev)
        self.prev = u
        self.t_prev = t

    def result(self, mask: np.ndarray | None = None) -> np.ndarray:
        """Arrival time per cell, years (as :func:`arrival_time` returns it)."""
        arrival = self.arrival
        if arrival is None:
            raise ValueError("no snapshots given")
        if mask is not None:
            m = np.asarray(mask, dtype=bool)
            if m.shape != arrival.shape:
                raise ValueError(f"mask shape {m.shape} differs from frame shape "
                                 f"{arrival.shape}")
            arrival[~m] = np.nan
        return arrival


def arrival_time_of_run(ds, species: str, threshold: float) -> np.ndarray:
    """Arrival-time map of one species in a results dataset, years.

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc`` (``time`` in years, densities in
        animals/km², ``mask``). Snapshots are read one at a time.
    species : {"prey", "predator"}
        Which density.
    threshold : float
        Density that counts as arrived, animals/km².

    Returns
    -------
    numpy.ndarray
        See :func:`arrival_time`.
    """
    mask = np.asarray(ds["mask"].values).astype(bool) if "mask" in ds else None
    return arrival_time(_frames_of(ds, species), _times_of(ds), threshold, mask=mask)


def arrival_and_profiles(ds, species: str, threshold: float,
                         transects: Sequence[SampledTransect] = (),
                         ) -> tuple[np.ndarray | None, list[TransectSeries]]:
    """:func:`arrival_time_of_run` and :func:`transect_series` from one read of each snapshot.

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc``.
    species : {"prey", "predator"}
        Which density.
    threshold : float
        Density that counts as arrived, animals/km²; not finite: no arrival times.
    transects : sequence of SampledTransect
        Where to take profiles (none: no profiles).

    Returns
    -------
    arrival : numpy.ndarray or None
        Arrival time per cell, years (None if ``threshold`` is not finite).
    series : list of TransectSeries
        One per transect.
    """
    from preyscape.analysis.transects import Profiles
    from preyscape.store import frames

    clock = ArrivalClock(threshold) if math.isfinite(threshold) else None
    keep = Profiles(transects, species) if transects else None
    if clock is None and keep is None:
        return None, []
    times = _times_of(ds)
    for k, frame in frames(ds, species, range(times.size), raw=True):
        for taker in (clock, keep):
            if taker is not None:
                taker.add(frame, times[k])
    mask = np.asarray(ds["mask"].values).astype(bool) if "mask" in ds else None
    return (None if clock is None else clock.result(mask),
            [] if keep is None else keep.result())


# ---------------------------------------------------------------------------
# local front speed
# ---------------------------------------------------------------------------
def _smooth_nan(a: np.ndarray, half: int) -> np.ndarray:
    # box mean over the finite cells within `half` cells (normalised convolution);
    # exact on a linear field wherever the whole box is finite
    from scipy.ndimage import uniform_filter

    ok = np.isfinite(a)
    size = 2 * half + 1
    s = uniform_filter(np.where(ok, a, 0.0), size=size, mode="constant")
    w = uniform_filter(ok.astype(float), size=size, mode="constant")
    with np.errstate(invalid="ignore", divide="ignore"):
        out = s / w
    return np.where(ok, out, np.nan)


def _derivative(T: np.ndarray, axis: int, h: float) -> np.ndarray:
    # central difference where both neighbours are known, one-sided where one is
    n = T.shape[axis]
    if n == 1:
        return np.zeros_like(T)  # nothing varies along a single row or column
    Tm = np.moveaxis(T, axis, 0)
    fwd = np.full(Tm.shape, np.nan)
    bwd = np.full(Tm.shape, np.nan)
    fwd[:-1] = (Tm[1:] - Tm[:-1]) / h
    bwd[1:] = (Tm[1:] - Tm[:-1]) / h
    both = np.isfinite(fwd) & np.isfinite(bwd)
    d = np.where(both, 0.5 * (fwd + bwd), np.where(np.isfinite(fwd), fwd, bwd))
    return np.moveaxis(d, 0, axis)


def local_front_speed(
    arrival: np.ndarray, dx_m: float, dy_m: float, *, smooth_cells: int = 1
) -> np.ndarray:
    """Local front speed ``1/|grad T|`` from an arrival-time map, km/yr.

    The gradient of the arrival time ``T`` (years) is taken by central
    differences (one-sided beside cells without an arrival time), converted
    from years per metre to years per km, and inverted.

    The result is noisy where snapshots are far apart compared with the time
    the front needs to cross a cell: ``T`` is interpolated linearly between
    snapshots, so its error is a fraction of the snapshot interval, and
    differencing over one cell turns that into a speed error of order
    ``interval * speed / cell size``. Smoothing (``smooth_cells``) and
    transect fits (:func:`front_speed`) are steadier.

    Parameters
    ----------
    arrival : numpy.ndarray
        Arrival time per cell, years, NaN where never reached or no data.
    dx_m, dy_m : float
        Cell width and height, metres.
    smooth_cells : int
        Half-width (cells) of a box mean applied to ``T`` over the cells with
        an arrival time before differencing (0: none). The mean of a linear
        field is the field itself, so a plane front keeps its speed.

    Returns
    -------
    numpy.ndarray
        Speed of the front through each cell, km/yr; NaN where there is no
        arrival time, where the cell was occupied at the start (``T <= 0``),
        where the gradient is zero, or where no neighbour along an axis has
        an arrival time.
    """
    if not (dx_m > 0 and dy_m > 0):
        raise ValueError("cell sizes dx_m and dy_m must be positive (metres)")
    if smooth_cells < 0:
        raise ValueError("smooth_cells must be >= 0")
    T = np.array(arrival, dtype=float)
    if T.ndim != 2:
        raise ValueError(f"arrival must be 2-D (rows, cols), not shape {T.shape}")
    started = np.isfinite(T) & (T > 0)
    T = np.where(started, T, np.nan)  # the front has no speed where it started
    if smooth_cells:
        T = _smooth_nan(T, int(smooth_cells))
    gx = _derivative(T, 1, dx_m / 1000.0)  # years per km
    gy = _derivative(T, 0, dy_m / 1000.0)
    g = np.hypot(gx, gy)
    with np.errstate(divide="ignore", invalid="ignore"):
        speed = 1.0 / g
    ok = started & np.isfinite(speed) & (g > 0)
    return np.where(ok, speed, np.nan)


# ---------------------------------------------------------------------------
# front position and speed along a transect
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class FrontFit:
    """Linear fit of a front's position along a transect against time.

    Attributes
    ----------
    transect : str
        Name of the transect.
    species : str
        Which density.
    threshold : float
        Density marking the front, animals/km².
    speed : float
        Fitted front speed, km/yr (slope of position on time).
    stderr : float
        Standard error of the speed, km/yr (NaN with fewer than 3 points).
    r2 : float
        Coefficient of determination of the fit.
    intercept : float
        Fitted position at time 0, km.
    n : int
        Number of snapshots in the fit.
    times, positions : numpy.ndarray
        The snapshots used: years and km along the transect.
    all_times, all_positions : numpy.ndarray
        Front position at every snapshot (NaN where no point reaches the
        threshold), years and km.
    t_min : float
        Start of the fitted interval, years.
    margin_km : float
        Fronts closer than this to either end of the transect were left out, km.
    predicted : float
        Predicted minimal front speed passed by the caller, km/yr (NaN if none).
    ratio : float
        ``speed / predicted`` (NaN if no prediction).
    """

    transect: str
    species: str
    threshold: float
    speed: float
    stderr: float
    r2: float
    intercept: float
    n: int
    times: np.ndarray
    positions: np.ndarray
    all_times: np.ndarray
    all_positions: np.ndarray
    t_min: float
    margin_km: float
    predicted: float = math.nan
    ratio: float = math.nan


def front_speed(
    source: Any,
    times: Sequence[float] | None,
    transect: SampledTransect | None,
    threshold: float,
    *,
    species: str = "prey",
    t_min: float | None = None,
    margin_km: float | None = None,
    predicted_km_yr: float | None = None,
) -> FrontFit:
    """Front speed along a transect by regression of position on time, km/yr.

    The front position (:func:`front_position`) is found at every snapshot.
    The fit uses the snapshots at which the front lies inside the transect,
    more than ``margin_km`` from both ends of its data points, and at or after
    ``t_min``. Pass the minimal speed theory predicts as ``predicted_km_yr``:
    ``preyscape.model.theory.fisher_speed(r, D)`` for prey invading empty
    habitat (Fisher 1937; Kolmogorov, Petrovsky & Piskunov 1937) or
    ``theory.predator_speed(...)`` for predators invading prey at capacity
    (Dunbar 1983, J Math Biol 17:11). Fronts started from a small release
    approach that speed from below: the position lags ``c* t`` by a term
    growing like ``ln t`` (Bramson 1983, Mem AMS 44(285)), so a fit over a
    finite run gives a ratio slightly below 1.

    Parameters
    ----------
    source : xarray.Dataset, iterable of numpy.ndarray, or TransectSeries
        An opened ``results.nc``, density snapshots (animals/km²), or
        profiles already read.
    times : sequence of float or None
        Snapshot times, years (read from a dataset or series when None).
    transect : SampledTransect or None
        Where to measure (None only with a TransectSeries).
    threshold : float
        Density marking the front, animals/km².
    species : str
        The density read from a dataset.
    t_min : float, optional
        Leave out snapshots before this time (the transient while the front
        forms), years. Default: the first 20 % of the interval during which
        the front lies inside the transect are left out.
    margin_km : float, optional
        Leave out fronts closer than this to either end of the transect, km.
        Default: 5 % of the transect's data length, at least two point
        spacings.
    predicted_km_yr : float, optional
        Predicted minimal speed, km/yr, for the ratio.

    Returns
    -------
    FrontFit
        Speed, its standard error, r², intercept and the snapshots used;
        NaN speed if fewer than two snapshots qualify.
    """
    s = _as_series(source, times, transect, species)
    tr = s.transect
    pos = front_positions(s, threshold)
    t = s.times
    d0, d1 = float(tr.distance_km[0]), float(tr.distance_km[-1])
    if margin_km is None:
        margin_km = max(2.0 * tr.spacing_km, 0.05 * (d1 - d0))
    with np.errstate(invalid="ignore"):
        inside = np.isfinite(pos) & (pos >= d0 + margin_km) & (pos <= d1 - margin_km)
    if t_min is None:
        if inside.any():
            ta, tb = t[inside][0], t[inside][-1]
            t_min = float(ta + 0.2 * (tb - ta))
        else:
            t_min = float(t[0]) if t.size else math.nan
    use = inside & (t >= t_min - 1e-12)
    tu, pu = t[use], pos[use]
    n = int(tu.size)
    speed = stderr = r2 = intercept = math.nan
    if n >= 3:
        from scipy.stats import linregress

        res = linregress(tu, pu)
        speed, intercept = float(res.slope), float(res.intercept)
        stderr, r2 = float(res.stderr), float(res.rvalue**2)
    elif n == 2:
        speed = float((pu[1] - pu[0]) / (tu[1] - tu[0]))
        intercept = float(pu[0] - speed * tu[0])
    pred = math.nan if predicted_km_yr is None else float(predicted_km_yr)
    ratio = speed / pred if (math.isfinite(pred) and pred > 0) else math.nan
    return FrontFit(
        transect=tr.name, species=s.species, threshold=float(threshold), speed=speed,
        stderr=stderr, r2=r2, intercept=intercept, n=n, times=tu, positions=pu,
        all_times=t.copy(), all_positions=pos, t_min=float(t_min),
        margin_km=float(margin_km), predicted=pred, ratio=ratio,
    )
