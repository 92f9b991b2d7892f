"""The one reader of run folders: metadata, grid, snapshots, time means, measures.

Every analysis, the report and the command line open a run folder through
:func:`open_run`; none of them reads ``run.json``, ``results.nc`` or the
measure files itself. Snapshots are read one at a time
(:meth:`RunResults.frames`), so memory does not grow with the run length.

Definitions used by every analysis
----------------------------------
snapshots used
    The snapshots after the start, t = 0 (all of them when there is only
    one): the start state is chosen by the user, not produced by the model
    (:func:`preyscape.store.used_snapshots`).
time mean
    A cell's mean density over the snapshots used, animals/km².
presence
    A density at or above the presence threshold
    (:attr:`~preyscape.analysis.settings.AnalysisSettings.presence`).
persistence of a cell
    The fraction (0–1) of the snapshots used in which the cell's density is
    at or above the presence threshold.

Examples
--------
``run_folder`` is a finished run folder (such as ``runs/moor/baseline``):

>>> run = open_run(run_folder)
>>> run.label
'baseline'
>>> run.time_mean("prey").shape == run.grid.shape
True
>>> run.close()
"""

from __future__ import annotations

import json
import math
import zipfile
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.errors import FileProblem, InputError
from preyscape.landscape.grid import Grid
from preyscape.store import SPECIES, data_mask, frames, grid_of, used_snapshots

__all__ = ["CellStatistics", "NO_PREDATOR", "RunResults", "cell_statistics", "find_damage",
           "map_layers_of", "open_run", "SPECIES"]

NO_PREDATOR = "no predator in this scenario"
"""What outputs of a run of prey alone say, once, instead of empty predator maps and tables."""


@dataclass(frozen=True)
class CellStatistics:
    """Per-cell statistics of one species over the snapshots used.

    Attributes
    ----------
    mean, minimum, maximum : numpy.ndarray
        Time mean, minimum and maximum density, animals/km² (float32, NaN off
        the data mask).
    persistence : numpy.ndarray
        Fraction (0–1) of snapshots with density >= ``presence`` (float32).
    presence : float
        The presence threshold used, animals/km².
    snapshots : int
        How many snapshots were used.
    """

    mean: np.ndarray
    minimum: np.ndarray
    maximum: np.ndarray
    persistence: np.ndarray
    presence: float
    snapshots: int


def cell_statistics(ds, species: str, presence: float) -> CellStatistics:
    """Time mean, minimum, maximum and persistence of ``species`` in a results dataset.

    Snapshots are read one at a time; sums are taken in float64 and the maps
    returned as float32.

    Parameters
    ----------
    ds : xarray.Dataset
        An opened ``results.nc``.
    species : str
        ``"prey"`` or ``"predator"``.
    presence : float
        Presence threshold, animals/km² (> 0).

    Raises
    ------
    InputError
        If the run holds no snapshots.
    """
    if not (math.isfinite(presence) and presence > 0):
        raise ValueError(f"presence threshold must be a positive density (animals/km²), "
                         f"not {presence!r}")
    mask = data_mask(ds)
    acc = np.zeros(mask.shape)
    lo = np.full(mask.shape, np.inf)
    hi = np.full(mask.shape, -np.inf)
    occ = np.zeros(mask.shape)
    n = 0
    for _, u in frames(ds, species, mask=mask):
        acc += u
        np.minimum(lo, u, out=lo)
        np.maximum(hi, u, out=hi)
        occ += u >= presence
        n += 1
    if n == 0:
        raise InputError("the run holds no snapshots", f"results: {species}")

    def out(a: np.ndarray) -> np.ndarray:
        return np.where(mask, a, np.nan).astype(np.float32)

    return CellStatistics(out(acc / n), out(lo), out(hi), out(occ / n), float(presence), n)


