"""Habitat rasters, JSON and GeoJSON files of the landscape tools.

Every file is written under a temporary name in its folder and renamed into
place with :func:`os.replace` only when all files of a step are complete
(:func:`staged`), and an existing file is refused unless ``overwrite`` is
set. Habitat rasters are written the way :func:`preyscape.landscape.io.read_habitat`
reads them:

* classes: int16 (int32 for codes above 32767) with no-data ``-1``
  (:data:`~preyscape.landscape.io.CLASS_NODATA`);
* suitability: float32 in [0, 1] with no-data NaN.

Class names and suggested prey-capacity multipliers travel with a class
raster as band tags ``CLASS_<code>`` and ``QUALITY_<code>`` (GDAL metadata,
visible in any GIS), so a starter scenario can name the classes.
"""

from __future__ import annotations

import json
import math
import os
import uuid
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Literal

import numpy as np

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid

__all__ = [
    "HabitatRaster",
    "crs_name",
    "guess_values",
    "metrics_path",
    "projected_in_metres",
    "read_raster",
    "refuse_existing",
    "staged",
    "write_geojson",
    "write_habitat",
    "write_text",
]

Values = Literal["classes", "suitability"]


def refuse_existing(path: str | os.PathLike[str], overwrite: bool, what: str = "file") -> None:
    """Refuse to replace an existing file unless asked; check the folder exists.

    Raises
    ------
    InputError
        If ``path`` exists and ``overwrite`` is false, if it is a folder, or
        if its folder does not exist.
    """
    p = Path(path)
    if p.is_dir():
        raise InputError(f"{what} path is a folder; give a file name", str(p))
    if p.exists() and not overwrite:
        raise InputError(f"{what} exists; pass --overwrite to replace it", str(p))
    if not p.parent.is_dir():
        raise InputError(f"folder {p.parent} does not exist; create it first or give another "
                         "path", str(p))


@contextmanager
def staged(targets: list[Path], overwrite: bool, what: str = "file") -> Iterator[list[Path]]:
    """Temporary names for ``targets``, renamed onto them when the block succeeds.

    Every target is checked with :func:`refuse_existing` before the block
    runs. If the block raises, no target is touched and the temporary files
    are removed.

    Yields
    ------
    list of pathlib.Path
        One hidden temporary path per target, in the same folder.
    """
    targets = [Path(t) for t in targets]
    for t in targets:
        refuse_existing(t, overwrite, what)
    token = uuid.uuid4().hex[:12]
    tmps = [t.with_name(f".{t.name}.{token}.tmp{t.suffix}") for t in targets]
    try:
        yield tmps
        for tmp, t in zip(tmps, targets, strict=True):
            os.replace(tmp, t)
    finally:
        for tmp in tmps:
            for leftover in (tmp, tmp.with_name(tmp.name + ".aux.xml")):
                if leftover.exists():
                    leftover.unlink()


def write_text(path: str | os.PathLike[str], text: str, overwrite: bool = False) -> None:
    """Write a UTF-8 text file atomically (temporary name, then rename).

    Raises
    ------
    InputError
        As :func:`refuse_existing`.
    """
    with staged([Path(path)], overwrite) as (tmp,):
        tmp.write_text(text, encoding="utf-8")


def metrics_path(raster: str | os.PathLike[str]) -> Path:
    """The metrics file beside a raster: ``map.tif`` → ``map.metrics.json``."""
    p = Path(raster)
    return p.with_name(p.stem + ".metrics.json")


def projected_in_metres(crs) -> bool:
    """Whether a rasterio CRS is projected with the metre as linear unit."""
    from rasterio.errors import CRSError

    if crs is None or not crs.is_projected:
        return False
    try:
        unit, factor = crs.linear_units_factor
    except CRSError:
        return False
    return str(unit).lower() in ("metre", "meter", "m", "metres", "meters") or math.isclose(
        factor, 1.0)


def crs_name(crs_wkt: str) -> str:
    """Short name of a CRS, ``EPSG:3035`` where it has an EPSG code."""
    from rasterio.crs import CRS

    if not crs_wkt:
        return "no CRS"
    crs = CRS.from_wkt(crs_wkt)
    epsg = crs.to_epsg()
    return f"EPSG:{epsg}" if epsg else crs.to_string()[:80]


