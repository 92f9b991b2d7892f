"""Landscape measures and zones burned onto the cells and faces of a grid.

Measures (corridors, fences, refuges) and zones come as vector files
(GeoJSON) or rasters. This module turns them into what the model uses:

* **cells** — boolean arrays of shape ``grid.shape`` (corridor and refuge
  cells, zone labels);
* **faces** — boolean arrays of the faces a fence blocks, in the layout of
  :class:`preyscape.model.movement.Movement`: ``fx`` of shape
  ``(rows, cols+1)`` for the faces between columns (face ``k`` separates
  columns ``k-1`` and ``k``) and ``fy`` of shape ``(rows+1, cols)`` for the
  faces between rows (face ``k`` separates rows ``k-1`` and ``k``). Faces on
  the grid edge (``k = 0`` and ``k = cols`` or ``rows``) are never fence faces.

Rules
-----
*Cells from vectors.* A cell belongs to a polygon when its centre lies inside
it (GDAL's rasterisation rule). Lines and points are either buffered by a
distance in metres first (then the same rule applies) or, with no buffer,
mark every cell they pass through. Every geometry that reaches the grid marks
at least one cell, the one holding a representative point of its part inside
the grid, so a polygon narrower than a cell is never lost silently. Cells
without data (``~grid.mask``) are never marked.

*Fences.* The model moves animals between 4-neighbour cells across the face
they share; the flux across a face follows the segment joining the two cell
centres (the face's *link*). A fence blocks a face exactly when it crosses
that link. Hence a fence that runs from grid edge to grid edge, or is closed,
cuts every 4-neighbour path between its two sides — also when it runs
diagonally — and never blocks a face whose link it does not cross.

The test is exact up to rounding and consistent between the two face
directions: in cell units ``u = (x - x0)/dx - 1/2``, ``v = (y0 - y)/dy - 1/2``
(cell centres at integer ``(u, v) = (col, row)``) every fence coordinate is
shifted by the same tiny amount (:data:`FENCE_SHIFT`, about 1e-7 cell) and
each cell centre gets one side per fence segment (the sign of one cross
product), used for both the horizontal and the vertical links through it.
So a fence exactly through cell centres or along a row of centres blocks a
deterministic set of faces without a leak (it counts as passing a hair
south-east of those centres), and a fence exactly along a face line
``x = x0 + k dx`` blocks exactly the faces of that line within its extent.
Lines that end where another begins (a polyline's own vertices, two
features meeting at a point, a ring's closing vertex) leave no gap.

*CRS of vector files.* See :func:`read_geometry`: an explicit CRS wins, then a
legacy GeoJSON ``"crs"`` member, then RFC 7946 WGS 84 longitude/latitude if
every coordinate fits that range, else the grid's own CRS. How the CRS was
decided is kept on the returned :class:`ShapeList` (``crs_note``), so the
caller can report it; :func:`geometry_crs_note` gives the same text without
reprojecting anything.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid

__all__ = [
    "FENCE_SHIFT",
    "Shape",
    "ShapeList",
    "cells_covered",
    "cells_from_raster",
    "fence_faces",
    "geometry_crs_note",
    "outline_faces",
    "read_geometry",
    "zones_from_polygons",
]

#: Symbolic shift ``(du, dv)`` of all fence coordinates, in cells (east, south).
#: Irrational multiples of 1e-7 cell so that no fence drawn on round numbers
#: passes exactly through a cell centre; far above rounding (~1e-12 cell).
FENCE_SHIFT = (1e-7 * math.sqrt(2.0), 1e-7 * math.pi)

_GEOMETRY_TYPES = (
    "Point",
    "MultiPoint",
    "LineString",
    "MultiLineString",
    "Polygon",
    "MultiPolygon",
    "GeometryCollection",
)
_WGS84 = "EPSG:4326"


@dataclass(frozen=True, eq=False)
class Shape:
    """One geometry of a vector file, in the grid's CRS.

    Attributes
    ----------
    geometry : shapely.geometry.base.BaseGeometry
        Two-dimensional geometry, coordinates in metres of the grid's CRS.
    properties : dict
        The GeoJSON feature's properties (empty for a bare geometry).
    """

    geometry: BaseGeometry
    properties: dict[str, Any]


class ShapeList(list):
    """A list of :class:`Shape` that also says how the file's CRS was decided.

    Attributes
    ----------
    crs_note : str
        One sentence for the user, e.g. ``"no CRS given and all coordinates
        are longitude/latitude: read as WGS 84 (EPSG:4326, RFC 7946)"``.
    crs_name : str
        Short name of the CRS the file was read in, e.g. ``"EPSG:4326"``.
    """

    def __init__(self, shapes: Iterable[Shape] = (), crs_note: str = "", crs_name: str = ""):
        super().__init__(shapes)
        self.crs_note = crs_note
        self.crs_name = crs_name


# --- reading vector files ---------------------------------------------------
def read_geometry(
    path: str | os.PathLike[str],
    grid: Grid,
    crs: str | None = None,
    source: str | None = None,
) -> ShapeList:
    """Read the geometries of a GeoJSON file into the grid's CRS.

    Parameters
    ----------
    path : str or os.PathLike
        GeoJSON file: a FeatureCollection, a Feature or a bare geometry
        (Point, LineString, Polygon, their Multi- forms, GeometryCollection).
        Features without geometry and empty geometries are skipped; third
        coordinates (heights) are dropped.
    grid : Grid
        The habitat grid (projected CRS, metres).
    crs : str, optional
        CRS of the file's coordinates, anything pyproj accepts (``"EPSG:25833"``,
        a WKT or PROJ string). Decides the CRS when given. Otherwise the
        file's legacy top-level ``"crs"`` member is used (e.g.
        ``{"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::25833"}}``);
        without one, a file whose coordinates all lie within longitude
        [-180, 180] and latitude [-90, 90] is WGS 84 longitude/latitude
        (RFC 7946), and any other file is taken to be in the grid's CRS.
    source : str, optional
        Name used in error messages. Default: ``str(path)``.

    Returns
    -------
    ShapeList
        One :class:`Shape` per non-empty geometry, in file order, with
        coordinates in metres of the grid's CRS; ``.crs_note`` says how the
        file's CRS was decided. Geometries in another CRS are reprojected
        (pyproj, longitude/easting first) after densifying their segments to
        about one grid cell, so a straight line in longitude/latitude follows
        its true path on the grid. Parts far outside the grid may be clipped
        off before reprojecting.

    Raises
    ------
    InputError
        If the file is missing, not JSON or not GeoJSON, holds no geometry,
        names an unknown CRS, cannot be reprojected, or a geometry lies
        entirely outside the grid (the message gives the grid's extent in
        metres and the CRS the file was read in).
    ValueError
        If the file needs reprojecting and the grid has no CRS, or the grid's
        CRS is geographic (grids are always projected).
    """
    src_name = str(path) if source is None else source
    data, items = _load_geojson(path, src_name)
    src_crs, note, name = _decide_crs(data, items, grid, crs, src_name)

    geoms = [g for g, _, _ in items]
    if src_crs is not None:
        geoms = _reproject(geoms, items, src_crs, grid, name, src_name)

    box = _grid_box(grid)
    shapes = ShapeList(crs_note=note, crs_name=name)
    for g, (_, props, label) in zip(geoms, items, strict=True):
        if g.is_empty or not g.intersects(box):
            raise InputError(
                f"{label} lies entirely outside the habitat grid, which covers "
                f"{_extent_text(grid)} in {_grid_crs_name(grid)}; the file was read with "
                f"{note}. Check the coordinates, or give the file's CRS explicitly",
                src_name,
            )
        shapes.append(Shape(g, props))
    return shapes


def geometry_crs_note(
    path: str | os.PathLike[str],
    grid: Grid,
    crs: str | None = None,
    source: str | None = None,
) -> str:
    """How :func:`read_geometry` decides the CRS of a GeoJSON file, as one sentence.

    Parameters are those of :func:`read_geometry`; nothing is reprojected.

    Returns
    -------
    str
        The same text as ``read_geometry(...).crs_note``.

    Raises
    ------
    InputError
        As :func:`read_geometry` for unreadable files and unknown CRSs.
    """
    src_name = str(path) if source is None else source
    data, items = _load_geojson(path, src_name)
    return _decide_crs(data, items, grid, crs, src_name)[1]


# --- cells --------------------------------------------------------------------
def cells_covered(
    shapes: Iterable[Shape | BaseGeometry],
    grid: Grid,
    buffer_m: float = 0.0,
) -> np.ndarray:
    """Cells covered by polygons, buffered lines and points.

    Parameters
    ----------
    shapes : iterable of Shape or shapely geometry
        Geometries in the grid's CRS (metres).
    grid : Grid
        The habitat grid.
    buffer_m : float
        Distance around lines and points, metres (>= 0): a line becomes a
        band ``2 * buffer_m`` wide. Polygons are not buffered. With 0, a line
        or point marks every cell it passes through or lies in.

    Returns
    -------
    numpy.ndarray of bool
        Shape ``grid.shape``: cells whose centre lies inside a polygon (or a
        buffered line/point), cells a line crosses (no buffer), and for every
        geometry reaching the grid at least the cell of a representative
        point; never a cell without data.

    Raises
    ------
    ValueError
        If ``buffer_m`` is negative or not finite.
    """
    if not (math.isfinite(buffer_m) and buffer_m >= 0):
        raise ValueError(f"buffer_m must be a finite distance >= 0 metres, not {buffer_m!r}")
    geoms = [_geometry_of(s) for s in shapes]
    index = _feature_raster(geoms, grid, buffer_m)
    return (index >= 0) & grid.mask


def cells_from_raster(
    path: str | os.PathLike[str],
    grid: Grid,
    source: str | None = None,
) -> np.ndarray:
    """Cells marked by a raster (band 1 non-zero and finite), aligned onto the grid.

    The raster is turned into an indicator (1 where marked, 0 where zero or
    no-data), warped onto the grid by area-weighted averaging (as
    :func:`preyscape.landscape.io.read_layer_onto` with ``"average"``), and a
    grid cell is marked when at least half of its area is marked.

    Parameters
    ----------
    path : str or os.PathLike
        Any raster GDAL can read, in a projected CRS, north-up; any origin
        and resolution.
    grid : Grid
        The habitat grid (with a CRS).
    source : str, optional
        Name used in error messages. Default: ``str(path)``.

    Returns
    -------
    numpy.ndarray of bool
        Shape ``grid.shape``; False where the raster does not reach and on
        cells without data.

    Raises
    ------
    InputError
        If the file is missing or unreadable, has no or a geographic CRS or a
        rotated transform, or cannot be warped onto the grid.
    ValueError
        If ``grid`` has no CRS.
    """
    from preyscape.landscape.io import read_layer_onto

    def marked(raw: np.ndarray, valid: np.ndarray) -> np.ndarray:
        # no-data counts as unmarked (0) inside the raster; beyond its edge the
        # grid cells stay NaN (not covered)
        vals = raw.astype(np.float64, copy=False)
        with np.errstate(invalid="ignore"):
            return (valid & np.isfinite(vals) & (vals != 0)).astype(np.float64)

    src_name = str(path) if source is None else source
    out = read_layer_onto(path, grid, "average", src_name, values=marked)
    with np.errstate(invalid="ignore"):
        return (out >= 0.5) & grid.mask


def zones_from_polygons(
    path: str | os.PathLike[str],
    grid: Grid,
    field: str | None = None,
    source: str | None = None,
    crs: str | None = None,
) -> tuple[np.ndarray, list[str]]:
    """Zone labels per cell from the polygons of a GeoJSON file.

    Parameters
    ----------
    path : str or os.PathLike
        GeoJSON file of polygons (CRS rules of :func:`read_geometry`).
    grid : Grid
        The habitat grid.
    field : str, optional
        Feature property holding the zone name; every feature must have it.
        Default: the property ``"name"`` where a feature has one, else
        ``"zone k"`` for the k-th feature (from 1).
    source : str, optional
        Name used in error messages. Default: ``str(path)``.
    crs : str, optional
        CRS of the file, as in :func:`read_geometry`.

    Returns
    -------
    labels : numpy.ndarray of int32
        Shape ``grid.shape``: index into ``names``; -1 on cells in no zone
        and on cells without data. A cell belongs to a polygon when its centre
        lies inside it; each polygon gets at least the cell of a
        representative point. Where polygons overlap, the later feature in
        the file wins.
    names : list of str
        Zone names in order of first appearance. Features with the same name
        form one zone. A zone may end up with no cells when later features
        cover it completely.

    Raises
    ------
    InputError
        As :func:`read_geometry`; also if a feature is not a polygon or lacks
        the property ``field``.
    """
    src_name = str(path) if source is None else source
    shapes = read_geometry(path, grid, crs=crs, source=src_name)
    names: list[str] = []
    label_of_feature = np.empty(len(shapes), dtype=np.int32)
    geoms = []
    for k, s in enumerate(shapes):
        parts = _parts(s.geometry)
        if not all(p.geom_type == "Polygon" for p in parts):
            kinds = sorted({p.geom_type for p in parts if p.geom_type != "Polygon"})
            raise InputError(
                f"feature {k + 1} is a {'/'.join(kinds)}; zones need polygons "
                "(Polygon or MultiPolygon)",
                src_name,
            )
        if field is not None:
            if field not in s.properties or s.properties[field] is None:
                have = ", ".join(repr(p) for p in s.properties) or "none"
                raise InputError(
                    f"feature {k + 1} has no property {field!r} for the zone name "
                    f"(its properties: {have})",
                    src_name,
                )
            name = str(s.properties[field])
        elif s.properties.get("name") is not None:
            name = str(s.properties["name"])
        else:
            name = f"zone {k + 1}"
        if name not in names:
            names.append(name)
        label_of_feature[k] = names.index(name)
        geoms.append(s.geometry)
    index = _feature_raster(geoms, grid, 0.0)
    labels = np.where(index >= 0, label_of_feature[np.maximum(index, 0)], -1)
    labels[~grid.mask] = -1
    return labels.astype(np.int32), names


# --- faces ----------------------------------------------------------------------
def fence_faces(
    shapes: Iterable[Shape | BaseGeometry],
    grid: Grid,
    gaps: Sequence[tuple[float, float, float]] = (),
    source: str | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Faces a fence blocks: those whose centre-to-centre link it crosses.

    Parameters
    ----------
    shapes : iterable of Shape or shapely geometry
        Fence geometries in the grid's CRS (metres): lines, and the
        boundaries (outer and inner rings) of polygons. Points are ignored.
    grid : Grid
        The habitat grid.
    gaps : sequence of (x, y, width_m)
        Gates in the fence: centre (metres, grid CRS) and width (metres).
        A blocked face whose crossing point (where the fence crosses its
        link) lies within ``width_m / 2`` of the centre is opened; the face
        whose crossing point is nearest to the centre is always opened, so
        a gate narrower than a cell opens one face.
    source : str, optional
        Name used in error messages about gaps.

    Returns
    -------
    fx : numpy.ndarray of bool
        Shape ``(rows, cols+1)``: ``fx[i, k]`` blocks the face between cells
        ``(i, k-1)`` and ``(i, k)``.
    fy : numpy.ndarray of bool
        Shape ``(rows+1, cols)``: ``fy[k, j]`` blocks the face between cells
        ``(k-1, j)`` and ``(k, j)``.

    Raises
    ------
    InputError
        If a gap has a negative or non-finite width, or lies more than half
        its width plus one cell diagonal from every blocked face (gaps are
        ignored when the fence blocks no face at all).
    ValueError
        If a fence coordinate is not finite.

    Notes
    -----
    Only links between two cells of the grid count; grid-edge faces are never
    blocked, whatever lies outside. Cells without data are not special: the
    movement operator closes their faces anyway. See the module docstring for
    the treatment of fences through cell centres and along face lines.
    """
    rows, cols = grid.shape
    fx = np.zeros((rows, cols + 1), dtype=bool)
    fy = np.zeros((rows + 1, cols), dtype=bool)
    seg = _fence_segments([_geometry_of(s) for s in shapes], grid)
    if len(seg) == 0:
        return fx, fy
    hx, hy = _link_crossings(seg, rows, cols)
    # crossing points back in metres (undo the symbolic shift; cosmetic only)
    du, dv = FENCE_SHIFT
    pts_x = np.concatenate([hx[2], hy[2]])
    pts_y = np.concatenate([hx[3], hy[3]])
    px = grid.x0 + (pts_x - du + 0.5) * grid.dx
    py = grid.y0 - (pts_y - dv + 0.5) * grid.dy
    is_x = np.concatenate([np.ones(hx[0].size, bool), np.zeros(hy[0].size, bool)])
    ii = np.concatenate([hx[0], hy[0]])
    jj = np.concatenate([hx[1], hy[1]])

    opened = np.zeros(ii.size, dtype=bool)
    for g, gap in enumerate(gaps):
        gx, gy, width = (float(v) for v in gap)
        if not (math.isfinite(gx) and math.isfinite(gy) and math.isfinite(width)) or width < 0:
            raise InputError(
                f"gap {g + 1} ({gap!r}) needs finite x, y (metres) and a width >= 0 metres",
                source,
            )
        if ii.size == 0:
            continue
        dist = np.hypot(px - gx, py - gy)
        near = int(np.argmin(dist))
        reach = 0.5 * width + math.hypot(grid.dx, grid.dy)
        if dist[near] > reach:
            raise InputError(
                f"gap {g + 1} at x={gx:.1f} m, y={gy:.1f} m is {dist[near]:.1f} m from the "
                f"nearest fence face; put the gap on the fence (within {reach:.1f} m)",
                source,
            )
        opened |= dist <= 0.5 * width
        opened[near] = True

    fx[ii[is_x], jj[is_x]] = True
    fy[ii[~is_x], jj[~is_x]] = True
    # a face crossed twice is open if any of its crossings lies in a gap
    fx[ii[is_x & opened], jj[is_x & opened]] = False
    fy[ii[~is_x & opened], jj[~is_x & opened]] = False
    return fx, fy


