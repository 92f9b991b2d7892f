"""Effects of refuges and corridors in a run folder, written as tables and figures.

The output folder holds::

    refuges.csv                    per refuge, species and region (inside / outside):
                                   cells, area, mean density, lowest mean density,
                                   persistence; the same for the run without the refuge
    refuge_<name>_spillover.png    prey against distance from the refuge edge, with fit
    refuge_<name>_profile.csv      the profile (distance km, density animals/km²)
    targets.csv                    per target patch and species: colonisation time
    flux.csv                       per transect and species: net flow across it at every
                                   snapshot (animals/yr) and the running total (animals)
    flux_<name>.png                the flows against time
    effects.json                   the numbers above as one record

Refuges come from the run's measures (``run.json``), target patches from the
scenario's ``[analysis]`` (``targets/`` in the run folder) or a GeoJSON file,
and transects from ``[analysis]`` or the caller. Fluxes use the movement
operators the run saved for each epoch (``operators/``).
"""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.errors import InputError
from preyscape.store import SPECIES, grid_of, load_operators, open_run, slug

SHARE = 0.5
"""Share of a target patch's cells that must be occupied for it to count as colonised
(common practice, no source)."""


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


def transect_flux(run_folder: Path, ds, points: list, species: str) -> tuple[np.ndarray,
                                                                               np.ndarray]:
    """Net flow of a species across a transect at every snapshot, animals/yr.

    Uses the movement operators the run saved for each epoch; a snapshot at
    a switch time uses the epoch that starts there.

    Returns
    -------
    times : numpy.ndarray
        Snapshot times, years.
    flow : numpy.ndarray
        Animals per year crossing from the left of the line to its right.
    """
    from preyscape.analysis.compare import snapshots
    from preyscape.analysis.effects import net_flux

    ops = load_operators(run_folder)
    if not ops:
        raise InputError("the run folder has no movement operators (operators/); it was "
                         "made by an older preyscape: run it again to compute fluxes",
                         str(run_folder))
    grid = grid_of(ds)
    fx, fy, sx, sy = transect_faces(points, grid)
    times = np.asarray(ds["time"].values, dtype=float)
    spans = [tuple(float(v) for v in op["span"]) for op in ops]
    flow = np.zeros(times.size)
    for k, frame in snapshots(ds, species, range(times.size)):  # one at a time: O(grid)
        t = float(times[k])
        op = ops[_epoch_of(t, spans)]
        flow[k] = net_flux([frame], [t], op[f"{species}_cx"], op[f"{species}_cy"],
                           op[f"{species}_w"], fx, fy, sx, sy, grid.cell_area_km2)[0]
    return times, flow


def _target_cells(run: Path, info: dict, targets: Path | None, grid) -> list[tuple[str,
                                                                                np.ndarray]]:
    import rasterio

    out = []
    for t in info.get("targets", []):
        with rasterio.open(run / t["cells_file"]) as src:
            out.append((t["name"], src.read(1) == 1))
    if targets is not None:
        from preyscape.landscape.measures import zones_from_polygons

        labels, names = zones_from_polygons(targets, grid, source=str(targets))
        out += [(n, labels == k) for k, n in enumerate(names)]
    return out


def colonisation(run_folder: Path, info: dict, targets: Path | None = None, ds=None,
                 thresholds: dict | None = None) -> list[dict]:
    """Colonisation time of each target patch by each species, years.

    Parameters
    ----------
    run_folder : pathlib.Path
        The run folder (its ``targets/`` and ``results.nc``).
    info : dict
        Its ``run.json``.
    targets : pathlib.Path, optional
        GeoJSON polygons of more target patches.
    ds : xarray.Dataset, optional
        The opened results (opened here if not given).
    thresholds : dict, optional
        Arrival density per species, animals/km² (default: the run's
        ``[analysis]`` thresholds, else its presence density, else 1).

    Returns
    -------
    list of dict
        ``name``, ``cells`` and ``<species>_colonised_year`` (None: not
        within the run) per target.
    """
    import xarray as xr

    from preyscape.analysis.effects import colonisation_time

    settings = info.get("analysis") or {}
    presence = float(settings.get("presence", 1.0))
    thr = thresholds or {sp: float(settings.get(f"{sp}_threshold") or presence)
                         for sp in SPECIES}
    own = ds is None
    if own:
        ds = xr.open_dataset(Path(run_folder) / "results.nc", decode_times=False)
    try:
        grid = grid_of(ds)
        out = []
        for name, cells in _target_cells(Path(run_folder), info, targets, grid):
            entry = {"name": name, "cells": int((cells & grid.mask).sum())}
            for sp in SPECIES:
                t = colonisation_time(ds, sp, cells, thr[sp], SHARE)
                entry[f"{sp}_colonised_year"] = None if math.isnan(t) else t
            out.append(entry)
        return out
    finally:
        if own:
            ds.close()