# --- reading ----------------------------------------------------------------
def guess_values(path: str | os.PathLike[str], source: str | None = None) -> Values:
    """Whether a raster holds habitat classes or suitability.

    Integer rasters hold classes. Floating-point rasters hold suitability when
    their values lie in [0, 1] and are not all whole numbers, and classes when
    every value is a whole number (a 0/1 raster counts as classes).

    Raises
    ------
    InputError
        If the file cannot be read, has no cells with data, or holds
        fractional values outside [0, 1] (neither kind).
    """
    import rasterio
    from rasterio.errors import RasterioError

    src = str(path) if source is None else source
    if not Path(path).exists():
        raise InputError(f"raster file not found ({Path(path).resolve()})", src)
    try:
        with rasterio.open(path) as ds:
            raw = ds.read(1)
            valid = ds.read_masks(1) != 0
            nodata = ds.nodata
    except (RasterioError, OSError) as exc:
        raise InputError(f"cannot read the file as a raster ({exc}); give a GeoTIFF or "
                         "another raster GDAL can read", src) from None
    if np.issubdtype(raw.dtype, np.integer):
        return "classes"
    vals = raw.astype(np.float64)
    valid &= np.isfinite(vals)
    if nodata is not None and not math.isnan(nodata):
        valid &= vals != nodata
    vals = vals[valid]
    if vals.size == 0:
        raise InputError("the raster has no cells with data", src)
    if np.all(vals == np.round(vals)):
        return "classes"
    if vals.min() >= 0.0 and vals.max() <= 1.0:
        return "suitability"
    raise InputError(
        f"the raster holds fractional values from {vals.min():g} to {vals.max():g}: neither "
        "suitability (0 to 1) nor whole-number class codes; rescale it to [0, 1] or give "
        "integer class codes", src)


class HabitatRaster:
    """A habitat raster read onto its grid, with its class names.

    Attributes
    ----------
    grid : Grid
        The grid (metres), mask ``True`` on cells with data.
    values : numpy.ndarray
        int32 class codes with ``-1`` on no-data, or float64 suitability with
        NaN on no-data; row 0 north.
    kind : {"classes", "suitability"}
        What the raster holds.
    names : dict of int to str
        Class names from ``CLASS_<code>`` band tags (may be empty).
    quality : dict of int to float
        Suggested prey-capacity multipliers from ``QUALITY_<code>`` tags.
    tags : dict of str to str
        The raster's dataset tags.
    """

    def __init__(self, grid: Grid, values: np.ndarray, kind: Values,
                 names: dict[int, str], quality: dict[int, float], tags: dict[str, str]):
        self.grid, self.values, self.kind = grid, values, kind
        self.names, self.quality, self.tags = names, quality, tags

    def class_counts(self) -> dict[int, int]:
        """Cells with data per class code, in code order (classes only)."""
        if self.kind != "classes":
            raise ValueError("class_counts applies to class rasters")
        codes, counts = np.unique(self.values[self.grid.mask], return_counts=True)
        return {int(c): int(n) for c, n in zip(codes, counts, strict=True)}


def read_raster(
    path: str | os.PathLike[str], values: Values | None = None, source: str | None = None
) -> HabitatRaster:
    """Read a habitat raster with :func:`~preyscape.landscape.io.read_habitat` and its tags.

    Parameters
    ----------
    path : str or os.PathLike
        The raster (projected CRS in metres, as ``read_habitat`` requires).
    values : {"classes", "suitability"}, optional
        What it holds. Default: :func:`guess_values`.
    source : str, optional
        Name used in error messages. Default: ``str(path)``.

    Raises
    ------
    InputError
        As :func:`guess_values` and ``read_habitat``.
    """
    import rasterio

    from preyscape.landscape.io import read_habitat

    src = str(path) if source is None else source
    kind = values or guess_values(path, src)
    grid, arr = read_habitat(path, kind, source=src)
    names: dict[int, str] = {}
    quality: dict[int, float] = {}
    with rasterio.open(path) as ds:
        band = ds.tags(1)
        tags = ds.tags()
    for key, text in band.items():
        head, _, code = key.partition("_")
        if not code.isdigit():
            continue
        if head == "CLASS":
            names[int(code)] = str(text)
        elif head == "QUALITY":
            try:
                q = float(text)
            except ValueError:
                continue
            if math.isfinite(q) and q >= 0:
                quality[int(code)] = q
    return HabitatRaster(grid, arr, kind, names, quality, tags)


