"""Compare two run folders: difference maps, change classes, zone table, totals.

Run A is the reference and run B the variant; every difference is B − A.
Both runs must lie on the same grid (see
:func:`preyscape.analysis.compare.check_same_grid`); their snapshot times may
differ, each run's statistics being taken over its own snapshots after the
start. The output folder holds::

    prey_mean_difference.tif/.png          time-mean density, B − A (animals/km²)
    predator_mean_difference.tif/.png
    prey_persistence_difference.tif/.png   persistence, B − A (fraction of snapshots)
    predator_persistence_difference.tif/.png
    prey_relative_change.tif               (B − A)/A where A >= presence
    predator_relative_change.tif
    change.tif, change.png                 0 none, 1 prey only, 2 predator only,
                                           3 both, -1 no data (int8)
    zones.csv                              per zone and species: A, B and B − A
    totals.png                             landscape totals of both runs
    comparison.json                        settings, runs, changed cells and areas
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from preyscape.analysis.compare import (
    CHANGE_CODES,
    CHANGE_THRESHOLD,
    PRESENCE,
    ZONE_STATISTICS,
    compare_runs,
    data_mask,
    used_snapshots,
    zone_table,
)
from preyscape.errors import InputError
from preyscape.store import SPECIES, grid_of, open_run, write_json

POLYGON_SUFFIXES = (".geojson", ".json")
"""Zone files read as polygons; any other file is read as a class raster."""


def _codes_to_labels(values: np.ndarray, valid: np.ndarray, prefix: str,
                     source: str) -> tuple[np.ndarray, list[str]]:
    """Integer labels 0..n-1 for the distinct integer codes in ``values`` on ``valid``."""
    v = values[valid]
    if v.size and not np.all(v == np.round(v)):
        raise InputError("zones must be integer class codes; the raster holds fractional "
                         "values", source)
    codes = np.unique(v.astype(np.int64))
    labels = np.full(values.shape, -1, dtype=np.int32)
    labels[valid] = np.searchsorted(codes, values[valid].astype(np.int64))
    return labels, [f"{prefix} {int(c)}" for c in codes]


def load_zones(zones: Path | None, zone_field: str | None, grid, ds) -> tuple[
        np.ndarray, list[str], str]:
    """Zone labels on ``grid`` from a file or from the run's habitat classes.

    Parameters
    ----------
    zones : pathlib.Path or None
        A polygon file (``.geojson``/``.json``, read with
        :func:`preyscape.landscape.measures.zones_from_polygons`) or a class
        raster (any other suffix; read with
        :func:`preyscape.landscape.io.read_layer_onto`, majority per cell).
        None: the habitat classes stored in ``ds`` (``habitat``), named
        ``"class <code>"``, when they are integer codes; otherwise one zone,
        the whole landscape.
    zone_field : str or None
        Polygon attribute naming the zones (polygons only).
    grid : Grid
        The run grid.
    ds : xarray.Dataset
        The results of run A (for its habitat layer).

    Returns
    -------
    labels : numpy.ndarray of int32
        Zone per cell, −1 none.
    names : list of str
        Zone names, indexed by label.
    kind : str
        ``"polygons"``, ``"raster"``, ``"habitat classes"`` or ``"whole landscape"``.
    """
    mask = grid.mask
    if zones is None:
        if "habitat" in ds:
            hab = np.asarray(ds["habitat"].values, dtype=np.float64)
            valid = mask & np.isfinite(hab)
            if valid.any() and np.all(hab[valid] == np.round(hab[valid])):
                labels, names = _codes_to_labels(hab, valid, "class", "results.nc: habitat")
                return labels, names, "habitat classes"
        return np.where(mask, 0, -1).astype(np.int32), ["whole landscape"], "whole landscape"
    zones = Path(zones)
    src = str(zones)
    if not zones.is_file():
        raise InputError("zone file not found; give a polygon GeoJSON or a class raster", src)
    if zones.suffix.lower() in POLYGON_SUFFIXES:
        from preyscape.landscape.measures import zones_from_polygons

        labels, names = zones_from_polygons(zones, grid, field=zone_field, source=src)
        return np.asarray(labels, dtype=np.int32), [str(n) for n in names], "polygons"
    if zone_field is not None:
        raise InputError(f"zone_field {zone_field!r} applies to polygon zones only "
                         f"({', '.join(POLYGON_SUFFIXES)}); a raster's zones are its codes", src)
    from preyscape.landscape.io import read_layer_onto

    arr = read_layer_onto(zones, grid, "mode", source=src)
    labels, names = _codes_to_labels(arr, mask & np.isfinite(arr), "zone", src)
    return labels, names, "raster"


def _time_mean_total(ds, sp: str) -> float:
    tot = np.asarray(ds[f"{sp}_total"].values, dtype=np.float64)
    return float(np.mean(tot[list(used_snapshots(tot.size))])) if tot.size else float("nan")


def write_comparison(
    run_a: Path,
    run_b: Path,
    out: Path,
    threshold: float = CHANGE_THRESHOLD,
    presence: float = PRESENCE,
    zones: Path | None = None,
    zone_field: str | None = None,
    overwrite: bool = False,
) -> dict:
    """Compare run B with run A and write maps, tables and a record into ``out``.

    Parameters
    ----------
    run_a, run_b : pathlib.Path
        Finished run folders (``run.json`` and ``results.nc``); A is the
        reference.
    out : pathlib.Path
        Output folder, created atomically.
    threshold : float
        Relative change of the time-mean density that counts as a change
        (0.1 = 10 %).
    presence : float
        Presence threshold, animals/km².
    zones : pathlib.Path, optional
        Zones for the table (see :func:`load_zones`); default the habitat
        classes of run A.
    zone_field : str, optional
        Polygon attribute naming the zones.
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    dict
        The contents of ``comparison.json`` plus ``folder`` (the output
        folder).

    Raises
    ------
    InputError
        If a folder is not a finished run, the runs are on different grids,
        ``threshold`` or ``presence`` is out of range, the zone file is
        unusable, or ``out`` exists and ``overwrite`` is False.
    """
    import xarray as xr

    from preyscape.landscape.io import write_geotiff
    from preyscape.plots.compare import change_map, difference_map, totals_compare_plot
    from preyscape.products import output_folder, write_csv

    if not (np.isfinite(threshold) and threshold >= 0):
        raise InputError(f"threshold must be a fraction >= 0 (0.1 = 10 %), not {threshold!r}",
                         "threshold")
    if not (np.isfinite(presence) and presence > 0):
        raise InputError(f"presence must be a density > 0 animals per km², not {presence!r}",
                         "presence")
    ra, rb = open_run(run_a), open_run(run_b)
    label_a = f"A ({ra.path})"
    label_b = f"B ({rb.path})"
    with xr.open_dataset(ra.path / "results.nc", decode_times=False) as ds_a, \
            xr.open_dataset(rb.path / "results.nc", decode_times=False) as ds_b:
        maps = compare_runs(ds_a, ds_b, threshold, presence, names=(label_a, label_b))
        grid = grid_of(ds_a)
        labels, zone_names, zone_kind = load_zones(zones, zone_field, grid, ds_a)
        tables = {sp: (zone_table(ds_a, labels, zone_names, sp, presence),
                       zone_table(ds_b, labels, zone_names, sp, presence)) for sp in SPECIES}
        times = (np.asarray(ds_a["time"].values), np.asarray(ds_b["time"].values))
        totals = tuple({sp: np.asarray(ds[f"{sp}_total"].values) for sp in SPECIES}
                       for ds in (ds_a, ds_b))
        mean_totals = {sp: {"a": _time_mean_total(ds_a, sp), "b": _time_mean_total(ds_b, sp)}
                       for sp in SPECIES}
        mask = data_mask(ds_a)

    species_names = {sp: (ra.info.get("species") or {}).get(sp) or sp for sp in SPECIES}
    change = maps["change"].values
    area = grid.cell_area_km2
    counts = {CHANGE_CODES[k]: int(np.count_nonzero(change == k)) for k in range(4)}
    record = {
        "run_a": str(ra.path.resolve()),
        "run_b": str(rb.path.resolve()),
        "title_a": ra.info.get("title"),
        "title_b": rb.info.get("title"),
        "settings": {
            "threshold": float(threshold),
            "presence_animals_per_km2": float(presence),
            "zones": str(zones) if zones is not None else None,
            "zone_field": zone_field,
            "zone_source": zone_kind,
        },
        "definitions": {
            "difference": "B - A",
            "time_mean": "mean over the snapshots after t = 0 (each run its own)",
            "persistence": "fraction of snapshots after t = 0 with density >= presence",
            "change": "|B - A| > threshold * A where A >= presence; B >= presence where "
                      "A < presence",
            "change_codes": {str(k): v for k, v in CHANGE_CODES.items()},
        },
        "same_snapshot_times": bool(maps.attrs["same_times"]),
        "snapshots_used": {"a": int(maps.attrs["prey_snapshots_a"]),
                           "b": int(maps.attrs["prey_snapshots_b"])},
        "cell_area_km2": area,
        "cells_with_data": int(mask.sum()),
        "changed_cells": counts,
        "changed_area_km2": {k: v * area for k, v in counts.items()},
        "time_mean_totals_animals": mean_totals,
        "zones": zone_names,
    }

    with output_folder(out, overwrite=overwrite) as tmp:
        files = []
        for sp in SPECIES:
            nm = species_names[sp]
            for stat, units in (("mean", "animals per km²"),
                                ("persistence", "fraction of snapshots")):
                arr = maps[f"{sp}_{stat}_difference"].values
                name = f"{sp}_{stat}_difference"
                write_geotiff(tmp / f"{name}.tif", grid, arr.astype(np.float32))
                what = "time-mean density" if stat == "mean" else "persistence"
                difference_map(grid, arr, f"{sp} ({nm}) {what}: B − A", tmp / f"{name}.png",
                               units)
                files += [f"{name}.tif", f"{name}.png"]
            write_geotiff(tmp / f"{sp}_relative_change.tif", grid,
                          maps[f"{sp}_relative_change"].values.astype(np.float32))
            files.append(f"{sp}_relative_change.tif")
        write_geotiff(tmp / "change.tif", grid, change.astype(np.int8), nodata=-1, dtype="int8")
        change_map(grid, change, f"Change of the time mean by more than {threshold:.0%}",
                   tmp / "change.png")
        files += ["change.tif", "change.png"]

        header = ["zone", "species", "area_km2"]
        for stat in ZONE_STATISTICS:
            header += [f"{stat}_a", f"{stat}_b", f"{stat}_b_minus_a"]
        rows = []
        for k in range(len(zone_names)):
            for sp in SPECIES:
                a, b = tables[sp][0][k], tables[sp][1][k]
                row = [a["zone"], sp, a["area_km2"]]
                for stat in ZONE_STATISTICS:
                    row += [a[stat], b[stat], b[stat] - a[stat]]
                rows.append(row)
        write_csv(tmp / "zones.csv", header, rows)
        files.append("zones.csv")

        totals_compare_plot(times[0], totals[0], times[1], totals[1],
                            [f"A: {ra.info.get('title') or ra.path.name}",
                             f"B: {rb.info.get('title') or rb.path.name}"],
                            species_names, tmp / "totals.png")
        files.append("totals.png")
        files.append("comparison.json")
        record["files"] = files
        write_json(tmp / "comparison.json", record)
    return {**record, "folder": str(Path(out))}