def outline_faces(cells: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Interior faces between a marked and an unmarked cell.

    Parameters
    ----------
    cells : numpy.ndarray of bool
        Marked cells, shape ``(rows, cols)``.

    Returns
    -------
    fx : numpy.ndarray of bool
        Shape ``(rows, cols+1)``, faces between columns (edges False).
    fy : numpy.ndarray of bool
        Shape ``(rows+1, cols)``, faces between rows (edges False).
    """
    c = np.asarray(cells, dtype=bool)
    if c.ndim != 2:
        raise ValueError(f"cells must be a 2-D array, not shape {c.shape}")
    rows, cols = c.shape
    fx = np.zeros((rows, cols + 1), dtype=bool)
    fy = np.zeros((rows + 1, cols), dtype=bool)
    fx[:, 1:-1] = c[:, :-1] != c[:, 1:]
    fy[1:-1, :] = c[:-1, :] != c[1:, :]
    return fx, fy


# --- helpers: GeoJSON -----------------------------------------------------------
def _load_geojson(
    path: str | os.PathLike[str], src_name: str
) -> tuple[dict, list[tuple[BaseGeometry, dict, str]]]:
    """Parse a GeoJSON file into ``(document, [(geometry, properties, label)])``."""
    p = Path(path)
    if not p.exists():
        raise InputError(
            f"geometry file not found ({p.resolve()}); give the path of an existing "
            "GeoJSON file, relative to the configuration file or absolute",
            src_name,
        )
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read the geometry file as UTF-8 text ({exc})", src_name) from None
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(
            f"the geometry file is not valid JSON (line {exc.lineno}, column {exc.colno}: "
            f"{exc.msg}); give a GeoJSON file (FeatureCollection, Feature or geometry)",
            src_name,
        ) from None
    kind = data.get("type") if isinstance(data, dict) else None
    if kind == "FeatureCollection":
        feats = data.get("features")
        if not isinstance(feats, list):
            raise InputError(
                "the FeatureCollection has no 'features' list; not valid GeoJSON", src_name
            )
        raw = [(f, f"feature {k + 1}") for k, f in enumerate(feats)]
    elif kind == "Feature":
        raw = [(data, "the feature")]
    elif kind in _GEOMETRY_TYPES:
        raw = [({"type": "Feature", "geometry": data, "properties": {}}, "the geometry")]
    else:
        raise InputError(
            f"not a GeoJSON file (top-level 'type' is {kind!r}); give a FeatureCollection, "
            "a Feature or a geometry (" + ", ".join(_GEOMETRY_TYPES) + ")",
            src_name,
        )

    items: list[tuple[BaseGeometry, dict, str]] = []
    for feat, label in raw:
        if not isinstance(feat, dict) or feat.get("type") != "Feature":
            raise InputError(f"{label} is not a GeoJSON Feature object", src_name)
        gj = feat.get("geometry")
        if gj is None:
            continue  # RFC 7946 allows unlocated features
        props = feat.get("properties") or {}
        if not isinstance(props, dict):
            raise InputError(f"{label} has 'properties' that are not an object", src_name)
        try:
            geom = shapely.geometry.shape(gj)
        except Exception as exc:  # shapely raises several types for bad coordinates
            raise InputError(
                f"{label} has an invalid geometry ({type(exc).__name__}: {exc}); "
                "coordinates must be [x, y] number pairs as GeoJSON defines",
                src_name,
            ) from None
        geom = shapely.force_2d(geom)
        if geom.is_empty:
            continue
        if not np.isfinite(shapely.get_coordinates(geom)).all():
            raise InputError(f"{label} has coordinates that are not finite numbers", src_name)
        items.append((geom, dict(props), label))
    if not items:
        raise InputError(
            "the geometry file holds no geometries (no features with a non-empty "
            "geometry); draw the measure or zone and save it again",
            src_name,
        )
    return data, items


def _decide_crs(
    data: dict,
    items: list[tuple[BaseGeometry, dict, str]],
    grid: Grid,
    crs: str | None,
    src_name: str,
) -> tuple[Any, str, str]:
    """The file's CRS: ``(pyproj CRS or None for the grid's own, note, short name)``."""
    from pyproj import CRS
    from pyproj.exceptions import CRSError

    grid_name = _grid_crs_name(grid)
    if crs is not None:
        try:
            src = CRS.from_user_input(crs)
        except CRSError as exc:
            raise InputError(
                f"unknown coordinate reference system {crs!r} ({exc}); give one pyproj "
                "understands, e.g. 'EPSG:25833'",
                src_name,
            ) from None
        how = f"the CRS {_short(src)} given for it"
    elif isinstance(data, dict) and data.get("crs") is not None:
        member = data["crs"]
        value = None
        if isinstance(member, dict) and isinstance(member.get("properties"), dict):
            props = member["properties"]
            if member.get("type") == "name":
                value = props.get("name")
            elif member.get("type") == "EPSG" and props.get("code") is not None:
                value = f"EPSG:{props['code']}"
        if not isinstance(value, str):
            raise InputError(
                f"cannot read the file's 'crs' member {json.dumps(member)[:120]}; expected "
                '{"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::25833"}}, '
                "or remove it and give the CRS explicitly",
                src_name,
            )
        try:
            src = CRS.from_user_input(value)
        except CRSError as exc:
            raise InputError(
                f"unknown coordinate reference system {value!r} in the file's 'crs' member "
                f"({exc}); use e.g. 'urn:ogc:def:crs:EPSG::25833'",
                src_name,
            ) from None
        how = f"the CRS {_short(src)} from the file's 'crs' member"
    else:
        xy = np.concatenate([shapely.get_coordinates(g) for g, _, _ in items])
        lonlat = bool(
            (np.abs(xy[:, 0]) <= 180.0).all() and (np.abs(xy[:, 1]) <= 90.0).all()
        )
        if lonlat:
            src = CRS.from_user_input(_WGS84)
            how = (
                "no CRS given and all coordinates within longitude/latitude range, so read "
                "as WGS 84 longitude/latitude (EPSG:4326, RFC 7946)"
            )
        else:
            return (
                None,
                "no CRS given and coordinates outside longitude/latitude range, so taken "
                f"to be in the habitat grid's CRS ({grid_name})",
                grid_name,
            )
    if grid.crs_wkt:
        grid_crs = CRS.from_wkt(grid.crs_wkt)
        if grid_crs.is_geographic:
            raise ValueError("the grid's CRS is geographic; grids are always projected (metres)")
        if src.equals(grid_crs, ignore_axis_order=True):
            return None, how, _short(src)
    return src, how, _short(src)


def _reproject(
    geoms: list[BaseGeometry],
    items: list[tuple[BaseGeometry, dict, str]],
    src_crs: Any,
    grid: Grid,
    name: str,
    src_name: str,
) -> list[BaseGeometry]:
    """Clip (generously), densify to about a cell and reproject into the grid's CRS."""
    from pyproj import CRS, Transformer
    from pyproj.exceptions import ProjError

    if not grid.crs_wkt:
        raise ValueError(
            f"grid has no CRS (crs_wkt is empty); cannot reproject geometries from {name}"
        )
    dst = CRS.from_wkt(grid.crs_wkt)
    fwd = Transformer.from_crs(src_crs, dst, always_xy=True)
    inv = Transformer.from_crs(dst, src_crs, always_xy=True)

    # Segment length in source units that maps to at most one cell: the
    # smallest singular value of the local Jacobian (source units per metre).
    h = min(grid.dx, grid.dy)
    cx = grid.x0 + 0.5 * grid.width_m
    cy = grid.y0 - 0.5 * grid.height_m
    sx, sy = inv.transform([cx, cx + h, cx], [cy, cy, cy + h])
    jac = np.array([[sx[1] - sx[0], sx[2] - sx[0]], [sy[1] - sy[0], sy[2] - sy[0]]]) / h
    if not np.isfinite(jac).all():
        raise InputError(
            f"the habitat grid's area cannot be expressed in {name} (the file's CRS); "
            "check the CRS of the file",
            src_name,
        )
    step = h * float(np.linalg.svd(jac, compute_uv=False).min())

    # Clip to the grid's area plus a wide margin (in source units) so that
    # densifying a large outline stays cheap; the cut lies outside the grid.
    margin = 0.1 * max(grid.width_m, grid.height_m) + 2 * max(grid.dx, grid.dy)
    clip = None
    try:
        left, bottom, right, top = inv.transform_bounds(
            grid.x0 - margin,
            grid.y0 - grid.height_m - margin,
            grid.x0 + grid.width_m + margin,
            grid.y0 + margin,
            densify_pts=21,
        )
        if all(map(math.isfinite, (left, bottom, right, top))) and left < right:
            clip = shapely.box(left, bottom, right, top)
    except ProjError:
        clip = None

    def to_grid(xy: np.ndarray) -> np.ndarray:
        x, y = fwd.transform(xy[:, 0], xy[:, 1], errcheck=False)
        return np.column_stack([x, y])

    out = []
    for g, (_, _, label) in zip(geoms, items, strict=True):
        if clip is not None and not clip.contains(g):
            if g.geom_type in ("Polygon", "MultiPolygon", "GeometryCollection") and not g.is_valid:
                g = shapely.make_valid(g)
            g = g.intersection(clip)
        if not g.is_empty and step > 0 and math.isfinite(step):
            g = shapely.segmentize(g, step)
        g = shapely.transform(g, to_grid)
        if not np.isfinite(shapely.get_coordinates(g)).all():
            raise InputError(
                f"{label} cannot be reprojected from {name} to the habitat grid's CRS "
                f"({_grid_crs_name(grid)}); check the CRS of the file",
                src_name,
            )
        out.append(g)
    return out


