"""Reading habitat rasters onto a :class:`~preyscape.landscape.grid.Grid`.

Every raster GDAL can read is accepted, as long as it lives in a projected CRS
whose linear unit is the metre and is north-up or south-up (no rotation or
shear). Anything else is refused with an :class:`~preyscape.errors.InputError`
that names the file and says what would be valid, because the solvers assume
cell sizes in metres and an axis-aligned grid.

Conventions
-----------
* Axis order is ``(row, col)`` with row 0 at the north edge.
* Suitability values are float64 in ``[0, 1]`` with NaN on no-data cells.
* Habitat classes are non-negative int32 codes with ``-1`` on no-data cells.
"""

from __future__ import annotations

import math
import os
import uuid
from collections.abc import Callable
from pathlib import Path
from typing import Literal

import numpy as np
import rasterio
from affine import Affine
from rasterio.crs import CRS
from rasterio.errors import CRSError, RasterioError
from rasterio.warp import Resampling, reproject

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid

__all__ = ["read_habitat", "read_layer_onto", "reproject_hint", "utm_epsg", "write_geotiff"]

HabitatKind = Literal["classes", "suitability"]

#: Fill value for no-data cells in class rasters (codes must be >= 0).
CLASS_NODATA = -1

_RESAMPLING = {
    "average": Resampling.average,
    "mode": Resampling.mode,
    "nearest": Resampling.nearest,
    "bilinear": Resampling.bilinear,
}

# Relative tolerance for "same cell size": sizes parsed from GeoTIFF tags carry
# float noise, and resampling onto an identical grid would only cost time.
_SIZE_RTOL = 1e-9



def utm_epsg(lon: float, lat: float) -> int:
    """EPSG code of the WGS 84 UTM zone holding a point (degrees).

    Zones are 6° of longitude wide from 180° W; 326zz north of the equator,
    327zz south of it (the exceptions around Norway and Svalbard are ignored).
    """
    zone = int(math.floor(((lon + 180.0) % 360.0) / 6.0)) + 1
    zone = min(max(zone, 1), 60)
    return (32600 if lat >= 0 else 32700) + zone


def reproject_hint(path: str | os.PathLike[str] | None, crs: CRS | None = None,
                   bounds: tuple[float, float, float, float] | None = None,
                   source_crs: bool = False) -> str:
    """How to reproject a raster with preyscape's own command, as one clause.

    Names the UTM zone of the raster's centre when ``crs`` and ``bounds``
    (left, bottom, right, top in ``crs``) allow it, else ``EPSG:326XX``.
    """
    code = "EPSG:326XX"
    if crs is not None and bounds is not None:
        try:
            from rasterio.warp import transform as warp_points

            cx, cy = (bounds[0] + bounds[2]) / 2.0, (bounds[1] + bounds[3]) / 2.0
            lon, lat = ([cx], [cy]) if crs.is_geographic else warp_points(
                crs, "EPSG:4326", [cx], [cy])
            if math.isfinite(lon[0]) and math.isfinite(lat[0]):
                code = f"EPSG:{utm_epsg(lon[0], lat[0])}"
        except (CRSError, RasterioError, ValueError):
            pass
    name = Path(path) if path is not None else Path("in.tif")
    out = name.with_name(f"{name.stem}_metres{name.suffix or '.tif'}")
    assign = " --source-crs EPSG:XXXX" if source_crs else ""
    which = ("the UTM zone of the area (EPSG:326zz north of the equator, 327zz south)"
             if code.endswith("XX") else "the UTM zone of the raster's centre")
    return (f"reproject it to a projected CRS in metres, for example {which}, with: "
            f"preyscape landscape reproject {name} {out}{assign} --crs {code}")


