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

    @classmethod
    def reopen(cls, path: Path, grid: Grid, n: int) -> ResultWriter:
        """Continue a results file after its first ``n`` snapshots (resuming a run).

        Snapshots the file holds beyond ``n`` (written after the last
        checkpoint) are overwritten, with the same values, as the run repeats
        them.
        """
        import netCDF4

        self = cls.__new__(cls)
        self.grid, self.path = grid, Path(path)
        self._ds = ds = netCDF4.Dataset(self.path, "a")
        try:
            self._vars = {sp: ds[sp] for sp in SPECIES}
            self._totals = {sp: ds[f"{sp}_total"] for sp in SPECIES}
            self._time = ds["time"]
        except (KeyError, IndexError):
            ds.close()
            raise OSError(f"{path} lacks a variable of a run's results") from None
        held = ds.dimensions["time"].size
        if held < n:
            ds.close()
            raise OSError(f"{path} holds {held} snapshots, not {n}")
        for v in self._vars.values():
            v.set_var_chunk_cache(size=0)
        self.n = n
        return self

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
    off = None if raw else ~np.asarray(mask, dtype=bool)
    some_off = off is not None and bool(off.any())
    for k in indices:
        if raw:
            yield int(k), np.asarray(var.isel(time=int(k)).values, dtype=np.float64)
            continue
        # a new float64 array (never a view of the dataset), cleaned in place: what
        # np.where(mask & isfinite, frame, 0) gives, without its passes when all is finite
        frame = np.array(var.isel(time=int(k)).values, dtype=np.float64)
        if some_off or not np.isfinite(frame).all():
            frame[off | ~np.isfinite(frame)] = 0.0
        yield int(k), frame


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


# ---------------------------------------------------------------------------
# output paths: checks before any work, atomic folders, stale temporary folders
# ---------------------------------------------------------------------------
_ACTIVE: set[Path] = set()
"""Temporary folders this process is writing now (never stale)."""


def partial_path(out: str | Path, pid: int | None = None) -> Path:
    """The hidden temporary folder beside ``out`` that a process writes first.

    ``.NAME.partial-PID``: renamed to ``out`` when complete. A run that was
    interrupted keeps it (with its checkpoint) so that it can be resumed.
    """
    out = Path(out)
    return out.parent / f".{out.name}.partial-{os.getpid() if pid is None else pid}"


def _pid_of(path: Path, marker: str) -> int | None:
    tail = path.name.rpartition(marker)[2]
    return int(tail) if tail.isdigit() else None


def _alive(pid: int) -> bool:
    if pid == os.getpid():
        return False  # ours: stale unless it is in _ACTIVE (checked by the caller)
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # another user's process
        return True
    return True


def stale_partials(out: str | Path, marker: str = ".partial-", *,
                   files: bool = False) -> list[Path]:
    """Temporary folders of ``out`` left by processes that were killed or interrupted.

    A folder ``.NAME<marker>PID`` beside ``out`` whose process no longer runs
    (or is this process, but not writing it now). Newest first. With
    ``files``, temporary files instead (``.NAME.tmp-PID`` of a report).
    """
    out = Path(out)
    if not out.parent.is_dir():
        return []
    found = []
    for p in out.parent.glob(f".{glob_escape(out.name)}{marker}*"):
        pid = _pid_of(p, marker)
        if (pid is not None and (p.is_file() if files else p.is_dir())
                and p not in _ACTIVE and not _alive(pid)):
            found.append(p)
    return sorted(found, key=lambda p: p.stat().st_mtime, reverse=True)


def glob_escape(name: str) -> str:
    """``name`` with the characters glob treats specially escaped."""
    import glob

    return glob.escape(name)


def remove_stale(out: str | Path, keep=None) -> list[Path]:
    """Remove the stale temporary folders of ``out`` (see :func:`stale_partials`).

    A folder set aside while an older ``out`` was being replaced
    (``.NAME.replaced-PID``) is put back when ``out`` is missing (the
    replacement never arrived), else removed. ``keep(path)`` may spare a
    partial folder (one that can be resumed). Returns the folders removed.
    """
    import shutil

    out = Path(out)
    removed = []
    for old in stale_partials(out, ".replaced-"):
        if not out.exists():
            os.replace(old, out)
        else:
            shutil.rmtree(old, ignore_errors=True)
            removed.append(old)
    for p in stale_partials(out):
        if keep is None or not keep(p):
            shutil.rmtree(p, ignore_errors=True)
            removed.append(p)
    return removed


