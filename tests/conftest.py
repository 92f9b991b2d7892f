"""Shared fixtures: a small habitat raster and a scenario TOML beside it.

The landscape is 24 x 30 cells of 100 m in EPSG:32633 (UTM 33N): class 1 (open
ground) in the west, class 2 (woodland) in the east and a few no-data cells (0).
The scenario runs half a year with snapshots every quarter year, so a run takes
a fraction of a second once the numba kernels are compiled.
"""

from __future__ import annotations

import copy
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from rasterio.crs import CRS

from preyscape.landscape.grid import Grid
from preyscape.landscape.io import write_geotiff

SHAPE = (24, 30)  # rows, cols
DX = 100.0  # m
X0, Y0 = 500_000.0, 5_000_000.0  # top-left corner, m (EPSG:32633)
EPSG = 32633
NODATA_CELLS = ((0, 0), (0, 1), (1, 0), (23, 29), (12, 20))

# Release at the centre of cell (row 12, col 10), which holds class 1.
RELEASE_ROW, RELEASE_COL = 12, 10
RELEASE_X = X0 + (RELEASE_COL + 0.5) * DX
RELEASE_Y = Y0 - (RELEASE_ROW + 0.5) * DX
RELEASE_RADIUS = 250.0  # m: no cell centre lies exactly on the circle
RELEASE_DENSITY = 10.0  # animals/km²

CAPACITY = 1000.0  # prey per km² at best habitat (class 1)
WOOD_CAPACITY = 0.5  # class-2 multiplier of the prey capacity

BASE: dict[str, Any] = {
    "title": "tiny test landscape",
    "landscape": {
        "habitat": "habitat.tif",
        "values": "classes",
        "classes": [
            {"code": 1, "name": "open ground"},
            {
                "code": 2,
                "name": "woodland",
                "prey_capacity": WOOD_CAPACITY,
                "prey_movement": 0.5,
                "predator_movement": 2.0,
            },
        ],
    },
    "prey": {
        "name": "vole",
        "growth": 3.7,
        "capacity": CAPACITY,
        "movement": "fickian",
        "diffusivity": 0.5,
    },
    "predator": {
        "name": "weasel",
        "mortality": 1.0,
        "movement": "fickian",
        "diffusivity": 2.0,
    },
    "interaction": {
        "form": "holling-ii",
        "attack_rate": 0.25,
        "handling_time": 0.002,
        "efficiency": 0.01,
    },
    "start": {
        "prey": "capacity",
        "releases": [
            {
                "x": RELEASE_X,
                "y": RELEASE_Y,
                "radius": RELEASE_RADIUS,
                "density": RELEASE_DENSITY,
            }
        ],
    },
    "run": {"years": 0.5, "save_every": 0.25, "step": "auto", "seed": 3},
}

DELETE = object()
"""Override value that removes a key (or a whole section)."""


# ---------------------------------------------------------------------------
# rasters
# ---------------------------------------------------------------------------
def utm_grid(shape: tuple[int, int] = SHAPE) -> Grid:
    """The test grid: 100 m cells in EPSG:32633."""
    return Grid(shape, X0, Y0, DX, DX, crs_wkt=CRS.from_epsg(EPSG).to_wkt())


def habitat_array(shape: tuple[int, int] = SHAPE) -> np.ndarray:
    """Class 1 in the western 60 % of columns, class 2 east of it, 0 (no data) in a few cells."""
    a = np.ones(shape, dtype=np.uint8)
    a[:, int(shape[1] * 0.6):] = 2
    for r, c in NODATA_CELLS:
        a[r, c] = 0
    return a


def write_habitat(path: Path, array: np.ndarray | None = None, grid: Grid | None = None) -> Path:
    """Write a uint8 class raster with no-data 0."""
    write_geotiff(path, grid or utm_grid(), habitat_array() if array is None else array,
                  nodata=0, dtype="uint8")
    return path


# ---------------------------------------------------------------------------
# scenario TOML
# ---------------------------------------------------------------------------
def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return repr(v)
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"cannot write {v!r} as TOML")


def _is_table_array(v: Any) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def to_toml(data: dict, prefix: str = "") -> str:
    """A small TOML writer for nested dicts, lists of dicts and scalars."""
    lines = [f"{k} = {_toml_value(v)}" for k, v in data.items()
             if not isinstance(v, dict) and not _is_table_array(v)]
    out = "\n".join(lines) + ("\n" if lines else "")
    for k, v in data.items():
        name = f"{prefix}.{k}" if prefix else k
        if isinstance(v, dict):
            out += f"\n[{name}]\n" + to_toml(v, name)
        elif _is_table_array(v):
            for item in v:
                out += f"\n[[{name}]]\n" + to_toml(item, name)
    return out


