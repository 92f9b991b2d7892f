"""Hotspot places: connected groups of hotspot cells, described for a reader.

A hotspot map is read as a few places, not as thousands of cells.
:func:`find_places` groups the hotspot cells of a
:class:`~preyscape.analysis.hotspots.HotspotResult` into places (cells that
touch, diagonals included), and gives each one its size, where it lies on the
map in words, how dense it is against the landscape mean, how often it is a
hotspot (persistence, Santora & Veit 2013, Mar Ecol Prog Ser 487:287) and its
main habitat. :func:`band_sensitivity` measures how much the hotspots move when
the distance band changes.

Examples
--------
>>> import numpy as np
>>> from preyscape.landscape.grid import Grid
>>> hot = np.zeros((30, 30), dtype=bool)
>>> hot[2:6, 24:29] = True          # a block in the north-east
>>> hot[25:27, 1:3] = True          # a small one in the south-west
>>> mean = np.where(hot, 300.0, 100.0)
>>> grid = Grid((30, 30), 0.0, 3000.0, 100.0, 100.0)
>>> places = find_places(hot, mean, None, grid)
>>> [(p.number, p.cells, p.where) for p in places]
[(1, 20, 'north-east'), (2, 4, 'south-west')]
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from preyscape.landscape.grid import Grid

__all__ = ["BandCheck", "Place", "band_sensitivity", "compass", "find_places"]

_COMPASS = (("north-west", "north", "north-east"), ("west", "centre", "east"),
            ("south-west", "south", "south-east"))


def compass(grid: Grid, row: float, col: float) -> str:
    """Where a cell lies on the map, in words: the ninth of the map it falls in.

    Parameters
    ----------
    grid : Grid
        The map's grid (row 0 north).
    row, col : float
        Cell position (fractional rows and columns allowed).

    Returns
    -------
    str
        ``"north-west"``, ``"north"``, ... ``"centre"`` ... ``"south-east"``.
    """
    r = min(2, max(0, int(3 * (row + 0.5) / grid.ny)))
    c = min(2, max(0, int(3 * (col + 0.5) / grid.nx)))
    return _COMPASS[r][c]


@dataclass(frozen=True)
class Place:
    """One hotspot place (connected hotspot cells).

    Attributes
    ----------
    number : int
        1 for the largest place, 2 for the next, ... (the label on the map).
    cells : int
        Cells in the place.
    area_km2 : float
        Its area, km².
    x_m, y_m : float
        Its centre (mean of its cell centres), map metres.
    where : str
        Its position on the map in words (:func:`compass`).
    ratio : float
        Mean density over the place divided by the landscape mean
        (dimensionless).
    persistence : float or None
        Mean over its cells of the share of snapshots (0–1) in which each is
        a hotspot; None if not computed.
    share_of_animals : float
        Share (0–1) of the landscape's time-mean animals living in it.
    habitat : int or None
        The most common habitat class code in it (None without classes).
    """

    number: int
    cells: int
    area_km2: float
    x_m: float
    y_m: float
    where: str
    ratio: float
    persistence: float | None
    share_of_animals: float
    habitat: int | None = None


def find_places(hot: np.ndarray, mean: np.ndarray, persistence: np.ndarray | None,
                grid: Grid, *, habitat: np.ndarray | None = None) -> tuple[Place, ...]:
    """Group hotspot cells into places (8-connected), largest first.

    Parameters
    ----------
    hot : numpy.ndarray of bool
        Hotspot cells.
    mean : numpy.ndarray
        Time-mean density, animals/km² (NaN off data).
    persistence : numpy.ndarray or None
        Share of snapshots (0–1) in which each cell is a hotspot.
    grid : Grid
        The run grid (cell sizes in metres, data mask).
    habitat : numpy.ndarray, optional
        Habitat class codes (NaN or anything off data); gives each place its
        most common class.

    Returns
    -------
    tuple of Place
        Largest first; ties broken by the animals they hold.
    """
    from scipy import ndimage

    hot = np.asarray(hot, dtype=bool) & grid.mask
    labels, n = ndimage.label(hot, structure=np.ones((3, 3), dtype=int))
    if n == 0:
        return ()
    data = grid.mask & np.isfinite(mean)
    vals = np.where(data, mean, 0.0)
    total = float(vals.sum())
    xbar = total / max(int(data.sum()), 1)
    idx = np.arange(1, n + 1)
    cells = ndimage.sum_labels(hot, labels, idx)
    animals = ndimage.sum_labels(vals, labels, idx)
    rows, cols = np.nonzero(hot)
    lab = labels[rows, cols]
    r_mean = np.bincount(lab, weights=rows, minlength=n + 1)[1:] / cells
    c_mean = np.bincount(lab, weights=cols, minlength=n + 1)[1:] / cells
    pers = None
    if persistence is not None:
        pers = ndimage.sum_labels(np.nan_to_num(persistence), labels, idx) / cells
    order = sorted(range(n), key=lambda k: (-cells[k], -animals[k]))
    out = []
    for num, k in enumerate(order, start=1):
        x, y = grid.x0 + (c_mean[k] + 0.5) * grid.dx, grid.y0 - (r_mean[k] + 0.5) * grid.dy
        out.append(Place(
            num, int(cells[k]), float(cells[k] * grid.cell_area_km2), float(x), float(y),
            compass(grid, r_mean[k], c_mean[k]),
            float(animals[k] / cells[k] / xbar) if xbar > 0 else float("nan"),
            None if pers is None else float(pers[k]),
            float(animals[k] / total) if total > 0 else 0.0,
            _main_class(habitat, labels == k + 1) if habitat is not None else None))
    return tuple(out)


def _main_class(habitat: np.ndarray, cells: np.ndarray) -> int | None:
    h = np.asarray(habitat, dtype=float)[cells]
    h = h[np.isfinite(h)]
    if not h.size:
        return None
    codes, counts = np.unique(h.astype(np.int64), return_counts=True)
    return int(codes[np.argmax(counts)])


@dataclass(frozen=True)
class BandCheck:
    """Hotspots found with one distance band, against those of the band in use.

    Attributes
    ----------
    band_m : float
        The band, metres.
    hot_cells : int
        Hotspot cells with it.
    share : float
        Share (0–1) of the data cells that are hotspots.
    overlap : float
        Jaccard overlap with the hotspots of the band in use: cells hot with
        both over cells hot with either (1 = the same cells; 1 if neither
        has any).
    """

    band_m: float
    hot_cells: int
    share: float
    overlap: float


def band_sensitivity(mean: np.ndarray, mask: np.ndarray, dx_m: float, dy_m: float,
                     bands: Sequence[float], reference: np.ndarray, *, alpha: float = 0.05,
                     floor_sd: float | None = None) -> tuple[BandCheck, ...]:
    """The hotspots of ``mean`` with each band in ``bands``, compared with ``reference``.

    Parameters
    ----------
    mean : numpy.ndarray
        The field (time-mean density, animals/km²; NaN off data).
    mask : numpy.ndarray of bool
        Cells with data.
    dx_m, dy_m : float
        Cell width and height, metres.
    bands : sequence of float
        Bands to try, metres.
    reference : numpy.ndarray of bool
        The hotspots found with the band in use.
    alpha, floor_sd
        As for :func:`preyscape.analysis.hotspots.hotspots` (default floor:
        :data:`~preyscape.analysis.hotspots.EFFECT_FLOOR_SD`).

    Returns
    -------
    tuple of BandCheck
    """
    from preyscape.analysis.hotspots import EFFECT_FLOOR_SD, hotspots

    floor = EFFECT_FLOOR_SD if floor_sd is None else floor_sd
    n = max(int(np.count_nonzero(mask & np.isfinite(mean))), 1)
    ref = np.asarray(reference, dtype=bool)
    out = []
    for b in bands:
        hot = hotspots(mean, mask, dx_m, dy_m, float(b), alpha=alpha, floor_sd=floor)["hot"]
        union = int(np.count_nonzero(hot | ref))
        both = int(np.count_nonzero(hot & ref))
        out.append(BandCheck(float(b), int(hot.sum()), float(hot.sum()) / n,
                             both / union if union else 1.0))
    return tuple(out)


def describe(place: Place, classes: Mapping[int, str] | None, unit: str = "") -> str:
    """One line in plain words about a place, e.g. for a report's summary."""
    hab = ""
    if place.habitat is not None and classes:
        hab = f", mostly {classes.get(place.habitat, f'class {place.habitat}')}"
    last = ""
    if place.persistence is not None:
        last = f"; a hotspot in {100 * place.persistence:.0f} % of the snapshots"
    return (f"place {place.number} in the {place.where} ({place.area_km2:.2g} km²{hab}): "
            f"{place.ratio:.2g} times the landscape's mean density{unit}{last}")
