"""Hotspots: the few places where animals are markedly denser, and whether they last.

A hotspot is a cell whose neighbourhood (every cell within a distance band)
holds markedly more animals than the landscape as a whole. Two conditions
must hold, on the time-mean density and, for persistence, on each snapshot:

1. the Getis–Ord Gi* z-score (Getis & Ord 1992, Geogr Anal 24:189; Ord &
   Getis 1995, Geogr Anal 27:286; :mod:`preyscape.analysis.gi_star`) is
   significant under the Benjamini–Hochberg false discovery rate (1995,
   J R Stat Soc B 57:289), and
2. the neighbourhood mean exceeds the landscape mean by at least
   :data:`EFFECT_FLOOR_SD` landscape standard deviations.

Significance alone does not single out places. Modelled densities are smooth,
strongly autocorrelated fields, and Gi* grows with the square root of the
neighbourhood size for a given excess, so with a band of hundreds of cells a
small, broad excess is "significant" and most of the landscape comes out hot
or cold. A hotspot here must therefore also stand out by a fixed amount: its
neighbourhood mean must lie at least :data:`EFFECT_FLOOR_SD` landscape
standard deviations above the landscape mean (the floor of Santora & Veit
2013, Mar Ecol Prog Ser 487:287, who call a place a hotspot when its value
exceeds the grid mean by more than one standard deviation, and measure its
persistence as the share of surveys in which it does). That standardised
excess, ``(m_i - xbar) / S`` with ``m_i`` the neighbourhood mean, is an effect
size: unlike the z-score it does not grow with the band, so the hotspots
change little when the band does. Cleasby et al. (2020, Biol Conserv
241:108375) found, for seabird densities, that all significant Gi* cells
covered far more area than a top share of the Gi* scores, which kept the
few high-density places; the floor does the same without fixing the share.
Coldspots mirror it: significant, and at least that far below the mean.
"""

from __future__ import annotations

from collections.abc import Iterable
from dataclasses import dataclass

import numpy as np

from preyscape.analysis.gi_star import (
    _data_mask,
    _GiStar,
    default_band_m,
    distance_band_kernel,
    fdr_significant,
    getis_ord_gi_star,
    normal_p,
)

__all__ = ["CLASS_NAMES", "CLASS_NODATA", "EFFECT_FLOOR_SD", "LASTING_SHARE", "HotspotResult",
           "default_band_m", "distance_band_kernel", "fdr_significant", "getis_ord_gi_star",
           "hotspots", "hotspots_of_run", "normal_p", "persistent_hotspots"]

EFFECT_FLOOR_SD = 1.0
"""Smallest standardised excess of a hotspot's neighbourhood mean over the landscape mean,
in landscape standard deviations (Santora & Veit 2013, Mar Ecol Prog Ser 487:287)."""

LASTING_SHARE = 0.5
"""Share of the snapshots used in which a place must be a hotspot to count as lasting
(common practice, no source: "at least half of the time")."""



def hotspots(
    mean: np.ndarray,
    mask: np.ndarray | None,
    dx_m: float,
    dy_m: float,
    band_m: float,
    *,
    alpha: float = 0.05,
    floor_sd: float = EFFECT_FLOOR_SD,
) -> dict[str, np.ndarray]:
    """Hot and cold spots of a field: significant Gi* that also stands out by ``floor_sd``.

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
    floor_sd : float
        Smallest excess of the neighbourhood mean over the landscape mean, in
        landscape standard deviations (0 gives plain Gi* with FDR).

    Returns
    -------
    dict
        ``z``: Gi* z-scores; ``p``: two-sided normal p-values; ``effect``:
        the neighbourhood mean's excess over the landscape mean in landscape
        standard deviations (all three NaN off data); ``significant_hot``,
        ``significant_cold``: bool, FDR-significant with z > 0 or z < 0;
        ``hot``, ``cold``: bool, significant and ``effect >= floor_sd`` or
        ``<= -floor_sd``.

    Examples
    --------
    A smooth ramp with one bump on 1600 cells: plain Gi* marks much of the
    ramp's high end, the floor only the bump.

    >>> yy, xx = np.mgrid[0:40, 0:40]
    >>> field = 100.0 + 0.5 * xx + 80.0 * np.exp(-((yy - 10) ** 2 + (xx - 30) ** 2) / 8.0)
    >>> res = hotspots(field, None, 10.0, 10.0, 30.0)
    >>> int(res["significant_hot"].sum()), int(res["hot"].sum())
    (454, 95)
    >>> bool(res["hot"][10, 30])
    True
    """
    z, effect, _, _ = _GiStar(_data_mask(mean, mask), dx_m, dy_m, band_m).scores(
        np.asarray(mean, dtype=np.float64))
    return _classify(z, effect, alpha, floor_sd)