def write_effects(
    run_folder: Path,
    out: Path,
    without: Path | None = None,
    targets: Path | None = None,
    transects: list[dict] | None = None,
    presence: float | None = None,
    thresholds: dict | None = None,
    overwrite: bool = False,
) -> dict[str, Any]:
    """Refuge, target and transect effects of a run, written into ``out``.

    Parameters
    ----------
    run_folder : pathlib.Path
        A finished run folder.
    out : pathlib.Path
        Output folder, created atomically.
    without : pathlib.Path, optional
        The same scenario's run without the refuges (a variant that removes
        them): the spill-over profile is then that of the difference.
    targets : pathlib.Path, optional
        GeoJSON polygons of more target patches (property ``name``).
    transects : list of dict, optional
        ``{"name": str, "points": [[x, y], ...]}`` in map metres; default the
        transects of the scenario's ``[analysis]``.
    presence : float, optional
        Presence threshold, animals/km² (default that of ``[analysis]``, 1).
    thresholds : dict, optional
        Density that counts as arrival per species, animals/km² (default
        ``[analysis]`` thresholds, else ``presence``).
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    dict
        The contents of ``effects.json`` plus ``folder``.
    """
    import xarray as xr

    from preyscape.analysis.effects import cumulative, refuge_effect
    from preyscape.plots.compare import profile_plot
    from preyscape.plots.effects import flux_plot
    from preyscape.products import output_folder, write_csv

    run = open_run(run_folder)
    info = run.info
    settings = info.get("analysis") or {}
    presence = float(presence if presence is not None else settings.get("presence", 1.0))
    thr = {sp: float((thresholds or {}).get(sp) or settings.get(f"{sp}_threshold") or presence)
           for sp in SPECIES}
    if transects is None:
        transects = [dict(t) for t in settings.get("transects", [])]
    names = info.get("species", {})
    record: dict[str, Any] = {"run": str(run_folder), "presence_per_km2": presence,
                              "thresholds_per_km2": thr, "refuges": [], "targets": [],
                              "transects": []}
    with xr.open_dataset(Path(run_folder) / "results.nc", decode_times=False) as ds, \
            output_folder(out, overwrite) as tmp:
        ds_without = None
        if without is not None:
            open_run(without)
            ds_without = xr.open_dataset(Path(without) / "results.nc", decode_times=False)
        try:
            import rasterio

            rows = []
            for m in info.get("measures", []):
                if m["kind"] != "refuge" or not m.get("cells_file"):
                    continue
                with rasterio.open(Path(run_folder) / m["cells_file"]) as src:
                    cells = src.read(1) == 1
                entry: dict[str, Any] = {"name": m["name"], "area_km2": m.get("area_km2"),
                                         "protected_fraction": m.get("protected_fraction")}
                for sp in SPECIES:
                    eff = refuge_effect(ds, cells, ds_without, sp, presence)
                    entry[sp] = {"inside_outside": eff["inside_outside"],
                                 "inside_outside_without": eff["inside_outside_without"]}
                    for region in ("inside", "outside"):
                        a = eff["inside_outside"][region]
                        b = (eff["inside_outside_without"] or {}).get(region, {})
                        rows.append([m["name"], sp, region, a["cells"], a["area_km2"],
                                     a["mean_density"], a["min_mean_density"],
                                     a["persistence"], b.get("mean_density", ""),
                                     b.get("min_mean_density", ""), b.get("persistence", "")])
                    if sp == "prey":
                        base = slug(m["name"])
                        entry["decay_length_km"] = eff["decay_length_km"]
                        entry["profile_is_difference"] = eff["difference"]
                        entry["fit"] = {k: v for k, v in eff["fit"].items()
                                        if isinstance(v, (int, float, str, bool))}
                        what = ("prey density with − without the refuge" if eff["difference"]
                                else "prey time-mean density")
                        profile_plot(eff["distance_km"], eff["density"], eff["fit"],
                                     tmp / f"refuge_{base}_spillover.png",
                                     ylabel=f"{what} (animals per km²)")
                        write_csv(tmp / f"refuge_{base}_profile.csv",
                                  ["distance_from_edge_km", "density_per_km2"],
                                  [[float(d), float(v)] for d, v in
                                   zip(eff["distance_km"], eff["density"], strict=True)])
                        entry["figure"] = f"refuge_{base}_spillover.png"
                record["refuges"].append(entry)
            if rows:
                write_csv(tmp / "refuges.csv",
                          ["refuge", "species", "region", "cells", "area_km2",
                           "mean_density_per_km2", "lowest_mean_density_per_km2",
                           "persistence", "without_mean_density_per_km2",
                           "without_lowest_mean_density_per_km2", "without_persistence"], rows)

            record["targets"] = colonisation(Path(run_folder), info, targets, ds, thr)
            trows = [[t["name"], sp, t["cells"], thr[sp], SHARE,
                      "" if t[f"{sp}_colonised_year"] is None else t[f"{sp}_colonised_year"]]
                     for t in record["targets"] for sp in SPECIES]
            if trows:
                write_csv(tmp / "targets.csv",
                          ["target", "species", "cells", "threshold_per_km2", "share",
                           "colonised_year"], trows)

            frows = []
            for k, tr in enumerate(transects):
                pts = [tuple(map(float, p)) for p in tr["points"]]
                if len(pts) < 2:
                    raise InputError("a transect needs at least two points",
                                     f"transects[{k}]")
                entry = {"name": tr["name"]}
                series = {}
                for sp in SPECIES:
                    times, flow = transect_flux(Path(run_folder), ds, pts, sp)
                    total = cumulative(flow, times)
                    series[sp] = (times, flow, total)
                    entry[f"{sp}_net_animals"] = float(total[-1])
                    for t, f, c in zip(times, flow, total, strict=True):
                        frows.append([tr["name"], sp, float(t), float(f), float(c)])
                fig = f"flux_{slug(tr['name'])}.png"
                flux_plot(series, names, tr["name"], tmp / fig)
                entry["figure"] = fig
                record["transects"].append(entry)
            if frows:
                write_csv(tmp / "flux.csv", ["transect", "species", "time_years",
                                             "net_flow_animals_per_year",
                                             "cumulative_animals"], frows)
            (tmp / "effects.json").write_text(json.dumps(record, indent=2, default=float)
                                              + "\n")
        finally:
            if ds_without is not None:
                ds_without.close()
    record["folder"] = str(out)
    return record
