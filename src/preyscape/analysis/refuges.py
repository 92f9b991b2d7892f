"""Effects of refuges: inside against outside, spill-over and its decay length.

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
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from preyscape.analysis.compare import PRESENCE, _check_presence, check_same_grid, zone_table
from preyscape.store import data_mask, grid_of, time_means


# ---------------------------------------------------------------------------
# refuges
# ---------------------------------------------------------------------------
def _cells(cells: np.ndarray, shape: tuple[int, ...]) -> np.ndarray:
    c = np.asarray(cells, dtype=bool)
    if c.shape != tuple(shape):
        raise ValueError(f"cells have shape {c.shape}, the grid {tuple(shape)}")
    return c


def inside_outside(ds, cells: np.ndarray, *, species: str = "prey",
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
    rows = zone_table(ds, labels, ["inside", "outside"], species, presence=presence)
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
    *,
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


@dataclass(frozen=True, eq=False)
class RefugeEffect:
    """A refuge's effect (from :func:`refuge_effect`).

    Attributes
    ----------
    inside_outside : dict
        :func:`inside_outside` of the run with the refuge.
    inside_outside_without : dict or None
        The same for the run without it, if given.
    difference : bool
        Whether the profile is that of with − without.
    distance_km : numpy.ndarray
        Distance bands from the refuge edge, km.
    density : numpy.ndarray
        The profile, animals/km².
    decay_length_km : float
        Fitted decay length, km (NaN if the fit failed).
    fit : dict
        Details of the fit (:func:`decay_length`).
    """

    inside_outside: dict
    inside_outside_without: dict | None
    difference: bool
    distance_km: np.ndarray
    density: np.ndarray
    decay_length_km: float
    fit: dict


def refuge_effect(
    ds,
    cells: np.ndarray,
    *, ds_without=None,
    species: str = "prey",
    presence: float = PRESENCE,
    bin_m: float | None = None,
    max_m: float | None = None,
    baseline: float | None = None,
    mean: np.ndarray | None = None,
    mean_without: np.ndarray | None = None,
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
    mean, mean_without : numpy.ndarray, optional
        The time-mean densities of ``species`` with and without the refuge over
        the snapshots used (animals/km², NaN off data), when already known
        (:meth:`preyscape.analysis.results.RunResults.time_mean`): they are then
        not read again.

    Returns
    -------
    RefugeEffect

    Raises
    ------
    InputError
        If ``ds_without`` is not on the grid of ``ds``.
    """
    _check_presence(presence)
    grid = grid_of(ds)
    c = _cells(cells, grid.shape)
    io_with = inside_outside(ds, c, species=species, presence=presence)
    io_without = None
    if mean is None:
        mean = time_means(ds, species=(species,))[species]
    if ds_without is not None:
        check_same_grid(ds, ds_without, ("with the refuge", "without the refuge"))
        io_without = inside_outside(ds_without, c, species=species, presence=presence)
        if mean_without is None:
            mean_without = time_means(ds_without, species=(species,))[species]
        mean = mean - mean_without
        if baseline is None:
            baseline = 0.0
    dist, dens = spillover_profile(mean, c, grid.mask, grid.dx, grid.dy, bin_m=bin_m,
                                   max_m=max_m)
    ell, fit = decay_length(dist, dens, baseline)
    return RefugeEffect(io_with, io_without, ds_without is not None, dist, dens, ell, fit)


__all__ = [
    "RefugeEffect",
    "decay_length",
    "distance_from_edge",
    "inside_outside",
    "refuge_effect",
    "spillover_profile",
]
