"""Maps and figures of a run (matplotlib object API, no global state).

Every figure is built on its own :class:`matplotlib.figure.Figure` with an Agg
canvas, so long runs and many figures leak no memory and need no display.
Densities use perceptually uniform colour maps; no-data cells are drawn in
light grey; axes are map coordinates in km.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from preyscape.landscape.grid import Grid

NO_DATA = "#d9d9d9"
SPECIES_CMAP = {"prey": "viridis", "predator": "magma"}
# habitat classes: an ordered set of muted, distinguishable colours (ours)
CLASS_COLOURS = [
    "#c9d77a", "#2f6b3a", "#5fa3c7", "#b5533c", "#3b3b3b", "#9c7fb8", "#e0a84f",
    "#7fbfa6", "#8c6d46", "#d47fa6",
]


MAX_PIXELS = 1200  # a map never needs more cells per side than the figure has pixels


def thin(grid: Grid) -> int:
    """Stride that brings the grid to at most :data:`MAX_PIXELS` cells per side."""
    return max(1, -(-max(grid.ny, grid.nx) // MAX_PIXELS))


def _shown(grid: Grid, values: np.ndarray) -> np.ma.MaskedArray:
    # every k-th cell on large grids: the figure could not show more, and the
    # full-resolution RGBA images matplotlib would build take several bytes per cell
    k = thin(grid)
    v = np.asarray(values)[::k, ::k]
    return np.ma.masked_where(~grid.mask[::k, ::k] | ~np.isfinite(v), v)


def _extent_km(grid: Grid) -> tuple[float, float, float, float]:
    left, bottom, right, top = grid.bounds
    return (left / 1e3, right / 1e3, bottom / 1e3, top / 1e3)


def _new(figsize=(6.4, 5.4), layout: str | None = None) -> Figure:
    fig = Figure(figsize=figsize, dpi=110, layout=layout)
    FigureCanvasAgg(fig)
    return fig


def _save(fig: Figure, path: Path) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name("." + path.name + ".tmp.png")
    fig.savefig(tmp, format="png", bbox_inches="tight")
    tmp.replace(path)
    return path


def _axes_labels(ax, grid: Grid) -> None:
    ax.set_xlabel("easting (km)")
    ax.set_ylabel("northing (km)")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.set_aspect("equal")


def map_figure(grid: Grid, values: np.ndarray, title: str, cmap, *, norm=None,
               vmin: float | None = None, vmax: float | None = None,
               units: str | None = None, extend: str = "neither",
               outlines=None, underlay: np.ndarray | None = None):
    """Start a map of one raster: the one helper every map uses.

    No-data cells are grey, axes in km, a title, a colour bar if ``units``.
    ``outlines`` (:class:`~preyscape.landscape.placed.Outline`) draws the
    measures of the run shown, with a legend; ``underlay`` (a habitat layer)
    is drawn faintly beneath values that are NaN on data cells.

    Returns ``(fig, ax, image)``; finish with :func:`finish_map`. ``cmap`` is a
    colour map name or object; ``norm`` or ``vmin``/``vmax`` set its scale.
    """
    fig = _new()
    ax = fig.add_subplot()
    if underlay is not None:
        ax.imshow(_shown(grid, underlay), extent=_extent_km(grid), cmap="Greys",
                  alpha=0.25, interpolation="nearest")
    im = ax.imshow(_shown(grid, values), extent=_extent_km(grid), cmap=_cmap(cmap), norm=norm,
                   vmin=vmin, vmax=vmax, interpolation="nearest")
    ax.set_facecolor(NO_DATA)
    _axes_labels(ax, grid)
    ax.set_title(title, fontsize=10)
    if units is not None:
        fig.colorbar(im, ax=ax, shrink=0.85, label=units, extend=extend)
    if outlines:
        handles = draw_outlines(ax, outlines, grid)
        if handles:
            ax.legend(handles=handles, loc="lower left", fontsize=7, framealpha=0.8)
    return fig, ax, im


def finish_map(fig: Figure, path: Path) -> Path:
    """Lay out and save a figure from :func:`map_figure`; returns the PNG path."""
    fig.tight_layout()
    return _save(fig, path)


def density_map(
    grid: Grid,
    values: np.ndarray,
    title: str,
    path: Path,
    *,
    cmap: str = "viridis",
    vmax: float | None = None,
    units: str = "animals per km²",
) -> Path:
    """Draw one density map (animals/km²) with no-data masked; returns the PNG path."""
    data = _shown(grid, values)
    vmax = vmax if vmax is not None else (float(data.max()) if data.count() else 1.0)
    fig, _, _ = map_figure(grid, values, title, cmap, vmin=0.0, vmax=max(vmax, 1e-12),
                           units=units)
    return finish_map(fig, path)


def _cmap(name):
    from matplotlib import colormaps

    cm = colormaps[name] if isinstance(name, str) else name
    return cm.with_extremes(bad=NO_DATA)


MEASURE_STYLE = {  # ours: line colour and style per kind of measure
    "fence": {"color": "#d62728", "lw": 1.6, "ls": "-"},
    "corridor": {"color": "#ff7f0e", "lw": 1.2, "ls": "-"},
    "refuge": {"color": "#1f77b4", "lw": 1.2, "ls": "--"},
}


def draw_outlines(ax, outlines, grid: Grid) -> list:
    """Draw measures on a map axis (km): fence lines, corridor and refuge outlines.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        A map axis in km.
    outlines : sequence of preyscape.landscape.placed.Outline
        The measures as plain lines (metres), cells and faces.
    grid : Grid
        The grid of the map.

    Returns
    -------
    list
        Legend handles, one per measure drawn.
    """
    from matplotlib.lines import Line2D

    handles = []
    for m in outlines or []:
        st = MEASURE_STYLE.get(m.kind, MEASURE_STYLE["fence"])
        drawn = False
        if m.kind == "fence" and m.lines:
            for line in m.lines:
                ax.plot(line[:, 0] / 1e3, line[:, 1] / 1e3, color=st["color"], lw=st["lw"],
                        ls=st["ls"])
            drawn = True
        elif m.cells is not None:
            k = thin(grid)
            ax.contour(grid.x[::k] / 1e3, grid.y[::k] / 1e3,
                       np.asarray(m.cells)[::k, ::k].astype(float), levels=[0.5],
                       colors=[st["color"]], linewidths=st["lw"], linestyles=st["ls"])
            drawn = True
        elif m.faces is not None:  # a fence from a raster: the outline of its cells
            _draw_faces(ax, grid, m.faces, st)
            drawn = True
        if drawn:
            handles.append(Line2D([], [], color=st["color"], lw=st["lw"], ls=st["ls"],
                                  label=f"{m.kind}: {m.name}"))
    return handles


def _draw_faces(ax, grid: Grid, faces, st: dict) -> None:
    fx, fy = faces
    xe = (grid.x0 + np.arange(grid.nx + 1) * grid.dx) / 1e3
    ye = (grid.y0 - np.arange(grid.ny + 1) * grid.dy) / 1e3
    for i, k in zip(*np.nonzero(fx), strict=True):
        ax.plot([xe[k], xe[k]], [ye[i], ye[i + 1]], color=st["color"], lw=st["lw"])
    for i, j in zip(*np.nonzero(fy), strict=True):
        ax.plot([xe[j], xe[j + 1]], [ye[i], ye[i]], color=st["color"], lw=st["lw"])


def habitat_map(grid: Grid, habitat: np.ndarray, classes: dict[int, str] | None,
                title: str, path: Path, *, outlines=None) -> Path:
    """Draw the habitat layer: class codes with a legend, or suitability 0–1.

    With ``outlines`` (:class:`~preyscape.landscape.placed.Outline`) the
    fences, corridors and refuges are drawn on top.
    """
    fig = _new()
    ax = fig.add_subplot()
    k = thin(grid)
    mask = grid.mask[::k, ::k]
    hab = np.asarray(habitat)[::k, ::k]
    data = np.ma.masked_where(~mask, hab)
    if classes:
        codes = sorted(classes)
        pos = np.searchsorted(codes, np.where(mask, hab, codes[0]))
        idx = np.ma.masked_where(~mask, np.clip(pos, 0, len(codes) - 1))
        colours = [CLASS_COLOURS[k % len(CLASS_COLOURS)] for k in range(len(codes))]
        cm = ListedColormap(colours).with_extremes(bad=NO_DATA)
        norm = BoundaryNorm(np.arange(len(codes) + 1) - 0.5, len(codes))
        ax.imshow(idx, extent=_extent_km(grid), cmap=cm, norm=norm, interpolation="nearest")
        handles = [Patch(color=colours[k], label=f"{c} {classes[c]}") for k, c in enumerate(codes)]
        handles.append(Patch(color=NO_DATA, label="no data"))
        if outlines:
            handles += draw_outlines(ax, outlines, grid)
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
                  frameon=False)
    else:
        im = ax.imshow(data, extent=_extent_km(grid), cmap=_cmap("cividis"), vmin=0, vmax=1,
                       interpolation="nearest")
        fig.colorbar(im, ax=ax, shrink=0.85, label="suitability (0–1)")
        if outlines:
            hs = draw_outlines(ax, outlines, grid)
            if hs:
                ax.legend(handles=hs, loc="lower left", fontsize=7)
    ax.set_facecolor(NO_DATA)
    _axes_labels(ax, grid)
    ax.set_title(title, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def totals_plot(time: np.ndarray, prey: np.ndarray, predator: np.ndarray | None,
                names: dict[str, str], path: Path) -> Path:
    """Landscape totals of both species (``predator`` None: prey alone) against time (years)."""
    fig = _new((7.0, 3.8))
    ax = fig.add_subplot()
    ax.plot(time, prey, color="#2a788e", label=f"prey ({names.get('prey') or 'prey'})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("prey in the landscape (animals)", color="#2a788e")
    if predator is None:
        ax.set_title("Landscape total (no predator in this scenario)", fontsize=10)
        fig.tight_layout()
        return _save(fig, path)
    ax2 = ax.twinx()
    ax2.plot(time, predator, color="#b5367a",
             label=f"predator ({names.get('predator') or 'predator'})")
    ax2.set_ylabel("predators in the landscape (animals)", color="#b5367a")
    lines = ax.get_lines() + ax2.get_lines()
    ax.legend(lines, [ln.get_label() for ln in lines], loc="upper right", fontsize=8)
    ax.set_title("Landscape totals", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def snapshot_panels(grid: Grid, times: np.ndarray, frames: list[np.ndarray], species: str,
                    name: str, path: Path) -> Path:
    """A row of density maps at chosen times on one shared colour scale."""
    n = len(frames)
    fig = _new((2.3 * n + 1.2, 2.9), layout="constrained")
    vmax = max(float(np.nanmax(f, initial=0.0)) for f in frames) or 1.0
    cm = _cmap(SPECIES_CMAP.get(species, "viridis"))
    im = None
    for k, (t, f) in enumerate(zip(times, frames, strict=True)):
        ax = fig.add_subplot(1, n, k + 1)
        data = _shown(grid, f)
        im = ax.imshow(data, extent=_extent_km(grid), cmap=cm, vmin=0, vmax=vmax,
                       interpolation="nearest")
        ax.set_facecolor(NO_DATA)
        ax.set_title(f"t = {t:g} yr", fontsize=9)
        ax.set_aspect("equal")
        ax.tick_params(labelsize=6)
        ax.ticklabel_format(useOffset=False, style="plain")
    fig.suptitle(f"{species} ({name}) density, animals per km²; axes in km", fontsize=9)
    fig.colorbar(im, ax=fig.axes, shrink=0.9, pad=0.01)
    return _save(fig, path)
