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
    return _colonisation_times(ds, species, [target_cells], threshold=threshold,
                               share=share)[0]


def _colonisation_times(ds, species: str, targets: Sequence[np.ndarray], *,
                        threshold: float, share: float) -> list[float]:
    """:func:`colonisation_time` of several patches, reading each snapshot once for all."""
    _check_presence(threshold)
    if not 0 < share <= 1:
        raise ValueError(f"share must lie in (0, 1], not {share!r}")
    mask = data_mask(ds)
    tgts = [_cells(cells, mask.shape) & mask for cells in targets]
    n_cells = [int(t.sum()) for t in tgts]
    if 0 in n_cells:
        raise InputError("the target patch has no cells with data; choose cells inside "
                         "the landscape", f"results: {species}")
    times = np.asarray(ds["time"].values, dtype=float)
    found = [math.nan] * len(tgts)
    prev = [(math.nan, math.nan)] * len(tgts)
    left = list(range(len(tgts)))
    for k, u in frames(ds, species, range(times.size), mask=mask):
        for j in list(left):
            f = float(np.count_nonzero(u[tgts[j]] >= threshold)) / n_cells[j]
            prev_t, prev_f = prev[j]
            if f >= share:
                found[j] = (float(times[k]) if k == 0 else
                            float(prev_t + (share - prev_f) / (f - prev_f) * (times[k] - prev_t)))
                left.remove(j)
            else:
                prev[j] = (float(times[k]), f)
        if not left:  # every patch colonised: the later snapshots need not be read
            break
    return found


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
    flow_of = _FaceFlow(cx, cy, w, faces_x, faces_y, side_sign_x, side_sign_y, cell_area_km2)
    out = np.asarray([flow_of(u) for u in frames], dtype=np.float64)
    if out.size != np.size(times):
        raise ValueError(f"{out.size} frames but {np.size(times)} times")
    return out


class _FaceFlow:
    """The net flow across a transect's faces from one snapshot (:func:`net_flux`).

    Built once per transect and movement operator; each snapshot then costs
    O(faces of the transect), not O(cells).
    """

    def __init__(self, cx, cy, w, faces_x, faces_y, side_sign_x, side_sign_y,
                 cell_area_km2: float) -> None:
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
        wt = None if w is None else np.asarray(w, dtype=np.float64)
        self.shape = (rows, cols)
        self.area = float(cell_area_km2)
        # per axis: the signed conductances of the faces that carry a flow, and for the
        # cell before (west or north) and after (east or south) each face its flat index,
        # whether it lies inside the grid (beyond the edge the density is 0) and its weight
        self.parts = []
        for g, axis in ((sx * cx, 1), (sy * cy, 0)):
            r, c = np.nonzero(g)
            before = (r, c - 1) if axis == 1 else (r - 1, c)
            after = (r, c)
            ends = []
            for rr, cc in (before, after):
                inside = (rr >= 0) & (cc >= 0) & (rr < rows) & (cc < cols)
                flat = np.where(inside, rr * cols + cc, 0)
                weight = (np.ones(flat.size) if wt is None else
                          np.where(inside, wt.ravel()[flat], 0.0))
                ends.append((flat, inside, weight))
            self.parts.append((g[r, c], ends))

    def __call__(self, frame: np.ndarray) -> float:
        """Net flow across the transect, animals/yr (NaN densities read as 0)."""
        u = np.asarray(frame, dtype=np.float64)
        if u.shape != self.shape:
            raise ValueError(f"frame has shape {u.shape}, the faces fit {self.shape}")
        flat = u.ravel()
        flow = 0.0
        for g, ends in self.parts:
            wu = []
            for idx, inside, weight in ends:
                v = flat[idx]
                wu.append(np.where(inside & np.isfinite(v), v, 0.0) * weight)
            flow += float(np.sum(g * (wu[0] - wu[1])))
        return flow * self.area


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
    times, flows = transect_fluxes(ds, operators, [points], species)
    return times, flows[0]


def transect_fluxes(ds, operators: Sequence[dict], lines: Sequence[Sequence], species: str,
                    ) -> tuple[np.ndarray, list[np.ndarray]]:
    """:func:`transect_flux` of several transects, reading each snapshot once for all.

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc``.
    operators : sequence of dict
        The movement operators of every epoch.
    lines : sequence of sequences of (float, float)
        Each transect's vertices, map metres.
    species : str
        ``"prey"`` or ``"predator"``.

    Returns
    -------
    times : numpy.ndarray
        Snapshot times, years.
    flows : list of numpy.ndarray
        Per transect, animals per year crossing from its left to its right.
    """
    ops = list(operators)
    grid = grid_of(ds)
    faces = [transect_faces(points, grid) for points in lines]
    times = np.asarray(ds["time"].values, dtype=float)
    spans = [tuple(float(v) for v in op["span"]) for op in ops]
    flows = [np.zeros(times.size) for _ in faces]
    epoch, flow_of = -1, []
    for k, frame in frames(ds, species, range(times.size)):
        e = _epoch_of(float(times[k]), spans)
        if e != epoch:  # one epoch's faces at a time
            op = ops[e]
            flow_of = [_FaceFlow(op[f"{species}_cx"], op[f"{species}_cy"], op[f"{species}_w"],
                                 *f, grid.cell_area_km2) for f in faces]
            epoch = e
        for flow, of in zip(flows, flow_of, strict=True):
            flow[k] = of(frame)
    return times, flows


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

    Each snapshot is read once per species for all the patches.

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
    found = {sp: _colonisation_times(ds, sp, [cells for _, cells in targets],
                                     threshold=thresholds[sp], share=share) if targets else []
             for sp in thresholds}  # the species given (prey alone: prey only)
    out = []
    for j, (name, cells) in enumerate(targets):
        years = {sp: None if math.isnan(found[sp][j]) else found[sp][j] for sp in thresholds}
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
    "transect_fluxes",
]