class RunResults:
    """An opened run folder.

    Open with :func:`open_run`; use as a context manager (or call
    :meth:`close`) to close the results file.

    Attributes
    ----------
    path : pathlib.Path
        The folder.
    info : dict
        The contents of ``run.json``.
    """

    def __init__(self, path: Path, info: dict) -> None:
        self.path = Path(path)
        self.info = info
        self._ds = None
        self._means: dict[str, np.ndarray] = {}
        self._stats: dict[tuple[str, float], CellStatistics] = {}

    # --- opening and closing ---------------------------------------------------------
    def __enter__(self) -> RunResults:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Close the results file (it is opened again when needed)."""
        if self._ds is not None:
            self._ds.close()
            self._ds = None

    @property
    def ds(self):
        """The snapshots as an :class:`xarray.Dataset` (opened once, lazily)."""
        if self._ds is None:
            self._ds = _open_results(self.path)
        return self._ds

    @property
    def results(self):
        """A new :class:`xarray.Dataset` of ``results.nc`` (the caller closes it)."""
        return _open_results(self.path)

    # --- what the run is ---------------------------------------------------------
    @cached_property
    def grid(self) -> Grid:
        """The run grid (metres, CRS, data mask)."""
        return grid_of(self.ds)

    @property
    def mask(self) -> np.ndarray:
        """Cells with data, bool (rows, cols)."""
        return self.grid.mask

    @property
    def label(self) -> str:
        """The run's name in titles and tables: its variant (or folder) name."""
        return str(self.info.get("variant") or self.path.name)

    @property
    def title(self) -> str:
        """The scenario's title, else the folder name."""
        return str(self.info.get("title") or self.path.name)

    @property
    def species(self) -> tuple[str, ...]:
        """The species the run models: ``("prey", "predator")``, or ``("prey",)`` for prey alone.

        A run of prey alone stores a predator density of zero everywhere; analyses
        leave it out and say once that the scenario has no predator.
        """
        present = self.info.get("species_present")
        return tuple(sp for sp in SPECIES if sp in present) if present else SPECIES

    @property
    def species_names(self) -> dict[str, str]:
        """Common name of each species (the species key where none is given)."""
        given = self.info.get("species") or {}
        return {sp: str(given.get(sp) or sp) for sp in SPECIES}

    @cached_property
    def times(self) -> np.ndarray:
        """Snapshot times, years since the start."""
        return np.asarray(self.ds["time"].values, dtype=float)

    @property
    def used(self) -> range:
        """Indices of the snapshots statistics use (:func:`preyscape.store.used_snapshots`)."""
        return used_snapshots(self.times.size)

    @property
    def classes(self) -> dict[int, str] | None:
        """Habitat class code to name (None for a suitability landscape)."""
        c = self.info.get("classes")
        return None if not c else {int(k): str(v) for k, v in c.items()}

    @property
    def class_colours(self) -> dict[int, str] | None:
        """Habitat class code to colour as the run recorded it (None if not recorded)."""
        c = self.info.get("class_colours")
        return None if not c else {int(k): str(v) for k, v in c.items()}

    def map_layers(self) -> dict[str, Any]:
        """What every map of this run shows besides its values, as plain values.

        Keywords for :func:`preyscape.plots.map_context`: ``run`` (the label),
        ``outlines`` (the measures), ``habitat``, ``classes`` and ``colours``.
        """
        return {"run": self.label, "outlines": self.overlays(), "habitat": self.habitat,
                "classes": self.classes, "colours": self.class_colours}

    def provenance(self) -> dict[str, str]:
        """Tags naming where an analysis raster comes from (``source_run`` and more)."""
        from preyscape import __version__

        return {"source_run": self.label, "run_folder": str(self.path.resolve()),
                "scenario": self.title, "software": f"preyscape {__version__}"}

    @property
    def habitat(self) -> np.ndarray | None:
        """The habitat layer (class codes or suitability), NaN off data; None if not stored."""
        return np.asarray(self.ds["habitat"].values) if "habitat" in self.ds else None

    # --- snapshots and statistics ---------------------------------------------------
    def frames(self, species: str, indices: Sequence[int] | None = None,
               ) -> Iterator[tuple[int, np.ndarray]]:
        """``(index, density)`` one snapshot at a time (default: the snapshots used)."""
        return frames(self.ds, species, indices, mask=self.mask)

    def frame(self, species: str, index: int) -> np.ndarray:
        """One snapshot as stored (animals/km², float64, NaN off the data mask)."""
        return next(frames(self.ds, species, (index,), raw=True))[1]

    def time_mean(self, species: str) -> np.ndarray:
        """Time-mean density over the snapshots used, animals/km² (float64, NaN off data)."""
        if species not in self._means:
            acc = np.zeros(self.grid.shape)
            n = 0
            for _, u in self.frames(species):
                acc += u
                n += 1
            if n == 0:
                raise InputError("the run holds no snapshots", str(self.path))
            self._means[species] = np.where(self.mask, acc / n, np.nan)
        return self._means[species]

    def statistics(self, species: str, presence: float) -> CellStatistics:
        """Per-cell statistics (:func:`cell_statistics`), cached per presence threshold."""
        key = (species, float(presence))
        if key not in self._stats:
            self._stats[key] = cell_statistics(self.ds, species, presence)
        return self._stats[key]

    def totals(self, species: str) -> np.ndarray:
        """Animals of ``species`` in the whole landscape at every snapshot."""
        return np.asarray(self.ds[f"{species}_total"].values, dtype=np.float64)

    def mean_total(self, species: str) -> float:
        """Time mean of the landscape total over the snapshots used, animals."""
        tot = self.totals(species)
        return float(np.mean(tot[list(used_snapshots(tot.size))])) if tot.size else math.nan

    # --- measures, targets, operators, settings ----------------------------------------
    @property
    def measures(self) -> list[dict]:
        """The measure records of ``run.json`` (files relative to the run folder)."""
        return list(self.info.get("measures") or [])

    def cells_of(self, record: Mapping[str, Any]) -> np.ndarray:
        """The cells (bool, rows × cols) of a measure or target record's ``cells_file``."""
        import rasterio

        f = self.path / str(record["cells_file"])
        try:
            with rasterio.open(f) as src:
                cells = src.read(1) == 1
        except rasterio.errors.RasterioError as err:
            raise FileProblem(f"cannot read {record['cells_file']} of this run folder ({err}); "
                              "run the scenario again", str(self.path)) from None
        if cells.shape != self.grid.shape:
            raise FileProblem(f"{record['cells_file']} of this run folder does not match its "
                              "grid; run the scenario again", str(self.path))
        return cells

    def _member(self, name: str, read):
        """``read(path)`` of the file ``name`` of the folder; damage becomes a FileProblem."""
        try:
            return read(self.path / name)
        except (OSError, ValueError, KeyError, TypeError, IndexError, AttributeError,
                zipfile.BadZipFile) as err:
            what = "is missing" if not (self.path / name).exists() else "is damaged"
            raise FileProblem(f"{name} of this run folder {what} ({type(err).__name__}: "
                              f"{err}); run the scenario again", str(self.path)) from None

    def faces_of(self, record: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray] | None:
        """Fence faces (between columns, between rows) of a record, or None."""
        if not record.get("faces_file"):
            return None

        def read(f: Path) -> tuple[np.ndarray, np.ndarray]:
            with np.load(f) as z:
                cols, rows = z["between_columns"].copy(), z["between_rows"].copy()
            ny, nx = self.grid.shape
            if cols.shape != (ny, nx + 1) or rows.shape != (ny + 1, nx):
                raise ValueError("its faces do not match the run grid")
            return cols, rows

        return self._member(str(record["faces_file"]), read)

    def lines_of(self, record: Mapping[str, Any]) -> list[np.ndarray]:
        """Line and ring vertices (k × 2, map metres) of a record's ``geometry_file``."""
        if not record.get("geometry_file"):
            return []

        def read(f: Path) -> list[np.ndarray]:
            doc = json.loads(f.read_text())
            out = [np.asarray(line, dtype=float) for ft in doc.get("features", [])
                   for line in _lines_of(ft.get("geometry") or {})]
            if any(a.ndim != 2 or a.shape[1] < 2 for a in out):
                raise ValueError("its coordinates are not lists of points")
            return [a[:, :2] for a in out]

        return self._member(str(record["geometry_file"]), read)

    def overlays(self) -> list:
        """The run's measures as map overlays (:class:`preyscape.landscape.placed.Outline`)."""
        from preyscape.landscape.placed import Outline

        out = []
        for m in self.measures:
            cells = self.cells_of(m) if m.get("cells_file") else None
            out.append(Outline(str(m["name"]), str(m["kind"]), tuple(self.lines_of(m)),
                               cells, self.faces_of(m)))
        return out

    def targets(self) -> list[tuple[str, np.ndarray]]:
        """The run's target patches: ``(name, cells)`` pairs."""
        return [(str(t["name"]), self.cells_of(t)) for t in self.info.get("targets", [])]

    def operators(self) -> list[dict]:
        """The movement operators of every epoch (:func:`preyscape.store.load_operators`)."""
        from preyscape.store import load_operators

        ops = self._member("operators", lambda _folder: load_operators(self.path))
        if not ops:
            raise FileProblem("the run folder has no movement operators (operators/); it was "
                              "made by an older preyscape: run it again to compute fluxes",
                              str(self.path))
        return ops

    def settings(self, overrides: Mapping[str, Any] | None = None,
                 spelled: Mapping[str, str] | None = None):
        """The run's :class:`~preyscape.analysis.settings.AnalysisSettings`, with overrides."""
        from preyscape.analysis.settings import AnalysisSettings

        stored_as = f"{self.path / 'run.json'}: analysis"
        s = AnalysisSettings.build(self.info.get("analysis") or {}, overrides, spelled,
                                   stored_as=stored_as)
        if (overrides or {}).get("goal") is not None:  # a goal asked for now must fit the run
            from preyscape.analysis.settings import check_goal

            try:
                check_goal(s.goal, self.species)
            except InputError as err:
                raise InputError(err.message, (spelled or {}).get("goal", "goal")) from None
        band = s.hotspot_distance
        if band is not None:
            given = (overrides or {}).get("hotspot_distance") is not None
            where = ((spelled or {}).get("hotspot_distance", "hotspot_distance") if given
                     else f"{stored_as}.hotspot_distance")
            g = self.grid
            diagonal = math.hypot(g.width_m, g.height_m)
            if band > diagonal:
                raise InputError(
                    f"a distance band of {band:g} m is larger than the landscape (its diagonal "
                    f"is {diagonal:.0f} m): every cell would be every other cell's neighbour "
                    f"and the test would say nothing; give at most {diagonal:.0f} m, "
                    "typically a few cells to a few per cent of the landscape", where)
        return s

    @property
    def predictions(self) -> dict:
        """The published predictions recorded when the run was made (``run.json``)."""
        return dict(self.info.get("predictions") or {})