def _short(crs: Any) -> str:
    """Short CRS name such as ``EPSG:25833``."""
    auth = crs.to_authority(min_confidence=70)
    return f"{auth[0]}:{auth[1]}" if auth else crs.name


def _grid_crs_name(grid: Grid) -> str:
    """Short name of the grid's CRS (``"unknown CRS"`` if it has none)."""
    if not grid.crs_wkt:
        return "unknown CRS"
    from pyproj import CRS

    return _short(CRS.from_wkt(grid.crs_wkt))


def _extent_text(grid: Grid) -> str:
    return (
        f"x {grid.x0:.1f} to {grid.x0 + grid.width_m:.1f} m, "
        f"y {grid.y0 - grid.height_m:.1f} to {grid.y0:.1f} m"
    )


# --- helpers: cells -----------------------------------------------------------
def _geometry_of(s: Shape | BaseGeometry) -> BaseGeometry:
    if isinstance(s, Shape):
        return s.geometry
    if isinstance(s, BaseGeometry):
        return s
    raise TypeError(f"expected a Shape or a shapely geometry, not {type(s).__name__}")


def _parts(g: BaseGeometry) -> list[BaseGeometry]:
    """Simple parts (points, lines, rings, polygons) of any geometry, non-empty."""
    out: list[BaseGeometry] = []
    stack = [g]
    while stack:
        h = stack.pop()
        if h.is_empty:
            continue
        if h.geom_type.startswith("Multi") or h.geom_type == "GeometryCollection":
            stack.extend(reversed(list(shapely.get_parts(h))))
        elif h.geom_type == "LinearRing":
            out.append(shapely.LineString(h.coords))  # GeoJSON knows no rings
        else:
            out.append(h)
    return out