def _classify(z: np.ndarray, effect: np.ndarray, alpha: float,
              floor_sd: float, *, p_values: bool = True) -> dict[str, np.ndarray]:
    if not (np.isfinite(floor_sd) and floor_sd >= 0):
        raise ValueError(f"floor_sd must be a finite number >= 0, got {floor_sd}")
    sig = fdr_significant(z, alpha, "two-sided")
    with np.errstate(invalid="ignore"):
        big = np.abs(effect) >= floor_sd
    hot, cold = sig & (z > 0), sig & (z < 0)
    return {"z": z, "p": normal_p(z, "two-sided") if p_values else None, "effect": effect,
            "significant_hot": hot, "significant_cold": cold,
            "hot": hot & big & (effect > 0), "cold": cold & big & (effect < 0)}


def persistent_hotspots(
    frames: Iterable[np.ndarray],
    mask: np.ndarray | None,
    dx_m: float,
    dy_m: float,
    band_m: float,
    *,
    alpha: float = 0.05,
    floor_sd: float = EFFECT_FLOOR_SD,
) -> np.ndarray:
    """Share of snapshots in which each cell is a hotspot.

    Each snapshot is tested on its own, as in :func:`hotspots`, against its
    own landscape mean and standard deviation: the persistence of Santora &
    Veit (2013, Mar Ecol Prog Ser 487:287), the share of surveys in which a
    place stands out. The frames are read one at a time, so memory stays a
    few grids whatever their number.

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
    floor_sd : float
        As for :func:`hotspots`.

    Returns
    -------
    numpy.ndarray of float64
        Fraction (0–1) of snapshots in which the cell is a hotspot; NaN on
        cells that had no data in any snapshot.

    Raises
    ------
    ValueError
        If there is no snapshot.
    """
    share = _HotShare(mask, dx_m, dy_m, band_m, alpha, floor_sd)
    for frame in frames:
        share.add(frame)
    return share.result()


class _HotShare:
    """Streaming :func:`persistent_hotspots`: :meth:`add` one snapshot at a time.

    Holds a few grids (the counts, the cells seen, the Gi* weights of the
    last data mask), whatever the number of snapshots.
    """

    def __init__(self, mask: np.ndarray | None, dx_m: float, dy_m: float, band_m: float,
                 alpha: float, floor_sd: float) -> None:
        self.mask, self.dx, self.dy, self.band = mask, dx_m, dy_m, band_m
        self.alpha, self.floor_sd = alpha, floor_sd
        self.count: np.ndarray | None = None
        self.seen: np.ndarray | None = None
        self.n = 0
        self.gi: _GiStar | None = None

    def add(self, frame: np.ndarray) -> None:
        """Test one snapshot (NaN or off the mask: no data) and count its hotspots."""
        frame = np.asarray(frame, dtype=np.float64)
        data = _data_mask(frame, self.mask)
        if self.gi is None or not np.array_equal(data, self.gi.data):
            # masks rarely change: reuse the counts
            self.gi = _GiStar(data, self.dx, self.dy, self.band)
        if self.count is None:
            self.count = np.zeros(frame.shape)
            self.seen = np.zeros(frame.shape, dtype=bool)
        elif frame.shape != self.count.shape:
            raise ValueError(f"snapshot shape {frame.shape} differs from {self.count.shape}")
        z, effect, _, _ = self.gi.scores(frame)
        self.count += _classify(z, effect, self.alpha, self.floor_sd, p_values=False)["hot"]
        self.seen |= data
        self.n += 1

    def result(self) -> np.ndarray:
        """Share (0–1) of the snapshots added in which each cell was a hotspot."""
        if self.n == 0:
            raise ValueError("no snapshots given")
        return np.where(self.seen, self.count / self.n, np.nan)


CLASS_NAMES = ("neither", "hotspot", "coldspot")
"""Name of each class code of :attr:`HotspotResult.classes` (the code is the index)."""