# --- public API ------------------------------------------------------------
def read_habitat(
    path: str | os.PathLike[str],
    kind: HabitatKind,
    cell_size: float | None = None,
    source: str | None = None,
) -> tuple[Grid, np.ndarray]:
    """Read a habitat raster (band 1) and the grid it lives on.

    Parameters
    ----------
    path : str or os.PathLike
        Any raster GDAL can read. It must have a projected CRS in metres and a
        north-up (or south-up) transform without rotation.
    kind : {"classes", "suitability"}
        ``"classes"``: integer habitat codes (non-negative; ``-1`` is reserved
        for no-data). ``"suitability"``: habitat quality in ``[0, 1]``.
    cell_size : float, optional
        Cell size of the returned grid, metres (> 0), the same in both
        directions. If given and different from the native cell size, the
        raster is resampled onto a grid with the same top-left corner and
        ``floor(extent / cell_size)`` cells per axis (the remainder strip at
        the east and south edges is dropped). Suitability uses area-weighted
        averaging of the cells with data (also when refining, where it
        reproduces the covering coarse cell). Classes use the majority (mode)
        of the cells with data, or nearest neighbour when the new cells are
        smaller than the native ones in both directions. A target cell is
        no-data only if all its sources are no-data. Default: keep the
        native cells (which may be non-square).
    source : str, optional
        Name used in error messages. Default: ``str(path)``.

    Returns
    -------
    grid : Grid
        The grid, with ``mask`` ``True`` on cells with data; ``x0``, ``y0``,
        ``dx``, ``dy`` in metres; ``crs_wkt`` the raster's CRS as WKT.
    values : numpy.ndarray
        Shape ``grid.shape``, row 0 north. float64 with NaN on no-data for
        ``"suitability"`` (dimensionless, 0–1); int32 with ``-1`` on no-data
        for ``"classes"``.

    Raises
    ------
    InputError
        If the file is missing or unreadable, has no CRS, a geographic
        (degree) CRS or a CRS not in metres, a rotated or sheared transform,
        no cells with data, suitability values outside ``[0, 1]``, class
        codes that are not non-negative integers, or an invalid ``cell_size``.
    ValueError
        If ``kind`` is not one of the two values above (a programming error).
    """
    if kind not in ("classes", "suitability"):
        raise ValueError(f"kind must be 'classes' or 'suitability', not {kind!r}")
    src_name = str(path) if source is None else source
    if cell_size is not None:
        cell_size = _check_cell_size(cell_size, src_name)

    with _open(path, src_name) as ds:
        crs = ds.crs
        _check_crs(crs, src_name, need_metres=True, path=path, bounds=_bounds(ds))
        transform = ds.transform
        _check_transform(transform, src_name, path)
        raw, valid = _read_band1(ds, src_name)

    if not valid.any():
        raise InputError(
            "the raster has no cells with data (every cell is no-data or NaN); "
            "a habitat raster needs at least one cell with a value",
            src_name,
        )
    # Check values before any flipping so that the reported row/col match the
    # file as the user sees it in a GIS.
    if kind == "suitability":
        _check_suitability(raw, valid, transform, src_name)
        values: np.ndarray = np.where(valid, raw, np.nan).astype(np.float64)
    else:
        _check_classes(raw, valid, transform, src_name)
        # Fill, then copy: np.where would cast -1 into a uint8 array as 255.
        values = np.full(raw.shape, CLASS_NODATA, dtype=np.int32)
        values[valid] = raw[valid]

    values, x0, y0, dx, dy = _north_up(values, transform)

    if cell_size is not None and not (
        math.isclose(cell_size, dx, rel_tol=_SIZE_RTOL)
        and math.isclose(cell_size, dy, rel_tol=_SIZE_RTOL)
    ):
        values = _resample_habitat(values, kind, crs, x0, y0, dx, dy, cell_size, src_name)
        dx = dy = cell_size

    valid = np.isfinite(values) if kind == "suitability" else values != CLASS_NODATA
    if not valid.any():  # only reachable after resampling, kept for safety
        raise InputError(
            f"no cells with data remain after resampling to {cell_size} m cells; "
            "use a smaller cell_size",
            src_name,
        )
    grid = Grid(values.shape, x0, y0, dx, dy, crs.to_wkt(), valid)
    return grid, values


