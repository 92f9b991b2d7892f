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
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.errors import FileProblem, InputError
from preyscape.landscape.grid import Grid
from preyscape.store import SPECIES, data_mask, frames, grid_of, used_snapshots

__all__ = ["CellStatistics", "NO_PREDATOR", "RunResults", "cell_statistics", "open_run",
           "SPECIES"]

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
                return src.read(1) == 1
        except rasterio.errors.RasterioIOError as err:
            raise FileProblem(f"cannot read {record['cells_file']} of this run folder ({err})",
                              str(self.path)) from None

    def faces_of(self, record: Mapping[str, Any]) -> tuple[np.ndarray, np.ndarray] | None:
        """Fence faces (between columns, between rows) of a record, or None."""
        if not record.get("faces_file"):
            return None
        with np.load(self.path / str(record["faces_file"])) as z:
            return z["between_columns"].copy(), z["between_rows"].copy()

    def lines_of(self, record: Mapping[str, Any]) -> list[np.ndarray]:
        """Line and ring vertices (k × 2, map metres) of a record's ``geometry_file``."""
        if not record.get("geometry_file"):
            return []
        doc = json.loads((self.path / str(record["geometry_file"])).read_text())
        return [np.asarray(line, dtype=float) for f in doc.get("features", [])
                for line in _lines_of(f.get("geometry") or {})]

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

        ops = load_operators(self.path)
        if not ops:
            raise FileProblem("the run folder has no movement operators (operators/); it was "
                              "made by an older preyscape: run it again to compute fluxes",
                              str(self.path))
        return ops

    def settings(self, overrides: Mapping[str, Any] | None = None,
                 spelled: Mapping[str, str] | None = None):
        """The run's :class:`~preyscape.analysis.settings.AnalysisSettings`, with overrides."""
        from preyscape.analysis.settings import AnalysisSettings

        return AnalysisSettings.build(self.info.get("analysis") or {}, overrides, spelled,
                                      stored_as=f"{self.path / 'run.json'}: analysis")

    @property
    def predictions(self) -> dict:
        """The published predictions recorded when the run was made (``run.json``)."""
        return dict(self.info.get("predictions") or {})


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


def _open_results(path: Path):
    import xarray as xr

    nc = Path(path) / "results.nc"
    try:
        ds = xr.open_dataset(nc, decode_times=False)
    except (OSError, ValueError) as err:
        raise FileProblem(f"results.nc cannot be read as NetCDF ({type(err).__name__}: {err}); "
                          "the run folder is damaged: run the scenario again", str(path)) from None
    missing = [v for v in ("time", "x", "y", *SPECIES) if v not in ds.variables]
    if missing:
        ds.close()
        raise FileProblem(f"results.nc has no variable {missing[0]!r}; it was not written by "
                          "preyscape or is damaged", str(path))
    return ds


def open_run(path: str | Path) -> RunResults:
    """Open a finished run folder.

    Parameters
    ----------
    path : str or pathlib.Path
        A folder written by :func:`preyscape.simulate`.

    Returns
    -------
    RunResults
        The opened run (``results.nc`` is opened lazily).

    Raises
    ------
    FileProblem
        If ``path`` is not a finished run folder or its ``run.json`` is damaged.
    """
    p = Path(path)
    rec = p / "run.json"
    if not rec.is_file() or not (p / "results.nc").is_file():
        what = "does not exist" if not p.exists() else "has no run.json and results.nc"
        raise FileProblem(f"not a finished run folder: it {what}", str(p))
    try:
        info = json.loads(rec.read_text())
    except (OSError, UnicodeDecodeError, json.JSONDecodeError) as err:
        raise FileProblem(f"run.json is not valid JSON ({err})", str(p)) from None
    if not isinstance(info, dict):
        raise FileProblem("run.json does not hold a JSON object; the folder is damaged or not "
                          "a run folder", str(p))
    return RunResults(p, info)
