"""Simple edits of a habitat raster: a corridor, a road, a lake.

Each edit reads a habitat raster, changes the cells a shape covers and
writes a new GeoTIFF (with its metrics beside it); the corridor and the road
can also be written as GeoJSON for a scenario's ``[[measures]]``, so the same
line can be tried as a measure in a variant instead of being painted into
the map.

Cells are chosen exactly as a scenario's measures choose them
(:func:`preyscape.landscape.measures.cells_covered`): a line of width ``w``
covers the cells whose centre lies within ``w/2`` of it, a polygon the
cells whose centre lies inside it, and every shape at least one cell. Cells
without data are never changed, except by a lake, which turns cells into
no-data.

* **corridor**: set the covered cells to a habitat class (default 1, the
  habitat class of generated maps) or a suitability (default 1.0);
* **road**: set them to a road class (default: a new code, one above the
  largest on the map) or a suitability (default 0.0: a sink);
* **lake**: make them no-data (water the animals do not live in; what
  happens at its shore is the scenario's ``landscape.nodata`` rule).
"""

from __future__ import annotations

import json
import math
import os
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from preyscape.errors import InputError
from preyscape.landscape.files import HabitatRaster, Values

__all__ = ["EDITS", "apply_edit", "edit_raster", "measure_snippet", "parse_point",
           "read_shapes"]

#: The edits this module makes.
EDITS = ("corridor", "road", "lake")


def parse_point(text: str, what: str = "point") -> tuple[float, float]:
    """``"x,y"`` (metres) as two floats.

    Raises
    ------
    InputError
        If the text is not two finite numbers separated by a comma.
    """
    parts = str(text).replace(" ", "").split(",")
    try:
        x, y = (float(p) for p in parts)
    except ValueError:
        raise InputError(f"{what} {text!r} is not 'x,y' (two numbers of metres separated by a "
                         "comma, e.g. 4323500,3214000)") from None
    if not (math.isfinite(x) and math.isfinite(y)):
        raise InputError(f"{what} {text!r} must be finite numbers of metres")
    return x, y


def read_shapes(
    raster: HabitatRaster,
    *,
    line: Sequence[str] | None = None,
    at: str | None = None,
    shape: str | os.PathLike[str] | None = None,
) -> list:
    """The shapes of an edit, in the raster's CRS (metres).

    Exactly one of ``line`` (two or more ``"x,y"`` points of a polyline),
    ``at`` (one ``"x,y"`` point) or ``shape`` (a GeoJSON file, read with the
    CRS rules of :func:`preyscape.landscape.measures.read_geometry`) is used.

    Returns
    -------
    list of shapely geometries

    Raises
    ------
    InputError
        If none or several are given, a line has fewer than two points, or
        a shape lies outside the map (the message gives the extent).
    """
    import shapely
    from shapely.geometry import box

    from preyscape.landscape.measures import read_geometry

    given = [k for k, v in (("--line", line), ("--at", at), ("--shape", shape)) if v]
    if len(given) != 1:
        raise InputError("give the shape once: " + (" or ".join(given) if given else
                         "a polyline (--line X,Y X,Y ...), a point (--at X,Y) or a GeoJSON "
                         "file (--shape FILE)"))
    grid = raster.grid
    if shape:
        return [s.geometry for s in read_geometry(shape, grid, source=str(shape))]
    if line:
        pts = [parse_point(p, "--line point") for p in line]
        if len(pts) < 2:
            raise InputError("--line needs at least two points X,Y X,Y (metres)")
        geom = shapely.LineString(pts)
    else:
        geom = shapely.Point(parse_point(at, "--at"))
    if not geom.intersects(box(*grid.bounds)):
        left, bottom, right, top = grid.bounds
        raise InputError(f"the shape lies outside the map, which spans x {left:.0f} to "
                         f"{right:.0f} m and y {bottom:.0f} to {top:.0f} m in its CRS")
    return [geom]