def read_layer_onto(
    path: str | os.PathLike[str],
    grid: Grid,
    resampling: str = "average",
    source: str | None = None,
    values: Callable[[np.ndarray, np.ndarray], np.ndarray] | None = None,
) -> np.ndarray:
    """Read band 1 of a raster and align it onto ``grid``.

    The layer may have any CRS, origin and resolution: it is warped from its
    own CRS and transform onto the grid's north-up transform
    ``Affine(dx, 0, x0, 0, -dy, y0)`` and CRS (``grid.crs_wkt``).

    Parameters
    ----------
    path : str or os.PathLike
        Any raster GDAL can read, with a projected CRS and no rotation. Its
        linear unit need not be the metre, since it is reprojected anyway.
    grid : Grid
        Target grid (metres). ``grid.mask`` is ignored: values are returned
        for every cell the layer covers.
    resampling : {"average", "mode", "nearest", "bilinear"}
        GDAL resampling method. ``"average"`` is area-weighted over the source
        cells with data; ``"mode"`` is the majority value (for categories).
    source : str, optional
        Name used in error messages. Default: ``str(path)``.
    values : callable, optional
        ``values(raw, valid)`` turns band 1 and its validity mask into the
        float64 array to warp (NaN = no data). Default: the raw values, NaN
        where not valid.

    Returns
    -------
    numpy.ndarray
        float64, shape ``grid.shape``, in the layer's own units, NaN where the
        layer has no data or does not cover the cell.

    Raises
    ------
    InputError
        If the file is missing or unreadable, has no CRS or a geographic
        (degree) CRS, a rotated or sheared transform, or ``resampling`` is
        not one of the values above.
    ValueError
        If ``grid`` has no CRS (``grid.crs_wkt`` empty).
    """
    src_name = str(path) if source is None else source
    if resampling not in _RESAMPLING:
        raise InputError(
            f"resampling {resampling!r} is not supported; use one of "
            + ", ".join(repr(k) for k in _RESAMPLING),
            src_name,
        )
    if not grid.crs_wkt:
        raise ValueError("grid has no CRS (crs_wkt is empty); cannot align a layer onto it")
    dst_crs = CRS.from_wkt(grid.crs_wkt)

    with _open(path, src_name) as ds:
        src_crs = ds.crs
        _check_crs(src_crs, src_name, need_metres=False, path=path, bounds=_bounds(ds))
        src_transform = ds.transform
        _check_transform(src_transform, src_name, path)
        raw, valid = _read_band1(ds, src_name)

    # A one-cell no-data frame: GDAL's average and mode take at least one
    # source cell per target cell, so target cells that merely touch the
    # layer's edge would otherwise copy the edge cell instead of being NaN.
    data = np.where(valid, raw, np.nan) if values is None else values(raw, valid)
    src = np.pad(np.asarray(data, dtype=np.float64), 1, constant_values=np.nan)
    t = src_transform
    src_transform = Affine(t.a, t.b, t.c - t.a - t.b, t.d, t.e, t.f - t.d - t.e)
    out = np.full(grid.shape, np.nan, dtype=np.float64)
    try:
        reproject(
            source=src,
            destination=out,
            src_transform=src_transform,
            src_crs=src_crs,
            src_nodata=np.nan,
            dst_transform=_grid_transform(grid),
            dst_crs=dst_crs,
            dst_nodata=np.nan,
            resampling=_RESAMPLING[resampling],
        )
    except (RasterioError, CRSError) as exc:
        raise InputError(
            f"could not align the layer onto the habitat grid: {exc}", src_name
        ) from None
    return out


COG_MIN_CELLS = 1_000_000
"""Rasters with more cells than this are written as Cloud-Optimised GeoTIFFs (internal
512 × 512 tiles and overviews), which a GIS can pan and zoom without reading them whole."""


