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
    fig.savefig(tmp, format="png")
    tmp.replace(path)
    return path


def _axes_labels(ax, grid: Grid) -> None:
    ax.set_xlabel("easting (km)")
    ax.set_ylabel("northing (km)")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.set_aspect("equal")


def density_map(
    grid: Grid,
    values: np.ndarray,
    title: str,
    path: Path,
    cmap: str = "viridis",
    vmax: float | None = None,
    units: str = "animals per km²",
) -> Path:
    """Draw one density map (animals/km²) with no-data masked; returns the PNG path."""
    fig = _new()
    ax = fig.add_subplot()
    data = _shown(grid, values)
    cm = _cmap(cmap)
    vmax = vmax if vmax is not None else (float(data.max()) if data.count() else 1.0)
    im = ax.imshow(data, extent=_extent_km(grid), cmap=cm, vmin=0.0, vmax=max(vmax, 1e-12),
                   interpolation="nearest")
    ax.set_facecolor(NO_DATA)
    _axes_labels(ax, grid)
    ax.set_title(title, fontsize=10)
    fig.colorbar(im, ax=ax, shrink=0.85, label=units)
    fig.tight_layout()
    return _save(fig, path)


def _cmap(name: str):
    from matplotlib import colormaps

    return colormaps[name].with_extremes(bad=NO_DATA)


def habitat_map(grid: Grid, habitat: np.ndarray, classes: dict[int, str] | None,
                title: str, path: Path) -> Path:
    """Draw the habitat layer: class codes with a legend, or suitability 0–1."""
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
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
                  frameon=False)
    else:
        im = ax.imshow(data, extent=_extent_km(grid), cmap=_cmap("cividis"), vmin=0, vmax=1,
                       interpolation="nearest")
        fig.colorbar(im, ax=ax, shrink=0.85, label="suitability (0–1)")
    ax.set_facecolor(NO_DATA)
    _axes_labels(ax, grid)
    ax.set_title(title, fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def totals_plot(time: np.ndarray, prey: np.ndarray, predator: np.ndarray,
                names: dict[str, str], path: Path) -> Path:
    """Landscape totals of both species against time (years)."""
    fig = _new((7.0, 3.8))
    ax = fig.add_subplot()
    ax.plot(time, prey, color="#2a788e", label=f"prey ({names.get('prey') or 'prey'})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("prey in the landscape (animals)", color="#2a788e")
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


def draw_run(folder: Path, sc, grid: Grid, habitat: np.ndarray, means: dict,
             finals: dict) -> list[Path]:
    """Draw the standard maps of a finished run into ``folder/maps``.

    Parameters
    ----------
    folder : pathlib.Path
        The (temporary) run folder holding ``results.nc``.
    sc : Scenario
        The scenario (names, class table, run length).
    grid : Grid
        The run grid.
    habitat : numpy.ndarray
        Habitat classes or suitability on the grid.
    means, finals : dict
        Time-mean and final densities per species, animals/km².
    """
    import xarray as xr

    maps = folder / "maps"
    names = {"prey": sc.prey.name, "predator": sc.predator.name}
    classes = ({c.code: c.name or str(c.code) for c in sc.landscape.classes}
               if sc.landscape.values == "classes" else None)
    out = [habitat_map(grid, habitat, classes, f"Habitat: {sc.title or sc.path.stem}",
                       maps / "habitat.png")]
    for sp in ("prey", "predator"):
        nm = names[sp] or sp
        out.append(density_map(grid, means[sp], f"Time-mean {sp} ({nm})",
                               maps / f"{sp}_mean.png", SPECIES_CMAP[sp]))
        out.append(density_map(grid, finals[sp], f"Final {sp} ({nm}), t = {sc.run.years:g} yr",
                               maps / f"{sp}_final.png", SPECIES_CMAP[sp]))
    with xr.open_dataset(folder / "results.nc", decode_times=False) as ds:
        t = ds["time"].values
        out.append(totals_plot(t, ds["prey_total"].values, ds["predator_total"].values, names,
                               maps / "totals.png"))
        pick = np.unique(np.linspace(0, len(t) - 1, 5).round().astype(int))
        for sp in ("prey", "predator"):
            frames = [ds[sp].isel(time=int(k)).values for k in pick]
            out.append(snapshot_panels(grid, t[pick], frames, sp, names[sp] or sp,
                                       maps / f"{sp}_snapshots.png"))
    return out
