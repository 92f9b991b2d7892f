"""Effects of corridors and fences: colonisation of target patches, animals crossing lines.

Pure functions on results datasets, movement operators and numpy arrays.
Densities are animals per km², times years, fluxes animals per year.

* :func:`colonisation_time` is when a target patch becomes occupied;
  :func:`colonisation` does it for every target and species;
* :func:`net_flux` counts the animals per year crossing a transect of cell
  faces, from the face conductances of the movement operator
  (:class:`preyscape.model.movement.Movement`); :func:`transect_faces` finds
  the faces a line crosses, :func:`transect_flux` follows the flow through a
  run epoch by epoch, and :func:`cumulative` integrates it over time.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

import numpy as np

from preyscape.analysis.compare import PRESENCE, _check_presence
from preyscape.analysis.refuges import _cells
from preyscape.errors import InputError
from preyscape.store import data_mask, frames, grid_of


def colonisation_time(
    ds,
    species: str,
    target_cells: np.ndarray,
    *,
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
    for k, u in frames(ds, species, range(times.size), mask=mask):
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


def transect_faces(points: list, grid) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Faces a transect line crosses and the sign of a crossing flow on each.

    The positive direction is from the left of the line to its right, walking
    from its first point to its last (for a line drawn northwards: west to
    east). A face crossed by two segments counts once (the first).

    Parameters
    ----------
    points : list of (float, float)
        The line's vertices, map metres.
    grid : Grid
        The run grid.

    Returns
    -------
    faces_x, faces_y, sign_x, sign_y : numpy.ndarray
        Boolean faces shaped (rows, cols+1) and (rows+1, cols) and the signs
        (+1 or −1) of a flow from west to east / north to south on them.
    """
    from shapely.geometry import LineString

    from preyscape.landscape.measures import fence_faces

    ny, nx = grid.shape
    fx = np.zeros((ny, nx + 1), bool)
    fy = np.zeros((ny + 1, nx), bool)
    sx = np.zeros((ny, nx + 1))
    sy = np.zeros((ny + 1, nx))
    for (x0, y0), (x1, y1) in zip(points[:-1], points[1:], strict=True):
        seg = LineString([(x0, y0), (x1, y1)])
        if seg.length == 0:
            continue
        a, b = fence_faces([seg], grid)
        a &= ~fx
        b &= ~fy
        # a west->east flow crosses left->right when the line heads north (dy > 0);
        # a north->south flow when it heads east (dx > 0)
        sx[a] = 1.0 if y1 > y0 else -1.0
        sy[b] = 1.0 if x1 > x0 else -1.0
        fx |= a
        fy |= b
    return fx, fy, sx, sy


def _epoch_of(t: float, spans: list[tuple[float, float]]) -> int:
    for k, (t0, t1) in enumerate(spans):
        if t0 <= t < t1:
            return k
    return len(spans) - 1


def transect_flux(ds, operators: Sequence[dict], points: Sequence, species: str,
                  ) -> tuple[np.ndarray, np.ndarray]:
    """Net flow of a species across a transect at every snapshot, animals/yr.

    Uses the movement operators the run saved for each epoch
    (:meth:`preyscape.analysis.results.RunResults.operators`); a snapshot at a
    switch time uses the epoch that starts there. Snapshots are read one at a
    time, so memory is O(grid).

    Returns
    -------
    times : numpy.ndarray
        Snapshot times, years.
    flow : numpy.ndarray
        Animals per year crossing from the left of the line to its right.
    """
    ops = list(operators)
    grid = grid_of(ds)
    fx, fy, sx, sy = transect_faces(points, grid)
    times = np.asarray(ds["time"].values, dtype=float)
    spans = [tuple(float(v) for v in op["span"]) for op in ops]
    flow = np.zeros(times.size)
    for k, frame in frames(ds, species, range(times.size)):
        t = float(times[k])
        op = ops[_epoch_of(t, spans)]
        flow[k] = net_flux([frame], [t], op[f"{species}_cx"], op[f"{species}_cy"],
                           op[f"{species}_w"], fx, fy, sx, sy, grid.cell_area_km2)[0]
    return times, flow

@dataclass(frozen=True)
class TargetColonisation:
    """When each species colonised one target patch.

    Attributes
    ----------
    name : str
        The target's name.
    cells : int
        Its cells with data.
    years : dict
        Species to the colonisation time in years (None: not within the run).
    """

    name: str
    cells: int
    years: dict


def colonisation(ds, targets: Sequence[tuple[str, np.ndarray]], thresholds: dict,
                 share: float) -> list[TargetColonisation]:
    """Colonisation time of each target patch by each species (:func:`colonisation_time`).

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc``.
    targets : sequence of (str, numpy.ndarray)
        Target names and their cells (bool, rows × cols).
    thresholds : dict
        Species to the density that counts as occupied, animals/km².
    share : float
        Share of a patch's cells that must be occupied, in (0, 1].

    Returns
    -------
    list of TargetColonisation
    """
    mask = data_mask(ds)
    out = []
    for name, cells in targets:
        years = {}
        for sp in thresholds:  # the species given (prey alone: prey only)
            t = colonisation_time(ds, sp, cells, threshold=thresholds[sp], share=share)
            years[sp] = None if math.isnan(t) else t
        out.append(TargetColonisation(name, int((cells & mask).sum()), years))
    return out


__all__ = [
    "TargetColonisation",
    "colonisation",
    "colonisation_time",
    "cumulative",
    "net_flux",
    "transect_faces",
    "transect_flux",
]