CLASS_NODATA = 255
"""No-data code of :attr:`HotspotResult.classes`."""


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
    floor_sd : float
        Effect-size floor, landscape standard deviations.
    snapshots : int
        Snapshots in the time mean.
    mean : numpy.ndarray
        Time-mean density, animals/km² (NaN off data).
    landscape_mean, landscape_sd : float
        Mean and population standard deviation of ``mean`` over the data
        cells, animals/km².
    gi_star : numpy.ndarray
        Gi* z-scores (NaN off data).
    p_value : numpy.ndarray
        Two-sided normal p-values (NaN off data).
    effect : numpy.ndarray
        Excess of each cell's neighbourhood mean over the landscape mean, in
        landscape standard deviations (NaN off data).
    hot, cold : numpy.ndarray of bool
        Hot and cold spots: FDR-significant and beyond the floor.
    significant_hot, significant_cold : numpy.ndarray of bool
        FDR-significant Gi* alone (what plain Gi* would mark).
    persistence : numpy.ndarray or None
        Share of snapshots (0–1) in which each cell is a hotspot (NaN off
        data), if asked for.
    """

    species: str
    band_m: float
    alpha: float
    floor_sd: float
    snapshots: int
    mean: np.ndarray
    landscape_mean: float
    landscape_sd: float
    gi_star: np.ndarray
    p_value: np.ndarray
    effect: np.ndarray
    hot: np.ndarray
    cold: np.ndarray
    significant_hot: np.ndarray
    significant_cold: np.ndarray
    persistence: np.ndarray | None = None

    @property
    def data(self) -> np.ndarray:
        """Cells with a Gi* value (bool)."""
        return np.isfinite(self.gi_star)

    @property
    def ratio(self) -> np.ndarray:
        """Neighbourhood mean over the landscape mean (dimensionless; NaN off data)."""
        if not self.landscape_mean > 0:
            return np.full(self.mean.shape, np.nan)
        return 1.0 + self.effect * self.landscape_sd / self.landscape_mean

    @property
    def classes(self) -> np.ndarray:
        """uint8 per cell: 0 neither, 1 hotspot, 2 coldspot (:data:`CLASS_NAMES`),
        :data:`CLASS_NODATA` no data."""
        cls = np.where(self.hot, 1, np.where(self.cold, 2, 0)).astype(np.uint8)
        cls[~self.data] = CLASS_NODATA
        return cls

    @property
    def hot_share_of_animals(self) -> float:
        """Share (0–1) of the time-mean animals on hotspot cells (equal cell areas)."""
        d = self.data
        total = float(np.sum(self.mean, where=d))
        return float(np.sum(self.mean, where=d & self.hot)) / total if total > 0 else 0.0

    @property
    def hot_share_of_landscape(self) -> float:
        """Share (0–1) of the data cells that are hotspots."""
        n = int(self.data.sum())
        return float(self.hot.sum()) / n if n else 0.0


def hotspots_of_run(
    ds,
    species: str,
    *,
    band_m: float | None = None,
    alpha: float = 0.05,
    floor_sd: float = EFFECT_FLOOR_SD,
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
    floor_sd : float
        Effect-size floor, landscape standard deviations (:func:`hotspots`).
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
    share = _HotShare(mask, grid.dx, grid.dy, band, alpha, floor_sd) if persistent else None
    n = 0
    # one pass: the snapshots as stored (NaN marks no data, which the persistence needs),
    # cleaned for the mean as store.frames cleans them (0 off the mask and where not finite)
    for _, raw in frames(ds, species, raw=True):
        acc += np.where(mask & np.isfinite(raw), raw, 0.0)
        if share is not None:
            share.add(raw)
        n += 1
    if n == 0:
        raise ValueError("the results dataset holds no snapshots")
    mean = np.where(mask, acc / n, np.nan)
    z, effect, xbar, sd = _GiStar(_data_mask(mean, mask), grid.dx, grid.dy, band).scores(mean)
    res = _classify(z, effect, alpha, floor_sd)
    frac = None if share is None else share.result()
    return HotspotResult(species, band, float(alpha), float(floor_sd), n, mean, xbar, sd,
                         res["z"], res["p"], res["effect"], res["hot"], res["cold"],
                         res["significant_hot"], res["significant_cold"], frac)
