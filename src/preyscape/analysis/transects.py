"""Transects: sampling run results along a polyline, and profiles over time.

A transect is a polyline in map metres. :func:`sample_transect` places
points along it at (about) the grid spacing, keeping those on cells with
data; :func:`transect_series` reads the profile of a species along one or
several transects from every snapshot, one snapshot at a time.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid

__all__ = ["Profiles", "SampledTransect", "TransectSeries", "auto_transect", "front_position",
           "front_positions", "profile", "sample_transect", "transect_series",
           "transects_from_file"]


def _frames_of(ds, species: str):
    # every snapshot as stored (NaN off data), one at a time
    from preyscape.store import frames

    return (f for _, f in frames(ds, species, range(ds[species].sizes["time"]), raw=True))


def _times_of(ds) -> np.ndarray:
    return np.asarray(ds["time"].values, dtype=float)


@dataclass(frozen=True, eq=False)
class SampledTransect:
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
    *,
    spacing_m: float | None = None,
    name: str = "transect",
) -> SampledTransect:
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
    return SampledTransect(
        name=name, line=pts, x=x[keep], y=y[keep], distance_km=d[keep] / 1000.0,
        row=row[keep], col=col[keep], spacing_km=length / n_steps / 1000.0,
        length_km=length / 1000.0,
    )


def profile(frame: np.ndarray, transect: SampledTransect) -> np.ndarray:
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

    transect: SampledTransect
    species: str
    times: np.ndarray
    values: np.ndarray


def transect_series(
    source: Any,
    transects: SampledTransect | Sequence[SampledTransect],
    *,
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
    single = isinstance(transects, SampledTransect)
    trs = [transects] if single else list(transects)
    if hasattr(source, "data_vars"):
        frames = _frames_of(source, species)
        if times is None:
            times = _times_of(source)
    else:
        frames = source
        if times is None:
            raise ValueError("times (years) are needed with frames")
    keep = Profiles(trs, species)
    for frame, t in zip(frames, times, strict=True):
        keep.add(frame, t)
    out = keep.result()
    return out[0] if single else out


class Profiles:
    """:func:`transect_series` one snapshot at a time: :meth:`add` each, then :meth:`result`.

    Keeps only the profiles (snapshots x points), so several analyses can
    share one pass over the snapshots.

    Parameters
    ----------
    transects : sequence of SampledTransect
        Where to sample.
    species : str
        Which density (a label of the series).
    """

    def __init__(self, transects: Sequence[SampledTransect], species: str) -> None:
        self.transects = list(transects)
        self.species = species
        self.cols: list[list[np.ndarray]] = [[] for _ in self.transects]
        self.times: list[float] = []

    def add(self, frame: np.ndarray, t: float) -> None:
        """Take the profiles of the snapshot at time ``t`` (years)."""
        f = np.asarray(frame)
        for k, tr in enumerate(self.transects):
            self.cols[k].append(profile(f, tr))
        self.times.append(float(t))

    def result(self) -> list[TransectSeries]:
        """One :class:`TransectSeries` per transect."""
        t_arr = np.asarray(self.times)
        return [TransectSeries(tr, self.species, t_arr,
                               np.asarray(c).reshape(len(self.times), tr.n))
                for tr, c in zip(self.transects, self.cols, strict=True)]


def front_position(
    profile: np.ndarray,
    distance_km: np.ndarray,
    threshold: float,
    *,
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
    return np.array([front_position(v, d, threshold, max_gap_km=gap) for v in series.values])


def _as_series(source, times, transect, species) -> TransectSeries:
    if isinstance(source, TransectSeries):
        return source
    if transect is None:
        raise ValueError("a transect is needed unless a TransectSeries is given")
    return transect_series(source, transect, species=species, times=times)  # type: ignore[return-value]


# --- which lines to measure along (moved here from waves_output) ---------------------
def transects_from_file(path, grid: Grid) -> tuple:
    """Transects from a GeoJSON file of lines, in ``grid``'s CRS (metres).

    Returns
    -------
    tuple of TransectLine

    Raises
    ------
    InputError
        If the file holds no LineString.
    """
    from preyscape.analysis.settings import TransectLine
    from preyscape.landscape.measures import read_geometry

    out = []
    for k, shape in enumerate(read_geometry(path, grid, source=str(path))):
        g = shape.geometry
        lines = list(g.geoms) if hasattr(g, "geoms") else [g]
        for j, line in enumerate(lines):
            if line.geom_type != "LineString":
                continue
            name = str(shape.properties.get("name") or f"transect {k + 1}")
            if len(lines) > 1:
                name += f" {j + 1}"
            out.append(TransectLine(name, tuple((float(x), float(y))
                                                for x, y, *_ in line.coords)))
    if not out:
        raise InputError("no LineString in the file; transects are lines", str(path))
    return tuple(out)


def auto_transect(grid: Grid, arrivals: Mapping[str, np.ndarray]):
    """A transect along the longest path a front took, or None.

    From where a species was first (the centroid of its earliest cells) to
    the cell it reached last, for predators first, else prey; ``arrivals``
    maps species to arrival-time maps (years, NaN: never).

    Returns
    -------
    TransectLine or None
        Named ``auto``; None when no species spread over more than a cell.
    """
    from preyscape.analysis.settings import TransectLine

    for sp in ("predator", "prey"):
        a = arrivals.get(sp)
        if a is None or np.count_nonzero(np.isfinite(a)) < 2:
            continue
        lo, hi = float(np.nanmin(a)), float(np.nanmax(a))
        if not hi > lo:
            continue
        rows, cols = np.nonzero(a <= lo)
        x0, y0 = float(np.mean(grid.x[cols])), float(np.mean(grid.y[rows]))
        r1, c1 = np.unravel_index(int(np.nanargmax(a)), a.shape)
        x1, y1 = float(grid.x[c1]), float(grid.y[r1])
        if math.hypot(x1 - x0, y1 - y0) < max(grid.dx, grid.dy):
            continue
        return TransectLine("auto", ((x0, y0), (x1, y1)))
    return None
