"""Make a neutral landscape and write it as a GeoTIFF with its metrics.

The pieces are in :mod:`preyscape.landscape.generate` (fields),
:mod:`preyscape.landscape.files` (writing) and
:mod:`preyscape.landscape.metrics`; this module checks the user's choices,
puts the field on a grid and writes both files atomically.

Default grid: EPSG:3035 (ETRS89 / LAEA Europe), an equal-area projection in
metres, so that cell areas, patch areas and densities per km² are true
areas; the south-west corner sits at the projection's false origin
(4 321 000 m E, 3 210 000 m N, at 52° N 10° E), where distances are also
true to within a fraction of a per cent over a few hundred kilometres. A
made-up landscape is nowhere in particular; give ``crs`` and ``corner`` to
place it in the CRS of other data.
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from preyscape.errors import InputError
from preyscape.landscape import generate

__all__ = ["DEFAULT_CORNER", "DEFAULT_CRS", "PATTERNS", "make_landscape", "pattern_field"]

#: Landscape patterns the generator knows.
PATTERNS = ("random", "fractal", "clusters")

#: Default CRS: ETRS89 / LAEA Europe, equal-area, metres.
DEFAULT_CRS = "EPSG:3035"

#: Default south-west corner, metres in :data:`DEFAULT_CRS` (its false origin).
DEFAULT_CORNER = (4_321_000.0, 3_210_000.0)

#: Largest grid the generator makes (cells).
MAX_CELLS = 25_000_000


def pattern_field(
    pattern: str,
    shape: tuple[int, int],
    seed: int,
    *,
    hurst: float = 0.5,
    marked: float = 0.45,
) -> np.ndarray:
    """The rank field (values in (0, 1), all distinct) of a pattern.

    Parameters
    ----------
    pattern : {"random", "fractal", "clusters"}
        ``"random"``: independent cells (:func:`~generate.random_field`);
        ``"fractal"``: spectral synthesis with Hurst exponent ``hurst``
        (:func:`~generate.fractal_field`); ``"clusters"``: modified random
        clusters with ``marked`` (:func:`~generate.cluster_field`).
    shape : tuple of int
        ``(rows, cols)``.
    seed : int
        Seed; the same seed and settings give the same field.
    hurst, marked : float
        Settings of the fractal and cluster patterns (ignored by the others).
    """
    if pattern == "random":
        return generate.random_field(shape, seed)
    if pattern == "fractal":
        return generate.fractal_field(shape, hurst, seed)
    if pattern == "clusters":
        return generate.cluster_field(shape, marked, seed)
    raise ValueError(f"pattern must be one of {PATTERNS}, not {pattern!r}")


def class_names(n: int) -> tuple[dict[int, str], dict[int, float]]:
    """Names and suggested prey-capacity multipliers of classes 1..n.

    Two classes are "habitat" (1.0) and "matrix" (0.1, the landscape-ecology
    term for the surroundings of habitat patches). More classes are graded
    from "class 1 (best)" (1.0) to "class n (poorest)" (0.1), linearly. The
    multipliers are a starting point for a scenario, not a property of the
    map.
    """
    if n == 1:
        return {1: "habitat"}, {1: 1.0}
    if n == 2:
        return {1: "habitat", 2: "matrix"}, {1: 1.0, 2: 0.1}
    names = {k: f"class {k}" for k in range(1, n + 1)}
    names[1] += " (best)"
    names[n] += " (poorest)"
    quality = {k: round(1.0 - 0.9 * (k - 1) / (n - 1), 3) for k in range(1, n + 1)}
    return names, quality


def make_landscape(
    out: str | os.PathLike[str],
    pattern: str,
    *,
    rows: int = 200,
    cols: int = 200,
    cell_size: float = 50.0,
    seed: int = 0,
    crs: str = DEFAULT_CRS,
    corner: tuple[float, float] | None = None,
    fractions: Sequence[float] | None = None,
    suitability: bool = False,
    hurst: float = 0.5,
    marked: float = 0.45,
    overwrite: bool = False,
    command: str = "",
) -> dict:
    """Generate a landscape and write ``out`` (GeoTIFF) and its metrics (JSON).

    Parameters
    ----------
    out : str or os.PathLike
        GeoTIFF to write. The metrics go beside it, ``NAME.metrics.json``.
    pattern : {"random", "fractal", "clusters"}
        See :func:`pattern_field`.
    rows, cols : int
        Grid size (≥ 2 each).
    cell_size : float
        Square cell size, metres.
    seed : int
        Seed (≥ 0). The same seed and settings give the same raster.
    crs : str
        Projected CRS in metres, anything pyproj accepts. Default
        :data:`DEFAULT_CRS`.
    corner : (float, float), optional
        South-west corner of the map, metres in ``crs``. Default
        :data:`DEFAULT_CORNER` with the default CRS, else ``(0, 0)``.
    fractions : sequence of float, optional
        Area fractions of classes 1, 2, ... (class 1 on the best cells),
        summing to 1. Default ``(0.5, 0.5)``: half habitat, half matrix.
    suitability : bool
        Write the continuous field as suitability (0–1, uniform over the
        cells) instead of classes; ``fractions`` must then be ``None``.
    hurst, marked : float
        Hurst exponent (fractal, 0–1) and share of marked cells (clusters,
        0–1 exclusive).
    overwrite : bool
        Replace existing files.
    command : str
        The command line, stored in the raster's tags for provenance.

    Returns
    -------
    dict
        ``out``, ``metrics_file``, ``kind``, ``grid`` (the Grid) and
        ``metrics`` (:func:`preyscape.landscape.metrics.landscape_metrics`).

    Raises
    ------
    InputError
        For any invalid choice (named, with the valid range), or an existing
        output without ``overwrite``.
    """
    from rasterio.crs import CRS
    from rasterio.errors import CRSError

    from preyscape.landscape import files
    from preyscape.landscape.grid import Grid
    from preyscape.landscape.metrics import landscape_metrics

    out = Path(out)
    src = str(out)
    if pattern not in PATTERNS:
        raise InputError(f"unknown pattern {pattern!r}; choose one of {', '.join(PATTERNS)}", src)
    rows, cols = _count(rows, "rows", src), _count(cols, "cols", src)
    if rows * cols > MAX_CELLS:
        raise InputError(f"{rows} x {cols} cells is more than {MAX_CELLS:,} cells; use fewer "
                         "rows or columns", src)
    if not (isinstance(cell_size, (int, float)) and math.isfinite(cell_size) and cell_size > 0):
        raise InputError(f"--cell-size must be a positive number of metres, not {cell_size!r}",
                         src)
    if not (isinstance(seed, int) and seed >= 0):
        raise InputError(f"--seed must be a whole number ≥ 0, not {seed!r}", src)
    if pattern == "fractal" and not 0.0 <= hurst <= 1.0:
        raise InputError(f"--hurst must lie in [0, 1] (0 rough, 1 smooth), not {hurst!r}", src)
    if pattern == "clusters" and not 0.0 < marked < 1.0:
        raise InputError(f"--marked must lie between 0 and 1 (exclusive), not {marked!r}",
                         src)
    if suitability and fractions is not None:
        raise InputError("give either class fractions or suitability, not both", src)
    if not suitability:
        fractions = _fractions(fractions if fractions is not None else (0.5, 0.5), src)
    try:
        crs_obj = CRS.from_user_input(crs)
    except CRSError as exc:
        raise InputError(f"--crs {crs!r} is not a coordinate reference system ({exc})",
                         src) from None
    if not files.projected_in_metres(crs_obj):
        raise InputError(f"--crs {crs} is not a projected CRS in metres; give e.g. "
                         f"{DEFAULT_CRS} (equal-area, Europe) or a UTM zone such as EPSG:32633",
                         src)
    if corner is None:
        corner = DEFAULT_CORNER if crs == DEFAULT_CRS else (0.0, 0.0)
    x_sw, y_sw = (float(corner[0]), float(corner[1]))
    if not (math.isfinite(x_sw) and math.isfinite(y_sw)):
        raise InputError(f"--corner must be two finite numbers of metres, not {corner!r}", src)

    field = pattern_field(pattern, (rows, cols), seed, hurst=hurst, marked=marked)
    grid = Grid((rows, cols), x_sw, y_sw + rows * cell_size, float(cell_size), float(cell_size),
                crs_obj.to_wkt())
    tags = {"PREYSCAPE_PATTERN": pattern, "PREYSCAPE_SEED": str(seed),
            "PREYSCAPE_NOTE": "made-up neutral landscape, not a survey of any place"}
    if pattern == "fractal":
        tags["PREYSCAPE_HURST"] = repr(float(hurst))
    if pattern == "clusters":
        tags["PREYSCAPE_MARKED"] = repr(float(marked))
    if command:
        tags["PREYSCAPE_COMMAND"] = command
    if suitability:
        kind, values, names, quality = "suitability", field, {}, {}
    else:
        kind = "classes"
        values = generate.habitat_classes(field, fractions)
        names, quality = class_names(len(fractions))
        tags["PREYSCAPE_FRACTIONS"] = ",".join(repr(float(f)) for f in fractions)
    metrics = landscape_metrics(grid, values, kind, names=names)
    m_path = files.metrics_path(out)
    with files.staged([out, m_path], overwrite) as (tif, js):
        files.write_habitat(tif, grid, values, kind, names=names, quality=quality, tags=tags)
        js.write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
    return {"out": out, "metrics_file": m_path, "kind": kind, "grid": grid, "metrics": metrics}


def _count(n: object, what: str, src: str) -> int:
    if not (isinstance(n, int) and n >= 2):
        raise InputError(f"--{what} must be a whole number ≥ 2, not {n!r}", src)
    return n


def _fractions(fr: Sequence[float], src: str) -> list[float]:
    out = [float(f) for f in fr]
    if not out or len(out) > 64:
        raise InputError(f"give between 1 and 64 class fractions, not {len(out)}", src)
    bad = [f for f in out if not (math.isfinite(f) and 0.0 <= f <= 1.0)]
    if bad:
        raise InputError(f"class fractions must lie in [0, 1]; got {bad[0]!r}", src)
    total = sum(out)
    if not math.isclose(total, 1.0, abs_tol=1e-6):
        terms = " + ".join(f"{f:g}" for f in out)
        raise InputError(f"class fractions must add up to 1, but {terms} = {total:.6g}", src)
    return out