def write_geotiff(
    path: str | os.PathLike[str],
    grid: Grid,
    array: np.ndarray,
    nodata: float | None = None,
    dtype: str | np.dtype | None = None,
    *,
    description: str | None = None,
    units: str | None = None,
    tags: dict | None = None,
    categories: dict[int, str] | None = None,
    colours: dict[int, str] | None = None,
) -> None:
    """Write a single-band GeoTIFF on ``grid`` that explains itself in a GIS, atomically.

    The file is written to a temporary name in the same folder and then moved
    into place with :func:`os.replace`, so readers never see half a file.
    Rasters of more than :data:`COG_MIN_CELLS` cells are Cloud-Optimised
    GeoTIFFs (GDAL's COG driver: tiled, with overviews).

    Parameters
    ----------
    path : str or os.PathLike
        Output file.
    grid : Grid
        Grid giving the transform (metres) and CRS. An empty ``crs_wkt``
        writes a raster without CRS. ``grid.mask`` is not applied: put the
        no-data value into ``array`` where wanted.
    array : numpy.ndarray
        Values, shape ``grid.shape``, row 0 north. Booleans are written as
        uint8.
    nodata : float, optional
        No-data value stored in the file. Default: NaN for float data, none
        for integer data.
    dtype : str or numpy.dtype, optional
        Data type in the file. Default: the array's dtype.
    description : str, optional
        The band description a GIS shows (what the values are).
    units : str, optional
        The band's units (e.g. ``"animals per km2"``).
    tags : dict, optional
        More metadata for the file (e.g. ``source_run``), values as text.
    categories : dict, optional
        Class code to name, for class rasters: written as GDAL category names
        (codes 0, 1, 2, ...) and a raster attribute table (any codes) in the
        PAM sidecar ``<path>.aux.xml``, which GDAL (and so QGIS) reads with
        the file.
    colours : dict, optional
        Class code to colour for the attribute table (and the colour table of
        uint8 rasters).

    Raises
    ------
    ValueError
        If ``array`` does not have the grid's shape.
    """
    arr = np.asarray(array)
    if arr.shape != grid.shape:
        raise ValueError(f"array shape {arr.shape} does not match grid shape {grid.shape}")
    if arr.dtype == np.bool_:
        arr = arr.astype(np.uint8)  # GeoTIFF has no boolean type
    out_dtype = np.dtype(dtype) if dtype is not None else arr.dtype
    if nodata is None and np.issubdtype(out_dtype, np.floating):
        nodata = float("nan")

    target = Path(path)
    # A fresh name rather than mkstemp: GDAL creates the file itself with the
    # usual permissions, and a unique name keeps concurrent writers apart.
    tmp = target.with_name(f".{target.name}.{uuid.uuid4().hex}.tmp.tif")
    profile = {
        "driver": "GTiff",
        "width": grid.nx,
        "height": grid.ny,
        "count": 1,
        "dtype": out_dtype.name,
        "transform": _grid_transform(grid),
        "crs": CRS.from_wkt(grid.crs_wkt) if grid.crs_wkt else None,
        "nodata": nodata,
        "compress": "deflate",
    }
    if grid.nx * grid.ny > COG_MIN_CELLS:
        profile.update(driver="COG", blocksize=512, overviews="auto",
                       resampling="nearest" if categories else "average")
    sidecar = target.with_name(target.name + ".aux.xml")
    tmp_side = tmp.with_name(tmp.name + ".aux.xml")
    try:
        with rasterio.open(tmp, "w", **profile) as dst:
            dst.write(arr.astype(out_dtype, copy=False), 1)
            if description:
                dst.set_band_description(1, description)
            if units:
                dst.set_band_unit(1, units)
            if tags:
                dst.update_tags(**{str(k): str(v) for k, v in tags.items()})
            if colours and out_dtype == np.uint8:
                dst.write_colormap(1, _colour_table(colours))
        if categories:
            tmp_side.write_text(_pam_categories(categories, colours or {}), encoding="utf-8")
            os.replace(tmp_side, sidecar)
        elif sidecar.exists():
            sidecar.unlink()  # a stale legend of an older file must not stay beside this one
        os.replace(tmp, target)
    finally:
        for t in (tmp, tmp_side):
            if t.exists():
                t.unlink()


def _rgb255(colour: str) -> tuple[int, int, int]:
    from matplotlib.colors import to_rgb

    return tuple(int(round(255 * c)) for c in to_rgb(colour))  # type: ignore[return-value]


def _colour_table(colours: dict[int, str]) -> dict[int, tuple[int, int, int, int]]:
    return {int(k): (*_rgb255(v), 255) for k, v in colours.items() if 0 <= int(k) <= 255}


