"""Fence topology: where animals get round a fence, and what a fence separates.

Pure functions on a grid's data mask and the faces a fence blocks (the layout
of :func:`preyscape.landscape.measures.fence_faces`: ``fx`` of shape
``(rows, cols+1)`` for faces between columns, ``fy`` of shape
``(rows+1, cols)`` for faces between rows). Nothing here reads files.

Animals move between 4-neighbour cells across the face they share, so the
landscape is a graph: data cells are its nodes and open faces its links. A
fence removes links. Three questions follow, each answered on that graph:

*Does it separate?* The connected components of the cell graph with the
blocked faces removed (:func:`components`, by
:func:`scipy.sparse.csgraph.connected_components`). A fence separates the
landscape when it adds components: animals on one side cannot reach the
other by any path.

*Where can animals get round it?* The blocked faces are edges of the lattice
of cell corners (corner ``(i, j)`` lies at map point ``(x0 + j dx, y0 − i dy)``;
face ``fx[i, k]`` joins corners ``(i, k)`` and ``(i+1, k)``, face ``fy[k, j]``
joins corners ``(k, j)`` and ``(k, j+1)``). A fence line is a chain of such
edges, and its **ends** are corners where the chain stops. An end is
**anchored** when it touches another barrier: the landscape edge, a no-data
cell, or a face that another impassable line blocks. Otherwise it is an
**open end**, and the **way round** is the straight gap from it to the nearest
barrier corner (metres): the width of the passage animals can use. Parts of
the same fence count as a barrier only when the fence itself runs more than
twice the straight distance between them (so a ring with a gate, or the mouth
of a U, is measured across the opening, while the fence's own nearby faces
are not).

*What are its sides?* The components with only this fence blocked and its
open ends closed along the way round (:func:`fence_sides`): for a fence that
ends short of the edge, the two parts it would separate if it were complete.

Short dead-end branches of at most :data:`SPUR_FACES` faces that hang off
the chain where a line turns back within a cell are not ends (pruning spurs
of a skeleton; common practice, no source).

Examples
--------
A 6 × 6 grid of 100 m cells and a fence between columns 2 and 3 that stops
one row short of the southern edge:

>>> from preyscape.landscape.grid import Grid
>>> grid = Grid((6, 6), 0.0, 600.0, 100.0, 100.0)
>>> fx = np.zeros((6, 7), bool); fy = np.zeros((7, 6), bool)
>>> fx[:5, 3] = True
>>> topo = fence_topology(grid, (fx, fy), name="test line", species="predator")
>>> topo.separates, [(e.x, e.y, e.width_m) for e in topo.open_ends]
(False, [(300.0, 100.0, 100.0)])
>>> fx[5, 3] = True  # carried to the edge: two sides of 1.8 km² each
>>> fence_topology(grid, (fx, fy)).sides_km2
(0.18, 0.18)
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from preyscape.landscape.grid import Grid

__all__ = ["SPUR_FACES", "FenceTopology", "OpenEnd", "boundary_corners", "components",
           "effective_faces", "fence_sides", "fence_topology", "line_length_m",
           "measure_topologies", "metres_text", "place_text", "warning_text"]

SPUR_FACES = 2
"""Longest dead-end branch (faces) hanging off a fence chain that is not an end."""

Faces = tuple[np.ndarray, np.ndarray]


@dataclass(frozen=True)
class OpenEnd:
    """An end of a fence that touches no other barrier.

    Attributes
    ----------
    x, y : float
        The corner where the fence stops, map metres.
    width_m : float
        The way round: straight distance to the nearest barrier corner, metres.
    to_x, to_y : float
        That nearest barrier corner, map metres.
    to : str
        What it is: ``"landscape edge"`` (the grid edge or no-data cells),
        ``"this fence"`` or the name of another line.
    at_gap : bool
        Whether the end lies at a gate drawn in the fence (``gaps``).
    """

    x: float
    y: float
    width_m: float
    to_x: float
    to_y: float
    to: str
    at_gap: bool = False


@dataclass(frozen=True)
class FenceTopology:
    """What one fence does to the movement of one species, before any run.

    Attributes
    ----------
    name, species : str
        The fence (or closed refuge) and the species it stops.
    length_m : float
        Length within the landscape's data cells, metres.
    faces : int
        Faces it blocks between two data cells.
    open_ends : tuple of OpenEnd
        Ends that touch no other barrier.
    separates : bool
        Whether it splits the landscape into parts this species cannot
        reach from each other (it adds connected components).
    sides_km2 : tuple of float
        Areas of the parts it borders when it separates (largest first),
        km²; empty otherwise.
    """

    name: str
    species: str
    length_m: float
    faces: int
    open_ends: tuple[OpenEnd, ...] = ()
    separates: bool = False
    sides_km2: tuple[float, ...] = field(default=())

    @property
    def leaks(self) -> tuple[OpenEnd, ...]:
        """Open ends not at a drawn gate: where animals get round it unintended."""
        return tuple(e for e in self.open_ends if not e.at_gap)

    def as_record(self) -> dict:
        """Plain JSON values (for ``run.json`` and ``check --json``)."""
        return {"name": self.name, "species": self.species,
                "length_m": round(self.length_m, 1), "faces": self.faces,
                "open_ends": [{"x": e.x, "y": e.y, "way_round_m": round(e.width_m, 1),
                               "nearest_barrier": {"x": e.to_x, "y": e.to_y, "what": e.to},
                               "at_gap": e.at_gap} for e in self.open_ends],
                "separates": self.separates,
                "sides_km2": [round(a, 6) for a in self.sides_km2]}


# --- the cell graph ---------------------------------------------------------------------
def _empty(shape: tuple[int, int]) -> Faces:
    rows, cols = shape
    return np.zeros((rows, cols + 1), bool), np.zeros((rows + 1, cols), bool)


def _faces(faces: Faces | None, shape: tuple[int, int]) -> Faces:
    if faces is None:
        return _empty(shape)
    fx, fy = (np.asarray(f, dtype=bool) for f in faces)
    rows, cols = shape
    if fx.shape != (rows, cols + 1) or fy.shape != (rows + 1, cols):
        raise ValueError(f"faces must have shapes {(rows, cols + 1)} and {(rows + 1, cols)}, "
                         f"not {fx.shape} and {fy.shape}")
    return fx, fy


def effective_faces(mask: np.ndarray, faces: Faces) -> Faces:
    """The blocked faces that lie between two data cells (the others change nothing)."""
    m = np.asarray(mask, dtype=bool)
    fx, fy = _faces(faces, m.shape)
    ex = np.zeros_like(fx)
    ey = np.zeros_like(fy)
    ex[:, 1:-1] = fx[:, 1:-1] & m[:, :-1] & m[:, 1:]
    ey[1:-1, :] = fy[1:-1, :] & m[:-1, :] & m[1:, :]
    return ex, ey


def components(mask: np.ndarray, blocked: Faces | None = None) -> tuple[np.ndarray, int]:
    """Connected components of the data cells, 4-neighbours, blocked faces removed.

    Parameters
    ----------
    mask : numpy.ndarray of bool
        Cells with data, shape (rows, cols).
    blocked : (numpy.ndarray, numpy.ndarray), optional
        Faces animals cannot cross (between columns, between rows).

    Returns
    -------
    labels : numpy.ndarray of int
        Component of every cell, 0..n−1; −1 off the data mask.
    n : int
        Number of components.
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    m = np.asarray(mask, dtype=bool)
    rows, cols = m.shape
    fx, fy = _faces(blocked, m.shape)
    idx = np.arange(rows * cols).reshape(rows, cols)
    across = m[:, :-1] & m[:, 1:] & ~fx[:, 1:-1]
    down = m[:-1, :] & m[1:, :] & ~fy[1:-1, :]
    a = np.concatenate([idx[:, :-1][across], idx[:-1, :][down]])
    b = np.concatenate([idx[:, 1:][across], idx[1:, :][down]])
    graph = coo_matrix((np.ones(a.size), (a, b)), shape=(rows * cols, rows * cols))
    _, lab = connected_components(graph, directed=False)
    lab = lab.reshape(rows, cols)
    # renumber the data cells' components 0..n-1 in order of first appearance
    uniq, inv = np.unique(lab[m], return_inverse=True)
    out = np.full(m.shape, -1, dtype=np.int64)
    out[m] = inv
    return out, int(uniq.size)