def _nearest_existing(path: Path) -> Path:
    p = path
    while not os.path.lexists(p) and p != p.parent:
        p = p.parent
    return p


def _inside(inner: Path, outer: Path) -> bool:
    try:
        inner.relative_to(outer)
    except ValueError:
        return False
    return True


def check_output(out: str | Path, overwrite: bool = False, what: str = "output folder", *,
                 kind: str = "folder", protect=(), option: str = "--out") -> None:
    """Refuse an output path that cannot or may not be written, before any work starts.

    Nothing is created. Refused: a path under a file; a place that cannot be
    written; a file where a folder goes or a folder where a file goes (also
    with ``overwrite``); an existing ``out`` unless ``overwrite``; and, with
    ``overwrite``, a folder whose deletion would take the inputs (``protect``),
    the current folder or the home folder with it.

    Parameters
    ----------
    out : str or pathlib.Path
        The folder (or file) to create.
    overwrite : bool
        Whether an existing ``out`` may be replaced.
    what : str
        What ``out`` is, for the message ("run folder", "report file").
    kind : {"folder", "file"}
        What ``out`` must be.
    protect : iterable of paths
        Inputs that replacing ``out`` must not delete (keyword only).
    option : str
        The command-line option that named ``out`` (keyword only).

    Raises
    ------
    InputError
        For an existing ``out`` without ``overwrite``, or one that must not be replaced.
    FileProblem
        For a path under a file, of the wrong kind, or in a place that cannot be written.

    Examples
    --------
    >>> check_output(out_folder / "runs" / "moor", what="run folder")  # fine: nothing made
    >>> (out_folder / "notes.txt").write_text("field notes")
    11
    >>> check_output(out_folder / "notes.txt" / "moor", what="run folder")
    Traceback (most recent call last):
    ...
    preyscape.errors.FileProblem: .../notes.txt/moor: cannot create the run folder here: ...
    """
    import tempfile

    from preyscape.errors import FileProblem, InputError

    out = Path(out)
    here = str(out)
    base = _nearest_existing(out.parent)
    if base.exists() and not base.is_dir():
        raise FileProblem(f"cannot create the {what} here: {base} is a file, not a folder; "
                          f"choose another {option}", here)
    if out.exists() or out.is_symlink():
        is_dir = out.is_dir()
        if kind == "folder" and not is_dir:
            raise FileProblem(f"this is a file, not a folder; the {what} is a folder: choose "
                              f"another {option} (--overwrite replaces only a folder)", here)
        if kind == "file" and is_dir:
            raise FileProblem(f"this is a folder; the {what} is a file: choose another "
                              f"{option} (--overwrite replaces only a file)", here)
        if not overwrite:
            raise InputError(f"{what} already exists; choose another with {option} or pass "
                             "--overwrite to replace it", here)
        real = out.resolve()
        keep = [Path.cwd().resolve(), Path.home().resolve(), Path(real.anchor)]
        if kind == "folder" and any(_inside(k, real) for k in keep):
            raise InputError(f"--overwrite would delete this folder, which holds the current "
                             f"folder or your home folder; choose another {option}", here)
        for p in protect:
            q = Path(p).resolve()
            if q == real or (kind == "folder" and _inside(q, real)):
                raise InputError(f"--overwrite would delete {p}, an input of this command; "
                                 f"choose another {option}", here)
    try:
        probe = tempfile.mkdtemp(prefix=".preyscape-probe-", dir=base)
    except OSError as err:
        raise FileProblem(f"cannot write the {what} here: {base} is not writable "
                          f"({err.strerror or err}); choose another {option}", here) from None
    os.rmdir(probe)