def _pam_categories(categories: dict[int, str], colours: dict[int, str]) -> str:
    """A GDAL PAM document with category names and a thematic raster attribute table.

    Category names are indexed by the pixel value from 0, so they are written
    only for non-negative codes (unused codes get an empty name); the
    attribute table (a ``value`` column of usage MinMax, a ``class`` name
    column and, with colours, Red/Green/Blue) holds any codes.
    """
    from xml.sax.saxutils import escape

    codes = sorted(int(c) for c in categories)
    lines = ["<PAMDataset>", '  <PAMRasterBand band="1">']
    if codes and codes[0] >= 0:
        names = [escape(str(categories.get(k, ""))) for k in range(codes[-1] + 1)]
        lines += ["    <CategoryNames>"] + [f"      <Category>{n}</Category>" for n in names]
        lines += ["    </CategoryNames>"]
    # field types: 0 integer, 2 string; usages: 5 MinMax, 2 Name, 6/7/8 Red/Green/Blue
    fields = [("value", 0, 5), ("class", 2, 2)]
    if colours:
        fields += [("red", 0, 6), ("green", 0, 7), ("blue", 0, 8)]
    lines.append('    <GDALRasterAttributeTable tableType="thematic">')
    for i, (name, kind, usage) in enumerate(fields):
        lines.append(f'      <FieldDefn index="{i}"><Name>{name}</Name><Type>{kind}</Type>'
                     f"<Usage>{usage}</Usage></FieldDefn>")
    for row, code in enumerate(codes):
        cells = [str(code), escape(str(categories[code]))]
        if colours:
            cells += [str(v) for v in _rgb255(colours.get(code, "#808080"))]
        lines.append(f'      <Row index="{row}">' + "".join(f"<F>{c}</F>" for c in cells)
                     + "</Row>")
    lines += ["    </GDALRasterAttributeTable>", "  </PAMRasterBand>", "</PAMDataset>", ""]
    return "\n".join(lines)


# --- helpers ---------------------------------------------------------------
def _bounds(ds: rasterio.DatasetReader) -> tuple[float, float, float, float]:
    """(left, bottom, right, top) of a raster in its CRS, from its four corners."""
    t, w, h = ds.transform, ds.width, ds.height
    xs = [t.c + t.a * c + t.b * r for c, r in ((0, 0), (w, 0), (0, h), (w, h))]
    ys = [t.f + t.d * c + t.e * r for c, r in ((0, 0), (w, 0), (0, h), (w, h))]
    return min(xs), min(ys), max(xs), max(ys)


def _grid_transform(grid: Grid) -> Affine:
    """North-up affine transform of ``grid`` (metres)."""
    return Affine(grid.dx, 0.0, grid.x0, 0.0, -grid.dy, grid.y0)


def _open(path: str | os.PathLike[str], src_name: str) -> rasterio.DatasetReader:
    """Open a raster, turning every failure into an :class:`InputError`."""
    p = Path(path)
    if not p.exists():
        raise InputError(
            f"raster file not found ({p.resolve()}); give the path of an existing "
            "raster, relative to the configuration file or absolute",
            src_name,
        )
    try:
        ds = rasterio.open(p)
    except (RasterioError, OSError) as exc:
        raise InputError(
            f"cannot read the file as a raster ({exc}); give a raster GDAL can read, "
            "e.g. a GeoTIFF",
            src_name,
        ) from None
    if ds.count < 1:
        ds.close()
        raise InputError("the raster has no bands; it needs one band of habitat values", src_name)
    return ds