def boundary_corners(mask: np.ndarray) -> np.ndarray:
    """Corners that touch the grid edge or a no-data cell, shape (rows+1, cols+1)."""
    m = np.pad(np.asarray(mask, dtype=bool), 1, constant_values=False)
    return ~(m[:-1, :-1] & m[:-1, 1:] & m[1:, :-1] & m[1:, 1:])


def _corners_touched(faces: Faces, shape: tuple[int, int]) -> np.ndarray:
    fx, fy = faces
    rows, cols = shape
    c = np.zeros((rows + 1, cols + 1), bool)
    c[:-1, :] |= fx
    c[1:, :] |= fx
    c[:, :-1] |= fy
    c[:, 1:] |= fy
    return c


def _edges(faces: Faces, cols: int) -> tuple[np.ndarray, np.ndarray]:
    """The faces as edges ``(a, b)`` of the corner lattice (flat corner indices)."""
    fx, fy = faces
    c1 = cols + 1
    i, k = np.nonzero(fx)
    k2, j = np.nonzero(fy)
    a = np.concatenate([i * c1 + k, k2 * c1 + j])
    b = np.concatenate([(i + 1) * c1 + k, k2 * c1 + j + 1])
    return a.astype(np.int64), b.astype(np.int64)


def _chain_ends(a: np.ndarray, b: np.ndarray) -> list[int]:
    """Corners of degree 1 once dead-end spurs of <= SPUR_FACES faces are pruned."""
    adj: dict[int, list[tuple[int, int]]] = {}
    for e, (u, v) in enumerate(zip(a.tolist(), b.tolist(), strict=True)):
        adj.setdefault(u, []).append((v, e))
        adj.setdefault(v, []).append((u, e))
    gone: set[int] = set()

    def live(u: int) -> list[tuple[int, int]]:
        return [(v, e) for v, e in adj[u] if e not in gone]

    for u in list(adj):
        if len(live(u)) != 1:
            continue
        path, cur, prev_e = [], u, None
        while True:
            nxt = [(v, e) for v, e in live(cur) if e != prev_e]
            if len(live(cur)) >= 3 or not nxt or len(path) > SPUR_FACES:
                break
            v, e = nxt[0]
            path.append(e)
            cur, prev_e = v, e
        if len(live(cur)) >= 3 and 0 < len(path) <= SPUR_FACES:
            gone.update(path)
    return sorted(u for u in adj if len(live(u)) == 1)


