"""Landscape metrics of a habitat raster: area, patches, edges and spanning.

For every habitat class (or, on a suitability raster, for the cells at or
above a suitability threshold and those below it):

* ``fraction``: share of the cells with data;
* ``patches``: number of patches, a patch being a set of cells of the class
  joined through shared edges (4-neighbour rule), counted with
  :func:`scipy.ndimage.label`;
* ``largest_patch_km2``, ``mean_patch_km2``: patch areas;
* ``edge_m``, ``edge_density_m_per_ha``: length of the cell faces between
  the class and another class, per hectare of the landscape (cells with
  data). Faces against no-data cells and the map border are not counted.
  Raster edges follow cell faces, so a boundary running diagonally counts
  up to √2 times its straight length;
* ``spans_north_south``, ``spans_west_east``: whether one patch touches both
  the northernmost and the southernmost row holding data (the first and last
  rows of a map without no-data), resp. the westernmost and easternmost
  columns; ``spans`` is either of the two. On a random map this is site
  percolation, with threshold p_c = 0.592746 for the share of the class on
  an infinite square lattice (Newman & Ziff 2000, Phys. Rev. Lett. 85:4104).

These are common landscape-pattern measures (see e.g. Turner, Gardner &
O'Neill 2001, *Landscape Ecology in Theory and Practice*, Springer; from
memory); the definitions above are the ones used here. Areas are in km²,
edge lengths in metres, edge density in metres per hectare.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np
from scipy import ndimage

from preyscape.landscape.grid import Grid

__all__ = ["class_metrics", "format_metrics", "landscape_metrics", "patches"]

_FOUR = ndimage.generate_binary_structure(2, 1)


def patches(cells: np.ndarray) -> tuple[np.ndarray, int]:
    """Label the patches (4-neighbour) of a boolean map.

    Parameters
    ----------
    cells : numpy.ndarray of bool
        2-D, ``True`` on the cells of the class.

    Returns
    -------
    labels : numpy.ndarray of int32
        0 off the class, 1..n on its patches.
    n : int
        Number of patches.
    """
    labels, n = ndimage.label(np.asarray(cells, dtype=bool), structure=_FOUR)
    return labels, int(n)


def class_metrics(
    classes: np.ndarray,
    dx: float,
    dy: float,
    mask: np.ndarray | None = None,
    names: Mapping[int, str] | None = None,
) -> list[dict]:
    """Metrics of every class of a class map.

    Parameters
    ----------
    classes : numpy.ndarray of int
        2-D class codes, row 0 north.
    dx, dy : float
        Cell width and height, metres.
    mask : numpy.ndarray of bool, optional
        ``True`` on cells with data. Default: ``classes >= 0``.
    names : mapping of int to str, optional
        Class names to include.

    Returns
    -------
    list of dict
        One dict per code present on a cell with data, in code order, with
        the keys described in the module docstring plus ``code``, ``name``,
        ``cells`` and ``area_km2``.
    """
    cl = np.asarray(classes)
    data = (cl >= 0) if mask is None else np.asarray(mask, dtype=bool)
    n_data = int(data.sum())
    cell_km2 = dx * dy / 1e6
    data_ha = n_data * dx * dy / 1e4
    rows = np.flatnonzero(data.any(axis=1))
    cols = np.flatnonzero(data.any(axis=0))
    # faces between two data cells of different classes; faces between columns
    # are dy long, faces between rows dx long
    diff_x = data[:, 1:] & data[:, :-1] & (cl[:, 1:] != cl[:, :-1])
    diff_y = data[1:, :] & data[:-1, :] & (cl[1:, :] != cl[:-1, :])
    out = []
    for code in np.unique(cl[data]):
        own = data & (cl == code)
        n = int(own.sum())
        labels, n_patch = patches(own)
        sizes = np.bincount(labels.ravel())[1:]
        edge = (dy * (int((diff_x & (own[:, 1:] | own[:, :-1])).sum()))
                + dx * (int((diff_y & (own[1:, :] | own[:-1, :])).sum())))
        ns = _touching(labels, rows[0], rows[-1], axis=0)
        we = _touching(labels, cols[0], cols[-1], axis=1)
        out.append({
            "code": int(code),
            "name": (names or {}).get(int(code), ""),
            "cells": n,
            "fraction": n / n_data,
            "area_km2": n * cell_km2,
            "patches": n_patch,
            "largest_patch_km2": float(sizes.max()) * cell_km2,
            "mean_patch_km2": n * cell_km2 / n_patch,
            "edge_m": edge,
            "edge_density_m_per_ha": edge / data_ha,
            "spans_north_south": ns,
            "spans_west_east": we,
            "spans": ns or we,
        })
    return out


def _touching(labels: np.ndarray, first: int, last: int, axis: int) -> bool:
    """Whether one label occurs on both line ``first`` and line ``last`` of ``axis``."""
    a = np.take(labels, first, axis=axis)
    b = np.take(labels, last, axis=axis)
    return bool(np.intersect1d(a[a > 0], b[b > 0]).size)


def landscape_metrics(
    grid: Grid,
    values: np.ndarray,
    kind: str,
    *,
    threshold: float = 0.5,
    names: Mapping[int, str] | None = None,
) -> dict:
    """Metrics of a habitat raster, ready to print or store as JSON.

    Parameters
    ----------
    grid : Grid
        The raster's grid (cell sizes in metres, data mask).
    values : numpy.ndarray
        Class codes (``kind="classes"``) or suitability in [0, 1]
        (``kind="suitability"``), shape ``grid.shape``.
    kind : {"classes", "suitability"}
        What ``values`` holds.
    threshold : float, optional
        On a suitability raster, cells with suitability ≥ ``threshold`` form
        the class ``1`` ("habitat"), the others the class ``0``. Default 0.5.
    names : mapping of int to str, optional
        Class names.

    Returns
    -------
    dict
        ``grid`` (rows, cols, cell size in m, CRS, extent in m), ``cells_with_data``,
        ``nodata_cells``, ``area_km2``, ``edge_m`` and ``edge_density_m_per_ha``
        (all boundaries between different classes), ``classes`` (see
        :func:`class_metrics`), ``rules`` (the definitions in words), and for
        suitability ``suitability`` (mean, quartiles) and ``threshold``.
    """
    from preyscape.landscape.files import crs_name

    mask = grid.mask
    if kind == "suitability":
        s = np.asarray(values, dtype=np.float64)
        cl = np.where(mask, np.where(s >= threshold, 1, 0), -1)
        names = {1: f"habitat (suitability >= {threshold:g})",
                 0: f"other (suitability < {threshold:g})"}
    elif kind == "classes":
        cl = np.where(mask, np.asarray(values).astype(np.int64), -1)
    else:
        raise ValueError(f"kind must be 'classes' or 'suitability', not {kind!r}")
    per_class = class_metrics(cl, grid.dx, grid.dy, mask, names)
    n_data = int(mask.sum())
    diff_x = mask[:, 1:] & mask[:, :-1] & (cl[:, 1:] != cl[:, :-1])
    diff_y = mask[1:, :] & mask[:-1, :] & (cl[1:, :] != cl[:-1, :])
    edge = grid.dy * int(diff_x.sum()) + grid.dx * int(diff_y.sum())
    left, bottom, right, top = grid.bounds
    out: dict = {
        "kind": kind,
        "grid": {"rows": grid.ny, "cols": grid.nx, "cell_size_m": [grid.dx, grid.dy],
                 "crs": crs_name(grid.crs_wkt),
                 "extent_m": {"west": left, "south": bottom, "east": right, "north": top}},
        "cells_with_data": n_data,
        "nodata_cells": int(mask.size - n_data),
        "area_km2": n_data * grid.cell_area_km2,
        "edge_m": edge,
        "edge_density_m_per_ha": edge / (n_data * grid.dx * grid.dy / 1e4),
        "classes": per_class,
        "rules": {
            "patches": "cells of a class joined through shared edges (4-neighbour rule)",
            "edge": "cell faces between two different classes; faces against no-data cells "
                    "and the map border not counted",
            "spans": "one patch touches both the northernmost and southernmost rows with data "
                     "(north-south), or the westernmost and easternmost columns (west-east)",
        },
    }
    if kind == "suitability":
        s = np.asarray(values, dtype=np.float64)[mask]
        q = np.quantile(s, [0.25, 0.5, 0.75])
        out["threshold"] = threshold
        out["suitability"] = {"mean": float(s.mean()), "quartiles": [float(x) for x in q],
                              "min": float(s.min()), "max": float(s.max())}
    return out


def format_metrics(m: dict) -> str:
    """The metrics as a short text table for the terminal."""
    g = m["grid"]
    e = g["extent_m"]
    lines = [
        f"grid      {g['rows']} rows x {g['cols']} cols, cells {g['cell_size_m'][0]:g} x "
        f"{g['cell_size_m'][1]:g} m, {g['crs']}",
        f"extent    x {e['west']:.0f} to {e['east']:.0f} m, y {e['south']:.0f} to "
        f"{e['north']:.0f} m",
        f"data      {m['cells_with_data']} cells ({m['area_km2']:.4g} km²), "
        f"{m['nodata_cells']} no-data cells",
        f"edges     {m['edge_m'] / 1000:.4g} km, {m['edge_density_m_per_ha']:.3g} m/ha",
    ]
    if m["kind"] == "suitability":
        s = m["suitability"]
        lines.append(f"suitability mean {s['mean']:.3f}, quartiles "
                     + ", ".join(f"{x:.3f}" for x in s["quartiles"]))
    head = (f"{'code':>5}  {'class':<32} {'cells':>9} {'share':>7} {'patches':>8} "
            f"{'largest km²':>12} {'mean km²':>10} {'edge m/ha':>10}  spans")
    lines += ["", head]
    for c in m["classes"]:
        span = ("N-S and W-E" if c["spans_north_south"] and c["spans_west_east"]
                else "N-S" if c["spans_north_south"] else "W-E" if c["spans_west_east"]
                else "no")
        name = c["name"] if len(c["name"]) <= 32 else c["name"][:31] + "…"
        lines.append(
            f"{c['code']:>5}  {name:<32} {c['cells']:>9} {100 * c['fraction']:6.2f}% "
            f"{c['patches']:>8} {_g(c['largest_patch_km2']):>12} {_g(c['mean_patch_km2']):>10} "
            f"{c['edge_density_m_per_ha']:>10.3g}  {span}")
    return "\n".join(lines)


def _g(x: float) -> str:
    return f"{x:.4g}" if math.isfinite(x) else "n/a"