def _check_crs(crs: CRS | None, src_name: str, need_metres: bool,
               path: str | os.PathLike[str] | None = None,
               bounds: tuple[float, float, float, float] | None = None) -> None:
    """Refuse a missing or geographic CRS and, if asked, non-metre units."""
    if crs is None or not crs.to_wkt():
        raise InputError(
            "the raster has no coordinate reference system (CRS); name the CRS its "
            "coordinates are in (--source-crs) and a projected CRS in metres for the copy "
            "(--crs, the same one if the coordinates already are in such a CRS): "
            + reproject_hint(path, source_crs=True).split("with: ", 1)[1],
            src_name,
        )
    if crs.is_geographic:
        raise InputError(
            f"the raster is in a geographic CRS with degree coordinates ({_crs_name(crs)}); "
            f"cell sizes must be in metres, so {reproject_hint(path, crs, bounds)}",
            src_name,
        )
    if not need_metres:
        return
    try:
        unit, factor = crs.linear_units_factor
    except CRSError:
        unit, factor = crs.linear_units, float("nan")
    if str(unit).lower() not in ("metre", "meter", "m", "metres", "meters") and not (
        math.isclose(factor, 1.0, rel_tol=1e-12)
    ):
        raise InputError(
            f"the raster's CRS ({_crs_name(crs)}) has linear unit {unit!r}, not metres; "
            f"{reproject_hint(path, crs, bounds)}",
            src_name,
        )


def _crs_name(crs: CRS) -> str:
    """Short human-readable CRS name, e.g. ``EPSG:4326``."""
    try:
        auth = crs.to_authority()
    except CRSError:
        auth = None
    return f"{auth[0]}:{auth[1]}" if auth else crs.to_string()[:80]


def _check_transform(transform: Affine, src_name: str,
                     path: str | os.PathLike[str] | None = None) -> None:
    """Refuse rotated or sheared (non axis-aligned) rasters."""
    if transform.b != 0.0 or transform.d != 0.0:
        name = Path(path) if path is not None else Path("in.tif")
        raise InputError(
            "the raster has a rotated or sheared geotransform "
            f"(row/column rotation terms {transform.b}, {transform.d}); warp it to a "
            f"north-up grid first with: preyscape landscape reproject {name} "
            f"{name.with_name(name.stem + '_north_up' + (name.suffix or '.tif'))}",
            src_name,
        )
    if transform.a == 0.0 or transform.e == 0.0:
        raise InputError("the raster's geotransform has a zero cell size", src_name)


def _read_band1(ds: rasterio.DatasetReader, src_name: str) -> tuple[np.ndarray, np.ndarray]:
    """Band 1 and its validity mask (nodata value, mask band and NaN masked)."""
    try:
        raw = ds.read(1)
        # read_masks honours the nodata value and any mask/alpha band.
        valid = ds.read_masks(1) != 0
    except (RasterioError, OSError) as exc:
        raise InputError(f"cannot read band 1 of the raster ({exc})", src_name) from None
    if np.issubdtype(raw.dtype, np.complexfloating):
        raise InputError("the raster holds complex numbers; values must be real", src_name)
    if np.issubdtype(raw.dtype, np.floating):
        valid &= ~np.isnan(raw)
    if ds.nodata is not None and not math.isnan(ds.nodata):
        valid &= raw != ds.nodata  # explicit, in case a driver ignores nodata in masks
    return raw, valid


def _cell_text(row: int, col: int, transform: Affine) -> str:
    """``row r, col c (x=…, y=… m)`` for a cell in the file's own order."""
    # Axis-aligned (checked before), so no rotation terms are needed.
    x = transform.c + transform.a * (col + 0.5)
    y = transform.f + transform.e * (row + 0.5)
    return f"row {row}, col {col} (cell centre x={x:.2f} m, y={y:.2f} m)"


def _check_suitability(
    raw: np.ndarray, valid: np.ndarray, transform: Affine, src_name: str
) -> None:
    """Refuse data values outside ``[0, 1]`` (infinities included)."""
    vals = raw.astype(np.float64, copy=False)
    with np.errstate(invalid="ignore"):
        bad = valid & ~((vals >= 0.0) & (vals <= 1.0))
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise InputError(
            f"suitability must lie in [0, 1] on every cell with data, but the cell at "
            f"{_cell_text(int(r), int(c), transform)} holds {vals[r, c]!r} "
            f"({int(bad.sum())} cells out of range); rescale the raster or mark such "
            "cells as no-data",
            src_name,
        )