def apply_edit(
    raster: HabitatRaster,
    edit: str,
    shapes: list,
    *,
    width: float | None = None,
    radius: float | None = None,
    value: float | None = None,
) -> tuple[np.ndarray, np.ndarray, float]:
    """The edited values and data mask.

    Parameters
    ----------
    raster : HabitatRaster
        The map to edit (not changed).
    edit : {"corridor", "road", "lake"}
        What to do.
    shapes : list of shapely geometries
        In the raster's CRS (metres).
    width : float, optional
        Width of a corridor or road drawn as a line, metres (> 0). Polygons
        are used as drawn.
    radius : float, optional
        Radius of a lake drawn as a point, metres (> 0).
    value : float, optional
        Class code (non-negative whole number) or suitability (0–1) of a
        corridor or road; defaults in the module docstring.

    Returns
    -------
    values : numpy.ndarray
        The new values (no-data as in :func:`read_raster`).
    mask : numpy.ndarray of bool
        The new data mask.
    value : float
        The value set (NaN for a lake).

    Raises
    ------
    InputError
        For a missing or invalid width, radius or value, or a shape that
        covers no cell with data.
    """
    from preyscape.landscape.io import CLASS_NODATA
    from preyscape.landscape.measures import cells_covered

    if edit not in EDITS:
        raise ValueError(f"edit must be one of {EDITS}, not {edit!r}")
    grid, kind = raster.grid, raster.kind
    lines_or_points = any(g.geom_type not in ("Polygon", "MultiPolygon") for g in shapes)
    if edit == "lake":
        size = radius
        if lines_or_points and size is None:
            raise InputError("a lake drawn as a point or line needs --radius (metres)")
    else:
        size = None if width is None else width / 2.0
        if lines_or_points and size is None:
            raise InputError(f"a {edit} drawn as a line needs --width (metres)")
    if size is not None and not (math.isfinite(size) and size > 0):
        raise InputError(f"{'--radius' if edit == 'lake' else '--width'} must be a positive "
                         "number of metres")
    cells = cells_covered(shapes, grid, size or 0.0)
    if not cells.any():
        raise InputError(f"the {edit} covers no cell with data")
    values = raster.values.copy()
    mask = grid.mask.copy()
    if edit == "lake":
        mask &= ~cells
        if not mask.any():
            raise InputError("the lake would cover every cell with data")
        values[cells] = CLASS_NODATA if kind == "classes" else np.nan
        return values, mask, math.nan
    if value is None:
        if kind == "suitability":
            value = 1.0 if edit == "corridor" else 0.0
        else:
            top = int(values[grid.mask].max())
            value = 1 if edit == "corridor" else top + 1
    value = _check_value(value, kind)
    values[cells] = value
    return values, mask, value


def _check_value(value: float, kind: Values) -> float:
    v = float(value)
    if kind == "suitability":
        if not (math.isfinite(v) and 0.0 <= v <= 1.0):
            raise InputError(f"--value must be a suitability in [0, 1] on this map, not {value!r}")
        return v
    if not (math.isfinite(v) and v == round(v) and 0 <= v <= np.iinfo(np.int32).max):
        raise InputError(f"--value must be a class code (a whole number ≥ 0) on this map, "
                         f"not {value!r}")
    return int(v)


def measure_snippet(edit: str, name: str, geojson: str, width: float | None,
                    kind: Values) -> str:
    """A ``[[measures]]`` table that uses the written GeoJSON, as TOML text.

    A corridor sets habitat values on the cells along the line; a road does
    the same with poor values (a corridor-kind measure, since measures of
    kind ``corridor`` set values on cells whatever they are called). The
    values are examples to edit.
    """
    buffer = "" if width is None else (f"{f'buffer = {width / 2.0!r}':<27}"
                                       f"# m either side: {width:g} m wide\n")
    if edit == "corridor":
        sets = ("suitability = 1.0" if kind == "suitability" else
                "prey_capacity = 1.0        # as the best habitat (example values: edit)\n"
                "prey_movement = 1.0\npredator_movement = 1.0")
    else:
        sets = ("suitability = 0.0          # a sink for prey (example value: edit)"
                if kind == "suitability" else
                "prey_capacity = 0.05       # little cover on and beside the road (example "
                "values: edit)\nprey_movement = 0.3\npredator_mortality = 2.0   # road kill")
    kind_line = 'kind = "corridor"'
    return (f"[[measures]]\nname = {json.dumps(name, ensure_ascii=False)}\n"
            f"{kind_line:<27}# sets habitat values on the cells it covers\n"
            f"geometry = {json.dumps(geojson, ensure_ascii=False)}\n{buffer}{sets}\n"
            "baseline = false           # a proposal: add it in a [[variants]] entry\n")