def refuse_existing(out: Path, overwrite: bool, what: str = "output folder") -> None:
    """Refuse an output folder that exists (unless ``overwrite``) or cannot be written.

    See :func:`check_output`.
    """
    check_output(out, overwrite, what)


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths atomically (Linux ``renameat2``); False where that is not available."""
    import ctypes

    try:
        libc = ctypes.CDLL(None, use_errno=True)
        fn = libc.renameat2
    except (OSError, AttributeError):
        return False
    at_fdcwd, rename_exchange = -100, 2
    if fn(at_fdcwd, os.fsencode(a), at_fdcwd, os.fsencode(b), rename_exchange) == 0:
        return True
    err = ctypes.get_errno()
    import errno

    if err in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP, errno.EXDEV):
        return False
    raise OSError(err, os.strerror(err), str(b))


@contextmanager
def _signals_held():
    """Hold Ctrl-C and SIGTERM while a folder is swapped in; deliver them afterwards.

    The Python-level handlers are replaced by a recorder (a signal mask would
    not do: a signal sent to the process may land on one of numba's or the
    libraries' threads), then restored, and a signal that arrived is passed
    to the handler that was in place.
    """
    import signal
    import threading

    if threading.current_thread() is not threading.main_thread():
        yield
        return
    caught: list[int] = []
    held = (signal.SIGINT, signal.SIGTERM)
    old = {s: signal.signal(s, lambda signum, _frame: caught.append(signum)) for s in held}
    try:
        yield
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if caught:
            h = old[caught[0]]
            if callable(h):
                h(caught[0], None)
            elif h == signal.SIG_DFL:
                os.kill(os.getpid(), caught[0])


def commit_folder(tmp: Path, out: Path, overwrite: bool = True, what: str = "folder") -> None:
    """Move the finished folder ``tmp`` to ``out``, replacing an existing ``out``.

    An existing ``out`` is swapped with ``tmp`` in one atomic step where the
    system allows it (Linux ``renameat2``); elsewhere it is renamed aside and
    ``tmp`` renamed in. The old folder, now ``.NAME.replaced-PID``, is deleted
    last; a later run into the same place deletes it if this one was killed
    first, or puts it back if ``out`` is missing. At every moment ``out`` is
    either the old folder or the complete new one. Ctrl-C and SIGTERM wait
    until the new folder is in place and the old one deleted.

    Raises
    ------
    InputError
        If ``out`` appeared while ``tmp`` was written (another process) and
        ``overwrite`` is False; ``tmp`` is left for the caller to remove.
    """
    import shutil

    from preyscape.errors import InputError

    aside = out.parent / f".{out.name}.replaced-{os.getpid()}"
    with _signals_held():
        if not out.exists():
            os.replace(tmp, out)
            return
        if not overwrite:
            raise InputError(f"the {what} was created by another process while this one was "
                             "writing it; it was left as it is, and this result discarded",
                             str(out))
        if _exchange(tmp, out):
            os.replace(tmp, aside)
        else:
            os.replace(out, aside)
            os.replace(tmp, out)
        shutil.rmtree(aside, ignore_errors=True)


@contextmanager
def output_folder(out: str | Path, overwrite: bool = False,
                  what: str = "output folder", *, adopt: Path | None = None,
                  keep=None, protect=()) -> Iterator[Path]:
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
    adopt : pathlib.Path, optional
        A temporary folder of an interrupted run to continue in (renamed to
        this process's temporary folder) instead of an empty one (keyword only).
    keep : callable, optional
        ``keep(tmp)``: whether to keep the temporary folder when the block is
        interrupted (Ctrl-C, SIGTERM), so that it can be resumed (keyword only).
    protect : iterable of paths
        Inputs that replacing ``out`` must not delete (:func:`check_output`).

    Yields
    ------
    pathlib.Path
        A hidden temporary folder beside ``out`` (``.NAME.partial-PID``). If the
        block raises (or is interrupted), the temporary folder is removed
        (unless ``keep`` says otherwise) and ``out`` is unchanged. Stale
        temporary folders of ``out`` left by killed processes are removed first.
    """
    import shutil

    out = Path(out)
    check_output(out, overwrite, what, protect=protect)
    tmp = partial_path(out)
    remove_stale(out, keep=lambda p: p == adopt)
    out.parent.mkdir(parents=True, exist_ok=True)
    if tmp.exists() and tmp != adopt:
        shutil.rmtree(tmp)
    _ACTIVE.add(tmp)
    try:
        if adopt is not None:
            if adopt != tmp:
                os.replace(adopt, tmp)
        else:
            tmp.mkdir()
        try:
            yield tmp
        except KeyboardInterrupt:
            if keep is None or not keep(tmp):
                shutil.rmtree(tmp, ignore_errors=True)
            raise
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        try:
            commit_folder(tmp, out, overwrite, what)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
    finally:
        _ACTIVE.discard(tmp)


def json_safe(value: Any) -> Any:
    """``value`` with every non-finite float (NaN, ±infinity) replaced by None.

    Standard JSON has no NaN or Infinity; ``null`` says "no such value".

    Examples
    --------
    >>> json_safe({"equilibrium": [float("nan"), 2.5], "period": float("inf")})
    {'equilibrium': [None, 2.5], 'period': None}
    """
    import math

    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, np.generic):
        return json_safe(value.item())
    return value


def write_json(path: Path, record: dict) -> None:
    """Write ``record`` as indented JSON, atomically."""
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(json_safe(record), indent=2, default=str, allow_nan=False) + "\n")
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
