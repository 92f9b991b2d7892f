"""Maps of hotspot analyses: Gi* z-scores with significant cells marked, persistence."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.colors import TwoSlopeNorm
from matplotlib.patches import Patch

from preyscape.landscape.grid import Grid
from preyscape.plots import (
    NO_DATA,
    _shown,
    finish_map,
    map_figure,
    thin,
)

HOT = "#67001f"  # dark ends of the RdBu colour map, so outlines read as its extremes
COLD = "#053061"


def _centres_km(grid: Grid) -> tuple[np.ndarray, np.ndarray]:
    k = thin(grid)
    return grid.x[::k] / 1e3, grid.y[::k] / 1e3


def _mark(ax, grid: Grid, cells: np.ndarray, colour: str, hatch: str) -> bool:
    """Outline and hatch the cells where ``cells`` is True; False if there are none."""
    k = thin(grid)
    sel = np.asarray(cells, dtype=bool)[::k, ::k] & grid.mask[::k, ::k]
    if not sel.any():
        return False
    x, y = _centres_km(grid)
    if sel.shape[0] < 2 or sel.shape[1] < 2:  # contouring needs two cells per axis
        return False
    f = sel.astype(float)
    ax.contourf(x, y, f, levels=[0.5, 1.5], colors="none", hatches=[hatch])
    ax.contour(x, y, f, levels=[0.5], colors=colour, linewidths=0.9)
    return True


def hotspot_map(
    grid: Grid,
    z: np.ndarray,
    hot: np.ndarray,
    cold: np.ndarray,
    title: str,
    path: Path,
) -> Path:
    """Map Gi* z-scores on a diverging scale centred on 0, significant cells marked.

    Significant hotspots are outlined in dark red and hatched ``///``,
    coldspots outlined in dark blue and hatched ``\\\\``. No-data cells are
    grey; axes are map coordinates in km.

    Parameters
    ----------
    grid : Grid
        The grid (metres; its mask marks cells with data).
    z : numpy.ndarray
        Gi* z-scores (dimensionless), NaN off data.
    hot, cold : numpy.ndarray of bool
        Significant hot and cold spots.
    title : str
        Figure title.
    path : pathlib.Path
        The PNG to write.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    data = _shown(grid, z)
    lim = float(np.abs(data).max()) if data.count() else 1.0
    lim = max(lim, 1.0)  # a flat field still gets a readable scale of ±1
    fig, ax, _ = map_figure(grid, z, title, "RdBu_r",
                            norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim),
                            units="Gi* z-score")
    handles = []
    if _mark(ax, grid, hot, HOT, "///"):
        handles.append(Patch(facecolor="none", edgecolor=HOT, hatch="///",
                             label="hotspot (FDR)"))
    if _mark(ax, grid, cold, COLD, "\\\\"):
        handles.append(Patch(facecolor="none", edgecolor=COLD, hatch="\\\\",
                             label="coldspot (FDR)"))
    handles.append(Patch(color=NO_DATA, label="no data"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.0, -0.12), ncol=3,
              fontsize=7, frameon=False)
    return finish_map(fig, path)


def persistence_map(grid: Grid, fraction: np.ndarray, title: str, path: Path) -> Path:
    """Map the share of snapshots (0–1) in which each cell is a significant hotspot.

    Parameters
    ----------
    grid : Grid
        The grid (metres; its mask marks cells with data).
    fraction : numpy.ndarray
        Share of snapshots, 0–1, NaN off data.
    title : str
        Figure title.
    path : pathlib.Path
        The PNG to write.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    fig, _, _ = map_figure(grid, fraction, title, "YlOrRd", vmin=0.0, vmax=1.0,
                           units="share of snapshots as hotspot (0–1)")
    return finish_map(fig, path)
