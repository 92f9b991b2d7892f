"""Hotspots: where animals cluster more than chance would give (Getis–Ord Gi*).

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

from collections.abc import Iterable
from dataclasses import dataclass
from typing import Literal

import numpy as np

from preyscape.landscape.grid import Grid

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

    def __call__(self, values: np.ndarray) -> np.ndarray:
        z = np.full(self.data.shape, np.nan)
        n = self.n
        if n == 0:
            return z
        x = np.where(self.data, values, 0.0).astype(np.float64, copy=False)
        xd = x[self.data]
        if xd.max() == xd.min():
            z[self.data] = 0.0  # constant field: S = 0, no cell stands out
            return z
        mean = xd.sum() / n
        # centred values: sum_j w_ij x_j - xbar W_i = sum_j w_ij (x_j - xbar), without the
        # cancellation of two large sums; S from the same centred values (two-pass variance)
        xc = np.where(self.data, x - mean, 0.0)
        s = np.sqrt(np.sum(xc * xc) / n)
        num = self.sums(xc)
        den = s * self.root
        # a band holding every data cell (W_i = n) gives 0/0: no information, z = 0
        ok = self.data & (den > 0)
        z[self.data] = 0.0
        z[ok] = num[ok] / den[ok]
        return z


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
    if not 0.0 < alpha < 1.0:
        raise ValueError(f"alpha must lie between 0 and 1, got {alpha}")
    z = np.asarray(z, dtype=np.float64)
    out = np.zeros(z.shape, dtype=bool)
    finite = np.isfinite(z)
    p = normal_p(z[finite], tail)
    m = p.size
    if m == 0:
        return out
    ps = np.sort(p)
    passed = np.nonzero(ps <= alpha * np.arange(1, m + 1) / m)[0]
    if passed.size:
        out[finite] = p <= ps[passed[-1]]
    return out


def hotspots(
    mean: np.ndarray,
    mask: np.ndarray | None,
    dx_m: float,
    dy_m: float,
    band_m: float,
    *,
    alpha: float = 0.05,
) -> dict[str, np.ndarray]:
    """Hot and cold spots of a field: Gi* with a two-sided FDR test.

    Parameters
    ----------
    mean : numpy.ndarray, shape (rows, cols)
        The field, e.g. a time-mean density in animals/km².
    mask : numpy.ndarray of bool or None
        True on cells with data.
    dx_m, dy_m : float
        Cell width and height, metres.
    band_m : float
        Neighbourhood radius, metres.
    alpha : float
        False discovery rate of the two-sided test.

    Returns
    -------
    dict
        ``z``: Gi* z-scores (NaN off data); ``p``: two-sided normal p-values
        (NaN off data); ``hot``, ``cold``: bool, significant with z > 0 or
        z < 0.
    """
    z = getis_ord_gi_star(mean, mask, dx_m, dy_m, band_m)
    return _classify(z, alpha)


def _classify(z: np.ndarray, alpha: float) -> dict[str, np.ndarray]:
    sig = fdr_significant(z, alpha, "two-sided")
    return {"z": z, "p": normal_p(z, "two-sided"), "hot": sig & (z > 0),
            "cold": sig & (z < 0)}


def persistent_hotspots(
    frames: Iterable[np.ndarray],
    mask: np.ndarray | None,
    dx_m: float,
    dy_m: float,
    band_m: float,
    *,
    alpha: float = 0.05,
) -> np.ndarray:
    """Share of snapshots in which each cell is a significant hotspot.

    Each snapshot is tested on its own, as in :func:`hotspots`. The frames
    are read one at a time, so memory stays a few grids whatever their number.

    Parameters
    ----------
    frames : iterable of numpy.ndarray
        Snapshots of a field (e.g. densities, animals/km²), all of one shape.
    mask : numpy.ndarray of bool or None
        True on cells with data (non-finite values are excluded as well).
    dx_m, dy_m : float
        Cell width and height, metres.
    band_m : float
        Neighbourhood radius, metres.
    alpha : float
        False discovery rate of the two-sided test in each snapshot.

    Returns
    -------
    numpy.ndarray of float64
        Fraction (0–1) of snapshots with a significant hotspot at the cell;
        NaN on cells that had no data in any snapshot.

    Raises
    ------
    ValueError
        If there is no snapshot.
    """
    count = None
    seen = None
    n_frames = 0
    gi = None
    for frame in frames:
        frame = np.asarray(frame, dtype=np.float64)
        data = _data_mask(frame, mask)
        if gi is None or not np.array_equal(data, gi.data):
            gi = _GiStar(data, dx_m, dy_m, band_m)  # masks rarely change: reuse the counts
        if count is None:
            count = np.zeros(frame.shape)
            seen = np.zeros(frame.shape, dtype=bool)
        elif frame.shape != count.shape:
            raise ValueError(f"snapshot shape {frame.shape} differs from {count.shape}")
        count += _classify(gi(frame), alpha)["hot"]
        seen |= data
        n_frames += 1
    if n_frames == 0:
        raise ValueError("no snapshots given")
    return np.where(seen, count / n_frames, np.nan)


@dataclass(frozen=True)
class HotspotResult:
    """Hotspots of one species in a run (from :func:`hotspots_of_run`).

    Attributes
    ----------
    species : str
        ``"prey"`` or ``"predator"``.
    band_m : float
        Neighbourhood radius, metres.
    alpha : float
        False discovery rate of the two-sided test.
    snapshots : int
        Snapshots in the time mean.
    mean : numpy.ndarray
        Time-mean density, animals/km² (NaN off data).
    gi_star : numpy.ndarray
        Gi* z-scores (NaN off data).
    p_value : numpy.ndarray
        Two-sided normal p-values (NaN off data).
    hot, cold : numpy.ndarray of bool
        Significant hot and cold spots (FDR).
    persistence : numpy.ndarray or None
        Share of snapshots (0–1) in which each cell is a significant hotspot
        (NaN off data), if asked for.
    """

    species: str
    band_m: float
    alpha: float
    snapshots: int
    mean: np.ndarray
    gi_star: np.ndarray
    p_value: np.ndarray
    hot: np.ndarray
    cold: np.ndarray
    persistence: np.ndarray | None = None

    @property
    def data(self) -> np.ndarray:
        """Cells with a Gi* value (bool)."""
        return np.isfinite(self.gi_star)

    @property
    def classes(self) -> np.ndarray:
        """int8 per cell: 1 hot, -1 cold, 0 neither, :data:`CLASS_NODATA` no data."""
        cls = np.where(self.hot, 1, np.where(self.cold, -1, 0)).astype(np.int8)
        cls[~self.data] = CLASS_NODATA
        return cls

    @property
    def hot_share_of_animals(self) -> float:
        """Share (0–1) of the time-mean animals on hotspot cells (equal cell areas)."""
        d = self.data
        total = float(np.sum(self.mean, where=d))
        return float(np.sum(self.mean, where=d & self.hot)) / total if total > 0 else 0.0


CLASS_NODATA = -128
"""No-data code of :attr:`HotspotResult.classes`."""


def hotspots_of_run(
    ds,
    species: str,
    *,
    band_m: float | None = None,
    alpha: float = 0.05,
    persistent: bool = True,
) -> HotspotResult:
    """Hotspots of one species in a results dataset.

    The time mean is taken over the snapshots used
    (:func:`preyscape.store.used_snapshots`), one snapshot at a time.

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc`` (coords ``time`` in years, ``y``, ``x`` in
        metres; densities in animals/km², NaN off data; ``mask``).
    species : {"prey", "predator"}
        The species.
    band_m : float, optional
        Neighbourhood radius, metres. Default: :func:`default_band_m`.
    alpha : float
        False discovery rate of the two-sided test.
    persistent : bool
        Also compute the share of snapshots used in which each cell is a
        hotspot (keyword only).

    Returns
    -------
    HotspotResult

    Examples
    --------
    >>> import numpy as np, xarray as xr
    >>> yy, xx = np.mgrid[0:12, 0:12]
    >>> bump = 100.0 + 50.0 * np.exp(-((yy - 3) ** 2 + (xx - 8) ** 2) / 4.0)
    >>> ds = xr.Dataset({"prey": (("time", "y", "x"), bump[None])},
    ...                 coords={"time": [0.0], "y": 1000.0 - 50.0 * np.arange(12),
    ...                         "x": 50.0 * np.arange(12)})
    >>> res = hotspots_of_run(ds, "prey", band_m=110.0, persistent=False)
    >>> bool(res.hot[3, 8]), bool(res.hot[10, 1])
    (True, False)
    """
    from preyscape.store import data_mask, frames, grid_of

    if species not in ds:
        raise ValueError(f"no variable {species!r} in the results dataset")
    grid = grid_of(ds)
    band = default_band_m(grid) if band_m is None else float(band_m)
    mask = data_mask(ds)
    acc = np.zeros(grid.shape)
    n = 0
    for _, f in frames(ds, species, mask=mask):
        acc += f
        n += 1
    if n == 0:
        raise ValueError("the results dataset holds no snapshots")
    mean = np.where(mask, acc / n, np.nan)
    res = hotspots(mean, mask, grid.dx, grid.dy, band, alpha=alpha)
    frac = None
    if persistent:
        # frames(...) gives 0 off the mask; the raw snapshots mark no data as NaN, which
        # persistent_hotspots needs to know where there is no data
        raw = (f for _, f in frames(ds, species, raw=True))
        frac = persistent_hotspots(raw, mask, grid.dx, grid.dy, band, alpha=alpha)
    return HotspotResult(species, band, float(alpha), n, mean, res["z"], res["p"],
                         res["hot"], res["cold"], frac)
