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

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid

__all__ = [
    "FrontFit",
    "Transect",
    "TransectSeries",
    "WaveSummary",
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
    threshold = float(threshold)
    if not math.isfinite(threshold):
        raise ValueError("threshold must be a finite density (animals/km²)")
    arrival: np.ndarray | None = None
    prev: np.ndarray | None = None
    t_prev = -math.inf
    for frame, t in zip(frames, times, strict=True):
        u = np.asarray(frame, dtype=float)
        t = float(t)
        if u.ndim != 2:
            raise ValueError(f"each frame must be 2-D (rows, cols), not shape {u.shape}")
        if not t > t_prev:
            raise ValueError("snapshot times must increase strictly")
        with np.errstate(invalid="ignore"):
            above = u >= threshold  # NaN (no data) compares False
        if arrival is None:
            arrival = np.full(u.shape, np.nan)
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
        prev = u
        t_prev = t
    if arrival is None:
        raise ValueError("no snapshots given")
    if mask is not None:
        m = np.asarray(mask, dtype=bool)
        if m.shape != arrival.shape:
            raise ValueError(f"mask shape {m.shape} differs from frame shape {arrival.shape}")
        arrival[~m] = np.nan
    return arrival


def _frames_of(ds, species: str) -> Iterable[np.ndarray]:
    # one snapshot at a time: results.nc stores one snapshot per chunk
    da = ds[species]
    for k in range(da.sizes["time"]):
        yield np.asarray(da.isel(time=k).values, dtype=float)


def _times_of(ds) -> np.ndarray:
    return np.asarray(ds["time"].values, dtype=float)


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
    return arrival_time(_frames_of(ds, species), _times_of(ds), threshold, mask)


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
    arrival: np.ndarray, dx_m: float, dy_m: float, smooth_cells: int = 1
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
# transects
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Transect:
    """Points sampled along a polyline on a grid.

    Attributes
    ----------
    name : str
        Label of the transect.
    line : numpy.ndarray
        Vertices of the polyline, shape ``(k, 2)``, map ``(x, y)`` in metres.
    x, y : numpy.ndarray
        Map coordinates of the kept sample points, metres.
    distance_km : numpy.ndarray
        Distance of each kept point along the line from its first vertex, km
        (increasing; gaps where points fell off the grid or on no-data cells).
    row, col : numpy.ndarray of int
        Cell of each kept point.
    spacing_km : float
        Distance between consecutive sample points along the line, km.
    length_km : float
        Length of the whole polyline, km.
    """

    name: str
    line: np.ndarray
    x: np.ndarray
    y: np.ndarray
    distance_km: np.ndarray
    row: np.ndarray
    col: np.ndarray
    spacing_km: float
    length_km: float

    @property
    def n(self) -> int:
        """Number of kept points."""
        return int(self.distance_km.size)


def sample_transect(
    grid: Grid,
    line: Sequence[Sequence[float]],
    spacing_m: float | None = None,
    name: str = "transect",
) -> Transect:
    """Sample a polyline every ``spacing_m`` metres and find the cell of each point.

    Parameters
    ----------
    grid : Grid
        The run grid (metres, data mask).
    line : sequence of (x, y)
        Vertices of the polyline in map coordinates, metres; at least two.
    spacing_m : float, optional
        Distance between sample points along the line, metres. Default: the
        smaller cell side. The line is divided into equal steps no longer
        than this, so the first and last vertices are both sampled.
    name : str
        Label, used in error messages and tables.

    Returns
    -------
    Transect
        The points that fall on cells with data; points off the grid or on
        no-data cells are dropped, and the others keep their distance from
        the start of the line.

    Raises
    ------
    InputError
        If the line has fewer than two vertices, non-finite coordinates,
        zero length, or no point on a cell with data.
    """
    pts = np.asarray(line, dtype=float)
    if pts.ndim != 2 or pts.shape[1] != 2 or pts.shape[0] < 2:
        raise InputError(
            "a transect needs at least two points [x, y] in map metres, e.g. "
            "[[500100, 4999900], [502000, 4999900]]", name,
        )
    if not np.all(np.isfinite(pts)):
        raise InputError("transect points must be finite numbers (map metres)", name)
    seg = np.hypot(*np.diff(pts, axis=0).T)
    keep_v = np.concatenate([[True], seg > 0])  # drop repeated vertices
    pts_u = pts[keep_v]
    cum = np.concatenate([[0.0], np.cumsum(seg[seg > 0])])
    length = float(cum[-1])
    if pts_u.shape[0] < 2 or length <= 0:
        raise InputError("transect has zero length (all its points coincide)", name)
    step = float(spacing_m) if spacing_m is not None else min(grid.dx, grid.dy)
    if not step > 0:
        raise ValueError("spacing_m must be positive (metres)")
    n_steps = max(1, math.ceil(length / step - 1e-9))
    d = np.linspace(0.0, length, n_steps + 1)
    x = np.interp(d, cum, pts_u[:, 0])
    y = np.interp(d, cum, pts_u[:, 1])
    fc = (x - grid.x0) / grid.dx
    fr = (grid.y0 - y) / grid.dy
    eps = 1e-9
    # a point exactly on the outer edge belongs to the edge cell
    inside = (fc >= -eps) & (fc <= grid.nx + eps) & (fr >= -eps) & (fr <= grid.ny + eps)
    col = np.clip(np.floor(fc), 0, grid.nx - 1).astype(np.intp)
    row = np.clip(np.floor(fr), 0, grid.ny - 1).astype(np.intp)
    keep = inside.copy()
    keep[inside] = grid.mask[row[inside], col[inside]]
    if not keep.any():
        left, bottom, right, top = grid.bounds
        raise InputError(
            "no point of the transect lies on a cell with data; the grid covers "
            f"x {left:.0f}–{right:.0f} m and y {bottom:.0f}–{top:.0f} m", name,
        )
    return Transect(
        name=name, line=pts, x=x[keep], y=y[keep], distance_km=d[keep] / 1000.0,
        row=row[keep], col=col[keep], spacing_km=length / n_steps / 1000.0,
        length_km=length / 1000.0,
    )


def profile(frame: np.ndarray, transect: Transect) -> np.ndarray:
    """Values of a 2-D field at the points of a transect (float64, same units)."""
    return np.asarray(np.asarray(frame)[transect.row, transect.col], dtype=float)


@dataclass(frozen=True, eq=False)
class TransectSeries:
    """Profiles of one species along one transect at every snapshot.

    Attributes
    ----------
    transect : Transect
        Where the profiles were taken.
    species : str
        Which density.
    times : numpy.ndarray
        Snapshot times, years.
    values : numpy.ndarray
        Density, animals/km², shape ``(times, points)``.
    """

    transect: Transect
    species: str
    times: np.ndarray
    values: np.ndarray


def transect_series(
    source: Any,
    transects: Transect | Sequence[Transect],
    species: str = "prey",
    times: Sequence[float] | None = None,
) -> TransectSeries | list[TransectSeries]:
    """Read the profiles along one or several transects from every snapshot.

    Each snapshot is read once for all transects, and only the profiles are
    kept, so memory is O(cells + snapshots x points).

    Parameters
    ----------
    source : xarray.Dataset or iterable of numpy.ndarray
        An opened ``results.nc``, or density snapshots (animals/km²).
    transects : Transect or sequence of Transect
        Where to sample.
    species : str
        The density to read from a dataset.
    times : sequence of float, optional
        Snapshot times, years; needed for frames, read from a dataset.

    Returns
    -------
    TransectSeries or list of TransectSeries
        One per transect (a single one if a single transect was given).
    """
    single = isinstance(transects, Transect)
    trs = [transects] if single else list(transects)
    if hasattr(source, "data_vars"):
        frames = _frames_of(source, species)
        if times is None:
            times = _times_of(source)
    else:
        frames = source
        if times is None:
            raise ValueError("times (years) are needed with frames")
    cols: list[list[np.ndarray]] = [[] for _ in trs]
    tt = []
    for frame, t in zip(frames, times, strict=True):
        f = np.asarray(frame)
        for k, tr in enumerate(trs):
            cols[k].append(profile(f, tr))
        tt.append(float(t))
    t_arr = np.asarray(tt)
    out = [
        TransectSeries(tr, species, t_arr, np.asarray(c).reshape(len(tt), tr.n))
        for tr, c in zip(trs, cols, strict=True)
    ]
    return out[0] if single else out


# ---------------------------------------------------------------------------
# front position and speed along a transect
# ---------------------------------------------------------------------------
def front_position(
    profile: np.ndarray,
    distance_km: np.ndarray,
    threshold: float,
    max_gap_km: float | None = None,
) -> float:
    """Furthest distance along a transect at which the density reaches ``threshold``, km.

    Parameters
    ----------
    profile : numpy.ndarray
        Density at the transect points, animals/km².
    distance_km : numpy.ndarray
        Distance of each point from the start of the transect, km, increasing.
    threshold : float
        Density that marks the front, animals/km².
    max_gap_km : float, optional
        Do not interpolate across gaps longer than this (points dropped on
        no-data cells); the front is then put at the last point above the
        threshold. Default: 1.5 times the median point spacing.

    Returns
    -------
    float
        The position of the last crossing from ``>= threshold`` to below it,
        interpolated linearly between the two points around it, km; the last
        point's distance if the density is above the threshold there; NaN if
        no point reaches the threshold.
    """
    p = np.asarray(profile, dtype=float)
    d = np.asarray(distance_km, dtype=float)
    if p.shape != d.shape:
        raise ValueError(f"profile {p.shape} and distances {d.shape} differ in shape")
    with np.errstate(invalid="ignore"):
        above = np.flatnonzero(p >= threshold)
    if above.size == 0:
        return math.nan
    k = int(above[-1])
    if k + 1 >= p.size or not np.isfinite(p[k + 1]):
        return float(d[k])
    if max_gap_km is None:
        max_gap_km = 1.5 * float(np.median(np.diff(d))) if d.size > 1 else math.inf
    if d[k + 1] - d[k] > max_gap_km:
        return float(d[k])
    return float(d[k] + (p[k] - threshold) / (p[k] - p[k + 1]) * (d[k + 1] - d[k]))


def front_positions(series: TransectSeries, threshold: float) -> np.ndarray:
    """Front position (km along the transect) at every snapshot of a series."""
    d = series.transect.distance_km
    gap = 1.5 * series.transect.spacing_km
    return np.array([front_position(v, d, threshold, gap) for v in series.values])


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


def _as_series(source, times, transect, species) -> TransectSeries:
    if isinstance(source, TransectSeries):
        return source
    if transect is None:
        raise ValueError("a transect is needed unless a TransectSeries is given")
    return transect_series(source, transect, species, times)  # type: ignore[return-value]


def front_speed(
    source: Any,
    times: Sequence[float] | None,
    transect: Transect | None,
    threshold: float,
    species: str = "prey",
    *,
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
    transect : Transect or None
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


# ---------------------------------------------------------------------------
# periodic travelling waves
# ---------------------------------------------------------------------------
MIN_CYCLES = 2.0
"""Fewest cycles a record must hold for its period or wavelength to be measured."""


def _dominant_period(values: np.ndarray, coords: np.ndarray, min_points: int = 8) -> float:
    """Period (in the units of ``coords``) of the strongest oscillation.

    Linear detrend, Hann window, zero-padding to at least 16 times the
    length, and a parabola through the logarithm of the three largest
    spectral values around the peak (Gaussian interpolation; e.g. Gasior &
    Gonzalez 2004, CERN-AB-2004-023). The zero-frequency lobe is skipped: the
    search starts at :data:`MIN_CYCLES` cycles per record and after the
    spectrum's first local minimum; a maximum at the start of the search is
    no peak (NaN).
    """
    from scipy.signal import detrend

    v = np.asarray(values, dtype=float)
    c = np.asarray(coords, dtype=float)
    ok = np.isfinite(v) & np.isfinite(c)
    v, c = v[ok], c[ok]
    if v.size < min_points:
        return math.nan
    order = np.argsort(c)
    v, c = v[order], c[order]
    step = float(np.median(np.diff(c)))
    if not step > 0:
        return math.nan
    if np.max(np.abs(np.diff(c) - step)) > 1e-6 * step:
        # gaps (dropped points): resample onto an even spacing
        grid = np.arange(c[0], c[-1] + 0.5 * step, step)
        v = np.interp(grid, c, v)
    n = v.size
    v = detrend(v, type="linear") * np.hanning(n)
    if not np.any(v):
        return math.nan
    nfft = 1 << int(math.ceil(math.log2(16 * n)))
    power = np.abs(np.fft.rfft(v, nfft)) ** 2
    df = 1.0 / (nfft * step)  # frequency step of the padded spectrum
    # at least two cycles per record: with fewer, the peak merges into the
    # zero-frequency lobe of the window and its position is biased
    lo = int(math.ceil((MIN_CYCLES / (n * step)) / df))
    dec = np.flatnonzero(np.diff(power) > 0)  # first rise: end of the zero-frequency lobe
    if dec.size:
        lo = max(lo, int(dec[0]))
    if lo >= power.size - 1:
        return math.nan
    k = lo + int(np.argmax(power[lo:]))
    if k <= lo or k >= power.size - 1 or power[k] <= 0:
        return math.nan  # the largest value is at the edge of the search: no peak
    a, b, cc = np.log(np.maximum(power[k - 1: k + 2], 1e-300))
    den = a - 2 * b + cc
    delta = 0.5 * (a - cc) / den if den < 0 else 0.0
    f = (k + delta) * df
    return 1.0 / f if f > 0 else math.nan


def wavelength_along(profile: np.ndarray, distance_km: np.ndarray) -> float:
    """Wavelength of the dominant spatial oscillation along a profile, km.

    From the highest peak of the power spectrum of the linearly detrended,
    Hann-windowed, zero-padded profile, refined by parabolic interpolation
    of the log power. Unevenly spaced points (gaps on no-data cells) are
    first interpolated onto an even spacing.

    Parameters
    ----------
    profile : numpy.ndarray
        Density along a transect, animals/km².
    distance_km : numpy.ndarray
        Distance of each point along the transect, km.

    Returns
    -------
    float
        Wavelength, km; NaN with fewer than 8 points, no oscillation, or
        fewer than :data:`MIN_CYCLES` wavelengths along the profile.
    """
    return _dominant_period(profile, distance_km)


def period_at(series: np.ndarray, times: np.ndarray, t_min: float | None = None) -> float:
    """Period of the dominant oscillation of a time series, years.

    Same method as :func:`wavelength_along`, on the part of the series at or
    after ``t_min``.

    Parameters
    ----------
    series : numpy.ndarray
        Density at one place over time, animals/km².
    times : numpy.ndarray
        Times, years.
    t_min : float, optional
        End of the transient to leave out, years. Default: use everything.

    Returns
    -------
    float
        Period, years; NaN with fewer than 8 samples, no oscillation, or
        fewer than :data:`MIN_CYCLES` periods in the series.
    """
    v = np.asarray(series, dtype=float)
    t = np.asarray(times, dtype=float)
    if t_min is not None:
        keep = t >= t_min
        v, t = v[keep], t[keep]
    return _dominant_period(v, t)


@dataclass(frozen=True)
class WaveSummary:
    """Periodic travelling waves behind a front along one transect.

    Attributes
    ----------
    wavelength : float
        Median wavelength over the last profiles, km.
    period : float
        Median period over points behind the front, years.
    phase_speed : float
        ``wavelength / period``, km/yr (magnitude; the direction is not
        resolved from the spectra).
    wavelengths : tuple of float
        Wavelength from each profile used, km.
    periods : tuple of float
        Period at each point used, years.
    points_km : tuple of float
        Distances along the transect of the points whose periods were taken, km.
    t_min : float
        Start of the part of the run that was used, years.
    threshold : float
        Density that marked the front, animals/km².
    front_km : float
        Front position at the last snapshot, km.
    """

    wavelength: float
    period: float
    phase_speed: float
    wavelengths: tuple[float, ...]
    periods: tuple[float, ...]
    points_km: tuple[float, ...]
    t_min: float
    threshold: float
    front_km: float


def _nanmedian(values) -> float:
    a = np.asarray(values, dtype=float)
    a = a[np.isfinite(a)]
    return float(np.median(a)) if a.size else math.nan


def wave_summary(
    source: Any,
    species: str = "predator",
    transect: Transect | None = None,
    t_min: float | None = None,
    *,
    threshold: float | None = None,
    times: Sequence[float] | None = None,
    n_profiles: int = 3,
    n_points: int = 3,
) -> WaveSummary:
    """Wavelength, period and phase speed of waves behind a front along a transect.

    *Behind the front* means the stretch of the transect from its first data
    point to the front position minus a gap (a tenth of that stretch, at least
    three point spacings), where the oscillations have formed. The
    wavelength is the median of :func:`wavelength_along` over the last
    ``n_profiles`` snapshots at or after ``t_min``; the period is the median
    of :func:`period_at` at ``n_points`` points spread over the stretch
    behind the final front, each using the snapshots at or after ``t_min``
    once the front has passed it.

    Parameters
    ----------
    source : xarray.Dataset, iterable of numpy.ndarray, or TransectSeries
        An opened ``results.nc``, density snapshots, or profiles already read.
    species : str
        The density read from a dataset.
    transect : Transect or None
        Where to measure (None only with a TransectSeries).
    t_min : float, optional
        End of the transient, years. Default: half-way through the snapshots.
    threshold : float, optional
        Density marking the front, animals/km². Default: 10 % of the largest
        time-mean density along the transect (common practice, no source).
    times : sequence of float, optional
        Snapshot times, years (needed with frames).
    n_profiles, n_points : int
        How many final profiles and how many points to take.

    Returns
    -------
    WaveSummary
        NaN values where there is no front or too little of the run behind it.
    """
    s = _as_series(source, times, transect, species)
    tr, t, vals = s.transect, s.times, s.values
    if t_min is None:
        t_min = float(t[0] + 0.5 * (t[-1] - t[0])) if t.size else math.nan
    if threshold is None:
        ok = np.isfinite(vals)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(ok, vals, 0.0).sum(axis=0) / ok.sum(axis=0)
        top = float(np.max(mean[np.isfinite(mean)])) if np.any(np.isfinite(mean)) else math.nan
        threshold = 0.1 * top if top > 0 else math.nan
    pos = front_positions(s, threshold) if math.isfinite(threshold) else np.full(t.size, np.nan)
    d = tr.distance_km
    d0 = float(d[0])

    def behind(front: float) -> float:
        # end of the stretch behind the front where waves have formed, km
        return front - max(0.1 * (front - d0), 3.0 * tr.spacing_km)

    late = np.flatnonzero((t >= t_min - 1e-12) & np.isfinite(pos))
    wl = []
    for k in late[-n_profiles:] if n_profiles > 0 else []:
        sel = d <= behind(pos[k])
        wl.append(wavelength_along(vals[k, sel], d[sel]))
    front_last = float(pos[-1]) if pos.size else math.nan
    periods, points = [], []
    if math.isfinite(front_last):
        end = behind(front_last)
        if end > d0:
            for q in np.linspace(0.0, 1.0, n_points + 2)[1:-1]:
                j = int(np.argmin(np.abs(d - (d0 + q * (end - d0)))))
                with np.errstate(invalid="ignore"):
                    passed = np.flatnonzero(pos >= d[j])
                if passed.size == 0:
                    continue
                since = max(float(t_min), float(t[passed[0]]))
                periods.append(period_at(vals[:, j], t, since))
                points.append(float(d[j]))
    lam, per = _nanmedian(wl), _nanmedian(periods)
    phase = lam / per if (math.isfinite(lam) and math.isfinite(per) and per > 0) else math.nan
    return WaveSummary(
        wavelength=lam, period=per, phase_speed=phase, wavelengths=tuple(wl),
        periods=tuple(periods), points_km=tuple(points), t_min=float(t_min),
        threshold=float(threshold), front_km=front_last,
    )