def _grid_box(grid: Grid) -> BaseGeometry:
    return shapely.box(grid.x0, grid.y0 - grid.height_m, grid.x0 + grid.width_m, grid.y0)


def _feature_raster(geoms: list[BaseGeometry], grid: Grid, buffer_m: float) -> np.ndarray:
    """Index of the last geometry covering each cell (-1: none), int32.

    Areas by the centre-inside rule, lines and points (unbuffered) by every
    cell they touch; a geometry covering no cell gets the cell of a
    representative point unless a later geometry covers that cell.
    """
    from rasterio.features import rasterize

    from preyscape.landscape.io import _grid_transform

    rows, cols = grid.shape
    areas: list[list[BaseGeometry]] = []
    lines: list[list[BaseGeometry]] = []
    for g in geoms:
        a, ln = [], []
        for p in _parts(g):
            if p.geom_type == "Polygon":
                a.append(p)
            elif buffer_m > 0:
                a.append(p.buffer(buffer_m))
            else:
                ln.append(p)
        areas.append(a)
        lines.append(ln)

    transform = _grid_transform(grid)
    index = np.full(grid.shape, -1, dtype=np.int32)

    def burn(parts: list[list[BaseGeometry]], touched: bool) -> None:
        pairs = [(p, k) for k, ps in enumerate(parts) for p in ps]
        if pairs:
            r = rasterize(pairs, out_shape=grid.shape, transform=transform, fill=-1,
                          all_touched=touched, dtype="int32")
            np.maximum(index, r, out=index)  # in order, so the later geometry wins

    burn(areas, False)
    burn(lines, True)

    present = np.zeros(len(geoms) + 1, dtype=bool)
    present[np.unique(index) + 1] = True
    box = _grid_box(grid)
    for k in np.flatnonzero(~present[1:]):
        # Hidden under later geometries, or too small for any cell centre?
        if _covers_a_cell(areas[k], lines[k], grid):
            continue
        inside = [_valid(p).intersection(box) for p in areas[k] + lines[k]]
        inside = [p for p in inside if not p.is_empty]
        if not inside:
            continue  # does not reach the grid
        pt = max(inside, key=lambda p: (p.area, p.length)).representative_point()
        r = min(max(int(math.floor((grid.y0 - pt.y) / grid.dy)), 0), rows - 1)
        c = min(max(int(math.floor((pt.x - grid.x0) / grid.dx)), 0), cols - 1)
        if index[r, c] < k:
            index[r, c] = k
    return index


