"""Getis–Ord Gi* on a raster: distance-band weights, z-scores, FDR significance.

The local statistic Gi* of Getis & Ord (1992, Geographical Analysis 24:189),
in the standardised form of Ord & Getis (1995, Geographical Analysis 27:286),
compares the sum of a cell's neighbourhood (the cell itself included) with
what the landscape mean would give::

    Gi* = (sum_j w_ij x_j - xbar W_i) / (S sqrt((n sum_j w_ij^2 - W_i^2) / (n - 1)))

with ``W_i = sum_j w_ij``, and ``xbar`` and ``S = sqrt(sum x^2 / n - xbar^2)``
taken over all ``n`` data cells. Under the null hypothesis of no spatial
association Gi* is approximately standard normal. The weights here are
binary distance-band weights: ``w_ij = 1`` when the centres of cells ``i``
and ``j`` lie at most ``band_m`` metres apart (so ``w_ii = 1``), 0 otherwise;
then ``sum_j w_ij^2 = W_i``. Cells without data take no part anywhere: they
are neither neighbours nor counted in ``n``, ``xbar`` or ``S``.

On a raster the weights are one kernel of cell offsets, so the neighbourhood
sums of all cells are one convolution (direct for small kernels, FFT for
large ones): a 1000 x 1000 grid with a band of 20 cells takes well under a
second per snapshot.

Many cells are tested at once, so significance is decided with the false
discovery rate procedure of Benjamini & Hochberg (1995, J R Stat Soc B 57:289),
as Caldas de Castro & Singer (2006, Geographical Analysis 38:180; from memory)
proposed for local statistics of spatial association. Neighbouring Gi*
values are positively correlated (their neighbourhoods overlap), the kind of
dependence under which the procedure keeps its error rate (Benjamini &
Yekutieli 2001, Ann Stat 29:1165; from memory).
"""

from __future__ import annotations

from typing import Literal

import numpy as np

from preyscape.landscape.grid import Grid

__all__ = ["default_band_m", "distance_band_kernel", "fdr_significant", "getis_ord_gi_star",
           "normal_p"]

# Kernels with at most this many cells are applied directly (exact sums);
# larger ones by FFT, whose cost does not grow with the band.
_DIRECT_MAX_CELLS = 49
# A band equal to a centre distance up to round-off includes that offset.
_BAND_RTOL = 1e-9


def default_band_m(grid: Grid) -> float:
    """A default neighbourhood radius for hotspot analysis, metres.

    The larger of 3 cells (of the longer cell side) and 2 % of the shorter
    extent of the grid. Common practice, no source: the band should hold
    enough cells for a stable neighbourhood sum but stay small against the
    landscape, so that local clusters are not averaged away.

    Parameters
    ----------
    grid : Grid
        The run grid (cell sizes and extents in metres).

    Returns
    -------
    float
        Band radius, metres.
    """
    return float(max(3.0 * max(grid.dx, grid.dy), 0.02 * min(grid.width_m, grid.height_m)))


def distance_band_kernel(dx_m: float, dy_m: float, band_m: float) -> np.ndarray:
    """Binary weights of all cell offsets whose centres lie within ``band_m``.

    Parameters
    ----------
    dx_m, dy_m : float
        Cell width (east–west) and height (north–south), metres.
    band_m : float
        Band radius, metres. An offset at exactly this distance is included
        (up to a relative round-off of 1e-9).

    Returns
    -------
    numpy.ndarray of float64, shape (2 ry + 1, 2 rx + 1)
        1 where the centre of the cell at offset ``(row - ry, col - rx)``
        lies at most ``band_m`` from the centre cell (which is always 1),
        0 elsewhere; ``ry`` and ``rx`` are the largest row and column
        offsets inside the band.

    Raises
    ------
    ValueError
        If a cell size is not positive or the band is negative or not finite.
    """
    if not (dx_m > 0 and dy_m > 0):
        raise ValueError(f"cell sizes must be positive, got dx={dx_m} m, dy={dy_m} m")
    if not (np.isfinite(band_m) and band_m >= 0):
        raise ValueError(f"band must be a finite distance >= 0 m, got {band_m}")
    lim = band_m * (1.0 + _BAND_RTOL)
    ry = int(np.floor(lim / dy_m))
    rx = int(np.floor(lim / dx_m))
    oy = np.arange(-ry, ry + 1)[:, None] * float(dy_m)
    ox = np.arange(-rx, rx + 1)[None, :] * float(dx_m)
    return (np.hypot(oy, ox) <= lim).astype(np.float64)


