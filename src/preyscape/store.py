"""Run folders: streaming NetCDF-CF results, GeoTIFF summaries, run record.

A run folder holds::

    results.nc        snapshots of both densities (animals/km²), appended as
                      the run goes (NetCDF-4, CF-1.8, CRS as grid mapping)
    summary/*.tif     time-mean and final densities per species (GeoTIFF)
    maps/*.png        maps and the landscape totals plot
    checkpoint.npz    the last saved state, float64, for resuming
    run.json          version, scenario digest, seed, wall time, step size

Memory does not grow with the run length: each snapshot is written to disk
and only running sums stay in memory.
"""

from __future__ import annotations

import json
import os
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.landscape.grid import Grid
from preyscape.names import slug

SPECIES = ("prey", "predator")

TIME_UNITS = "common_years since 0001-01-01 00:00:00"
"""CF units of ``time`` in ``results.nc``: years of 365 days since the start of the run."""
TIME_CALENDAR = "noleap"
"""CF calendar of ``time`` (365-day years, so a common year is exactly one model year)."""


def _cf_grid_mapping(crs_wkt: str) -> dict[str, Any]:
    if not crs_wkt:
        return {}
    from pyproj import CRS

    attrs = {k: v for k, v in CRS.from_wkt(crs_wkt).to_cf().items() if v is not None}
    attrs["spatial_ref"] = crs_wkt  # read by GDAL
    return attrs


class ResultWriter:
    """Append snapshots of prey and predator density to a NetCDF-CF file.

    Parameters
    ----------
    path : pathlib.Path
        The ``results.nc`` to create.
    grid : Grid
        Grid of the run (metres, CRS).
    names : dict
        Common names of the species, ``{"prey": ..., "predator": ...}``.
    attrs : dict
        Global attributes (title, scenario digest, ...).
    habitat : numpy.ndarray, optional
        The habitat layer (class codes or suitability), stored alongside.
    """

    def __init__(
        self,
        path: Path,
        grid: Grid,
        names: dict[str, str],
        attrs: dict[str, Any],
        habitat: np.ndarray | None = None,
    ) -> None:
        import netCDF4

        self.grid = grid
        self.path = Path(path)
        ds = netCDF4.Dataset(self.path, "w", format="NETCDF4")
        self._ds = ds
        ds.Conventions = "CF-1.8"
        for k, v in attrs.items():
            ds.setncattr(k, v if isinstance(v, (int, float)) else str(v))
        ds.createDimension("time", None)
        ds.createDimension("y", grid.ny)
        ds.createDimension("x", grid.nx)
        t = ds.createVariable("time", "f8", ("time",))
        # CF time: values stay years since the start; "common_year" is the UDUNITS year of
        # 365 days, exact in the 365-day ("noleap") calendar, and the reference date is
        # a placeholder for the start of the run (CF-1.8 §4.4)
        t.units = TIME_UNITS
        t.calendar = TIME_CALENDAR
        t.standard_name = "time"
        t.long_name = ("simulated time since the start of the run, years (the date "
                       "0001-01-01 stands for the start)")
        t.axis = "T"
        for name, values, axis in (("x", grid.x, "X"), ("y", grid.y, "Y")):
            v = ds.createVariable(name, "f8", (name,))
            v[:] = values
            v.units = "m"
            v.axis = axis
            v.standard_name = f"projection_{name}_coordinate"
            v.long_name = f"{'easting' if name == 'x' else 'northing'} of cell centre"
        crs = ds.createVariable("spatial_ref", "i4")
        for k, v in _cf_grid_mapping(grid.crs_wkt).items():
            crs.setncattr(k, v)
        crs.GeoTransform = " ".join(repr(float(g)) for g in grid.gdal_transform)
        mk = ds.createVariable("mask", "u1", ("y", "x"), zlib=True)
        mk[:] = grid.mask.astype(np.uint8)
        mk.long_name = "cell has habitat data"
        mk.flag_values = np.array([0, 1], dtype=np.uint8)
        mk.flag_meanings = "no_data data"
        mk.grid_mapping = "spatial_ref"
        if habitat is not None:
            hv = ds.createVariable("habitat", "f4", ("y", "x"), zlib=True, fill_value=np.nan)
            hv[:] = np.where(grid.mask, habitat, np.nan).astype(np.float32)
            hv.long_name = "habitat layer (class code or suitability 0-1)"
            hv.grid_mapping = "spatial_ref"
        self._vars = {}
        self._totals = {}
        for sp in SPECIES:
            v = ds.createVariable(
                sp, "f4", ("time", "y", "x"), zlib=True, complevel=1, shuffle=True,
                chunksizes=(1, grid.ny, grid.nx), fill_value=np.nan,
            )
            v.units = "km-2"
            v.long_name = f"{sp} density ({names.get(sp) or sp}), animals per km2"
            v.grid_mapping = "spatial_ref"
            v.coordinates = "y x"
            v.set_var_chunk_cache(size=0)  # one snapshot per chunk, written once: no cache
            self._vars[sp] = v
            tv = ds.createVariable(f"{sp}_total", "f8", ("time",))
            tv.units = "1"
            tv.long_name = f"{sp} animals in the whole landscape"
            self._totals[sp] = tv
        self._time = t
        self.n = 0

    def write(self, t: float, N: np.ndarray, P: np.ndarray) -> None:
        """Append one snapshot at time ``t`` (years); densities in animals/km²."""
        k = self.n
        self._time[k] = t
        area = self.grid.cell_area_km2
        for sp, u in zip(SPECIES, (N, P), strict=True):
            frame = u.astype(np.float32)
            frame[~self.grid.mask] = np.nan
            self._vars[sp][k, :, :] = frame
            self._totals[sp][k] = float(np.sum(u, where=self.grid.mask) * area)
        self.n += 1
        self._ds.sync()

    def means(self) -> dict[str, np.ndarray]:
        """Time-mean density per species over the snapshots after the start, animals/km².

        Read back from the file one snapshot at a time (the file must be
        closed or synced), so no running sums take memory during the run.
        """
        if self._ds is not None:
            self._ds.sync()
        return time_means(self.path, self.grid.mask)

    def close(self) -> None:
        """Close the file."""
        if self._ds is not None:
            self._ds.close()
            self._ds = None