def _valid(p: BaseGeometry) -> BaseGeometry:
    return p if p.is_valid else shapely.make_valid(p)


def _covers_a_cell(areas: list[BaseGeometry], lines: list[BaseGeometry], grid: Grid) -> bool:
    """Whether the parts cover a cell on their own (rasterised in their window)."""
    from affine import Affine
    from rasterio.features import rasterize

    rows, cols = grid.shape
    for parts, touched in ((areas, False), (lines, True)):
        if not parts:
            continue
        minx, miny, maxx, maxy = shapely.total_bounds(parts)
        c0 = max(int(math.floor((minx - grid.x0) / grid.dx)) - 1, 0)
        c1 = min(int(math.ceil((maxx - grid.x0) / grid.dx)) + 1, cols)
        r0 = max(int(math.floor((grid.y0 - maxy) / grid.dy)) - 1, 0)
        r1 = min(int(math.ceil((grid.y0 - miny) / grid.dy)) + 1, rows)
        if c1 <= c0 or r1 <= r0:
            continue
        t = Affine(grid.dx, 0.0, grid.x0 + c0 * grid.dx, 0.0, -grid.dy, grid.y0 - r0 * grid.dy)
        r = rasterize([(p, 1) for p in parts], out_shape=(r1 - r0, c1 - c0), transform=t,
                      fill=0, all_touched=touched, dtype="uint8")
        if r.any():
            return True
    return False


