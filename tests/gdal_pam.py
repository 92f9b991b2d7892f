"""Read what GDAL itself sees of a GeoTIFF's legend: category names and attribute table.

rasterio has no API for category names or raster attribute tables, so these
helpers call the GDAL C library that rasterio loads (``rasterio.libs``) through
ctypes: the same library, and so the same reading, as rasterio's own and as a
GDAL-based GIS. GDAL loads a GeoTIFF's PAM sidecar (``.aux.xml``) when the
georeferencing is first asked for, as a GIS does on opening a layer; the
helper does the same before asking for the legend.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import glob
import os
from functools import cache

import rasterio


@cache
def _gdal() -> ctypes.CDLL:
    libs = os.path.dirname(rasterio.__file__) + ".libs"
    found = sorted(glob.glob(os.path.join(libs, "libgdal*.so*")))
    if not found:  # a rasterio built against a system GDAL
        found = [ctypes.util.find_library("gdal")]
    g = ctypes.CDLL(found[0])
    vp, ip, cp = ctypes.c_void_p, ctypes.c_int, ctypes.c_char_p
    for name, res, args in (
        ("GDALOpen", vp, [cp, ip]), ("GDALGetRasterBand", vp, [vp, ip]),
        ("GDALGetGeoTransform", ip, [vp, ctypes.POINTER(ctypes.c_double)]),
        ("GDALGetRasterCategoryNames", ctypes.POINTER(cp), [vp]),
        ("GDALGetDefaultRAT", vp, [vp]), ("GDALRATGetRowCount", ip, [vp]),
        ("GDALRATGetColumnCount", ip, [vp]), ("GDALRATGetNameOfCol", cp, [vp, ip]),
        ("GDALRATGetValueAsString", cp, [vp, ip, ip]), ("GDALClose", None, [vp]),
    ):
        f = getattr(g, name)
        f.restype, f.argtypes = res, args
    g.GDALAllRegister()
    return g


def legend(path) -> tuple[list[str], list[dict[str, str]]]:
    """The category names and the attribute table rows (column name -> text) of band 1."""
    g = _gdal()
    h = g.GDALOpen(os.fsencode(path), 0)
    if not h:
        raise OSError(f"GDAL cannot open {path}")
    try:
        g.GDALGetGeoTransform(h, (ctypes.c_double * 6)())  # loads the PAM sidecar
        band = g.GDALGetRasterBand(h, 1)
        names, p, i = [], g.GDALGetRasterCategoryNames(band), 0
        while p and p[i] is not None:
            names.append(p[i].decode())
            i += 1
        rows = []
        rat = g.GDALGetDefaultRAT(band)
        if rat:
            cols = [g.GDALRATGetNameOfCol(rat, c).decode()
                    for c in range(g.GDALRATGetColumnCount(rat))]
            rows = [{c: g.GDALRATGetValueAsString(rat, r, k).decode()
                     for k, c in enumerate(cols)} for r in range(g.GDALRATGetRowCount(rat))]
        return names, rows
    finally:
        g.GDALClose(h)
