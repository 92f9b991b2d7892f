"""Neutral landscape generators.

Small, dependency-light building blocks (numpy and scipy only) for making
synthetic habitat rasters: spatially correlated noise fields, fractal
surfaces by spectral synthesis, modified random clusters, classification of a
field into habitat classes with prescribed area fractions, random
("percolation") landscapes, and a test for a spanning cluster.

Every ``*_field`` function returns a *rank field*: values spread evenly over
the open interval (0, 1), all distinct, so that cutting it with
:func:`classify_by_fractions` (or :func:`habitat_classes`) gives class areas
that match the requested fractions to the nearest cell, whatever the pattern.

Sources of the methods (the full references are in ``docs/landscapes.md``):

* fractal surfaces: spectral synthesis of fractional Brownian surfaces,
  Saupe 1988 (in Peitgen & Saupe (eds), *The Science of Fractal Images*,
  Springer, pp. 71–136), as used for neutral landscapes by Keitt 2000
  (Landscape Ecology 15:479) (both from memory);
* random clusters: the modified random clusters method of Saura &
  Martínez-Millán 2000 (Landscape Ecology 15:661), with the change described
  in :func:`cluster_field`;
* random sites and spanning: site percolation on the square lattice, with
  threshold p_c = 0.592746 (Newman & Ziff 2000, Phys. Rev. Lett. 85:4104).

All arrays use the raster axis order ``(row, col)`` with row 0 at the top.
Randomness comes only from :func:`numpy.random.default_rng` seeded with the
``seed`` argument, so the same seed always gives the same landscape.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence

import numpy as np
from scipy import ndimage

__all__ = [
    "classify_by_fractions",
    "cluster_field",
    "fractal_field",
    "fractal_surface",
    "gaussian_field",
    "habitat_classes",
    "random_field",
    "random_sites",
    "spans",
    "spans_west_east",
]

#: 4-neighbour (von Neumann) connectivity on the square lattice.
FOUR_NEIGHBOURS = ndimage.generate_binary_structure(2, 1)

#: Site percolation threshold of the square lattice (Newman & Ziff 2000,
#: Phys. Rev. Lett. 85:4104: p_c = 0.59274621(13)).
SITE_PERCOLATION_THRESHOLD = 0.592746


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


def spans_west_east(occupied: np.ndarray) -> bool:
    """Whether occupied sites connect the first column to the last (4-neighbour).

    The west–east counterpart of :func:`spans`.

    Parameters
    ----------
    occupied : numpy.ndarray of bool
        2-D array, ``True`` on occupied sites.

    Returns
    -------
    bool
        ``True`` if one 4-connected cluster touches both the first and the
        last column.
    """
    return spans(np.asarray(occupied, dtype=bool).T)


# --- rank fields for the landscape generators ------------------------------
def random_field(shape: tuple[int, int], seed: int | None = None) -> np.ndarray:
    """Independent random cells: a rank field without spatial correlation.

    Cutting it at a fraction ``q`` with :func:`habitat_classes` marks exactly
    ``round(q * cells)`` cells chosen uniformly at random, which is site
    percolation at a fixed number of occupied sites (the ensemble Newman &
    Ziff 2000, Phys. Rev. Lett. 85:4104, work in).

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray of float64
        Values in (0, 1), all distinct.
    """
    rows, cols = _check_shape(shape)
    rng = np.random.default_rng(seed)
    return _to_ranks(rng.random((rows, cols)))


def fractal_surface(
    shape: tuple[int, int], hurst: float, seed: int | None = None
) -> np.ndarray:
    """A fractional Brownian surface made by spectral synthesis (periodic).

    White Gaussian noise is Fourier transformed, each coefficient at spatial
    frequency ``k`` (cycles per cell, ``k = |(k_x, k_y)|``) is multiplied by
    ``k**-(hurst + 1)`` and the result is transformed back (Saupe 1988,
    "Algorithms for random fractals", in Peitgen & Saupe (eds), *The Science
    of Fractal Images*, Springer, pp. 71–136; from memory). The expected power
    at each frequency is therefore proportional to ``k**-(2 * hurst + 2)``:
    this is the spectral density of a 2-D fractional Brownian surface with
    Hurst exponent ``hurst``, whose increments over a lag ``r`` have variance
    proportional to ``r**(2 * hurst)`` (Mandelbrot & Van Ness 1968, SIAM
    Review 10:422). Mean power over an annulus of frequencies (the radially
    *averaged* spectrum) falls as ``f**-(2H+2)``; summed over the annulus it
    falls as ``f**-(2H+1)``.

    The surface is periodic: its east edge continues into its west edge and
    its south edge into its north edge, as the discrete Fourier transform
    implies.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    hurst : float
        Hurst exponent H in [0, 1]: near 0 rough and fragmented, near 1
        smooth with large patches. The fractal dimension of the surface is
        ``3 - H``.
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray of float64
        Zero mean, unit standard deviation (an all-zero array for a single
        cell).

    Raises
    ------
    ValueError
        If the shape is invalid or ``hurst`` lies outside [0, 1].
    """
    rows, cols = _check_shape(shape)
    if not 0.0 <= hurst <= 1.0:
        raise ValueError(f"hurst must lie in [0, 1], got {hurst!r}")
    rng = np.random.default_rng(seed)
    coeff = np.fft.rfft2(rng.standard_normal((rows, cols)))
    ky = np.fft.fftfreq(rows)[:, None]
    kx = np.fft.rfftfreq(cols)[None, :]
    k = np.hypot(kx, ky)
    k[0, 0] = 1.0  # the mean is removed below
    coeff *= k ** -(hurst + 1.0)
    coeff[0, 0] = 0.0
    z = np.fft.irfft2(coeff, s=(rows, cols))
    sd = z.std()
    return z / sd if sd > 0 else z


def fractal_field(shape: tuple[int, int], hurst: float, seed: int | None = None) -> np.ndarray:
    """Rank field of a fractal surface (see :func:`fractal_surface`).

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    hurst : float
        Hurst exponent in [0, 1].
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray of float64
        Values in (0, 1), all distinct, in the same order as the surface.
    """
    return _to_ranks(fractal_surface(shape, hurst, seed))


def cluster_field(
    shape: tuple[int, int], marked: float, seed: int | None = None
) -> np.ndarray:
    """Rank field of a modified random clusters landscape.

    The steps of Saura & Martínez-Millán 2000 (Landscape Ecology 15:661):

    1. mark each cell independently with probability ``marked`` (a site
       percolation map);
    2. group the marked cells into clusters of 4-neighbours;
    3. give every cluster a class at random;
    4. fill the unmarked cells from the clusters around them: each takes the
       most frequent value among its 8 neighbours that already have one (ties
       broken at random), repeated until every cell is filled.

    One change makes class areas exact: the paper draws each cluster's class
    with probabilities equal to the wanted fractions, so realised areas
    scatter around them. Here step 3 gives each cluster a random rank instead,
    and step 4 fills with cluster identities rather than classes; cutting the
    ranked cells at the wanted fractions (:func:`habitat_classes`) then assigns
    whole clusters to classes, splitting at most one cluster at each class
    boundary. Within a cluster, cells are ordered by a smooth random field,
    so a split cluster splits into contiguous pieces rather than speckle.

    Parameters
    ----------
    shape : tuple of int
        ``(rows, cols)``.
    marked : float
        Share p of cells marked in step 1, in (0, 1). Near the percolation
        threshold (0.5927) the marked clusters, and so the patches, are large
        with irregular edges; above it one cluster fills most of the map. At
        p ≈ 0.2–0.3 the map is most fragmented (most edge); at small p the
        few marked cells grow into compact blobs of about 1/p cells.
    seed : int or None, optional
        Seed for :func:`numpy.random.default_rng`.

    Returns
    -------
    numpy.ndarray of float64
        Values in (0, 1), all distinct; the cells of each filled cluster hold
        consecutive ranks.

    Raises
    ------
    ValueError
        If the shape is invalid or ``marked`` lies outside (0, 1).
    """
    rows, cols = _check_shape(shape)
    if not 0.0 < marked < 1.0:
        raise ValueError(f"marked must lie in (0, 1), got {marked!r}")
    rng = np.random.default_rng(seed)
    marks = rng.random((rows, cols)) < marked
    if not marks.any():  # a tiny map can draw no marked cell: keep one
        marks.flat[rng.integers(marks.size)] = True
    labels, n = ndimage.label(marks, structure=FOUR_NEIGHBOURS)
    labels = _fill_by_majority(labels, rng)
    cluster_rank = rng.permutation(n) + 1.0  # ranks 1..n, label 0 never remains
    within = gaussian_field((rows, cols), 2.0, rng.integers(2**63))
    key = np.empty(labels.shape)
    key[...] = cluster_rank[labels - 1]
    order = np.lexsort((within.ravel(), key.ravel()))
    ranks = np.empty(labels.size, dtype=np.float64)
    ranks[order] = (np.arange(labels.size) + 0.5) / labels.size
    return ranks.reshape(labels.shape)


def _fill_by_majority(labels: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Fill zero cells with the most frequent non-zero label of their 8 neighbours.

    All cells with at least one labelled neighbour are filled at once from the
    labels of the previous sweep; sweeps repeat until no zero is left. Ties go
    to a random one of the tied labels.
    """
    lab = labels.astype(np.int64, copy=True)
    rows, cols = lab.shape
    shifts = [(dr, dc) for dr in (-1, 0, 1) for dc in (-1, 0, 1) if (dr, dc) != (0, 0)]
    while True:
        empty = np.flatnonzero(lab.ravel() == 0)
        if empty.size == 0:
            return lab
        padded = np.pad(lab, 1)
        r, c = np.divmod(empty, cols)
        nb = np.stack([padded[r + 1 + dr, c + 1 + dc] for dr, dc in shifts], axis=1)
        ready = (nb > 0).any(axis=1)
        nb, cells = nb[ready], empty[ready]
        # votes[i, j]: how many neighbours of cell i carry neighbour j's label;
        # a random fraction below 1 breaks ties without overturning a majority
        votes = (nb[:, :, None] == nb[:, None, :]).sum(axis=2).astype(np.float64)
        votes[nb == 0] = -1.0
        votes += rng.random(votes.shape) * 0.5
        lab.ravel()[cells] = nb[np.arange(nb.shape[0]), votes.argmax(axis=1)]