# --- helpers: fences ------------------------------------------------------------
def _fence_segments(geoms: list[BaseGeometry], grid: Grid) -> np.ndarray:
    """Fence segments ``(pu, pv, qu, qv)`` in shifted cell units, shape (n, 4)."""
    chunks = []
    for g in geoms:
        for p in _parts(g):
            if p.geom_type == "Polygon":
                rings = shapely.get_rings(p)
            elif p.geom_type == "LineString":
                rings = [p]
            else:
                continue  # points do not fence anything
            for ring in rings:
                xy = shapely.get_coordinates(ring)
                if len(xy) >= 2:
                    chunks.append(np.hstack([xy[:-1], xy[1:]]))
    if not chunks:
        return np.empty((0, 4))
    seg = np.concatenate(chunks)
    if not np.isfinite(seg).all():
        raise ValueError("fence coordinates must be finite")
    du, dv = FENCE_SHIFT
    out = np.empty_like(seg)
    out[:, 0::2] = (seg[:, 0::2] - grid.x0) / grid.dx - 0.5 + du
    out[:, 1::2] = (grid.y0 - seg[:, 1::2]) / grid.dy - 0.5 + dv
    return out


def _link_crossings(
    seg: np.ndarray, rows: int, cols: int
) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    """Links crossed by the segments, with crossing points in cell units.

    Returns ``(i, k, u, v)`` for faces between columns (``fx[i, k]``) and
    ``(k, j, u, v)`` for faces between rows (``fy[k, j]``). Each cell centre
    ``(j, i)`` gets one side per segment, ``cross(j, i) > 0`` with one
    formula, whichever link is tested; along a lattice line that value is
    monotone even in floating point, so exactly one link per crossed line.
    """
    pu, pv, qu, qv = seg.T
    su = qu - pu
    sv = qv - pv
    lo_u, hi_u = np.minimum(pu, qu), np.maximum(pu, qu)
    lo_v, hi_v = np.minimum(pv, qv), np.maximum(pv, qv)
    # segments away from the box of cell centres cross no link
    near = (hi_u >= -1) & (lo_u <= cols) & (hi_v >= -1) & (lo_v <= rows)

    def side(k: np.ndarray, j: np.ndarray, i: np.ndarray) -> np.ndarray:
        # the single side formula for centre (j, i) and segment k
        return (pu[k] - j) * sv[k] - (pv[k] - i) * su[k] > 0

    def lines(lo: np.ndarray, hi: np.ndarray, n_lines: int) -> tuple[np.ndarray, np.ndarray]:
        # lattice lines w = m (0 <= m < n_lines) with (p >= m) != (q >= m)
        first = np.maximum(np.floor(lo) + 1, 0)
        last = np.minimum(np.floor(hi), n_lines - 1)
        n = np.where(near, last - first + 1, 0).clip(min=0).astype(np.int64)
        k = np.repeat(np.arange(len(seg)), n)
        start = np.repeat(np.cumsum(n) - n, n)
        m = first[k] + (np.arange(k.size) - start)
        return k, m.astype(np.float64)

    # faces between columns: crossings of the row lines v = i
    k, i = lines(lo_v, hi_v, rows)
    u = pu[k] + (i - pv[k]) / sv[k] * su[k]
    j0 = np.floor(u)
    left = sv[k] > 0  # side of centres far west on this line
    kx = j0 - 1
    for off in (-1.0, 0.0, 1.0, 2.0):
        kx += side(k, j0 + off, i) == left
    ok = (kx >= 1) & (kx <= cols - 1)
    hx = (i[ok].astype(np.intp), kx[ok].astype(np.intp), u[ok], i[ok])

    # faces between rows: crossings of the column lines u = j
    k, j = lines(lo_u, hi_u, cols)
    v = pv[k] + (j - pu[k]) / su[k] * sv[k]
    i0 = np.floor(v)
    top = su[k] < 0  # side of centres far north on this line
    ky = i0 - 1
    for off in (-1.0, 0.0, 1.0, 2.0):
        ky += side(k, j, i0 + off) == top
    ok = (ky >= 1) & (ky <= rows - 1)
    hy = (ky[ok].astype(np.intp), j[ok].astype(np.intp), j[ok], v[ok])
    return hx, hy