def data_mask(ds) -> np.ndarray:
    """Cells with data of a results dataset (its ``mask`` variable; all cells if absent)."""
    if "mask" in ds:
        return np.asarray(ds["mask"].values).astype(bool)
    sp = next(s for s in SPECIES if s in ds)
    return np.ones(ds[sp].shape[-2:], dtype=bool)


def used_snapshots(n: int) -> range:
    """Indices of the snapshots statistics use: all after the first when ``n > 1``.

    The start state is chosen by the user, not produced by the model, so it
    does not weigh on time means, persistence or hotspots.
    """
    return range(1 if n > 1 else 0, n)


def frames(ds, species: str, indices: Iterable[int] | None = None,
           mask: np.ndarray | None = None, *, raw: bool = False,
           ) -> Iterator[tuple[int, np.ndarray]]:
    """Yield ``(index, density)`` one snapshot at a time (animals/km², float64).

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc`` with variable ``species`` of dims (time, y, x).
    species : str
        ``"prey"`` or ``"predator"``.
    indices : iterable of int, optional
        Snapshots to read; default :func:`used_snapshots`.
    mask : numpy.ndarray of bool, optional
        Cells with data; default :func:`data_mask` of ``ds``.
    raw : bool
        Yield the values as stored (NaN off the data mask) instead of
        cleaned ones (keyword only).

    Yields
    ------
    (int, numpy.ndarray)
        The snapshot index and its densities, 0 off the data mask. NaN only
        marks no-data cells, so a non-finite value on a data cell counts as
        absence.
    """
    if species not in ds:
        raise ValueError(f"results dataset has no variable {species!r}")
    var = ds[species]
    if mask is None and not raw:
        mask = data_mask(ds)
    if indices is None:
        indices = used_snapshots(var.shape[0])
    for k in indices:
        frame = np.asarray(var.isel(time=int(k)).values, dtype=np.float64)
        if raw:
            yield int(k), frame
            continue
        yield int(k), np.where(mask & np.isfinite(frame), frame, 0.0)


def time_means(source, mask: np.ndarray | None = None,
               species: Iterable[str] = SPECIES) -> dict[str, np.ndarray]:
    """Time-mean density per species over :func:`used_snapshots`, animals/km².

    Accumulated in float64 one snapshot at a time, so memory does not grow
    with the number of snapshots.

    Parameters
    ----------
    source : xarray.Dataset or path
        An opened ``results.nc`` or its path.
    mask : numpy.ndarray of bool, optional
        Cells with data (default: the file's own mask).
    species : iterable of str
        The species to average.

    Returns
    -------
    dict
        Species to float64 map, NaN off the mask.
    """
    if isinstance(source, (str, os.PathLike)):
        import xarray as xr

        with xr.open_dataset(source, decode_times=False) as ds:
            return time_means(ds, mask, species)
    ds = source
    if mask is None:
        mask = data_mask(ds)
    out = {}
    for sp in species:
        acc = np.zeros(mask.shape)
        n = 0
        for _, u in frames(ds, sp, mask=mask):
            acc += u
            n += 1
        out[sp] = np.where(mask, acc / max(n, 1), np.nan)
    return out