# --- writing ----------------------------------------------------------------
def write_habitat(
    path: str | os.PathLike[str],
    grid: Grid,
    values: np.ndarray,
    kind: Values,
    *,
    names: Mapping[int, str] | None = None,
    quality: Mapping[int, float] | None = None,
    tags: Mapping[str, str] | None = None,
) -> None:
    """Write a habitat raster that ``read_habitat`` reads back unchanged.

    ``path`` is written in place (use it inside :func:`staged`). No-data
    cells are those outside ``grid.mask``.

    Parameters
    ----------
    path : str or os.PathLike
        Output GeoTIFF.
    grid : Grid
        Grid (metres, CRS) and data mask.
    values : numpy.ndarray
        Class codes (non-negative integers) or suitability (0–1), shape
        ``grid.shape``, row 0 north.
    kind : {"classes", "suitability"}
        What ``values`` holds.
    names, quality : mapping, optional
        Class names and suggested prey-capacity multipliers, written as band
        tags ``CLASS_<code>`` and ``QUALITY_<code>``.
    tags : mapping, optional
        Dataset tags (provenance: how the raster was made).
    """
    import rasterio

    from preyscape.landscape.io import CLASS_NODATA, write_geotiff

    mask = grid.mask
    if kind == "classes":
        arr = np.asarray(values)
        top = int(arr[mask].max()) if mask.any() else 0
        dtype = "int16" if top <= np.iinfo(np.int16).max else "int32"
        out = np.where(mask, arr.astype(np.int64), CLASS_NODATA).astype(dtype)
        write_geotiff(path, grid, out, nodata=CLASS_NODATA, dtype=dtype)
    else:
        out = np.where(mask, np.asarray(values, dtype=np.float64), np.nan).astype(np.float32)
        write_geotiff(path, grid, out, nodata=float("nan"), dtype="float32")
    band = {f"CLASS_{c}": str(n) for c, n in (names or {}).items()}
    band.update({f"QUALITY_{c}": repr(float(q)) for c, q in (quality or {}).items()})
    if band or tags:
        with rasterio.open(path, "r+") as ds:
            if tags:
                ds.update_tags(**{str(k): str(v) for k, v in tags.items()})
            if band:
                ds.update_tags(1, **band)
                ds.set_band_description(1, "habitat class" if kind == "classes"
                                        else "habitat suitability (0-1)")


def write_geojson(
    path: str | os.PathLike[str],
    features: list[tuple[Any, dict[str, Any]]],
    crs_wkt: str,
) -> None:
    """Write a GeoJSON FeatureCollection in the grid's CRS (in place).

    The coordinates are metres of the grid's CRS, not longitude/latitude, so
    the file carries the legacy top-level ``"crs"`` member naming that CRS
    (as ``urn:ogc:def:crs:EPSG::<code>``) where it has an EPSG code: GIS
    software and :func:`preyscape.landscape.measures.read_geometry` then read
    it correctly.

    Parameters
    ----------
    path : str or os.PathLike
        Output file.
    features : list of (shapely geometry, properties)
        Geometries in metres of the grid's CRS and their properties.
    crs_wkt : str
        The grid's CRS.
    """
    import shapely
    from rasterio.crs import CRS

    doc: dict[str, Any] = {"type": "FeatureCollection"}
    epsg = CRS.from_wkt(crs_wkt).to_epsg() if crs_wkt else None
    if epsg:
        doc["crs"] = {"type": "name", "properties": {"name": f"urn:ogc:def:crs:EPSG::{epsg}"}}
    doc["features"] = [
        {"type": "Feature", "properties": props,
         "geometry": json.loads(shapely.to_geojson(geom))}
        for geom, props in features
    ]
    Path(path).write_text(json.dumps(doc, indent=1) + "\n", encoding="utf-8")