def habitat_classes(
    field: np.ndarray, fractions: Sequence[float], *, mask: np.ndarray | None = None
) -> np.ndarray:
    """Cut a rank field into classes 1..n, class 1 on the highest values.

    Parameters
    ----------
    field : numpy.ndarray
        2-D array of finite values (a rank field, or any field to threshold).
    fractions : sequence of float
        Area fraction of class 1, 2, ..., n, in that order; non-negative,
        summing to 1. Class 1 takes the highest field values (the best
        habitat when the field is read as suitability), class n the lowest.
    mask : numpy.ndarray of bool, optional
        Only these cells are classified (fractions refer to them); the rest
        get ``-1``. Default: all cells.

    Returns
    -------
    numpy.ndarray of int64
        Class codes 1..n (``-1`` outside ``mask``). Class k covers
        ``round(F_k * cells) - round(F_(k-1) * cells)`` cells, with ``F_k``
        the cumulative fraction of classes 1..k, so every class is within
        one cell of its fraction and the cumulative areas are exact to the
        nearest cell.

    Raises
    ------
    ValueError
        As :func:`classify_by_fractions`.
    """
    fr = [float(f) for f in fractions]
    if not fr:
        raise ValueError("fractions must not be empty")
    # classify_by_fractions gives its first class the lowest values; negate
    # the field so class 1 (first) takes the highest values
    codes = {k + 1: f for k, f in enumerate(fr)}
    return classify_by_fractions(-np.asarray(field, dtype=np.float64), codes, mask=mask,
                                 fill=-1)
