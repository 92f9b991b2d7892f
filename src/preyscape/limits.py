"""Limits checked before a run: memory, step count, what 32-bit fields can hold.

A scenario can ask for more than a machine has (a grid of billions of cells)
or for an absurd run (a rate given per day where the file wants per year
makes millions of steps). These checks refuse such a scenario before anything
is allocated or written, with the numbers and what causes them;
:func:`preyscape.assemble.prepare` runs them unless ``allow_large=True``
(``--allow-large`` on the command line). Values beyond what the float32
per-cell fields hold are refused whatever the options.

Examples
--------
>>> round(memory_estimate_mb(1_000_000))  # 180 bytes per cell plus ~250 MB
430
>>> check_steps(years=10.0, dt=0.01, step="auto", save_every=0.5, cells=10_000,
...             explicit_rate=None, rates=lambda: ({}, None), source=str)  # 1000: fine
>>> check_steps(years=10.0, dt=1e-6, step=1e-6, save_every=0.5, cells=10_000,
...             explicit_rate=None, rates=lambda: ({}, None),
...             source=lambda key: f"my.toml: {key}")
Traceback (most recent call last):
...
preyscape.errors.InputError: my.toml: run.step: the run needs 10,000,000 steps ...
"""

from __future__ import annotations

import inspect
import math
from collections.abc import Callable, Sequence

import numpy as np

from preyscape.errors import InputError
from preyscape.scenario import LARGEST, Scenario
from preyscape.solve.stepper import auto_step

__all__ = ["MAX_STEPS", "NS_PER_CELL_STEP", "available_memory_mb", "check_fields",
           "check_memory", "check_movement", "check_steps", "memory_estimate_mb"]

MAX_STEPS = 1_000_000
"""Most steps (movement substeps, for the explicit scheme) a run takes unless allowed.

Common practice, no source: a scenario on the automatic step needs hundreds
to a few thousand steps; a million is a sign of a mistake (a rate, a fixed
step, a stability bound), and costs hours on a large grid."""

NS_PER_CELL_STEP = 15.0
"""Time per cell and step on a 2-core machine, ns (measured: docs/performance.md)."""

BYTES_PER_CELL = 180.0
"""Memory of a run per grid cell, bytes (state and transposed work, reaction fields,
faces, weights and pivots, habitat, start and output buffers; measured:
``benchmarks/run.py --only memory``)."""

BASE_MB = 250.0
"""Memory of Python and the libraries, MB (measured likewise)."""

READ_BYTES_PER_CELL = 24.0
"""Memory to read and check a habitat raster, bytes per raster cell (the band, its
validity, the values and a flipped copy)."""

Source = Callable[[str], str]
"""``source(key)``: how a message names the scenario key ``key`` (file and key path)."""


def memory_estimate_mb(cells: int, raster_cells: int = 0) -> float:
    """Memory a run of ``cells`` grid cells needs, MB.

    Parameters
    ----------
    cells : int
        Cells of the run grid.
    raster_cells : int
        Cells of the habitat raster as stored (read before the run's arrays exist).
    """
    return BASE_MB + max(cells * BYTES_PER_CELL, raster_cells * READ_BYTES_PER_CELL) / 1e6


def available_memory_mb() -> float | None:
    """Memory available to a new run, MB (Linux ``MemAvailable``; None where unknown)."""
    import os

    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemAvailable:"):
                    return int(line.split()[1]) * 1024 / 1e6  # kB (KiB) to MB
    except (OSError, ValueError, IndexError):
        pass
    try:
        return os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") / 1e6
    except (ValueError, OSError, AttributeError):
        return None


def _raster_shape(sc: Scenario) -> tuple[int, int, float, float] | None:
    """Rows, columns and cell sizes (m) of the habitat raster, from its header only."""
    try:
        import rasterio

        with rasterio.open(sc.resolve(sc.landscape.habitat)) as ds:
            return ds.height, ds.width, abs(ds.transform.a), abs(ds.transform.e)
    except Exception:  # noqa: BLE001 - reading the raster reports an unreadable one properly
        return None


