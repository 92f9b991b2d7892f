"""Effects of measures: refuges (inside against outside, spill-over) and corridors.

Pure functions on results datasets and numpy arrays. Densities are animals
per km², distances km (metres for cell sizes), times years, fluxes animals per
year. The presence threshold, the snapshots used and the persistence are as
defined in :mod:`preyscape.analysis.compare`.

Refuges
    :func:`inside_outside` compares the cells of a refuge with the rest of
    the landscape; :func:`spillover_profile` averages a density map in
    bands of distance from the refuge edge; :func:`decay_length` fits an
    exponential decay to such a profile. Where animals only die outside a
    source patch, the steady density there obeys D u'' = r u and decays as
    exp(−d/ℓ) with ℓ = √(D/r) (textbook; Skellam 1951, Biometrika 38:196;
    Murray 2002, Mathematical Biology I), so ℓ measures how far a refuge
    feeds its surroundings.

Corridors
    :func:`colonisation_time` is when a target patch becomes occupied;
    :func:`net_flux` counts the animals per year crossing a transect of cell
    faces, from the face conductances of the movement operator
    (:class:`preyscape.model.movement.Movement`), and :func:`cumulative`
    integrates it over time.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

import numpy as np

from preyscape.analysis.compare import (
    PRESENCE,
    _check_presence,
    check_same_grid,
    data_mask,
    snapshots,
    zone_table,
)
from preyscape.errors import InputError
from preyscape.store import grid_of


# ---------------------------------------------------------------------------
# refuges
# ---------------------------------------------------------------------------
def _cells(cells: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    c = np.asarray(cells, dtype=bool)
    if c.shape != tuple(shape):
        raise ValueError(f"cells have shape {c.shape}, the grid {tuple(shape)}")
    return c


def inside_outside(ds, cells: np.ndarray, species: str = "prey",
                   presence: float = PRESENCE) -> dict[str, dict]:
    """A species inside a refuge against outside it.

    Parameters
    ----------
    ds : xarray.Dataset
        A results dataset.
    cells : numpy.ndarray of bool
        The refuge's cells, shape (rows, cols).
    species : str
        ``"prey"`` or ``"predator"``.
    presence : float
        Presence threshold, animals/km².

    Returns
    -------
    dict
        ``{"inside": {...}, "outside": {...}}``, each with ``cells``,
        ``area_km2``; ``mean_density`` (time mean of the region's mean
        density, animals/km²); ``min_mean_density`` (smallest mean density
        of the region in any snapshot used, animals/km²); ``persistence``
        (mean persistence of the region's cells, 0–1). Only cells with data
        count; statistics are NaN for an empty region.
    """
    mask = data_mask(ds)
    c = _cells(cells, mask.shape)
    labels = np.where(c, 0, 1).astype(np.int32)
    rows = zone_table(ds, labels, ["inside", "outside"], species, presence)
    out = {}
    for row in rows:
        area = row["area_km2"]
        out[row["zone"]] = {
            "cells": row["cells"],
            "area_km2": area,
            "mean_density": row["mean_density"],
            "min_mean_density": row["min_animals"] / area if area > 0 else math.nan,
            "persistence": row["persistence"],
        }
    return out


def distance_from_edge(cells: np.ndarray, dx_m: float, dy_m: float) -> np.ndarray:
    """Distance of every cell centre outside ``cells`` from the edge of the region, metres.

    The distance is from the cell centre to the nearest point of the square
    of the region cell whose centre is nearest (found with
    :func:`scipy.ndimage.distance_transform_edt`, ``sampling=(dy, dx)``). A
    cell sharing a side with the region is at half a cell (``dx/2`` east or
    west, ``dy/2`` north or south); one sharing only a corner at
    ``hypot(dx/2, dy/2)``; in general ``hypot(max(|Δx| − dx/2, 0),
    max(|Δy| − dy/2, 0))`` for centre offsets Δx, Δy. Cells inside the
    region get 0; NaN everywhere if the region is empty.
    """
    from scipy.ndimage import distance_transform_edt

    c = np.asarray(cells, dtype=bool)
    if not c.any():
        return np.full(c.shape, np.nan)
    _, (ri, ci) = distance_transform_edt(~c, sampling=(dy_m, dx_m), return_indices=True)
    rows, cols = np.indices(c.shape)
    ox = np.maximum(np.abs(cols - ci) * dx_m - 0.5 * dx_m, 0.0)
    oy = np.maximum(np.abs(rows - ri) * dy_m - 0.5 * dy_m, 0.0)
    return np.where(c, 0.0, np.hypot(ox, oy))


def spillover_profile(
    mean: np.ndarray,
    cells: np.ndarray,
    mask: np.ndarray,
    dx_m: float,
    dy_m: float,
    bin_m: float | None = None,
    max_m: float | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Mean density against distance from a refuge's edge, outside the refuge.

    Parameters
    ----------
    mean : numpy.ndarray
        A density map, animals/km² (a time mean, or a difference of two).
    cells : numpy.ndarray of bool
        The refuge's cells.
    mask : numpy.ndarray of bool
        Cells with data; others are left out.
    dx_m, dy_m : float
        Cell width and height, metres.
    bin_m : float, optional
        Width of the distance bands, metres. Default: one cell,
        ``min(dx_m, dy_m)``.
    max_m : float, optional
        Largest distance included, metres. Default: all cells.

    Returns
    -------
    distance_km : numpy.ndarray
        Centres of the bands holding at least one cell, km. Band ``k`` holds
        the cells at distance ``d`` (:func:`distance_from_edge`) with
        ``k·bin <= d < (k+1)·bin``; with the default band the cells beside a
        straight edge, at half a cell, sit at the band centres.
    density : numpy.ndarray
        Mean of ``mean`` over the cells of each band, animals/km².
    """
    m = np.asarray(mean, dtype=np.float64)
    c = _cells(cells, m.shape)
    ok = np.asarray(mask, dtype=bool) & ~c & np.isfinite(m)
    bin_m = float(min(dx_m, dy_m) if bin_m is None else bin_m)
    if not bin_m > 0:
        raise ValueError("bin_m must be a positive distance (metres)")
    d = distance_from_edge(c, dx_m, dy_m)
    if max_m is not None:
        ok &= d <= max_m
    if not ok.any() or not c.any():
        return np.zeros(0), np.zeros(0)
    k = np.floor(d[ok] / bin_m).astype(np.intp)
    count = np.bincount(k)
    total = np.bincount(k, weights=m[ok])
    keep = count > 0
    centre_km = (np.arange(count.size) + 0.5) * bin_m / 1000.0
    return centre_km[keep], total[keep] / count[keep]


def decay_length(
    distance_km: np.ndarray,
    density: np.ndarray,
    baseline: float | None = None,
) -> tuple[float, dict]:
    """Decay length ℓ of a profile ``density − baseline ≈ A exp(−d/ℓ)``, km.

    Parameters
    ----------
    distance_km : numpy.ndarray
        Distances from the refuge edge, km.
    density : numpy.ndarray
        Density at those distances, animals/km².
    baseline : float, optional
        Known far-field density, animals/km². Given: a least-squares line
        through ``log(density − baseline)`` over the points where it is
        positive. None: ``A``, ``ℓ`` and the baseline are fitted together by
        :func:`scipy.optimize.curve_fit`, started from the log fit.

    Returns
    -------
    length_km : float
        ℓ, km; NaN if the profile does not decay or has too few points.
    info : dict
        ``amplitude`` (A, animals/km²), ``baseline`` (animals/km²),
        ``length_km``, ``method`` (``"log-linear"`` or ``"curve_fit"``),
        ``points`` used, ``rms`` (root-mean-square residual, animals/km²)
        and ``error`` (a reason when the fit failed, else None).
    """
    d = np.asarray(distance_km, dtype=np.float64)
    y = np.asarray(density, dtype=np.float64)
    ok = np.isfinite(d) & np.isfinite(y)
    d, y = d[ok], y[ok]
    if baseline is not None:
        return _log_fit(d, y, float(baseline))
    if d.size < 4:
        return math.nan, _fail("curve_fit", d.size, "fewer than 4 points")
    from scipy.optimize import curve_fit

    # start: baseline a little below the smallest value, then the log fit
    span = float(np.ptp(y)) or 1.0
    b0 = float(y.min()) - 1e-3 * span
    ell0, first = _log_fit(d, y, b0)
    if not math.isfinite(ell0):
        ell0 = max(float(np.ptp(d)) / 3.0, 1e-9)
        first = {"amplitude": span}

    def model(x, a, ell, b):
        return a * np.exp(-x / ell) + b

    try:
        p, _ = curve_fit(model, d, y, p0=(first["amplitude"], ell0, b0),
                         bounds=([-np.inf, 1e-12, -np.inf], [np.inf, np.inf, np.inf]),
                         maxfev=20000)
    except (RuntimeError, ValueError) as exc:
        return math.nan, _fail("curve_fit", d.size, str(exc))
    a, ell, b = (float(v) for v in p)
    rms = float(np.sqrt(np.mean((model(d, a, ell, b) - y) ** 2)))
    return ell, {"amplitude": a, "baseline": b, "length_km": ell, "method": "curve_fit",
                 "points": int(d.size), "rms": rms, "error": None}


def _fail(method: str, points: int, why: str) -> dict:
    return {"amplitude": math.nan, "baseline": math.nan, "length_km": math.nan,
            "method": method, "points": int(points), "rms": math.nan, "error": why}


def _log_fit(d: np.ndarray, y: np.ndarray, baseline: float) -> tuple[float, dict]:
    z = y - baseline
    pos = z > 0
    if pos.sum() < 2:
        return math.nan, _fail("log-linear", int(pos.sum()), "fewer than 2 points above "
                               "the baseline")
    slope, icpt = np.polyfit(d[pos], np.log(z[pos]), 1)
    if not slope < 0:
        return math.nan, _fail("log-linear", int(pos.sum()), "the profile does not decay")
    ell = -1.0 / float(slope)
    amp = float(np.exp(icpt))
    rms = float(np.sqrt(np.mean((amp * np.exp(-d[pos] / ell) + baseline - y[pos]) ** 2)))
    return ell, {"amplitude": amp, "baseline": baseline, "length_km": ell,
                 "method": "log-linear", "points": int(pos.sum()), "rms": rms, "error": None}


def time_mean(ds, species: str) -> np.ndarray:
    """Time mean over the snapshots after the start, animals/km², float64, NaN off the mask."""
    mask = data_mask(ds)
    acc = np.zeros(mask.shape)
    n = 0
    for _, u in snapshots(ds, species):
        acc += u
        n += 1
    if n == 0:
        raise InputError("the run holds no snapshots", f"results: {species}")
    return np.where(mask, acc / n, np.nan)


def refuge_effect(
    ds,
    cells: np.ndarray,
    ds_without=None,
    species: str = "prey",
    presence: float = PRESENCE,
    bin_m: float | None = None,
    max_m: float | None = None,
    baseline: float | None = None,
) -> dict:
    """Inside/outside statistics, spill-over profile and decay length of a refuge.

    Parameters
    ----------
    ds : xarray.Dataset
        Results of the run with the refuge.
    cells : numpy.ndarray of bool
        The refuge's cells.
    ds_without : xarray.Dataset, optional
        Results of the same scenario without the refuge, on the same grid.
        Given: the profile is that of the difference of the time means (with
        − without), which isolates the refuge's own effect, and the decay is
        fitted towards a baseline of 0 unless ``baseline`` says otherwise.
        Not given: the profile of the time mean of ``ds``, with the baseline
        fitted freely unless given.
    species : str
        ``"prey"`` or ``"predator"``.
    presence : float
        Presence threshold, animals/km².
    bin_m, max_m : float, optional
        Band width and largest distance of the profile, metres
        (:func:`spillover_profile`).
    baseline : float, optional
        Far-field density of the profile, animals/km² (:func:`decay_length`).

    Returns
    -------
    dict
        ``inside_outside`` (:func:`inside_outside` of ``ds``),
        ``inside_outside_without`` (of ``ds_without``, or None),
        ``difference`` (bool: profile of with − without), ``distance_km``,
        ``density`` (the profile, animals/km²), ``decay_length_km`` and
        ``fit`` (:func:`decay_length`).

    Raises
    ------
    InputError
        If ``ds_without`` is not on the grid of ``ds``.
    """
    _check_presence(presence)
    grid = grid_of(ds)
    c = _cells(cells, grid.shape)
    io_with = inside_outside(ds, c, species, presence)
    io_without = None
    mean = time_mean(ds, species)
    if ds_without is not None:
        check_same_grid(ds, ds_without, ("with the refuge", "without the refuge"))
        io_without = inside_outside(ds_without, c, species, presence)
        mean = mean - time_mean(ds_without, species)
        if baseline is None:
            baseline = 0.0
    dist, dens = spillover_profile(mean, c, grid.mask, grid.dx, grid.dy, bin_m, max_m)
    ell, fit = decay_length(dist, dens, baseline)
    return {"inside_outside": io_with, "inside_outside_without": io_without,
            "difference": ds_without is not None, "distance_km": dist, "density": dens,
            "decay_length_km": ell, "fit": fit}


# ---------------------------------------------------------------------------
# corridors
# ---------------------------------------------------------------------------
def colonisation_time(
    ds,
    species: str,
    target_cells: np.ndarray,
    threshold: float = PRESENCE,
    share: float = 0.5,
) -> float:
    """First time a target patch is colonised, years.

    The patch counts as colonised when at least ``share`` of its cells with
    data have density >= ``threshold``. The share occupied is interpolated
    linearly in time between the two snapshots around the crossing, so the
    result need not be a snapshot time. All snapshots count, the start
    included (a patch occupied at the start is colonised at the first
    snapshot's time).

    Parameters
    ----------
    ds : xarray.Dataset
        A results dataset.
    species : str
        ``"prey"`` or ``"predator"``.
    target_cells : numpy.ndarray of bool
        The patch, shape (rows, cols).
    threshold : float
        Density that counts as occupied, animals/km².
    share : float
        Fraction of the patch's cells that must be occupied, in (0, 1].

    Returns
    -------
    float
        Years; NaN if the patch is never colonised within the run.

    Raises
    ------
    InputError
        If the patch has no cells with data.
    """
    _check_presence(threshold)
    if not 0 < share <= 1:
        raise ValueError(f"share must lie in (0, 1], not {share!r}")
    mask = data_mask(ds)
    tgt = _cells(target_cells, mask.shape) & mask
    n_cells = int(tgt.sum())
    if n_cells == 0:
        raise InputError("the target patch has no cells with data; choose cells inside "
                         "the landscape", f"results: {species}")
    times = np.asarray(ds["time"].values, dtype=float)
    prev_t, prev_f = math.nan, math.nan
    for k, u in snapshots(ds, species, range(times.size)):
        f = float(np.count_nonzero(u[tgt] >= threshold)) / n_cells
        if f >= share:
            if k == 0:
                return float(times[k])
            return float(prev_t + (share - prev_f) / (f - prev_f) * (times[k] - prev_t))
        prev_t, prev_f = float(times[k]), f
    return math.nan


def net_flux(
    frames: Iterable[np.ndarray],
    times: np.ndarray,
    cx: np.ndarray,
    cy: np.ndarray,
    w: np.ndarray | None,
    faces_x: np.ndarray,
    faces_y: np.ndarray,
    side_sign_x: np.ndarray | float,
    side_sign_y: np.ndarray | float,
    cell_area_km2: float,
) -> np.ndarray:
    """Animals per year crossing a transect of cell faces, at each snapshot.

    Across the face between cells a (west of it, or north of it) and b (east,
    or south) the flow from a to b is ``c · (w_a u_a − w_b u_b) · area``,
    animals/yr, with the face conductance ``c`` and per-cell weights ``w``
    as stored in :class:`preyscape.model.movement.Movement` (``c · w`` in
    1/yr: for Fickian movement ``c`` is the face diffusivity over h² and
    ``w = 1``; for ecological movement ``c`` is the permeability over h²
    and ``w`` the motility). Beyond the grid edge and on no-data cells the
    density is 0, so a closed face (``c = 0``) carries nothing and a hostile
    face carries the animals lost there. The transect's flow is the sum over
    its faces of ``sign · flow``.

    Parameters
    ----------
    frames : iterable of numpy.ndarray
        Densities at the snapshots, animals/km², shape (rows, cols) (NaN read
        as 0).
    times : numpy.ndarray
        Snapshot times, years (one per frame).
    cx : numpy.ndarray
        Conductances of the faces between columns, shape (rows, cols+1); face
        ``k`` separates columns ``k−1`` and ``k``.
    cy : numpy.ndarray
        Conductances of the faces between rows, shape (rows+1, cols); face
        ``k`` separates rows ``k−1`` and ``k``.
    w : numpy.ndarray or None
        Per-cell weights (motility, km²/yr), None for Fickian (all 1).
    faces_x, faces_y : numpy.ndarray of bool
        Faces of the transect, shaped like ``cx`` and ``cy``.
    side_sign_x, side_sign_y : numpy.ndarray or float
        +1 where a flow from a to b (west to east, north to south) crosses the
        transect in its positive direction, −1 where it crosses the other
        way; shaped like ``cx``/``cy`` or a scalar.
    cell_area_km2 : float
        Area of one cell, km².

    Returns
    -------
    numpy.ndarray
        Net flow across the transect at each snapshot, animals/yr.
    """
    cx = np.asarray(cx, dtype=np.float64)
    cy = np.asarray(cy, dtype=np.float64)
    rows, cols = cx.shape[0], cx.shape[1] - 1
    if cy.shape != (rows + 1, cols):
        raise ValueError("cx must have shape (rows, cols+1) and cy (rows+1, cols)")
    fx = np.asarray(faces_x, dtype=bool)
    fy = np.asarray(faces_y, dtype=bool)
    if fx.shape != cx.shape or fy.shape != cy.shape:
        raise ValueError("faces_x must be shaped like cx and faces_y like cy")
    sx = np.where(fx, np.broadcast_to(np.asarray(side_sign_x, dtype=float), cx.shape), 0.0)
    sy = np.where(fy, np.broadcast_to(np.asarray(side_sign_y, dtype=float), cy.shape), 0.0)
    gx, gy = sx * cx, sy * cy  # signed conductances of the transect's faces
    wt = np.ones((rows, cols)) if w is None else np.asarray(w, dtype=np.float64)
    out = []
    for u in frames:
        u = np.asarray(u, dtype=np.float64)
        if u.shape != (rows, cols):
            raise ValueError(f"frame has shape {u.shape}, the faces fit {(rows, cols)}")
        wu = np.where(np.isfinite(u), u, 0.0) * wt
        px = np.pad(wu, ((0, 0), (1, 1)))
        py = np.pad(wu, ((1, 1), (0, 0)))
        flow = np.sum(gx * (px[:, :-1] - px[:, 1:])) + np.sum(gy * (py[:-1, :] - py[1:, :]))
        out.append(flow * cell_area_km2)
    out = np.asarray(out, dtype=np.float64)
    if out.size != np.size(times):
        raise ValueError(f"{out.size} frames but {np.size(times)} times")
    return out


def cumulative(values: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Running time integral by the trapezoid rule, starting at 0.

    Parameters
    ----------
    values : numpy.ndarray
        A rate at each snapshot (for example animals/yr from :func:`net_flux`).
    times : numpy.ndarray
        Snapshot times, years.

    Returns
    -------
    numpy.ndarray
        The integral from the first snapshot to each snapshot (animals, for a
        rate in animals/yr).
    """
    from scipy.integrate import cumulative_trapezoid

    v = np.asarray(values, dtype=np.float64)
    t = np.asarray(times, dtype=np.float64)
    if v.shape != t.shape:
        raise ValueError("values and times must have the same length")
    if v.size == 0:
        return v.copy()
    return cumulative_trapezoid(v, t, initial=0.0)


__all__ = [
    "colonisation_time",
    "cumulative",
    "decay_length",
    "distance_from_edge",
    "inside_outside",
    "net_flux",
    "refuge_effect",
    "spillover_profile",
    "time_mean",
]
