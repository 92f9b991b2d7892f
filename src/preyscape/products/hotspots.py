"""Hotspot product: Gi* rasters, hotspot classes, persistence, maps and a table.

:func:`write_hotspots` runs :func:`preyscape.analysis.hotspots.hotspots_of_run`
for both species of a run folder and writes, into a new output folder::

    prey_gi_star.tif                  Gi* z-score of the time-mean density (float32, NaN)
    prey_hotspot_class.tif            int8: 1 hot, -1 cold, 0 neither, -128 no data
    prey_hotspot_persistence.tif      share of snapshots as hotspot, 0-1 (float32, NaN)
    prey_hotspots.png                 map of Gi* with significant cells marked
    prey_hotspot_persistence.png      map of the persistence
    (the same for predator)
    hotspots.csv                      one row per species (see below)
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.errors import InputError
from preyscape.products import output_folder, write_csv

SPECIES = ("prey", "predator")
CLASS_NODATA = -128

CSV_HEADER = [
    "species", "band_m", "alpha", "n_cells", "hot_cells", "cold_cells", "hot_area_km2",
    "hot_share_of_animals",
]


def _common_name(ds, sp: str) -> str:
    # long_name reads "prey density (field vole), animals per km2"
    m = re.search(r"\(([^)]*)\)", str(ds[sp].attrs.get("long_name", "")))
    return m.group(1) if m and m.group(1) and m.group(1) != sp else ""


def write_hotspots(
    run_folder: Path,
    out: Path,
    band_m: float | None = None,
    alpha: float = 0.05,
    overwrite: bool = False,
) -> dict[str, Any]:
    """Hotspot analysis of both species of a run, written into ``out``.

    Each species' time-mean density (snapshots after the start) is tested
    with Getis–Ord Gi* and a two-sided Benjamini–Hochberg FDR test; each
    snapshot after the start is tested the same way for the persistence.

    Parameters
    ----------
    run_folder : pathlib.Path
        A run folder holding ``results.nc``.
    out : pathlib.Path
        The output folder to create (atomically).
    band_m : float, optional
        Neighbourhood radius, metres. Default:
        :func:`preyscape.analysis.hotspots.default_band_m` of the run grid.
    alpha : float
        False discovery rate, 0 < alpha < 1.
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    dict
        ``band_m`` (metres), ``alpha``, ``species``: per species ``name``,
        ``n_cells``, ``hot_cells``, ``cold_cells``, ``hot_area_km2`` (km²),
        ``hot_share_of_animals`` (0–1, share of the time-mean animals on hot
        cells); ``maps``: PNG paths relative to ``out``; ``rasters``:
        GeoTIFF paths relative to ``out``; ``table``: ``"hotspots.csv"``.

    Raises
    ------
    InputError
        If ``run_folder`` holds no ``results.nc``, ``band_m`` is not a
        positive distance, ``alpha`` is not between 0 and 1, or ``out``
        exists and ``overwrite`` is False.
    """
    import xarray as xr

    from preyscape.analysis.hotspots import default_band_m, hotspots_of_run
    from preyscape.landscape.io import write_geotiff
    from preyscape.plots.hotspots import hotspot_map, persistence_map
    from preyscape.store import grid_of

    results = Path(run_folder) / "results.nc"
    if not results.is_file():
        raise InputError("no results.nc here; give the folder of a finished run",
                         str(run_folder))
    if band_m is not None and not (np.isfinite(band_m) and band_m > 0):
        raise InputError(f"hotspot band must be a positive distance in metres, got {band_m}",
                         "band_m")
    if not 0.0 < alpha < 1.0:
        raise InputError(f"alpha (false discovery rate) must lie between 0 and 1, got {alpha}",
                         "alpha")
    out = Path(out)
    summary: dict[str, Any] = {"alpha": float(alpha), "species": {}, "maps": [],
                               "rasters": [], "table": "hotspots.csv"}
    rows = []
    with xr.open_dataset(results, decode_times=False) as ds, \
            output_folder(out, overwrite) as tmp:
        grid = grid_of(ds)
        band = default_band_m(grid) if band_m is None else float(band_m)
        summary["band_m"] = band
        for sp in SPECIES:
            res = hotspots_of_run(ds, sp, band, alpha, persistent=True)
            name = _common_name(ds, sp)
            label = f"{sp} ({name})" if name else sp
            z = res["gi_star"].values
            hot = res["hot"].values
            cold = res["cold"].values
            data = grid.mask & np.isfinite(z)
            for fname, arr, kw in (
                (f"{sp}_gi_star.tif", np.where(data, z, np.nan).astype(np.float32), {}),
                (f"{sp}_hotspot_class.tif", res["hotspot_class"].values,
                 {"nodata": CLASS_NODATA, "dtype": "int8"}),
                (f"{sp}_hotspot_persistence.tif",
                 np.where(data, res["persistence"].values, np.nan).astype(np.float32), {}),
            ):
                write_geotiff(tmp / fname, grid, arr, **kw)
                summary["rasters"].append(fname)
            maps = [
                hotspot_map(grid, z, hot, cold,
                            f"Hotspots of time-mean {label}\nGi*, band {band:g} m, "
                            f"FDR {alpha:g}", tmp / f"{sp}_hotspots.png"),
                persistence_map(grid, res["persistence"].values,
                                f"Hotspot persistence of {label}\n"
                                f"{res.attrs['snapshots']} snapshots, band {band:g} m",
                                tmp / f"{sp}_hotspot_persistence.png"),
            ]
            summary["maps"] += [p.name for p in maps]
            mean = res["mean"].values
            total = float(np.sum(mean, where=data))
            on_hot = float(np.sum(mean, where=data & hot))
            stats = {
                "name": name,
                "n_cells": int(data.sum()),
                "hot_cells": int(hot.sum()),
                "cold_cells": int(cold.sum()),
                "hot_area_km2": float(hot.sum() * grid.cell_area_km2),
                # equal cell areas: the share of animals is the share of summed densities
                "hot_share_of_animals": on_hot / total if total > 0 else 0.0,
            }
            summary["species"][sp] = stats
            rows.append([sp, band, float(alpha), stats["n_cells"], stats["hot_cells"],
                         stats["cold_cells"], stats["hot_area_km2"],
                         stats["hot_share_of_animals"]])
        write_csv(tmp / "hotspots.csv", CSV_HEADER, rows)
    return summary