def _check_classes(raw: np.ndarray, valid: np.ndarray, transform: Affine, src_name: str) -> None:
    """Refuse class codes that are not non-negative integers fitting int32."""
    if np.issubdtype(raw.dtype, np.integer):
        bad = valid & ((raw < 0) | (raw > np.iinfo(np.int32).max))
    else:
        vals = raw.astype(np.float64, copy=False)
        with np.errstate(invalid="ignore"):
            ok = np.isfinite(vals) & (vals == np.round(vals))
            ok &= (vals >= 0) & (vals <= np.iinfo(np.int32).max)
        bad = valid & ~ok
    if bad.any():
        r, c = np.argwhere(bad)[0]
        raise InputError(
            f"habitat classes must be non-negative integer codes, but the cell at "
            f"{_cell_text(int(r), int(c), transform)} holds {raw[r, c].item()!r} "
            f"({int(bad.sum())} such cells); use an integer raster of class codes, or "
            "kind 'suitability' for values in [0, 1]",
            src_name,
        )


def _north_up(
    values: np.ndarray, transform: Affine
) -> tuple[np.ndarray, float, float, float, float]:
    """Flip a south-up (or east-to-west) array so row 0 is north, col 0 west.

    Returns the array and ``x0, y0`` (top-left corner, metres) and positive
    ``dx, dy`` (metres).
    """
    rows, cols = values.shape
    x0, y0 = transform.c, transform.f
    dx, dy = transform.a, -transform.e
    if dy < 0:  # south-up: row 0 is the south edge
        values = values[::-1, :]
        y0 = transform.f + transform.e * rows
        dy = -dy
    if dx < 0:  # columns run east to west
        values = values[:, ::-1]
        x0 = transform.c + transform.a * cols
        dx = -dx
    return np.ascontiguousarray(values), float(x0), float(y0), float(dx), float(dy)


def _check_cell_size(cell_size: float, src_name: str) -> float:
    """A positive, finite cell size in metres."""
    try:
        cs = float(cell_size)
    except (TypeError, ValueError):
        raise InputError(
            f"cell_size must be a number of metres, not {cell_size!r}", src_name
        ) from None
    if not math.isfinite(cs) or cs <= 0:
        raise InputError(
            f"cell_size must be a positive number of metres, not {cell_size!r}", src_name
        )
    return cs


def _resample_habitat(
    values: np.ndarray,
    kind: HabitatKind,
    crs: CRS,
    x0: float,
    y0: float,
    dx: float,
    dy: float,
    cell_size: float,
    src_name: str,
) -> np.ndarray:
    """Resample a north-up habitat array onto square ``cell_size`` cells (metres)."""
    rows, cols = values.shape
    # The small epsilon keeps e.g. 60 m / 20 m from flooring to 2 through float noise.
    new_rows = math.floor(rows * dy / cell_size + 1e-9)
    new_cols = math.floor(cols * dx / cell_size + 1e-9)
    if new_rows < 1 or new_cols < 1:
        raise InputError(
            f"cell_size {cell_size} m is larger than the raster's extent "
            f"({cols * dx:g} m x {rows * dy:g} m); use a smaller cell_size",
            src_name,
        )
    if kind == "suitability":
        # Average is area-weighted and skips no-data sources, so a target cell is
        # no-data only if all its sources are; it also keeps values in [0, 1].
        method, fill = Resampling.average, np.nan
        out = np.full((new_rows, new_cols), np.nan, dtype=np.float64)
    else:
        # Majority keeps codes valid; on refinement every target cell lies in
        # (mostly) one source cell, where nearest is the exact answer.
        finer = cell_size < dx and cell_size < dy
        method = Resampling.nearest if finer else Resampling.mode
        fill = CLASS_NODATA
        out = np.full((new_rows, new_cols), CLASS_NODATA, dtype=np.int32)
    try:
        reproject(
            source=values,
            destination=out,
            src_transform=Affine(dx, 0.0, x0, 0.0, -dy, y0),
            src_crs=crs,
            src_nodata=fill,
            dst_transform=Affine(cell_size, 0.0, x0, 0.0, -cell_size, y0),
            dst_crs=crs,
            dst_nodata=fill,
            resampling=method,
        )
    except (RasterioError, CRSError) as exc:
        raise InputError(f"could not resample to {cell_size} m cells: {exc}", src_name) from None
    return out