def write_npz(path: Path, compressed: bool = False, **arrays) -> None:
    """Write arrays to an ``.npz`` file atomically (temporary name, then rename)."""
    tmp = path.with_name(path.name + ".tmp")
    with open(tmp, "wb") as fh:
        (np.savez_compressed if compressed else np.savez)(fh, **arrays)
    os.replace(tmp, path)


def save_checkpoint(path: Path, step: int, N: np.ndarray, P: np.ndarray, extra: dict) -> None:
    """Write the state after ``step`` steps, atomically (float64, exact)."""
    write_npz(path, step=step, prey=N, predator=P, extra=json.dumps(extra))


def load_checkpoint(path: Path) -> tuple[int, np.ndarray, np.ndarray, dict]:
    """Read a checkpoint written by :func:`save_checkpoint`."""
    with np.load(path) as z:
        return int(z["step"]), z["prey"].copy(), z["predator"].copy(), json.loads(str(z["extra"]))


def write_summaries(folder: Path, grid: Grid, means: dict, finals: dict, *,
                    names: dict | None = None, tags: dict | None = None) -> list[Path]:
    """Write time-mean and final density GeoTIFFs (float32, NaN no-data) into ``folder``.

    Each carries a band description naming the species and the statistic, the
    units (animals per km2) and ``tags`` (e.g. the source run).
    """
    from preyscape.landscape.io import write_geotiff

    folder.mkdir(parents=True, exist_ok=True)
    names = names or {}
    what = {"mean": "time-mean density over the snapshots after the start",
            "final": "density at the end of the run"}
    out = []
    for label, layers in (("mean", means), ("final", finals)):
        for sp, arr in layers.items():
            p = folder / f"{sp}_{label}.tif"
            name = f"{sp} ({names[sp]})" if names.get(sp) and names[sp] != sp else sp
            write_geotiff(p, grid, np.where(grid.mask, arr, np.nan).astype(np.float32),
                          description=f"{name} {what[label]}", units="animals per km2",
                          tags=tags)
            out.append(p)
    return out


def write_measures(folder: Path, grid: Grid, measures: Iterable) -> list[dict]:
    """Write each measure's cells (GeoTIFF) and geometry (GeoJSON) into ``folder``.

    Parameters
    ----------
    folder : pathlib.Path
        Created if there is at least one measure.
    grid : Grid
        The run grid.
    measures : iterable of PlacedMeasure
        Placed measures (:func:`preyscape.assemble.place_measures`).

    Returns
    -------
    list of dict
        One summary per measure (``PlacedMeasure.summary``) with the names of
        the files written, relative to the run folder.
    """
    from preyscape.landscape.io import write_geotiff

    out = []
    for m in measures:
        rec = m.summary(grid.cell_area_km2)
        folder.mkdir(parents=True, exist_ok=True)
        base = slug(m.name)
        if m.cells is not None:
            write_geotiff(folder / f"{base}.tif", grid,
                          np.where(grid.mask, m.cells, 255).astype(np.uint8),
                          nodata=255, dtype="uint8", description=f"cells of the {m.kind} "
                          f"{m.name!r}", units="class code",
                          categories={0: "outside", 1: f"{m.kind}: {m.name}"})
            rec["cells_file"] = f"{folder.name}/{base}.tif"
        if m.faces is not None:
            write_npz(folder / f"{base}_faces.npz", True, between_columns=m.faces[0],
                      between_rows=m.faces[1])
            rec["faces_file"] = f"{folder.name}/{base}_faces.npz"
        if m.shapes:
            from shapely.geometry import mapping

            feats = [{"type": "Feature", "properties": {"name": m.name, "kind": m.kind},
                      "geometry": mapping(s.geometry)} for s in m.shapes]
            doc = {"type": "FeatureCollection", "features": feats}
            if grid.crs_wkt:
                from pyproj import CRS

                auth = CRS.from_wkt(grid.crs_wkt).to_authority()
                if auth:  # the legacy member: these coordinates are not WGS 84
                    doc["crs"] = {"type": "name", "properties": {
                        "name": f"urn:ogc:def:crs:{auth[0]}::{auth[1]}"}}
            write_json(folder / f"{base}.geojson", doc)
            rec["geometry_file"] = f"{folder.name}/{base}.geojson"
        out.append(rec)
    return out


