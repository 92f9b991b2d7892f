"""Figures of invasion fronts: arrival-time and front-speed maps, front positions.

Maps are drawn in map coordinates (km) with no-data cells in light grey;
times are years, speeds km/yr.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.landscape.grid import Grid
from preyscape.plots import (
    _extent_km,
    _new,
    _save,
    _shown,
    finish_map,
    map_figure,
)

ARRIVAL_CMAP = "cividis"  # sequential, perceptually uniform, readable in grey
SPEED_CMAP = "plasma"
TRANSECT_COLOUR = "#d62728"


def _line_of(tr: Any) -> tuple[str, np.ndarray]:
    # a Transect (has .line and .name), a {"name", "points"} dict, or a bare polyline
    if hasattr(tr, "line"):
        return str(getattr(tr, "name", "")), np.asarray(tr.line, dtype=float)
    if isinstance(tr, dict):
        return str(tr.get("name", "")), np.asarray(tr["points"], dtype=float)
    return "", np.asarray(tr, dtype=float)


def _draw_transects(ax, transects: Sequence[Any]) -> None:
    for tr in transects:
        name, pts = _line_of(tr)
        xs, ys = pts[:, 0] / 1e3, pts[:, 1] / 1e3
        ax.plot(xs, ys, color=TRANSECT_COLOUR, lw=1.4)
        ax.plot(xs[:1], ys[:1], "o", color=TRANSECT_COLOUR, ms=4)  # start of the transect
        if name:
            ax.annotate(name, (xs[-1], ys[-1]), fontsize=7, color=TRANSECT_COLOUR,
                        xytext=(3, 3), textcoords="offset points")


def arrival_map(
    grid: Grid,
    arrival: np.ndarray,
    title: str,
    path: Path,
    transects: Sequence[Any] = (),
) -> Path:
    """Map of arrival times, years, with transects drawn; returns the PNG path.

    Parameters
    ----------
    grid : Grid
        The run grid (metres).
    arrival : numpy.ndarray
        Arrival time per cell, years; NaN where never reached (drawn grey,
        like no-data cells).
    title : str
        Figure title.
    path : pathlib.Path
        PNG to write (atomically).
    transects : sequence
        Transects to draw: :class:`~preyscape.analysis.waves.Transect`
        objects, ``{"name", "points"}`` dicts or polylines of map ``(x, y)``
        in metres. A dot marks each start.
    """
    data = _shown(grid, arrival)
    vmax = float(data.max()) if data.count() else 1.0
    fig, ax, _ = map_figure(grid, arrival, title, ARRIVAL_CMAP, vmin=0.0,
                            vmax=max(vmax, 1e-12),
                            units="arrival time (years); grey: never or no data")
    _draw_transects(ax, transects)
    left, right, bottom, top = _extent_km(grid)
    ax.set_xlim(left, right)
    ax.set_ylim(bottom, top)
    return finish_map(fig, path)


def speed_map(grid: Grid, speed: np.ndarray, title: str, path: Path) -> Path:
    """Map of the local front speed, km/yr; returns the PNG path.

    The colour scale ends at the 98th percentile so that a few noisy cells
    (the local speed is a derivative of interpolated arrival times) do not
    wash out the rest; faster cells are drawn in the top colour.
    """
    vals = _shown(grid, speed).compressed()
    vmax = float(np.percentile(vals, 98)) if vals.size else 1.0
    fig, _, _ = map_figure(grid, speed, title, SPEED_CMAP, vmin=0.0, vmax=max(vmax, 1e-12),
                           units="local front speed (km/yr)", extend="max")
    return finish_map(fig, path)


def front_plot(fit: Any, path: Path, label: str) -> Path:
    """Front position along a transect against time, with the fit and the prediction.

    Parameters
    ----------
    fit : FrontFit
        From :func:`preyscape.analysis.waves.front_speed`.
    path : pathlib.Path
        PNG to write (atomically).
    label : str
        Title, e.g. the transect and species.
    """
    fig = _new((6.4, 4.2))
    ax = fig.add_subplot()
    t_all = np.asarray(fit.all_times, dtype=float)
    x_all = np.asarray(fit.all_positions, dtype=float)
    ax.plot(t_all, x_all, "o", ms=3, color="#9a9a9a", label="front position (not fitted)")
    ax.plot(fit.times, fit.positions, "o", ms=3.5, color="#2a788e",
            label=f"fitted snapshots (n = {fit.n})")
    if fit.n >= 2 and math.isfinite(fit.speed):
        tt = np.array([fit.times[0], fit.times[-1]])
        err = f" ± {fit.stderr:.3g}" if math.isfinite(fit.stderr) else ""
        ax.plot(tt, fit.intercept + fit.speed * tt, "-", color="#2a788e", lw=1.6,
                label=f"fit: {fit.speed:.3g}{err} km/yr")
        if math.isfinite(fit.predicted):
            # the predicted speed through the centre of the fitted points
            tm, xm = float(np.mean(fit.times)), float(np.mean(fit.positions))
            ax.plot(tt, xm + fit.predicted * (tt - tm), "--", color="#b5367a", lw=1.3,
                    label=f"predicted minimal speed: {fit.predicted:.3g} km/yr "
                          f"(ratio {fit.ratio:.3f})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("front position along the transect (km)")
    ax.set_title(label, fontsize=10)
    ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return _save(fig, path)
