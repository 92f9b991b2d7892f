"""Neutral landscape generators.

Small, dependency-light building blocks (numpy and scipy only) for making
synthetic habitat rasters: spatially correlated noise fields, classification
of a field into habitat classes with prescribed area fractions, random
("percolation") landscapes, and a test for a spanning cluster.

All arrays use the raster axis order ``(row, col)`` with row 0 at the top.
Randomness comes only from :func:`numpy.random.default_rng` seeded with the
``seed`` argument, so the same seed always gives the same landscape.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from scipy import ndimage

__all__ = [
    "gaussian_field",
    "classify_by_fractions",
    "random_sites",
    "spans",
]

#: 4-neighbour (von Neumann) connectivity on the square lattice.
FOUR_NEIGHBOURS = ndimage.generate_binary_structure(2, 1)


def _check_shape(shape: tuple[int, int]) -> tuple[int, int]:
    if len(shape) != 2:
        raise ValueError(f"shape must be (rows, cols), got {shape!r}")
    rows, cols = int(shape[0]), int(shape[1])
    if rows < 1 or cols < 1:
        raise ValueError(f"shape must be positive, got {shape!r}")
    return rows, cols


def _to_ranks(values: np.ndarray) -> np.ndarray:
    """Replace values by their ranks mapped into the open interval (0, 1)."""
    flat = values.ravel()
    order = np.argsort(flat, kind="stable")
    ranks = np.empty(flat.size, dtype=np.float64)
    ranks[order] = np.arange(flat.size, dtype=np.float64)
    return ((ranks + 0.5) / flat.size).reshape(values.shape)


def gaussian_field(
    shape: tuple[int, int],
    correlation_cells: float,
    seed: int | None = None,
    *,
    mode: str = "reflect",
) -> np.ndarray:
    """Spatially correlated noise with a uniform marginal distribution.

    White Gaussian noise is smoothed with a Gaussian kernel and the result is
    replaced by its ranks, so that the values are spread evenly over the open
    interval (0, 1). Thresholding the field at ``q`` therefore selects a
    fraction ``q`` of the cells, in patches whose size scales with
    ``correlation_cells``.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)`` of the output.
    correlation_cells : float
        Standard deviation of the smoothing kernel, in cells. ``0`` gives
        uncorrelated (white) noise.
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.
    mode : {"reflect", "wrap"}, optional
        Boundary handling of the smoothing filter. ``"wrap"`` gives a
        periodic (tileable) field.

    Returns
    -------
    numpy.ndarray of float64
        Array of ``shape`` with values in (0, 1), every value distinct.

    Raises
    ------
    ValueError
        If the shape is invalid, ``correlation_cells`` is negative or
        ``mode`` is not supported.
    """
    rows, cols = _check_shape(shape)
    if not correlation_cells >= 0:
        raise ValueError(f"correlation_cells must be >= 0, got {correlation_cells!r}")
    if mode not in ("reflect", "wrap"):
        raise ValueError(f"mode must be 'reflect' or 'wrap', got {mode!r}")
    rng = np.random.default_rng(seed)
    noise = rng.standard_normal((rows, cols))
    if correlation_cells > 0:
        noise = ndimage.gaussian_filter(noise, sigma=float(correlation_cells), mode=mode)
    return _to_ranks(noise)


def classify_by_fractions(
    field: np.ndarray,
    fractions: Mapping[int, float],
    *,
    mask: np.ndarray | None = None,
    fill: int = 0,
) -> np.ndarray:
    """Assign class codes so that each class covers a given area fraction.

    Cells are ordered by their ``field`` value (ties broken by position) and
    cut at the cumulative fractions: the lowest values get the first class of
    ``fractions``, the next ones the second class, and so on. Class sizes are
    exact up to rounding to whole cells.

    Parameters
    ----------
    field : numpy.ndarray
        2-D array of finite values to classify.
    fractions : mapping of int to float
        Class code to area fraction, in the order the classes are assigned
        from low to high field values. Fractions must be non-negative and sum
        to 1.
    mask : numpy.ndarray of bool, optional
        Only cells where ``mask`` is true are classified (fractions refer to
        these cells); the others get ``fill``. Default: all cells.
    fill : int, optional
        Code for cells outside ``mask``. Default ``0``.

    Returns
    -------
    numpy.ndarray of int64
        Class codes, same shape as ``field``.

    Raises
    ------
    ValueError
        If the fractions are empty, negative or do not sum to 1, or if the
        mask does not match the field.
    """
    values = np.asarray(field, dtype=np.float64)
    if not fractions:
        raise ValueError("fractions must not be empty")
    codes = np.array([int(c) for c in fractions], dtype=np.int64)
    fracs = np.array([float(fractions[c]) for c in fractions], dtype=np.float64)
    if np.any(fracs < 0):
        raise ValueError("fractions must be non-negative")
    if not np.isclose(fracs.sum(), 1.0, rtol=0.0, atol=1e-9):
        raise ValueError(f"fractions must sum to 1, got {fracs.sum():.12g}")
    if mask is None:
        sel = np.ones(values.shape, dtype=bool)
    else:
        sel = np.asarray(mask, dtype=bool)
        if sel.shape != values.shape:
            raise ValueError(f"mask shape {sel.shape} does not match field shape {values.shape}")
    inside = values[sel]
    if not np.all(np.isfinite(inside)):
        raise ValueError("field must be finite on the classified cells")

    n = inside.size
    bounds = np.rint(np.cumsum(fracs) * n).astype(np.int64)
    bounds[-1] = n
    per_rank = np.repeat(codes, np.diff(np.concatenate(([0], bounds))))
    order = np.argsort(inside, kind="stable")
    classified = np.empty(n, dtype=np.int64)
    classified[order] = per_rank

    out = np.full(values.shape, int(fill), dtype=np.int64)
    out[sel] = classified
    return out


def random_sites(shape: tuple[int, int], p: float, seed: int | None = None) -> np.ndarray:
    """Random neutral landscape: each site occupied independently.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)`` of the output.
    p : float
        Occupancy probability of each site, in [0, 1].
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray of bool
        ``True`` on occupied sites.

    Raises
    ------
    ValueError
        If the shape is invalid or ``p`` lies outside [0, 1].
    """
    rows, cols = _check_shape(shape)
    if not 0.0 <= p <= 1.0:
        raise ValueError(f"p must lie in [0, 1], got {p!r}")
    rng = np.random.default_rng(seed)
    return rng.random((rows, cols)) < p


def spans(occupied: np.ndarray) -> bool:
    """Whether occupied sites connect the top row to the bottom row.

    Connectivity is through shared edges (4-neighbour lattice), as in site
    percolation on the square lattice.

    Parameters
    ----------
    occupied : numpy.ndarray of bool
        2-D array, ``True`` on occupied sites.

    Returns
    -------
    bool
        ``True`` if one 4-connected cluster of occupied sites touches both
        the first and the last row.

    Raises
    ------
    ValueError
        If ``occupied`` is not 2-D.
    """
    occ = np.asarray(occupied, dtype=bool)
    if occ.ndim != 2:
        raise ValueError(f"occupied must be 2-D, got {occ.ndim} dimensions")
    labels, n = ndimage.label(occ, structure=FOUR_NEIGHBOURS)
    if n == 0:
        return False
    top = np.unique(labels[0])
    bottom = np.unique(labels[-1])
    common = np.intersect1d(top[top > 0], bottom[bottom > 0])
    return bool(common.size)