def edit_raster(
    src: str | os.PathLike[str],
    edit: str,
    *,
    out: str | os.PathLike[str] | None = None,
    measure: str | os.PathLike[str] | None = None,
    line: Sequence[str] | None = None,
    at: str | None = None,
    shape: str | os.PathLike[str] | None = None,
    width: float | None = None,
    radius: float | None = None,
    value: float | None = None,
    name: str | None = None,
    values: Values | None = None,
    overwrite: bool = False,
) -> dict:
    """Edit a habitat raster into a new GeoTIFF and/or write the measure's GeoJSON.

    Parameters
    ----------
    src : str or os.PathLike
        The habitat raster (projected CRS in metres).
    edit : {"corridor", "road", "lake"}
        What to do (see the module docstring).
    out : str or os.PathLike, optional
        The edited GeoTIFF to write (its metrics go beside it).
    measure : str or os.PathLike, optional
        GeoJSON of the corridor or road to write, for ``[[measures]]``.
        At least one of ``out`` and ``measure`` is needed (a lake needs
        ``out``).
    line, at, shape
        The shape: see :func:`read_shapes`.
    width, radius, value
        See :func:`apply_edit`.
    name : str, optional
        Name of the measure (default: the edit's name).
    values : {"classes", "suitability"}, optional
        What the raster holds. Default: guessed.
    overwrite : bool
        Replace existing output files.

    Returns
    -------
    dict
        ``cells`` changed, ``area_km2``, ``value``, ``out``, ``metrics_file``,
        ``metrics``, ``measure`` (path) and ``snippet`` (TOML text), as
        written.

    Raises
    ------
    InputError
        For bad input (named), or existing outputs without ``overwrite``.
    """
    from preyscape.landscape import files
    from preyscape.landscape.metrics import landscape_metrics

    src = Path(src)
    if edit == "lake" and measure is not None:
        raise InputError("a lake is an edit of the map only: give --out, not --measure")
    if out is None and measure is None:
        raise InputError("give --out (the edited raster) and/or --measure (a GeoJSON for a "
                         "scenario's [[measures]])")
    for p in (out, measure):
        if p is not None and Path(p).resolve() == src.resolve():
            raise InputError("write to a new file, not onto the input raster", str(p))
    targets = []
    if out is not None:
        targets += [Path(out), files.metrics_path(out)]
    if measure is not None:
        targets.append(Path(measure))
    for t in targets:
        files.refuse_existing(t, overwrite)
    raster = files.read_raster(src, values)
    try:
        shapes = read_shapes(raster, line=line, at=at, shape=shape)
        new_values, new_mask, set_to = apply_edit(raster, edit, shapes, width=width,
                                                  radius=radius, value=value)
    except InputError as exc:  # name the raster being edited
        if exc.source is None:
            raise InputError(exc.message, str(src)) from None
        raise
    grid = raster.grid.with_mask(new_mask)
    changed = (new_mask != raster.grid.mask) | (
        new_mask & (new_values != raster.values))
    names = dict(raster.names)
    quality = dict(raster.quality)
    if raster.kind == "classes" and edit != "lake" and int(set_to) not in names:
        names[int(set_to)] = edit
        quality.setdefault(int(set_to), 1.0 if edit == "corridor" else 0.05)
    note = None
    cell = max(grid.dx, grid.dy)
    if edit != "lake" and width is not None and width < math.sqrt(2.0) * cell and any(
            g.geom_type not in ("Polygon", "MultiPolygon") for g in shapes):
        # cells within w/2 of a diagonal line touch only at corners unless w >= √2 h
        note = (f"the {edit} is narrower than √2 cells ({math.sqrt(2.0) * cell:.0f} m): where "
                "it runs diagonally its cells may touch only at corners, leaving gaps that "
                "animals moving between neighbouring cells pass through; use --width "
                f"{math.ceil(math.sqrt(2.0) * cell)} or more for an unbroken {edit}")
    result: dict = {"edit": edit, "cells": int(changed.sum()), "note": note,
                    "area_km2": int(changed.sum()) * grid.cell_area_km2,
                    "value": set_to, "kind": raster.kind, "out": None, "measure": None,
                    "snippet": None, "metrics": None, "metrics_file": None}
    with files.staged(targets, overwrite) as tmps:
        k = 0
        if out is not None:
            tags = dict(raster.tags)
            tags[f"PREYSCAPE_{edit.upper()}"] = _describe(edit, shapes, width, radius, set_to)
            files.write_habitat(tmps[0], grid, new_values, raster.kind, names=names,
                                quality=quality, tags=tags)
            metrics = landscape_metrics(grid, new_values, raster.kind, names=names)
            tmps[1].write_text(json.dumps(metrics, indent=1) + "\n", encoding="utf-8")
            result.update(out=Path(out), metrics_file=files.metrics_path(out), metrics=metrics)
            k = 2
        if measure is not None:
            label = name or edit
            props = {"name": label, "edit": edit,
                     "note": "drawn with preyscape landscape " + edit}
            if width is not None:
                props["width_m"] = float(width)
            files.write_geojson(tmps[k], [(g, props) for g in shapes], raster.grid.crs_wkt)
            rel = Path(measure).name
            result.update(measure=Path(measure),
                          snippet=measure_snippet(edit, label, rel, _line_width(shapes, width),
                                                  raster.kind))
    return result


def _line_width(shapes: list, width: float | None) -> float | None:
    """The width a measure needs: only lines and points are buffered."""
    if all(g.geom_type in ("Polygon", "MultiPolygon") for g in shapes):
        return None
    return width


def _describe(edit: str, shapes: list, width: float | None, radius: float | None,
              value: float) -> str:
    parts = [f"{len(shapes)} shape(s)"]
    if width is not None:
        parts.append(f"width {width:g} m")
    if radius is not None:
        parts.append(f"radius {radius:g} m")
    if edit != "lake":
        parts.append(f"value {value:g}")
    return ", ".join(parts)
