"""Reproject a habitat raster onto a north-up grid in a projected CRS in metres.

preyscape needs habitat rasters in a projected CRS whose unit is the metre,
without rotation. This module warps any raster GDAL reads (in degrees, feet,
rotated, or without a CRS when the user names it) onto such a grid, with
:func:`rasterio.warp.reproject`:

* habitat classes with nearest-neighbour resampling, or the majority (mode)
  of the source cells when the new cells are larger than the old ones, so
  every cell keeps a code that occurs in the source;
* suitability with bilinear interpolation when the new cells are smaller,
  and area-weighted averaging when they are larger, so values stay in
  [0, 1].

The new grid's corners lie on whole multiples of the cell size, and it covers
the whole source extent; cells beyond the source are no-data.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np

from preyscape.errors import InputError
from preyscape.landscape.files import Values

__all__ = ["reproject_habitat", "target_crs"]


def target_crs(text: str | None, src_crs, bounds: tuple[float, float, float, float],
               source: str):
    """The CRS to reproject into: ``text``, else a sensible default.

    The default is the source CRS when it is already projected in metres
    (the raster is only rotated), else the WGS 84 UTM zone of the raster's
    centre.

    Raises
    ------
    InputError
        If ``text`` is not a CRS pyproj knows, or not projected in metres.
    """
    from rasterio.crs import CRS
    from rasterio.errors import CRSError
    from rasterio.warp import transform as warp_points

    from preyscape.landscape import files
    from preyscape.landscape.io import utm_epsg

    if text is None:
        if files.projected_in_metres(src_crs):
            return src_crs
        cx, cy = (bounds[0] + bounds[2]) / 2.0, (bounds[1] + bounds[3]) / 2.0
        lon, lat = ([cx], [cy]) if src_crs.is_geographic else warp_points(
            src_crs, "EPSG:4326", [cx], [cy])
        return CRS.from_epsg(utm_epsg(lon[0], lat[0]))
    try:
        crs = CRS.from_user_input(text)
    except CRSError as exc:
        raise InputError(f"--crs {text!r} is not a coordinate reference system ({exc}); give "
                         "e.g. EPSG:32633", source) from None
    if not files.projected_in_metres(crs):
        raise InputError(f"--crs {text} is not a projected CRS in metres; give one such as the "
                         "UTM zone of the area (EPSG:326zz north, 327zz south of the equator) "
                         "or an equal-area CRS (EPSG:3035 in Europe)", source)
    return crs


def reproject_habitat(
    src: str | os.PathLike[str],
    out: str | os.PathLike[str],
    *,
    values: Values | None = None,
    crs: str | None = None,
    cell_size: float | None = None,
    source_crs: str | None = None,
    overwrite: bool = False,
) -> dict:
    """Reproject a habitat raster into ``out`` (GeoTIFF), with its metrics beside it.

    Parameters
    ----------
    src : str or os.PathLike
        Any raster GDAL can read: band 1 holds class codes or suitability.
    out : str or os.PathLike
        The GeoTIFF to write; ``out``'s ``.metrics.json`` is written too.
    values : {"classes", "suitability"}, optional
        What the raster holds. Default: guessed (see
        :func:`preyscape.landscape.files.guess_values`).
    crs : str, optional
        Target CRS, anything pyproj accepts (``"EPSG:32633"``); projected, in
        metres. Default: the source CRS if it is projected in metres, else the
        WGS 84 UTM zone of the raster's centre.
    cell_size : float, optional
        Square cell size of the new grid, metres. Default: GDAL's estimate of
        the source resolution in the target CRS, rounded to two significant
        digits.
    source_crs : str, optional
        The CRS of the source coordinates, for a raster without one (or to
        override a wrong one).
    overwrite : bool
        Replace existing output files.

    Returns
    -------
    dict
        ``out``, ``metrics`` (path), ``crs``, ``cell_size_m``, ``shape``,
        ``kind``, ``resampling`` and the ``metrics`` numbers
        (:func:`preyscape.landscape.metrics.landscape_metrics`).

    Raises
    ------
    InputError
        For unreadable input, a missing source CRS, an invalid target CRS or
        cell size, values of neither kind, or a result without data cells.
    """
    import rasterio
    from affine import Affine
    from rasterio.crs import CRS
    from rasterio.errors import CRSError, RasterioError
    from rasterio.warp import Resampling, calculate_default_transform, reproject, transform_bounds

    from preyscape.landscape import files
    from preyscape.landscape.grid import Grid
    from preyscape.landscape.io import CLASS_NODATA, read_habitat
    from preyscape.landscape.metrics import landscape_metrics

    src_p, out_p = Path(src), Path(out)
    name = str(src_p)
    if src_p.resolve() == out_p.resolve():
        raise InputError("the output must be a new file, not the input raster", str(out_p))
    files.refuse_existing(out_p, overwrite)
    files.refuse_existing(files.metrics_path(out_p), overwrite)
    kind = values or files.guess_values(src_p, name)
    if cell_size is not None and not (math.isfinite(cell_size) and cell_size > 0):
        raise InputError(f"--cell-size must be a positive number of metres, not {cell_size!r}",
                         name)
    try:
        with rasterio.open(src_p) as ds:
            raw = ds.read(1)
            valid = ds.read_masks(1) != 0
            nodata = ds.nodata
            s_crs = ds.crs
            s_tf = ds.transform
            height, width = ds.height, ds.width
            band_tags, tags = ds.tags(1), ds.tags()
    except (RasterioError, OSError) as exc:
        raise InputError(f"cannot read the file as a raster ({exc})", name) from None
    if source_crs is not None:
        try:
            s_crs = CRS.from_user_input(source_crs)
        except CRSError as exc:
            raise InputError(f"--source-crs {source_crs!r} is not a coordinate reference system "
                             f"({exc})", name) from None
    if s_crs is None or not s_crs.to_wkt():
        raise InputError("the raster has no CRS: name the CRS its coordinates are in with "
                         "--source-crs (e.g. --source-crs EPSG:4326 for longitude/latitude)",
                         name)

    # source values: float64 with NaN (suitability) or int32 with -1 (classes)
    if np.issubdtype(raw.dtype, np.floating):
        valid &= np.isfinite(raw)
    if nodata is not None and not math.isnan(nodata):
        valid &= raw != nodata
    if kind == "classes":
        vals = raw.astype(np.float64)
        bad = valid & ~((vals == np.round(vals)) & (vals >= 0) & (vals < 2**31 - 1))
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise InputError(f"class codes must be non-negative whole numbers; row {r}, col {c} "
                             f"holds {raw[r, c]!r} (use --values suitability for values in "
                             "[0, 1])", name)
        # fill, then copy: np.where would turn -1 into 255 in a uint8 array
        data = np.full(raw.shape, CLASS_NODATA, dtype=np.int32)
        data[valid] = raw[valid]
        fill: float = CLASS_NODATA
    else:
        vals = raw.astype(np.float64)
        bad = valid & ~((vals >= 0) & (vals <= 1))
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise InputError(f"suitability must lie in [0, 1]; row {r}, col {c} holds "
                             f"{raw[r, c]!r}", name)
        data = np.where(valid, vals, np.nan)
        fill = float("nan")
    if not valid.any():
        raise InputError("the raster has no cells with data", name)

    corners = [(s_tf.a * c + s_tf.b * r + s_tf.c, s_tf.d * c + s_tf.e * r + s_tf.f)
               for c, r in ((0, 0), (width, 0), (0, height), (width, height))]
    xs, ys = zip(*corners, strict=True)
    s_bounds = (min(xs), min(ys), max(xs), max(ys))
    try:
        d_crs = target_crs(crs, s_crs, s_bounds, name)
        left, bottom, right, top = transform_bounds(s_crs, d_crs, *s_bounds, densify_pts=21)
        est_tf, _, _ = calculate_default_transform(s_crs, d_crs, width, height, *s_bounds)
    except (CRSError, RasterioError, ValueError) as exc:
        raise InputError(f"cannot transform the raster's extent into the target CRS ({exc})",
                         name) from None
    native = min(abs(est_tf.a), abs(est_tf.e))
    cs = float(cell_size) if cell_size is not None else float(f"{native:.2g}")
    x0 = math.floor(left / cs) * cs
    y0 = math.ceil(top / cs) * cs
    nx = max(1, math.ceil((right - x0) / cs - 1e-9))
    ny = max(1, math.ceil((y0 - bottom) / cs - 1e-9))
    if nx * ny > 50_000_000:
        raise InputError(f"{cs:g} m cells would make a grid of {ny} x {nx} cells; choose a "
                         "larger --cell-size", name)
    coarser = cs > native * 1.01
    if kind == "classes":
        method = "mode" if coarser else "nearest"
        dst = np.full((ny, nx), CLASS_NODATA, dtype=np.int32)
    else:
        method = "average" if coarser else "bilinear"
        dst = np.full((ny, nx), np.nan, dtype=np.float64)
    d_tf = Affine(cs, 0.0, x0, 0.0, -cs, y0)
    try:
        reproject(source=data, destination=dst, src_transform=s_tf, src_crs=s_crs,
                  src_nodata=fill, dst_transform=d_tf, dst_crs=d_crs, dst_nodata=fill,
                  resampling=getattr(Resampling, method))
    except (CRSError, RasterioError) as exc:
        raise InputError(f"could not reproject the raster: {exc}", name) from None
    mask = dst != CLASS_NODATA if kind == "classes" else np.isfinite(dst)
    if not mask.any():
        raise InputError("no cells with data remain after reprojecting; check --source-crs and "
                         "--cell-size", name)
    if kind == "suitability":
        dst = np.clip(dst, 0.0, 1.0)  # interpolation can stray by rounding only
    grid = Grid((ny, nx), x0, y0, cs, cs, d_crs.to_wkt(), mask)
    names = {int(k.split("_", 1)[1]): v for k, v in band_tags.items()
             if k.startswith("CLASS_") and k.split("_", 1)[1].isdigit()}
    quality = {int(k.split("_", 1)[1]): float(v) for k, v in band_tags.items()
               if k.startswith("QUALITY_") and k.split("_", 1)[1].isdigit()
               and _is_number(v)}
    tags = dict(tags)
    tags["PREYSCAPE_REPROJECTED_FROM"] = f"{src_p.name} ({files.crs_name(s_crs.to_wkt())}), " \
                                         f"{method} resampling"
    metrics = landscape_metrics(grid, dst, kind, names=names)
    m_path = files.metrics_path(out_p)
    with files.staged([out_p, m_path], overwrite) as (tif, js):
        files.write_habitat(tif, grid, dst, kind, names=names, quality=quality, tags=tags)
        read_habitat(tif, kind, source=str(out_p))  # what preyscape will read
        js.write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
    return {"out": out_p, "metrics_file": m_path, "crs": files.crs_name(d_crs.to_wkt()),
            "cell_size_m": cs, "shape": (ny, nx), "kind": kind, "resampling": method,
            "metrics": metrics}


def _is_number(text: str) -> bool:
    try:
        return math.isfinite(float(text))
    except ValueError:
        return False