def apply_overrides(data: dict, overrides: dict[str, Any]) -> dict:
    """A deep copy of ``data`` with dotted keys set (or removed with :data:`DELETE`).

    An integer part indexes a list, e.g. ``"start.releases.0.x"``.
    """
    data = copy.deepcopy(data)
    for dotted, value in overrides.items():
        *parents, last = dotted.split(".")
        node: Any = data
        for part in parents:
            node = node[int(part)] if isinstance(node, list) else node.setdefault(part, {})
        if isinstance(node, list):
            node[int(last)] = value
        elif value is DELETE:
            node.pop(last, None)
        else:
            node[last] = value
    return data


WriteScenario = Callable[..., Path]


@pytest.fixture
def write_scenario(tmp_path: Path) -> WriteScenario:
    """Factory writing a scenario TOML into ``tmp_path`` (habitat raster beside it).

    ``write_scenario({"prey.growth": -1.0}, name="bad.toml")`` writes the base
    scenario with the override applied; ``text=...`` writes raw TOML instead.
    The default habitat raster ``habitat.tif`` is written once.
    """
    write_habitat(tmp_path / "habitat.tif")

    def make(overrides: dict[str, Any] | None = None, name: str = "scenario.toml",
             text: str | None = None) -> Path:
        path = tmp_path / name
        if text is None:
            text = to_toml(apply_overrides(BASE, overrides or {}))
        path.write_text(text)
        return path

    return make


@pytest.fixture
def scenario_path(write_scenario: WriteScenario) -> Path:
    """The valid base scenario, written to ``tmp_path/scenario.toml``."""
    return write_scenario()


def make_landscape(folder: Path) -> Path:
    """Habitat raster and base scenario in ``folder`` (for module-scoped fixtures)."""
    folder.mkdir(parents=True, exist_ok=True)
    write_habitat(folder / "habitat.tif")
    path = folder / "scenario.toml"
    path.write_text(to_toml(BASE))
    return path


def write_run_record(folder, species=None, **info) -> None:
    """A minimal ``run.json`` beside a hand-written ``results.nc`` (a finished run folder)."""
    import json
    from pathlib import Path

    rec = {"variant": "baseline", "species": species or {}, "analysis": {}, **info}
    (Path(folder) / "run.json").write_text(json.dumps(rec))


# ---------------------------------------------------------------------------
# streaming: results files of a chosen length, and the memory an analysis holds
# ---------------------------------------------------------------------------
STREAM_SHAPE = (96, 120)  # rows, cols of 100 m: 92 kB per float64 grid


def write_snapshots(path: Path, snapshots: int, shape: tuple[int, int] = STREAM_SHAPE) -> Path:
    """A ``results.nc`` (written by :class:`preyscape.store.ResultWriter`, as a run writes
    it) with the start and ``snapshots`` more, a quarter year apart: prey on a ridge that
    drifts east, predators behind a front that moves east at 1.5 km/yr. A few no-data
    cells. Invented values for tests of how analyses read snapshots."""
    from preyscape.store import ResultWriter

    grid = utm_grid(shape)
    mask = np.ones(shape, dtype=bool)
    mask[:3, :2] = False
    grid = Grid(shape, grid.x0, grid.y0, grid.dx, grid.dy, grid.crs_wkt, mask)
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]] * DX / 1000.0  # km
    writer = ResultWriter(path, grid, {}, {"title": "streaming test"})
    try:
        for k in range(snapshots + 1):
            t = 0.25 * k
            prey = 500.0 + 400.0 * np.exp(-((xx - 2.0 - 0.3 * t) ** 2 + (yy - 4.0) ** 2) / 2.0)
            predator = 20.0 / (1.0 + np.exp((xx - 1.0 - 1.5 * t) / 0.3))
            writer.write(t, prey, predator)
    finally:
        writer.close()
    return path


def peak_bytes(fn: Callable[[], Any]) -> int:
    """Peak memory allocated while ``fn()`` runs, bytes (numpy arrays included: numpy
    reports its allocations to :mod:`tracemalloc`)."""
    import gc
    import tracemalloc

    gc.collect()
    tracemalloc.start()
    try:
        fn()
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def stream_peaks(folder: Path, analyse: Callable[[Any], Any], counts: tuple[int, ...] = (10, 40),
                 ) -> tuple[dict[int, int], dict[int, Any]]:
    """Peak memory (bytes) and result of ``analyse(ds)`` on results files of each number of
    snapshots (:func:`write_snapshots`, opened lazily with xarray as runs are). A first
    call, not measured, imports and caches what every call needs."""
    import xarray as xr

    peaks: dict[int, int] = {}
    results: dict[int, Any] = {}
    opened = {n: xr.open_dataset(write_snapshots(folder / f"run{n}.nc", n),
                                 decode_times=False) for n in counts}
    try:
        analyse(opened[counts[0]])
        for n, ds in opened.items():
            peaks[n] = peak_bytes(lambda ds=ds, n=n: results.__setitem__(n, analyse(ds)))
    finally:
        for ds in opened.values():
            ds.close()
    return peaks, results