def save_operators(path: Path, span: tuple[float, float], prey, predator) -> None:
    """Save the movement operators of one epoch (face conductances, 1/yr; weights).

    ``span`` is the epoch ``(t0, t1)`` in years; ``prey`` and ``predator`` are
    :class:`~preyscape.model.movement.Movement` objects. Read back with
    :func:`load_operators`; used to compute fluxes across lines after the run.
    """
    path.parent.mkdir(parents=True, exist_ok=True)
    arrays = {"span": np.asarray(span, dtype=float)}
    for sp, mv in (("prey", prey), ("predator", predator)):
        arrays[f"{sp}_cx"] = mv.cx
        arrays[f"{sp}_cy"] = mv.cy
        arrays[f"{sp}_w"] = (mv.w if mv.w is not None else np.ones(mv.mask.shape, np.float32))
    write_npz(path, True, **arrays)


def load_operators(folder: Path) -> list[dict]:
    """The movement operators of every epoch of a run, in time order.

    Returns a list of dicts with ``span`` (t0, t1 in years) and, per species,
    ``<species>_cx`` (rows, cols+1), ``<species>_cy`` (rows+1, cols) face
    conductances in 1/yr and ``<species>_w`` per-cell weights.
    """
    files = sorted((Path(folder) / "operators").glob("epoch_*.npz"),
                   key=lambda p: int(p.stem.split("_")[1]))
    out = []
    for f in files:
        with np.load(f) as z:
            out.append({k: z[k] for k in z.files})
    return out


def refuse_existing(out: Path, overwrite: bool, what: str = "output folder") -> None:
    """Raise :class:`~preyscape.errors.InputError` if ``out`` exists and may not be replaced."""
    from preyscape.errors import InputError

    if Path(out).exists() and not overwrite:
        raise InputError(
            f"{what} already exists; choose another with --out or pass --overwrite to "
            "replace it", str(out),
        )


@contextmanager
def output_folder(out: str | Path, overwrite: bool = False,
                  what: str = "output folder") -> Iterator[Path]:
    """Create the folder ``out`` atomically: yield a temporary folder, rename it when done.

    Parameters
    ----------
    out : str or pathlib.Path
        The folder to create.
    overwrite : bool
        Replace an existing ``out``; otherwise an existing folder is an
        :class:`~preyscape.errors.InputError` and is left untouched.
    what : str
        What the folder is, for the message.

    Yields
    ------
    pathlib.Path
        A hidden temporary folder beside ``out`` (``.NAME.partial-PID``). If the
        block raises (or is interrupted), the temporary folder is removed and
        ``out`` is unchanged.
    """
    import shutil

    out = Path(out)
    refuse_existing(out, overwrite, what)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial-{os.getpid()}"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        yield tmp
        if out.exists():  # overwrite was asked for
            shutil.rmtree(out)
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def write_json(path: Path, record: dict) -> None:
    """Write ``record`` as indented JSON, atomically."""
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(record, indent=2, default=str) + "\n")
    os.replace(tmp, path)


def now_iso() -> str:
    """Current UTC time, ISO 8601."""
    return datetime.now(UTC).isoformat(timespec="seconds")


def grid_of(ds) -> Grid:
    """The :class:`Grid` of a results dataset (as written by :class:`ResultWriter`).

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc``: coordinates ``x``, ``y`` (cell centres,
        metres), variables ``mask`` and ``spatial_ref``.
    """
    x = np.asarray(ds["x"].values, dtype=float)
    y = np.asarray(ds["y"].values, dtype=float)
    ref = ds["spatial_ref"].attrs if "spatial_ref" in ds else {}
    gt = ref.get("GeoTransform")
    if gt:
        x0, dx, _, y0, _, ndy = (float(v) for v in str(gt).split())
        dy = -ndy
    else:  # from the centres (needs two cells per axis)
        dx = float(x[1] - x[0]) if x.size > 1 else 1.0
        dy = float(y[0] - y[1]) if y.size > 1 else 1.0
        x0, y0 = float(x[0] - dx / 2), float(y[0] + dy / 2)
    wkt = str(ref.get("crs_wkt") or ref.get("spatial_ref") or "")
    mask = np.asarray(ds["mask"].values).astype(bool) if "mask" in ds else None
    return Grid((y.size, x.size), x0, y0, dx, dy, wkt, mask)