def check_memory(sc: Scenario, available: float | None = None) -> None:
    """Refuse a grid whose memory estimate exceeds the available memory, before reading it.

    The grid size comes from the habitat raster's header and
    ``landscape.cell_size`` (``floor(extent / cell_size)`` cells per axis, as
    :func:`preyscape.landscape.io.read_habitat` resamples).

    Parameters
    ----------
    sc : Scenario
        The scenario.
    available : float, optional
        Memory available, MB; default :func:`available_memory_mb`.

    Raises
    ------
    InputError
        With the estimate, the memory available and a cell size that would fit.
    """
    shape = _raster_shape(sc)
    available = available_memory_mb() if available is None else available
    if shape is None or available is None:
        return
    rows, cols, dx, dy = shape
    h = sc.landscape.cell_size
    cells = rows * cols if h is None else int(rows * dy // h) * int(cols * dx // h)
    need = memory_estimate_mb(cells, rows * cols)
    if need <= available:
        return
    if BASE_MB + rows * cols * READ_BYTES_PER_CELL / 1e6 > available:
        fix = ("the raster itself is too large to read: resample it to larger cells first "
               "(gdalwarp -tr SIZE SIZE in.tif out.tif)")
    else:
        fit = max(1.0, (available - BASE_MB) * 1e6 / BYTES_PER_CELL)
        size = (h or max(dx, dy)) * math.sqrt(cells / fit)
        size = float(f"{size * 1.05:.2g}")  # a little margin, two digits
        fix = f"a cell size of {size:g} m or more would fit (landscape.cell_size)"
    key = "landscape.cell_size" if h else f"landscape.habitat ({sc.landscape.habitat})"
    raise InputError(
        f"the grid of {cells:,} cells needs about {need:,.0f} MB, more than the "
        f"{available:,.0f} MB available; {fix}, or pass --allow-large to try anyway",
        f"{sc.path}: {key}")


_ACCURACY = inspect.signature(auto_step).parameters["accuracy"].default


def _bound(rates: dict[str, float], period: float | None, save_every: float) -> str:
    """What sets the automatic step (see :func:`preyscape.solve.stepper.auto_step`)."""
    steps = [(what, _ACCURACY / abs(r)) for what, r in rates.items()
             if math.isfinite(r) and r != 0]
    if period is not None and math.isfinite(period) and period > 0:
        steps.append(("the local oscillation period / 200", period / 200.0))
    steps.append(("run.save_every", save_every))
    return min(steps, key=lambda x: x[1])[0]


def check_steps(*, years: float, dt: float, step: float | str, save_every: float,
                cells: int, explicit_rate: float | None,
                rates: Callable[[], tuple[dict[str, float], float | None]],
                source: Source) -> None:
    """Refuse a run of more than :data:`MAX_STEPS` steps, naming what makes it so long.

    Parameters
    ----------
    years, dt : float
        Run length and step, years.
    step : float or "auto"
        The scenario's ``run.step``.
    save_every : float
        Save interval, years.
    cells : int
        Cells of the grid (for the time estimate).
    explicit_rate : float or None
        For the explicit scheme, the largest movement rate ``dg_x + dg_y``
        (1/yr): every step takes ``ceil(dt * rate / 0.9)`` movement substeps.
    rates : callable
        Returns ``(rates, period)``: the named per-capita rates (1/yr) and the
        local period (yr) that set the automatic step; called only to explain
        a refusal.
    source : callable
        Names a scenario key in the message.

    Raises
    ------
    InputError
        With the step count, a time estimate and the cause: a rate, a fixed
        step or the explicit scheme's stability bound.
    """
    steps = round(years / dt)
    sub = max(1, math.ceil(dt * explicit_rate / 0.9)) if explicit_rate else 1
    total = steps * sub
    if total <= MAX_STEPS:
        return
    hours = total * cells * NS_PER_CELL_STEP * 1e-9 / 3600
    if sub > 1:
        why = (f"the explicit scheme's stability bound: each step of {dt:g} yr needs "
               f"{sub:,} movement substeps (scheme = 'explicit'; 'adi' has no such bound)")
        key = "run.scheme"
    elif step != "auto":
        why = f"the fixed step run.step = {dt:g} yr over run.years = {years:g}"
        key = "run.step"
    else:
        named, period = rates()
        why = (f"the automatic step of {dt:g} yr, set by {_bound(named, period, save_every)}; "
               "check that value and its units (per year)")
        key = "run.step"
    raise InputError(
        f"the run needs {total:,} steps (more than {MAX_STEPS:,}; about {hours:.2g} hours on "
        f"this grid), because of {why}; pass --allow-large to run it anyway", source(key))


_FIELD_KEYS = {"K": "prey.capacity", "r": "prey.growth", "inv_K": "prey.capacity",
               "m": "predator.mortality", "prey_move": "prey.diffusivity or motility",
               "predator_move": "predator.diffusivity or motility"}


def check_fields(fields, source: Source) -> None:
    """Refuse per-cell values beyond what a run holds (a value times its multipliers).

    ``fields`` is a :class:`~preyscape.model.fields.Fields`; every value must be
    finite and at most :data:`preyscape.scenario.LARGEST` in magnitude.

    Raises
    ------
    InputError
        Naming the scenario key whose value, times its multipliers, is too large.
    """
    for name, key in _FIELD_KEYS.items():
        a = getattr(fields, name)
        if a.size and not (np.isfinite(a).all() and float(np.abs(a).max()) <= LARGEST):
            raise InputError(
                "this value times its habitat multipliers (class table or measures) exceeds "
                f"what a per-cell value can hold (32-bit floats, at most {LARGEST:g}); lower "
                "one of them", source(key.split(" ")[0]))


def check_movement(movements: Sequence, source: Source) -> None:
    """Refuse movement operators whose face conductances overflow 32-bit floats.

    ``movements`` are the prey's and the predator's
    :class:`~preyscape.model.movement.Movement`.
    """
    for sp, mv in zip(("prey", "predator"), movements, strict=True):
        if not (np.isfinite(mv.cx).all() and np.isfinite(mv.cy).all()):
            raise InputError(f"the {sp}'s movement rate per cell (diffusivity or motility over "
                             "the squared cell size) overflows 32-bit floats; lower it or use "
                             "larger cells", source(sp))