# --- ends and the way round --------------------------------------------------------------
def _corner_xy(grid: Grid, i: int, j: int) -> tuple[float, float]:
    return float(grid.x0 + j * grid.dx), float(grid.y0 - i * grid.dy)


def _own_far(grid: Grid, a: np.ndarray, b: np.ndarray, end: int,
             ) -> tuple[float, int] | None:
    """Nearest own corner that the fence reaches only by a long way round (metres, corner)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import dijkstra

    nodes, inv = np.unique(np.concatenate([a, b]), return_inverse=True)
    n = nodes.size
    g = coo_matrix((np.ones(a.size), (inv[:a.size], inv[a.size:])), shape=(n, n))
    start = int(np.searchsorted(nodes, end))
    steps = dijkstra(g, directed=False, indices=start, unweighted=True)
    c1 = grid.nx + 1
    ei, ej = divmod(end, c1)
    ni, nj = np.divmod(nodes, c1)
    dist = np.hypot((ni - ei) * grid.dy, (nj - ej) * grid.dx)
    cell = min(grid.dx, grid.dy)
    far = np.isfinite(steps) & (steps * cell > 2.0 * dist + 1e-9 * cell)
    far |= ~np.isfinite(steps)  # another chain of the same fence
    if not far.any():
        return None
    k = int(np.argmin(np.where(far, dist, np.inf)))
    return float(dist[k]), int(nodes[k])


def _barrier_map(grid: Grid, others: Sequence[tuple[str, Faces]]) -> tuple[np.ndarray, list]:
    """Corner labels: 0 none, 1 landscape edge, k + 2 the other line k."""
    lab = np.zeros((grid.ny + 1, grid.nx + 1), dtype=np.int32)
    for k, (_, faces) in enumerate(others):
        lab[_corners_touched(effective_faces(grid.mask, faces), grid.shape)] = k + 2
    lab[boundary_corners(grid.mask)] = 1
    return lab, ["landscape edge"] + [f"fence '{n}'" for n, _ in others]


def _open_ends(grid: Grid, faces: Faces, others: Sequence[tuple[str, Faces]],
               gaps: Sequence[tuple[float, float, float]]) -> list[OpenEnd]:
    from scipy.ndimage import distance_transform_edt

    a, b = _edges(faces, grid.nx)
    if a.size == 0:
        return []
    lab, what = _barrier_map(grid, others)
    c1 = grid.nx + 1
    ends = [e for e in _chain_ends(a, b) if lab.flat[e] == 0]
    if not ends:
        return []
    dist, (ti, tj) = distance_transform_edt(lab == 0, sampling=(grid.dy, grid.dx),
                                            return_indices=True)
    reach = math.hypot(grid.dx, grid.dy)
    out = []
    for e in ends:
        i, j = divmod(e, c1)
        best = (float(dist[i, j]), int(ti[i, j]) * c1 + int(tj[i, j]))
        to = what[lab[ti[i, j], tj[i, j]] - 1]
        own = _own_far(grid, a, b, e)
        if own is not None and own[0] < best[0]:
            best, to = own, "this fence"
        x, y = _corner_xy(grid, i, j)
        tx, ty = _corner_xy(grid, *divmod(best[1], c1))
        at_gap = any(math.hypot(x - gx, y - gy) <= 0.5 * gw + reach for gx, gy, gw in gaps)
        out.append(OpenEnd(x, y, best[0], tx, ty, to, at_gap))
    return out


def fence_topology(grid: Grid, faces: Faces, *, others: Sequence[tuple[str, Faces]] = (),
                   lines: Sequence[np.ndarray] | None = None,
                   gaps: Sequence[tuple[float, float, float]] = (), name: str = "",
                   species: str = "") -> FenceTopology:
    """Length, open ends and separation of one impassable fence for one species.

    Parameters
    ----------
    grid : Grid
        The grid with its data mask (metres).
    faces : (numpy.ndarray, numpy.ndarray)
        Faces the fence blocks for this species (between columns, between rows).
    others : sequence of (str, faces)
        The other lines this species cannot cross (name and faces), keyword only.
    lines : sequence of numpy.ndarray, optional
        The fence's vertices, each ``(k, 2)`` in map metres, for its length;
        default: the length of the faces it blocks (exact for fences along
        cell edges, such as raster fences and refuge outlines).
    gaps : sequence of (x, y, width_m)
        Gates drawn in the fence; an open end at a gate is marked ``at_gap``.
    name, species : str
        Names for the result.

    Returns
    -------
    FenceTopology
    """
    eff = effective_faces(grid.mask, faces)
    n_faces = int(eff[0].sum() + eff[1].sum())
    if lines:
        length = line_length_m(lines, grid)
    else:
        length = float(eff[0].sum() * grid.dy + eff[1].sum() * grid.dx)
    other_x, other_y = _empty(grid.shape)
    for _, (ox, oy) in others:
        other_x |= np.asarray(ox, bool)
        other_y |= np.asarray(oy, bool)
    _, n_without = components(grid.mask, (other_x, other_y))
    labels, n_with = components(grid.mask, (other_x | eff[0], other_y | eff[1]))
    sides: tuple[float, ...] = ()
    separates = n_with > n_without
    if separates:
        near = _bordering(labels, eff)
        area = np.bincount(labels[grid.mask], minlength=n_with) * grid.cell_area_km2
        sides = tuple(sorted((round(float(area[k]), 9) for k in near), reverse=True))
    ends = _open_ends(grid, eff, others, gaps)
    return FenceTopology(name, species, length, n_faces, tuple(ends), separates, sides)


def _bordering(labels: np.ndarray, faces: Faces) -> list[int]:
    """Components that touch the given faces on either side."""
    fx, fy = faces
    i, k = np.nonzero(fx)
    i2, j2 = np.nonzero(fy)
    found = np.concatenate([labels[i, k - 1], labels[i, k], labels[i2 - 1, j2], labels[i2, j2]])
    return sorted(int(v) for v in np.unique(found) if v >= 0)


def line_length_m(lines: Sequence[np.ndarray], grid: Grid) -> float:
    """Length of lines within the grid's data cells, metres.

    Each segment is cut into pieces of at most an eighth of a cell; a piece
    counts when its midpoint lies on a data cell (error below a quarter
    cell per crossing of the data boundary).
    """
    step = min(grid.dx, grid.dy) / 8.0
    total = 0.0
    for line in lines:
        v = np.asarray(line, dtype=float)[:, :2]
        for (x0, y0), (x1, y1) in zip(v[:-1], v[1:], strict=True):
            seg = math.hypot(x1 - x0, y1 - y0)
            if seg == 0:
                continue
            n = max(1, math.ceil(seg / step))
            t = (np.arange(n) + 0.5) / n
            col = np.floor((x0 + t * (x1 - x0) - grid.x0) / grid.dx).astype(np.int64)
            row = np.floor((grid.y0 - (y0 + t * (y1 - y0))) / grid.dy).astype(np.int64)
            ok = (row >= 0) & (row < grid.ny) & (col >= 0) & (col < grid.nx)
            inside = np.zeros(n, bool)
            inside[ok] = grid.mask[row[ok], col[ok]]
            total += seg / n * int(inside.sum())
    return total


# --- sides ------------------------------------------------------------------------------
def _staircase(i0: int, j0: int, i1: int, j1: int) -> list[tuple[int, int]]:
    """Corners of a 4-connected path from (i0, j0) to (i1, j1) close to the straight line."""
    path = [(i0, j0)]
    i, j = i0, j0
    di, dj = i1 - i0, j1 - j0
    while (i, j) != (i1, j1):
        moves = []
        if i != i1:
            moves.append((i + (1 if i1 > i else -1), j))
        if j != j1:
            moves.append((i, j + (1 if j1 > j else -1)))
        # the move that stays nearest the straight line
        i, j = min(moves, key=lambda p: abs((p[0] - i0) * dj - (p[1] - j0) * di))
        path.append((i, j))
    return path


def _close(faces: Faces, ends: Sequence[OpenEnd], grid: Grid) -> Faces:
    fx, fy = (f.copy() for f in faces)
    for e in ends:
        i0, j0 = round((grid.y0 - e.y) / grid.dy), round((e.x - grid.x0) / grid.dx)
        i1, j1 = round((grid.y0 - e.to_y) / grid.dy), round((e.to_x - grid.x0) / grid.dx)
        path = _staircase(i0, j0, i1, j1)
        for (ia, ja), (ib, jb) in zip(path[:-1], path[1:], strict=True):
            if ia == ib:
                fy[ia, min(ja, jb)] = True
            else:
                fx[min(ia, ib), ja] = True
    return fx, fy


COMPASS = ("east", "north-east", "north", "north-west", "west", "south-west", "south",
           "south-east")


def fence_sides(grid: Grid, faces: Faces) -> tuple[np.ndarray, list[str]]:
    """The sides of a fence: the parts it would separate with its open ends closed.

    Open ends are closed along the way round (the straight gap to the nearest
    barrier corner, the landscape edge or this fence itself; other lines are
    ignored), then the landscape is split into connected components with
    only this fence blocked. The components that touch the fence are its
    sides.

    Parameters
    ----------
    grid : Grid
        The grid with its data mask (metres).
    faces : (numpy.ndarray, numpy.ndarray)
        The faces the fence blocks.

    Returns
    -------
    labels : numpy.ndarray of int
        Side of every cell (0..n−1), −1 off the sides (no data, or parts of
        the landscape the fence does not touch).
    names : list of str
        One name per side: the compass direction, across the fence's main
        axis, from the fence's centre to the side's centre (``"west"``,
        ``"north-east"``), or ``"inside"`` for a side that touches no
        landscape edge.
    """
    eff = effective_faces(grid.mask, faces)
    ends = _open_ends(grid, eff, (), ())
    closed = _close(eff, ends, grid)
    labels, _ = components(grid.mask, closed)
    near = _bordering(labels, eff)
    out = np.full(grid.shape, -1, dtype=np.int64)
    (cx, cy), axis = _faces_centre(grid, eff)
    edge_cells = _edge_cells(grid.mask)
    names = []
    for k, lab in enumerate(near):
        cells = labels == lab
        out[cells] = k
        if not (cells & edge_cells).any():
            names.append("inside")
            continue
        r, c = np.nonzero(cells)
        d = np.array([grid.x[c].mean() - cx, grid.y[r].mean() - cy])
        across = d - (d @ axis) * axis  # the part of the offset across the fence
        d = across if np.hypot(*across) > 1e-6 * np.hypot(*d) else d
        ang = math.degrees(math.atan2(d[1], d[0])) % 360.0
        names.append(COMPASS[int(((ang + 22.5) % 360.0) // 45.0)])
    for n in set(names):
        if names.count(n) > 1:
            k = 0
            for i, m in enumerate(names):
                if m == n:
                    k += 1
                    names[i] = f"{n} {k}"
    return out, names


def _faces_centre(grid: Grid, faces: Faces) -> tuple[tuple[float, float], np.ndarray]:
    """Centre of the faces (metres) and the unit vector of their main axis."""
    fx, fy = faces
    i, k = np.nonzero(fx)
    i2, j2 = np.nonzero(fy)
    xs = np.concatenate([grid.x0 + k * grid.dx, grid.x0 + (j2 + 0.5) * grid.dx])
    ys = np.concatenate([grid.y0 - (i + 0.5) * grid.dy, grid.y0 - i2 * grid.dy])
    if xs.size < 2:
        return (float(np.mean(xs)), float(np.mean(ys))), np.array([1.0, 0.0])
    pts = np.column_stack([xs - xs.mean(), ys - ys.mean()])
    _, vecs = np.linalg.eigh(pts.T @ pts)
    return (float(xs.mean()), float(ys.mean())), vecs[:, -1]


def _edge_cells(mask: np.ndarray) -> np.ndarray:
    m = np.pad(np.asarray(mask, dtype=bool), 1, constant_values=False)
    inner = m[1:-1, 1:-1]
    return inner & ~(m[:-2, 1:-1] & m[2:, 1:-1] & m[1:-1, :-2] & m[1:-1, 2:])


# --- words --------------------------------------------------------------------------------
def place_text(x: float, y: float) -> str:
    """``"x 461 900 m, y 6 836 825 m"``: a map point for readers (metres)."""
    def n(v: float) -> str:
        return f"{v:,.0f}".replace(",", "\u2009")  # thin space between thousands

    return f"x {n(x)} m, y {n(y)} m"


def metres_text(width: float) -> str:
    """A width in whole metres, rounded as the run record rounds it."""
    return f"{round(width, 1):.0f} m"


def warning_text(topo: FenceTopology, who: str, kind: str = "fence") -> str | None:
    """One warning in plain words when an impassable line can be walked round, else None.

    Parameters
    ----------
    topo : FenceTopology
        The line's topology.
    who : str
        The species as readers know it (``"predators (least weasel)"``).
    kind : str
        What the line is (``"fence"``, ``"refuge outline"``).
    """
    leaks = topo.leaks
    if leaks:
        where = "; ".join(
            f"{place_text(e.x, e.y)}, {metres_text(e.width_m)} from the "
            + ("landscape edge" if e.to == "landscape edge" else e.to)
            for e in leaks)
        ends = "its end at" if len(leaks) == 1 else f"its {len(leaks)} open ends at"
        tail = ("It does not separate the landscape for them." if not topo.separates else
                "It still separates parts of the landscape, but not along all of its length.")
        return (f"{kind.capitalize()} '{topo.name}' is meant to stop {who}, but they can walk "
                f"round it: {ends} {where}. {tail}")
    if not topo.separates and not topo.open_ends:
        return (f"{kind.capitalize()} '{topo.name}' is meant to stop {who}, but it does not "
                "separate the landscape for them: the lines it meets can be walked round.")
    return None


# --- measures ---------------------------------------------------------------------------
def _lines_of(shapes) -> list[np.ndarray]:
    out = []
    for s in shapes:
        g = getattr(s, "geometry", s)
        for part in getattr(g, "geoms", [g]):
            if part.geom_type == "Polygon":
                out.append(np.asarray(part.exterior.coords)[:, :2])
                out += [np.asarray(r.coords)[:, :2] for r in part.interiors]
            elif part.geom_type in ("LineString", "LinearRing"):
                out.append(np.asarray(part.coords)[:, :2])
    return out


def _stops(m, species: str) -> bool:
    """Whether a placed measure is an impassable line for ``species``."""
    if m.faces is None:
        return False
    if m.kind == "fence":
        return float(m.permeability.get(species, 1.0)) == 0.0
    return m.kind == "refuge" and m.closed_to_predators and species == "predator"


def measure_topologies(grid: Grid, measures: Sequence, who: dict[str, str]) -> list[dict]:
    """The topology of every fence and closed refuge outline among placed measures.

    Parameters
    ----------
    grid : Grid
        The run grid with its data mask.
    measures : sequence of PlacedMeasure
        The measures of one variant (:mod:`preyscape.landscape.placed`); every
        other impassable line of the variant counts as a barrier, whatever
        its years.
    who : dict
        Species key to how readers know it (``{"predator": "predators (least
        weasel)"}``), for the warnings.

    Returns
    -------
    list of dict
        One record per line and species it stops (:meth:`FenceTopology.as_record`
        with ``kind`` and ``warning``: a sentence, or None); a fence that
        stops no species completely has one record with ``species`` None, its
        length and faces only.
    """
    out = []
    for m in measures:
        if m.faces is None:
            continue
        lines = _lines_of(m.shapes) if m.kind == "fence" else None
        gaps = [(float(g["x"]), float(g["y"]), float(g["width"])) for g in m.gaps]
        kind = "fence" if m.kind == "fence" else "refuge outline"
        stopped = [sp for sp in ("prey", "predator") if _stops(m, sp)]
        for sp in stopped:
            others = [(o.name, o.faces) for o in measures if o is not m and _stops(o, sp)]
            topo = fence_topology(grid, m.faces, others=others, lines=lines, gaps=gaps,
                                  name=m.name, species=sp)
            out.append({**topo.as_record(), "kind": m.kind,
                        "warning": warning_text(topo, who.get(sp, sp), kind)})
        if not stopped:
            eff = effective_faces(grid.mask, m.faces)
            length = (line_length_m(lines, grid) if lines else
                      float(eff[0].sum() * grid.dy + eff[1].sum() * grid.dx))
            out.append({"name": m.name, "species": None, "kind": m.kind,
                        "length_m": round(length, 1), "faces": int(eff[0].sum() + eff[1].sum()),
                        "open_ends": [], "separates": False, "sides_km2": [],
                        "warning": None})
    return out
