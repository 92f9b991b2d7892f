"""Invasion fronts of a run folder: arrival-time and speed rasters, front table, plots.

:func:`write_waves` reads ``results.nc`` one snapshot at a time and writes
into a new output folder::

    prey_arrival.tif, predator_arrival.tif          arrival time, years (NaN: never)
    prey_front_speed.tif, predator_front_speed.tif  local front speed, km/yr
    prey_arrival.png, ..._front_speed.png           maps of the above
    fronts.csv                                      fitted speed per transect and species
    front_<transect>_<species>.png                  front position against time
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.errors import InputError
from preyscape.store import SPECIES

FRONTS_HEADER = [
    "transect", "species", "threshold_per_km2", "speed_km_yr", "stderr_km_yr", "r2",
    "predicted_km_yr", "ratio", "n", "wavelength_km", "period_yr", "phase_speed_km_yr",
]
DEFAULT_THRESHOLD_FRACTION = 0.1  # of the largest time-mean density (common practice, no source)


def _number(value: Any, source: str, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise InputError(f"{what} must be a number, not {value!r}", source) from None
    if not math.isfinite(v) or v < 0:
        raise InputError(f"{what} must be a finite number >= 0, not {value!r}", source)
    return v


def _species_numbers(d: dict | None, key: str, what: str) -> dict[str, float]:
    if d is None:
        return {}
    if not isinstance(d, dict):
        raise InputError(f"{key} must be a table {{prey = ..., predator = ...}}", key)
    out = {}
    for sp, v in d.items():
        if sp not in SPECIES:
            raise InputError(f"unknown species {sp!r}; valid: {', '.join(SPECIES)}",
                             f"{key}.{sp}")
        if v is not None:
            out[sp] = _number(v, f"{key}.{sp}", what)
    return out


def _check_transects(transects: list[dict] | None) -> list[tuple[str, list]]:
    if transects is None:
        return []
    out, seen = [], set()
    for i, tr in enumerate(transects):
        src = f"transects[{i}]"
        if not isinstance(tr, dict) or "name" not in tr or "points" not in tr:
            raise InputError('a transect is {"name": str, "points": [[x, y], ...]} '
                             "(map metres)", src)
        name = str(tr["name"]).strip()
        if not name:
            raise InputError("transect name must not be empty", f"{src}.name")
        if name in seen:
            raise InputError(f"transect name {name!r} is used twice; names must differ",
                             f"{src}.name")
        seen.add(name)
        pts = tr["points"]
        try:
            arr = np.asarray(pts, dtype=float)
        except (TypeError, ValueError):
            raise InputError("points must be a list of [x, y] pairs in map metres",
                             f"{src}.points") from None
        if arr.ndim != 2 or arr.shape[1] != 2 or arr.shape[0] < 2:
            raise InputError("points must be a list of at least two [x, y] pairs in map "
                             "metres", f"{src}.points")
        out.append((name, arr.tolist()))
    return out


def _file_part(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_-]+", "_", name).strip("_") or "transect"


def _auto_line(grid, arrivals: dict[str, np.ndarray]) -> tuple[str, list] | None:
    # from where a species was first (the centroid of its earliest cells) to the
    # cell it reached last: the longest path the front took; predators first
    for sp in ("predator", "prey"):
        a = arrivals.get(sp)
        if a is None or np.count_nonzero(np.isfinite(a)) < 2:
            continue
        lo, hi = float(np.nanmin(a)), float(np.nanmax(a))
        if not hi > lo:
            continue
        rows, cols = np.nonzero(a <= lo)
        x0 = float(np.mean(grid.x[cols]))
        y0 = float(np.mean(grid.y[rows]))
        r1, c1 = np.unravel_index(int(np.nanargmax(a)), a.shape)
        x1, y1 = float(grid.x[c1]), float(grid.y[r1])
        if math.hypot(x1 - x0, y1 - y0) < max(grid.dx, grid.dy):
            continue
        return "auto", [[x0, y0], [x1, y1]]
    return None


def _f(v: float) -> float | None:
    return float(v) if math.isfinite(v) else None


def write_waves(
    run_folder: Path,
    out: Path,
    transects: list[dict] | None = None,
    thresholds: dict | None = None,
    predicted: dict | None = None,
    overwrite: bool = False,
) -> dict:
    """Write arrival times, local front speeds and transect front fits of a run.

    Parameters
    ----------
    run_folder : pathlib.Path
        A run folder holding ``results.nc``.
    out : pathlib.Path
        Output folder to create (atomically).
    transects : list of dict, optional
        ``{"name": str, "points": [[x, y], ...]}`` in map metres. Default: one
        transect named ``auto`` from where the predators (or, if they do not
        spread, the prey) were first to the cell they reached last.
    thresholds : dict, optional
        Density marking arrival, ``{"prey": ..., "predator": ...}``,
        animals/km². Default per species: 10 % of the largest time-mean
        density of that species (common practice, no source).
    predicted : dict, optional
        Predicted minimal front speeds, ``{"prey": ..., "predator": ...}``,
        km/yr (for example from :func:`preyscape.model.theory.fisher_speed`
        and :func:`~preyscape.model.theory.predator_speed`).
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    dict
        ``thresholds`` (animals/km²) and ``threshold_source`` per species,
        ``arrival`` (per species: share of data cells reached, median and
        latest arrival, years), ``local_speed_median`` (km/yr), ``transects``
        (name, points, whether automatic), ``fronts`` (one dict per CSV row),
        ``pngs`` and ``files`` (names inside ``out``).

    Raises
    ------
    InputError
        If the run folder has no ``results.nc``, ``out`` exists and
        ``overwrite`` is false, or a transect, threshold or predicted speed
        is malformed.
    """
    import xarray as xr

    from preyscape.analysis import waves as W
    from preyscape.landscape.io import write_geotiff
    from preyscape.plots import waves as plots
    from preyscape.products import output_folder, write_csv
    from preyscape.store import grid_of, time_means

    run_folder = Path(run_folder)
    nc = run_folder / "results.nc"
    if not nc.is_file():
        raise InputError("no results.nc here; pass a finished run folder", str(run_folder))
    lines = _check_transects(transects)
    given = _species_numbers(thresholds, "thresholds", "an arrival threshold (animals/km²)")
    pred = _species_numbers(predicted, "predicted", "a predicted speed (km/yr)")
    for sp, v in given.items():
        if v <= 0:
            raise InputError("an arrival threshold must be > 0 animals/km²",
                             f"thresholds.{sp}")

    summary: dict[str, Any] = {
        "thresholds": {}, "threshold_source": {}, "arrival": {}, "local_speed_median": {},
        "transects": [], "fronts": [], "pngs": [], "files": [],
    }
    with xr.open_dataset(nc, decode_times=False) as ds, output_folder(out, overwrite) as tmp:
        grid = grid_of(ds)
        times = np.asarray(ds["time"].values, dtype=float)
        means = None
        thr: dict[str, float] = {}
        for sp in SPECIES:
            if sp in given:
                thr[sp] = given[sp]
                summary["threshold_source"][sp] = "given"
            else:
                if means is None:
                    means = time_means(nc, grid.mask)
                top = float(np.nanmax(means[sp])) if np.any(np.isfinite(means[sp])) else 0.0
                thr[sp] = DEFAULT_THRESHOLD_FRACTION * top if top > 0 else math.nan
                summary["threshold_source"][sp] = "10% of the largest time-mean density"
            summary["thresholds"][sp] = _f(thr[sp])

        arrivals: dict[str, np.ndarray] = {}
        speeds: dict[str, np.ndarray] = {}
        for sp in SPECIES:
            if math.isfinite(thr[sp]):
                a = W.arrival_time_of_run(ds, sp, thr[sp])
            else:  # the species is absent: it never arrives anywhere
                a = np.full(grid.shape, np.nan)
            speed = W.local_front_speed(a, grid.dx, grid.dy)
            for name, arr in ((f"{sp}_arrival.tif", a), (f"{sp}_front_speed.tif", speed)):
                write_geotiff(tmp / name, grid, np.where(grid.mask, arr, np.nan)
                              .astype(np.float32))
                summary["files"].append(name)
            reached = np.isfinite(a) & grid.mask
            summary["arrival"][sp] = {
                "reached_fraction": float(reached.sum() / max(grid.n_cells, 1)),
                "present_at_start_fraction": float((reached & (a <= 0)).sum()
                                                   / max(grid.n_cells, 1)),
                "median_years": _f(float(np.median(a[reached]))) if reached.any() else None,
                "latest_years": _f(float(np.max(a[reached]))) if reached.any() else None,
            }
            fin = speed[np.isfinite(speed)]
            summary["local_speed_median"][sp] = _f(float(np.median(fin))) if fin.size else None
            arrivals[sp], speeds[sp] = a, speed  # drawn once the transects are known

        auto = False
        if transects is None:
            line = _auto_line(grid, arrivals)
            if line is not None:
                lines, auto = [line], True
        trs = []
        for i, (name, pts) in enumerate(lines):
            try:
                trs.append(W.sample_transect(grid, pts, name=name))
            except InputError as err:
                src = "transects (automatic)" if auto else f"transects[{i}] ({name})"
                raise InputError(err.message, src) from None
        summary["transects"] = [{"name": n, "points": p, "auto": auto} for n, p in lines]

        for sp in SPECIES:
            p1 = plots.arrival_map(grid, arrivals[sp],
                                   f"{sp.capitalize()} arrival (density ≥ {thr[sp]:.3g} per km²)",
                                   tmp / f"{sp}_arrival.png", trs)
            p2 = plots.speed_map(grid, speeds[sp], f"{sp.capitalize()} local front speed",
                                 tmp / f"{sp}_front_speed.png")
            summary["pngs"] += [p1.name, p2.name]

        rows = []
        for sp in SPECIES:
            if not trs or not math.isfinite(thr[sp]):
                continue
            series = W.transect_series(ds, trs, sp, times)
            for tr, s in zip(trs, series, strict=True):
                fit = W.front_speed(s, None, None, thr[sp],
                                    predicted_km_yr=pred.get(sp, math.nan))
                wave = W.wave_summary(s, threshold=thr[sp])
                png = plots.front_plot(
                    fit, tmp / f"front_{_file_part(tr.name)}_{sp}.png",
                    f"{sp.capitalize()} front along transect {tr.name!r}")
                summary["pngs"].append(png.name)
                rec = {
                    "transect": tr.name, "species": sp, "threshold_per_km2": thr[sp],
                    "speed_km_yr": fit.speed, "stderr_km_yr": fit.stderr, "r2": fit.r2,
                    "predicted_km_yr": fit.predicted, "ratio": fit.ratio, "n": fit.n,
                    "wavelength_km": wave.wavelength, "period_yr": wave.period,
                    "phase_speed_km_yr": wave.phase_speed,
                    "fit_start_yr": float(fit.times[0]) if fit.n else math.nan,
                    "fit_end_yr": float(fit.times[-1]) if fit.n else math.nan,
                    "figure": png.name,
                }
                rows.append([rec[k] for k in FRONTS_HEADER])
                summary["fronts"].append(
                    {k: (_f(v) if isinstance(v, float) else v) for k, v in rec.items()})
        write_csv(tmp / "fronts.csv", FRONTS_HEADER, rows)
        summary["files"].append("fronts.csv")
    summary["out"] = str(Path(out))
    return summary