def map_layers_of(runs: Sequence[RunResults]) -> dict[str, Any]:
    """What maps of one or more runs show (:meth:`RunResults.map_layers`), combined.

    The first run's habitat; every run's measures (once each, by name); the
    run's label, or "B, C compared with A" for several runs.
    """
    layers = runs[0].map_layers()
    outlines = list(layers["outlines"])
    seen = {o.name for o in outlines}
    for r in runs[1:]:
        new = [o for o in r.overlays() if o.name not in seen]
        outlines += new
        seen |= {o.name for o in new}
    label = (", ".join(r.label for r in runs[1:]) + f" compared with {runs[0].label}"
             if len(runs) > 1 else layers["run"])
    return {**layers, "run": label, "outlines": outlines}


def _lines_of(geom: Mapping[str, Any]) -> list:
    t = geom.get("type")
    c = geom.get("coordinates")
    if t == "LineString":
        return [c]
    if t in ("MultiLineString", "Polygon"):
        return list(c)
    if t == "MultiPolygon":
        return [ring for poly in c for ring in poly]
    if t == "GeometryCollection":
        return [ln for g in geom.get("geometries", []) for ln in _lines_of(g)]
    return []


_NEEDED = ("time", "x", "y", *SPECIES, *(f"{sp}_total" for sp in SPECIES))


