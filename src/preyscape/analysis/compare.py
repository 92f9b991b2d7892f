"""Comparing two runs of the same landscape cell by cell and zone by zone.

Pure functions on results datasets (``xarray.open_dataset(folder / "results.nc",
decode_times=False)``) and numpy arrays. Densities are animals per km², areas
km², times years.

The presence threshold, the snapshots used, the time mean and the persistence
are defined once, in :mod:`preyscape.analysis.results`.

Two runs are compared only on the same grid (shape, cell size, position, CRS
and data mask: :func:`check_same_grid`). Their snapshot times may differ:
every statistic of a run is taken over that run's own snapshots, so a
difference map compares the two runs' own time means and persistences. The
landscape totals are compared as two curves on their own time axes.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from preyscape.analysis.results import CellStatistics, cell_statistics
from preyscape.analysis.settings import DEFAULTS
from preyscape.errors import InputError
from preyscape.store import SPECIES, data_mask, frames, grid_of

PRESENCE = DEFAULTS["presence"]
"""Default presence threshold, animals/km² (:data:`~preyscape.analysis.settings.DEFAULTS`)."""

CHANGE_THRESHOLD = DEFAULTS["change_threshold"]
"""Default relative change of the time-mean density that counts as a change (10 %)."""

CHANGE_CODES = {-1: "no data", 0: "no change", 1: "prey only", 2: "predator only", 3: "both"}
"""Encoding of :func:`change_classes` (int8 per cell)."""

ZONE_STATISTICS = (
    "mean_density",
    "mean_animals",
    "min_animals",
    "persistence",
    "occupied_fraction",
)
"""Per-zone statistics of :func:`zone_table`, in table order."""


def _check_presence(presence: float) -> None:
    if not (np.isfinite(presence) and presence > 0):
        raise ValueError(f"presence threshold must be a positive density (animals/km²), "
                         f"not {presence!r}")


# ---------------------------------------------------------------------------
# grids
# ---------------------------------------------------------------------------
def _same_crs(a: str, b: str) -> bool:
    if a == b:
        return True
    if not a or not b:
        return False
    from pyproj import CRS

    return CRS.from_wkt(a).equals(CRS.from_wkt(b), ignore_axis_order=True)


def same_times(ds_a, ds_b) -> bool:
    """Whether two results datasets hold the same snapshot times (to 1e-9 years)."""
    ta = np.asarray(ds_a["time"].values, dtype=float)
    tb = np.asarray(ds_b["time"].values, dtype=float)
    return ta.shape == tb.shape and bool(np.allclose(ta, tb, rtol=0, atol=1e-9))


def check_same_grid(ds_a, ds_b, names: tuple[str, str] = ("A", "B")) -> None:
    """Refuse two runs that do not lie on the same grid.

    The grids (read with :func:`preyscape.store.grid_of`) must agree in shape,
    cell size and top-left corner (to a thousandth of a cell, metres), CRS and
    data mask. Snapshot times may differ (see the module docstring): each
    run's statistics are taken over its own snapshots.

    Parameters
    ----------
    ds_a, ds_b : xarray.Dataset
        Results datasets of runs A and B.
    names : tuple of str
        How the two runs are named in the message (for example their folders).

    Raises
    ------
    InputError
        Naming both runs and the first difference found.
    """
    ga, gb = grid_of(ds_a), grid_of(ds_b)
    na, nb = names
    lead = f"runs {na} and {nb} cannot be compared cell by cell: "
    tail = "; compare runs made on the same habitat raster, cell size and data mask"
    if ga.shape != gb.shape:
        raise InputError(lead + f"their grids have {ga.ny} x {ga.nx} and {gb.ny} x {gb.nx} "
                         "cells (rows x cols)" + tail)
    tol = 1e-3 * min(ga.dx, ga.dy, gb.dx, gb.dy)
    for label, va, vb in (("cell width (m)", ga.dx, gb.dx), ("cell height (m)", ga.dy, gb.dy),
                          ("west edge x0 (m)", ga.x0, gb.x0),
                          ("north edge y0 (m)", ga.y0, gb.y0)):
        if abs(va - vb) > tol:
            raise InputError(lead + f"their {label} differ: {va:g} and {vb:g}" + tail)
    if not _same_crs(ga.crs_wkt, gb.crs_wkt):
        raise InputError(lead + "their coordinate reference systems differ" + tail)
    diff = ga.mask != gb.mask
    if diff.any():
        r, c = (int(v) for v in np.argwhere(diff)[0])
        raise InputError(lead + f"their data masks differ in {int(diff.sum())} cells, "
                         f"first at row {r}, col {c}" + tail)


# ---------------------------------------------------------------------------
# per-cell statistics
# ---------------------------------------------------------------------------
def difference(stats_a: CellStatistics, stats_b: CellStatistics) -> dict[str, np.ndarray]:
    """Maps of B − A for the time mean and the persistence.

    Parameters
    ----------
    stats_a, stats_b : CellStatistics
        Statistics of runs A and B (:func:`preyscape.analysis.results.cell_statistics`,
        same grid).

    Returns
    -------
    dict
        ``"mean"``: B − A of the time-mean density, animals/km²;
        ``"persistence"``: B − A of the persistence (−1 to 1); float32, NaN
        off the data mask.
    """
    out = {}
    for key in ("mean", "persistence"):
        a = np.asarray(getattr(stats_a, key), dtype=np.float64)
        b = np.asarray(getattr(stats_b, key), dtype=np.float64)
        if a.shape != b.shape:
            raise ValueError(f"{key} maps have shapes {a.shape} and {b.shape}")
        out[key] = (b - a).astype(np.float32)
    return out


def relative_change(mean_a: np.ndarray, mean_b: np.ndarray,
                    presence: float = PRESENCE) -> np.ndarray:
    """Relative change (B − A) / A of the time-mean density, float32.

    Parameters
    ----------
    mean_a, mean_b : numpy.ndarray
        Time-mean densities of runs A and B, animals/km².
    presence : float
        Presence threshold, animals/km².

    Returns
    -------
    numpy.ndarray
        Dimensionless (0.1 = 10 % more in B). NaN where A is below the
        presence threshold (a change relative to an absent population is
        undefined; :func:`change_classes` treats those cells separately) and
        where either map has no data.
    """
    _check_presence(presence)
    a = np.asarray(mean_a, dtype=np.float64)
    b = np.asarray(mean_b, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(b) & (a >= presence)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = np.where(ok, (b - a) / np.where(ok, a, 1.0), np.nan)
    return rel.astype(np.float32)


def _changed(a: np.ndarray, b: np.ndarray, threshold: float, presence: float) -> np.ndarray:
    with np.errstate(invalid="ignore"):
        above = a >= presence
        rel = np.abs(b - a) > threshold * a
        return np.where(above, rel, b >= presence)


def change_classes(
    mean_a_prey: np.ndarray,
    mean_b_prey: np.ndarray,
    mean_a_pred: np.ndarray,
    mean_b_pred: np.ndarray,
    *,
    threshold: float = CHANGE_THRESHOLD,
    presence: float = PRESENCE,
) -> np.ndarray:
    """Which species' time-mean density changes from run A to run B, per cell.

    A species changes in a cell when

    * A >= ``presence`` and |B − A| > ``threshold`` · A (strictly more than
      the threshold, relative to A), or
    * A < ``presence`` and B >= ``presence`` (the species appears).

    Where both runs are below ``presence`` the species has not changed.

    Parameters
    ----------
    mean_a_prey, mean_b_prey, mean_a_pred, mean_b_pred : numpy.ndarray
        Time-mean densities of prey and predator in runs A and B,
        animals/km², same shape.
    threshold : float
        Relative change that counts (0.10 = 10 %).
    presence : float
        Presence threshold, animals/km².

    Returns
    -------
    numpy.ndarray of int8
        0 no change, 1 prey only, 2 predator only, 3 both, −1 no data (any of
        the four maps not finite); see :data:`CHANGE_CODES`.
    """
    _check_presence(presence)
    if not (np.isfinite(threshold) and threshold >= 0):
        raise ValueError(f"threshold must be a non-negative fraction, not {threshold!r}")
    arrs = [np.asarray(v, dtype=np.float64) for v in
            (mean_a_prey, mean_b_prey, mean_a_pred, mean_b_pred)]
    if len({a.shape for a in arrs}) != 1:
        raise ValueError("the four time-mean maps must have the same shape")
    ok = np.logical_and.reduce([np.isfinite(a) for a in arrs])
    prey = _changed(arrs[0], arrs[1], threshold, presence)
    pred = _changed(arrs[2], arrs[3], threshold, presence)
    code = prey.astype(np.int8) + 2 * pred.astype(np.int8)
    return np.where(ok, code, -1).astype(np.int8)


# ---------------------------------------------------------------------------
# zones
# ---------------------------------------------------------------------------
def zone_table(
    ds,
    labels: np.ndarray,
    names: Sequence[str],
    species: str,
    *,
    presence: float = PRESENCE,
) -> list[dict]:
    """Statistics of one species per zone, over the snapshots after the start.

    Parameters
    ----------
    ds : xarray.Dataset
        A results dataset.
    labels : numpy.ndarray of int
        Zone of every cell, shape (rows, cols): ``k`` is zone ``names[k]``,
        −1 no zone. Cells without data are left out whatever their label.
    names : sequence of str
        Zone names, indexed by label.
    species : str
        ``"prey"`` or ``"predator"``.
    presence : float
        Presence threshold, animals/km².

    Returns
    -------
    list of dict
        One per zone, in label order: ``zone`` (name), ``code`` (label),
        ``species``, ``cells`` (data cells), ``area_km2``; ``mean_density``
        (time-mean animals per km² of the zone: ``mean_animals / area_km2``);
        ``mean_animals`` (time mean of the animals in the zone);
        ``min_animals`` (smallest number of animals in the zone in any
        snapshot used); ``persistence`` (mean persistence of its cells, 0–1);
        ``occupied_fraction`` (fraction of snapshots in which the zone holds
        at least ``presence × area_km2`` animals). Statistics are NaN for a
        zone without data cells. Zones covering all data cells add up to the
        landscape totals.
    """
    _check_presence(presence)
    mask = data_mask(ds)
    labels = np.asarray(labels)
    if labels.shape != mask.shape:
        raise ValueError(f"labels have shape {labels.shape}, the grid {mask.shape}")
    nz = len(names)
    if labels.size and (labels.max(initial=-1) >= nz or labels.min(initial=0) < -1):
        raise ValueError(f"labels must be -1 (no zone) or 0..{nz - 1}")
    sel = mask & (labels >= 0)
    lab = labels[sel].astype(np.intp)
    area_cell = grid_of(ds).cell_area_km2
    cells = np.bincount(lab, minlength=nz).astype(float)
    area = cells * area_cell
    acc = np.zeros(nz)
    lo = np.full(nz, np.inf)
    occ_cells = np.zeros(nz)
    occ_zone = np.zeros(nz)
    n = 0
    for _, u in frames(ds, species, mask=mask):
        v = u[sel]
        animals = np.bincount(lab, weights=v, minlength=nz) * area_cell
        acc += animals
        np.minimum(lo, animals, out=lo)
        occ_cells += np.bincount(lab, weights=(v >= presence).astype(float), minlength=nz)
        occ_zone += animals >= presence * area
        n += 1
    if n == 0:
        raise InputError("the run holds no snapshots", f"results: {species}")
    rows = []
    for k in range(nz):
        has = cells[k] > 0
        mean_animals = acc[k] / n if has else np.nan
        rows.append({
            "zone": str(names[k]),
            "code": k,
            "species": species,
            "cells": int(cells[k]),
            "area_km2": float(area[k]),
            "mean_density": float(mean_animals / area[k]) if has else np.nan,
            "mean_animals": float(mean_animals),
            "min_animals": float(lo[k]) if has else np.nan,
            "persistence": float(occ_cells[k] / (n * cells[k])) if has else np.nan,
            "occupied_fraction": float(occ_zone[k] / n) if has else np.nan,
        })
    return rows


# ---------------------------------------------------------------------------
# all maps at once
# ---------------------------------------------------------------------------
def compare_runs(ds_a, ds_b, *, threshold: float = CHANGE_THRESHOLD,
                 presence: float = PRESENCE,
                 names: tuple[str, str] = ("A", "B")):
    """Compare two runs cell by cell: the maps of both runs and their differences.

    Parameters
    ----------
    ds_a, ds_b : xarray.Dataset
        Results datasets of runs A (reference) and B, on the same grid.
    threshold : float
        Relative change of the time-mean density that counts as a change.
    presence : float
        Presence threshold, animals/km².
    names : tuple of str
        Names of the runs for error messages.

    Returns
    -------
    xarray.Dataset
        On the coordinates ``y``, ``x`` (metres) of run A, for each species
        ``sp``: ``{sp}_mean_a``, ``{sp}_mean_b`` (animals/km²),
        ``{sp}_persistence_a``, ``{sp}_persistence_b`` (0–1),
        ``{sp}_mean_difference`` (B − A, animals/km²),
        ``{sp}_persistence_difference`` (B − A), ``{sp}_relative_change``
        ((B − A)/A); and ``change`` (int8, :data:`CHANGE_CODES`). Attributes
        record ``threshold``, ``presence``, ``same_times`` (1 if both runs have
        the same snapshot times) and the snapshot counts used.

    Raises
    ------
    InputError
        If the runs are not on the same grid (:func:`check_same_grid`).

    Examples
    --------
    ``run_folder`` and ``other_run`` are finished runs of one scenario:

    >>> import xarray as xr
    >>> with xr.open_dataset(run_folder / "results.nc", decode_times=False) as a, \\
    ...         xr.open_dataset(other_run / "results.nc", decode_times=False) as b:
    ...     maps = compare_runs(a, b, presence=1.0)
    >>> str(maps["change"].dtype), maps.attrs["same_times"]
    ('int8', 1)
    """
    import xarray as xr

    check_same_grid(ds_a, ds_b, names)
    dims = ("y", "x")
    data = {}
    means = {}
    attrs = {"threshold": float(threshold), "presence": float(presence),
             "same_times": int(same_times(ds_a, ds_b))}
    for sp in SPECIES:
        sa = cell_statistics(ds_a, sp, presence)
        sb = cell_statistics(ds_b, sp, presence)
        d = difference(sa, sb)
        means[sp] = (sa.mean, sb.mean)
        unit = {"units": "km-2"}
        data[f"{sp}_mean_a"] = (dims, sa.mean, {**unit, "long_name": f"time-mean {sp}, A"})
        data[f"{sp}_mean_b"] = (dims, sb.mean, {**unit, "long_name": f"time-mean {sp}, B"})
        data[f"{sp}_persistence_a"] = (dims, sa.persistence, {"units": "1"})
        data[f"{sp}_persistence_b"] = (dims, sb.persistence, {"units": "1"})
        data[f"{sp}_mean_difference"] = (dims, d["mean"],
                                         {**unit, "long_name": f"time-mean {sp}, B - A"})
        data[f"{sp}_persistence_difference"] = (dims, d["persistence"], {"units": "1"})
        data[f"{sp}_relative_change"] = (
            dims, relative_change(sa.mean, sb.mean, presence), {"units": "1"})
        attrs[f"{sp}_snapshots_a"] = sa.snapshots
        attrs[f"{sp}_snapshots_b"] = sb.snapshots
    change = change_classes(means["prey"][0], means["prey"][1], means["predator"][0],
                            means["predator"][1], threshold=threshold, presence=presence)
    data["change"] = (dims, change, {
        "flag_values": np.array(sorted(CHANGE_CODES), dtype=np.int8),
        "flag_meanings": " ".join(CHANGE_CODES[k].replace(" ", "_")
                                  for k in sorted(CHANGE_CODES)),
    })
    coords = {"y": ds_a["y"].values, "x": ds_a["x"].values}
    return xr.Dataset(data, coords=coords, attrs=attrs)


# ---------------------------------------------------------------------------
# zones from files
# ---------------------------------------------------------------------------
POLYGON_SUFFIXES = (".geojson", ".json")
"""Zone files read as polygons; any other file is read as a class raster."""


def _codes_to_labels(values: np.ndarray, valid: np.ndarray, prefix: str,
                     source: str) -> tuple[np.ndarray, list[str]]:
    """Integer labels 0..n-1 for the distinct integer codes in ``values`` on ``valid``."""
    v = values[valid]
    if v.size and not np.all(v == np.round(v)):
        raise InputError("zones must be integer class codes; the raster holds fractional "
                         "values", source)
    codes = np.unique(v.astype(np.int64))
    labels = np.full(values.shape, -1, dtype=np.int32)
    labels[valid] = np.searchsorted(codes, values[valid].astype(np.int64))
    return labels, [f"{prefix} {int(c)}" for c in codes]


def load_zones(zones: Path | None, zone_field: str | None, grid, ds) -> tuple[
        np.ndarray, list[str], str]:
    """Zone labels on ``grid`` from a file or from the run's habitat classes.

    Parameters
    ----------
    zones : pathlib.Path or None
        A polygon file (``.geojson``/``.json``, read with
        :func:`preyscape.landscape.measures.zones_from_polygons`) or a class
        raster (any other suffix; read with
        :func:`preyscape.landscape.io.read_layer_onto`, majority per cell).
        None: the habitat classes stored in ``ds`` (``habitat``), named
        ``"class <code>"``, when they are integer codes; otherwise one zone,
        the whole landscape.
    zone_field : str or None
        Polygon attribute naming the zones (polygons only).
    grid : Grid
        The run grid.
    ds : xarray.Dataset
        The results of run A (for its habitat layer).

    Returns
    -------
    labels : numpy.ndarray of int32
        Zone per cell, −1 none.
    names : list of str
        Zone names, indexed by label.
    kind : str
        ``"polygons"``, ``"raster"``, ``"habitat classes"`` or ``"whole landscape"``.
    """
    mask = grid.mask
    if zones is None:
        if "habitat" in ds:
            hab = np.asarray(ds["habitat"].values, dtype=np.float64)
            valid = mask & np.isfinite(hab)
            if valid.any() and np.all(hab[valid] == np.round(hab[valid])):
                labels, names = _codes_to_labels(hab, valid, "class", "results.nc: habitat")
                return labels, names, "habitat classes"
        return np.where(mask, 0, -1).astype(np.int32), ["whole landscape"], "whole landscape"
    zones = Path(zones)
    src = str(zones)
    if not zones.is_file():
        raise InputError("zone file not found; give a polygon GeoJSON or a class raster", src)
    if zones.suffix.lower() in POLYGON_SUFFIXES:
        from preyscape.landscape.measures import zones_from_polygons

        labels, names = zones_from_polygons(zones, grid, field=zone_field, source=src)
        return np.asarray(labels, dtype=np.int32), [str(n) for n in names], "polygons"
    if zone_field is not None:
        raise InputError(f"zone_field {zone_field!r} applies to polygon zones only "
                         f"({', '.join(POLYGON_SUFFIXES)}); a raster's zones are its codes", src)
    from preyscape.landscape.io import read_layer_onto

    arr = read_layer_onto(zones, grid, "mode", source=src)
    labels, names = _codes_to_labels(arr, mask & np.isfinite(arr), "zone", src)
    return labels, names, "raster"