class _NeighbourSums:
    """Sums over the kernel neighbourhood of every cell (zero outside the grid).

    The kernel spectrum is computed once, so repeated calls (one per
    snapshot) cost one forward and one inverse FFT each.
    """

    def __init__(self, shape: tuple[int, int], kernel: np.ndarray, method: str) -> None:
        ny, nx = shape
        # offsets reaching beyond the grid never pair two cells: crop them
        ry = min(kernel.shape[0] // 2, ny - 1)
        rx = min(kernel.shape[1] // 2, nx - 1)
        cy, cx = kernel.shape[0] // 2, kernel.shape[1] // 2
        k = np.ascontiguousarray(kernel[cy - ry:cy + ry + 1, cx - rx:cx + rx + 1])
        if method == "auto":
            method = "direct" if np.count_nonzero(k) <= _DIRECT_MAX_CELLS else "fft"
        if method not in ("direct", "fft"):
            raise ValueError(f"method must be 'auto', 'direct' or 'fft', got {method!r}")
        self.method = method
        self.kernel = k
        self.shape = (ny, nx)
        self.exact = method == "direct"
        if method == "fft":
            from scipy import fft

            self._fshape = (fft.next_fast_len(ny + 2 * ry, real=True),
                            fft.next_fast_len(nx + 2 * rx, real=True))
            # correlation = convolution with the flipped kernel (ours is symmetric anyway)
            self._kf = fft.rfft2(k[::-1, ::-1], self._fshape)
            self._r = (ry, rx)

    def __call__(self, a: np.ndarray) -> np.ndarray:
        if self.method == "direct":
            from scipy import ndimage

            return ndimage.correlate(a, self.kernel, mode="constant", cval=0.0)
        from scipy import fft

        full = fft.irfft2(fft.rfft2(a, self._fshape) * self._kf, self._fshape)
        ry, rx = self._r
        ny, nx = self.shape
        return full[ry:ry + ny, rx:rx + nx]


class _GiStar:
    """Gi* on one data mask: neighbour counts and variance factors computed once."""

    def __init__(self, data: np.ndarray, dx_m: float, dy_m: float, band_m: float,
                 method: str = "auto") -> None:
        self.data = data
        self.n = int(data.sum())
        self.sums = _NeighbourSums(data.shape, distance_band_kernel(dx_m, dy_m, band_m), method)
        w = self.sums(data.astype(np.float64))
        if not self.sums.exact:
            w = np.rint(w)  # counts are integers; FFT leaves round-off of ~1e-12
        self.w = w
        n = self.n
        # binary weights: sum_j w_ij^2 = W_i, so n sum w^2 - W^2 = W (n - W)
        var = np.where(data, w * (n - w), 0.0) / max(n - 1, 1)
        self.root = np.sqrt(np.maximum(var, 0.0))
        self.all_data = bool(data.all())
        # where z is a quotient once S > 0 (then S sqrt(var) > 0 exactly where var > 0: var
        # is 0 or at least 1, the binary weights being integers), where it is 0 instead,
        # and where the neighbourhood mean is defined
        self.has_root = data & (self.root > 0)
        self.no_root = data & ~self.has_root
        self.has_w = data & (w > 0)
        self.no_w = data & ~self.has_w

    def __call__(self, values: np.ndarray) -> np.ndarray:
        return self.scores(values)[0]

    def scores(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, float, float]:
        """Gi* z-scores, standardised excess (m_i - xbar)/S, landscape mean and S."""
        z = np.full(self.data.shape, np.nan)
        effect = np.full(self.data.shape, np.nan)
        n = self.n
        if n == 0:
            return z, effect, float("nan"), float("nan")
        x = np.where(self.data, values, 0.0).astype(np.float64, copy=False)
        # the data values in order (all of x, without a copy, when every cell has data)
        xd = x.ravel() if self.all_data else x[self.data]
        mean = xd.sum() / n
        if xd.max() == xd.min():
            z[self.data] = 0.0  # constant field: S = 0, no cell stands out
            effect[self.data] = 0.0
            return z, effect, float(mean), 0.0
        # centred values: sum_j w_ij x_j - xbar W_i = sum_j w_ij (x_j - xbar), without the
        # cancellation of two large sums; S from the same centred values (two-pass variance)
        xc = x - mean if self.all_data else np.where(self.data, x - mean, 0.0)
        s = np.sqrt(np.sum(xc * xc) / n)
        num = self.sums(xc)
        den = s * self.root
        # a band holding every data cell (W_i = n) gives 0/0: no information, z = 0
        ok, zero = ((self.has_root, self.no_root) if s > 0 else
                    (self.data & (den > 0), self.data & ~(den > 0)))
        np.divide(num, den, out=z, where=ok)
        z[zero] = 0.0
        # the neighbourhood mean's excess in landscape standard deviations: (m_i - xbar)/S
        np.divide(num, self.w * s, out=effect, where=self.has_w)
        effect[self.no_w] = 0.0
        return z, effect, float(mean), float(s)


def _data_mask(values: np.ndarray, mask: np.ndarray | None) -> np.ndarray:
    values = np.asarray(values)
    if values.ndim != 2:
        raise ValueError(f"values must be a 2-D raster, got shape {values.shape}")
    data = np.isfinite(values)
    if mask is not None:
        mask = np.asarray(mask, dtype=bool)
        if mask.shape != values.shape:
            raise ValueError(f"mask shape {mask.shape} does not match values {values.shape}")
        data &= mask
    return data


def getis_ord_gi_star(
    values: np.ndarray,
    mask: np.ndarray | None,
    dx_m: float,
    dy_m: float,
    band_m: float,
    *,
    method: Literal["auto", "direct", "fft"] = "auto",
) -> np.ndarray:
    """Getis–Ord Gi* z-scores with binary distance-band weights.

    Gi* = (Σ_j w_ij x_j − x̄ W_i) / (S √((n Σ_j w_ij² − W_i²)/(n − 1))),
    W_i = Σ_j w_ij, x̄ and S = √(Σx²/n − x̄²) over the n data cells
    (Getis & Ord 1992, Geogr Anal 24:189; Ord & Getis 1995, Geogr Anal
    27:286). ``w_ij = 1`` when the centres of cells i and j lie at most
    ``band_m`` apart, self included.

    Parameters
    ----------
    values : numpy.ndarray, shape (rows, cols)
        The field, e.g. a density in animals/km² (any unit: Gi* has none).
    mask : numpy.ndarray of bool or None
        True on cells with data. Cells where it is False or ``values`` is
        not finite are excluded from every sum, from n, x̄ and S.
    dx_m, dy_m : float
        Cell width and height, metres.
    band_m : float
        Neighbourhood radius, metres.
    method : {"auto", "direct", "fft"}
        How neighbourhood sums are taken: direct correlation (exact) for
        kernels of at most 49 cells, FFT above ("auto").

    Returns
    -------
    numpy.ndarray of float64
        Gi* z-scores (dimensionless), NaN on excluded cells. A constant field
        (S = 0) gives 0 on every data cell, as does a cell whose band holds
        every data cell (W_i = n, where Gi* is 0/0).

    Examples
    --------
    With a band shorter than a cell, Gi* is the standard score (x - 3) / √3.5:

    >>> x = np.array([[1.0, 2.0], [3.0, 6.0]])
    >>> getis_ord_gi_star(x, None, 10.0, 10.0, 5.0).round(3).tolist()
    [[-1.069, -0.535], [0.0, 1.604]]
    """
    data = _data_mask(values, mask)
    return _GiStar(data, dx_m, dy_m, band_m, method)(np.asarray(values, dtype=np.float64))


def normal_p(z: np.ndarray, tail: Literal["upper", "two-sided"] = "two-sided") -> np.ndarray:
    """p-values of standard-normal z-scores (NaN stays NaN).

    Parameters
    ----------
    z : numpy.ndarray
        z-scores.
    tail : {"upper", "two-sided"}
        ``P(Z >= z)`` or ``P(|Z| >= |z|)``.
    """
    from scipy.special import ndtr  # standard normal CDF; lighter than scipy.stats

    z = np.asarray(z, dtype=np.float64)
    if tail == "upper":
        return ndtr(-z)
    if tail == "two-sided":
        return 2.0 * ndtr(-np.abs(z))
    raise ValueError(f"tail must be 'upper' or 'two-sided', got {tail!r}")


def fdr_significant(
    z: np.ndarray,
    alpha: float = 0.05,
    tail: Literal["upper", "two-sided"] = "two-sided",
) -> np.ndarray:
    """Significant z-scores by the Benjamini–Hochberg false discovery rate.

    The m finite z-scores get normal p-values p_(1) <= ... <= p_(m); all
    with p <= p_(k) are significant, k the largest rank with
    p_(k) <= k alpha / m (Benjamini & Hochberg 1995, J R Stat Soc B 57:289).

    Parameters
    ----------
    z : numpy.ndarray
        z-scores; non-finite entries are not tested (and not counted in m).
    alpha : float
        False discovery rate, 0 < alpha < 1.
    tail : {"upper", "two-sided"}
        "upper" tests for high values only (hotspots); "two-sided" tests
        both ways: a significant cell with z > 0 is a hotspot, with z < 0
        a coldspot.

    Returns
    -------
    numpy.ndarray of bool
        Same shape as ``z``; False on non-finite entries.
    """
    from scipy.special import ndtri

    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie between 0 and 1, got {alpha}")
    if tail not in ("upper", "two-sided"):
        raise ValueError(f"tail must be 'upper' or 'two-sided', got {tail!r}")
    z = np.asarray(z, dtype=np.float64)
    out = np.zeros(z.shape, dtype=bool)
    finite = np.isfinite(z)
    m = int(np.count_nonzero(finite))
    if m == 0:
        return out
    # With c(t) the number of p-values <= t, the rank k is the largest k with
    # c(k alpha / m) >= k: the largest fixed point of k -> c(k alpha / m), which the
    # iteration from k = m falls to. p is a decreasing function of z (or |z|), so c(t)
    # counts the z beyond the z of t; only z within _KEY_MARGIN of it need their exact
    # p-value (the same function of z as for any cell, so the same values and counts as
    # sorting all p-values). Each round keeps only the cells still below the bound.
    zf = z.ravel()
    # idx: the cells still in play (None: all cells, as long as that is cheaper)
    idx = None if m == zf.size else np.flatnonzero(finite.ravel())
    key = np.abs(zf) if tail == "two-sided" else zf
    if idx is not None:
        key = key[idx]
    k = m
    for _ in range(_BH_ROUNDS):
        t = alpha * float(k) / m  # the bound of rank k, as p_(k) <= k alpha / m
        b = -float(ndtri(t if tail == "upper" else t / 2))  # z (or |z|) with p = t
        with np.errstate(invalid="ignore"):
            keep = key > b - _KEY_MARGIN
        if 2 * np.count_nonzero(keep) < key.size:  # drop the cells out of play
            idx = np.flatnonzero(keep) if idx is None else idx[keep]
            key = key[keep]
            keep = np.ones(key.size, dtype=bool)
        near = np.flatnonzero(keep & (key < b + _KEY_MARGIN))
        p_near = normal_p(zf[near if idx is None else idx[near]], tail)
        sig = keep
        sig[near] = p_near <= t
        c = int(np.count_nonzero(sig))
        if c == k:
            if idx is None:
                out.ravel()[:] = sig
            else:
                out.ravel()[idx[sig]] = True
            return out
        k = c
    if idx is None:
        idx = np.flatnonzero(finite.ravel())
    # a slow fall: the cells left hold the k smallest p-values, ranks 1..k among all m
    p = normal_p(zf[idx], tail)
    ps = np.sort(p)
    passed = np.nonzero(ps <= alpha * np.arange(1, ps.size + 1) / m)[0]
    if passed.size:
        out.ravel()[idx[p <= ps[passed[-1]]]] = True
    return out


# Rounds of the fixed-point iteration before the few p-values left are sorted instead.
_BH_ROUNDS = 30
# z-scores this close to a bound get their exact p-value; farther ones are counted by z.
# p = 2 Phi(-|z|) changes by a relative 1e-7 or more over it for every bound of a test
# (p >= alpha / m > 1e-20), far beyond the round-off of the normal CDF (~1e-15).
_KEY_MARGIN = 1e-6