def _open_results(path: Path):
    import xarray as xr

    nc = Path(path) / "results.nc"
    try:
        with open(nc, "rb") as fh:
            head = fh.read(8)
    except OSError as err:
        raise FileProblem(f"results.nc cannot be read ({err.strerror or err})",
                          str(path)) from None
    if not (head.startswith(b"\x89HDF") or head.startswith(b"CDF")):
        what = "is empty" if not head else "is not a NetCDF file"
        raise FileProblem(f"results.nc {what}; the run folder is damaged or was not written "
                          "by preyscape: run the scenario again", str(path))
    try:
        ds = xr.open_dataset(nc, decode_times=False)
    except (OSError, ValueError, RuntimeError) as err:
        raise FileProblem(f"results.nc cannot be read as NetCDF ({type(err).__name__}: "
                          f"{str(err).splitlines()[0][:200]}); the file is truncated or "
                          "damaged: run the scenario again", str(path)) from None
    problem = _layout_problem(ds)
    if problem:
        ds.close()
        raise FileProblem(f"results.nc {problem}; it was not written by preyscape or is "
                          "damaged", str(path))
    return ds


def _layout_problem(ds) -> str | None:
    """What is wrong with the variables of an opened ``results.nc``, or None."""
    missing = [v for v in _NEEDED if v not in ds.variables]
    if missing:
        return f"has no variable {missing[0]!r}"
    ny, nx, nt = ds["y"].size, ds["x"].size, ds["time"].size
    for sp in SPECIES:
        if ds[sp].dims != ("time", "y", "x"):
            return f"has {sp} on dimensions {ds[sp].dims}, not (time, y, x)"
    if nt == 0 or ny == 0 or nx == 0:
        return "holds no snapshots" if nt == 0 else "has an empty grid"
    if "mask" in ds.variables and ds["mask"].shape != (ny, nx):
        return "has a data mask of another shape than its grid"
    return None


def find_damage(paths: Sequence[str | Path]) -> FileProblem | None:
    """The first run folder whose ``results.nc`` cannot be read through, as a FileProblem.

    Reads every variable in full: meant for the moment a read has failed, to
    say which folder is damaged.
    """
    import netCDF4

    for p in paths:
        nc = Path(p) / "results.nc"
        try:
            with netCDF4.Dataset(nc) as ds:
                for v in ds.variables.values():
                    for k in range(v.shape[0] if v.ndim == 3 else 1):
                        _ = v[k] if v.ndim == 3 else v[...]
        except (OSError, RuntimeError, ValueError, IndexError) as err:
            return FileProblem(f"results.nc is damaged: part of it cannot be read ({err}); run "
                               "the scenario again", str(p))
    return None


_INFO_TYPES: dict[str, tuple] = {
    "years": (int, float), "variant": (str,), "title": (str,), "species": (dict,),
    "analysis": (dict, type(None)), "measures": (list,), "targets": (list,),
    "classes": (dict, type(None)), "predictions": (dict,), "settings": (dict,),
}


def _info_problem(info: dict) -> str | None:
    """What is wrong with the structure of a ``run.json``, or None."""
    for key, types in _INFO_TYPES.items():
        v = info.get(key)
        if key in info and (not isinstance(v, types) or isinstance(v, bool)):
            want = " or ".join("null" if t is type(None) else
                               {int: "a number", float: "a number", str: "text",
                                dict: "an object", list: "a list"}[t] for t in types)
            return f"has {key!r} of the wrong type ({type(v).__name__}; expected {want})"
    years = info.get("years", 1.0)
    if not (math.isfinite(years) and years > 0):
        return "has 'years' that is not a positive number"
    for key, needs in (("measures", ("name", "kind")), ("targets", ("name", "cells_file"))):
        for k, rec in enumerate(info.get(key) or []):
            if not isinstance(rec, dict) or any(n not in rec for n in needs):
                return f"has {key}[{k}] without {' and '.join(needs)}"
    return None


def open_run(path: str | Path) -> RunResults:
    """Open a finished run folder.

    Parameters
    ----------
    path : str or pathlib.Path
        A folder written by :func:`preyscape.simulate`.

    Returns
    -------
    RunResults
        The opened run (``results.nc`` is checked, closed, and opened again
        lazily when needed).

    Raises
    ------
    FileProblem
        If ``path`` is not a finished run folder, or its ``run.json`` or
        ``results.nc`` is damaged (naming the folder and what is wrong).
    """
    p = Path(path)
    rec = p / "run.json"
    if not rec.is_file() or not (p / "results.nc").is_file():
        if not p.exists():
            what = "it does not exist"
        elif not p.is_dir():
            what = "it is a file, not a folder"
        elif (p / "results.nc").is_file():
            what = "it has results.nc but no run.json"
        elif rec.is_file():
            what = "it has run.json but no results.nc"
        else:
            what = "it has no run.json and results.nc"
        raise FileProblem(f"not a finished run folder: {what}", str(p))
    try:
        info = json.loads(rec.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise FileProblem(f"run.json is not valid JSON ({err})", str(p)) from None
    if not isinstance(info, dict):
        raise FileProblem("run.json does not hold a JSON object; the folder is damaged or not "
                          "a run folder", str(p))
    problem = _info_problem(info)
    if problem:
        raise FileProblem(f"run.json {problem}; the folder is damaged or was not written by "
                          "preyscape", str(p))
    _open_results(p).close()
    return RunResults(p, info)
