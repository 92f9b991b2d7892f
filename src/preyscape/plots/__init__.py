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
               units: str | None = None, extend: str = "neither"):
    """Start a map of one raster: no-data grey, axes in km, title, colour bar if ``units``.

    Returns ``(fig, ax, image)``; finish with :func:`finish_map`. ``cmap`` is a
    colour map name or object; ``norm`` or ``vmin``/``vmax`` set its scale.
    """
    fig = _new()
    ax = fig.add_subplot()
    im = ax.imshow(_shown(grid, values), extent=_extent_km(grid), cmap=_cmap(cmap), norm=norm,
                   vmin=vmin, vmax=vmax, interpolation="nearest")
    ax.set_facecolor(NO_DATA)
    _axes_labels(ax, grid)
    ax.set_title(title, fontsize=10)
    if units is not None:
        fig.colorbar(im, ax=ax, shrink=0.85, label=units, extend=extend)
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


def draw_measures(ax, folder: Path, measures: list[dict], grid: Grid) -> list:
    """Draw measures on a map axis (km): fence lines, corridor and refuge outlines.

    ``measures`` are the records of ``run.json`` (files relative to ``folder``).
    Returns legend handles.
    """
    import json

    from matplotlib.lines import Line2D

    handles = []
    x = grid.x / 1e3
    y = grid.y / 1e3
    for m in measures or []:
        st = MEASURE_STYLE.get(m["kind"], MEASURE_STYLE["fence"])
        drawn = False
        if m["kind"] == "fence" and m.get("geometry_file"):
            doc = json.loads((folder / m["geometry_file"]).read_text())
            for f in doc["features"]:
                for line in _lines_of(f["geometry"]):
                    xs, ys = zip(*[(p[0] / 1e3, p[1] / 1e3) for p in line], strict=True)
                    ax.plot(xs, ys, color=st["color"], lw=st["lw"], ls=st["ls"])
                    drawn = True
        elif m.get("cells_file"):
            import rasterio

            with rasterio.open(folder / m["cells_file"]) as src:
                cells = src.read(1) == 1
            k = thin(grid)
            ax.contour(x[::k], y[::k], cells[::k, ::k].astype(float), levels=[0.5],
                       colors=[st["color"]], linewidths=st["lw"], linestyles=st["ls"])
            drawn = True
        elif m.get("faces_file"):  # a fence from a raster: the outline of its cells
            with np.load(folder / m["faces_file"]) as z:
                fx, fy = z["between_columns"], z["between_rows"]
            xe = (grid.x0 + np.arange(grid.nx + 1) * grid.dx) / 1e3
            ye = (grid.y0 - np.arange(grid.ny + 1) * grid.dy) / 1e3
            for i, k in zip(*np.nonzero(fx), strict=True):
                ax.plot([xe[k], xe[k]], [ye[i], ye[i + 1]], color=st["color"], lw=st["lw"])
            for i, j in zip(*np.nonzero(fy), strict=True):
                ax.plot([xe[j], xe[j + 1]], [ye[i], ye[i]], color=st["color"], lw=st["lw"])
            drawn = True
        if drawn:
            handles.append(Line2D([], [], color=st["color"], lw=st["lw"], ls=st["ls"],
                                  label=f"{m['kind']}: {m['name']}"))
    return handles


def _lines_of(geom: dict) -> list:
    t = geom["type"]
    c = geom.get("coordinates")
    if t == "LineString":
        return [c]
    if t == "MultiLineString":
        return list(c)
    if t == "Polygon":
        return list(c)
    if t == "MultiPolygon":
        return [ring for poly in c for ring in poly]
    if t == "GeometryCollection":
        return [ln for g in geom["geometries"] for ln in _lines_of(g)]
    return []


def habitat_map(grid: Grid, habitat: np.ndarray, classes: dict[int, str] | None,
                title: str, path: Path, folder: Path | None = None,
                measures: list[dict] | None = None) -> Path:
    """Draw the habitat layer: class codes with a legend, or suitability 0–1.

    With ``measures`` (records of ``run.json``, files relative to ``folder``)
    the fences, corridors and refuges are drawn on top.
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
        if measures:
            handles += draw_measures(ax, folder, measures, grid)
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
                  frameon=False)
    else:
        im = ax.imshow(data, extent=_extent_km(grid), cmap=_cmap("cividis"), vmin=0, vmax=1,
                       interpolation="nearest")
        fig.colorbar(im, ax=ax, shrink=0.85, label="suitability (0–1)")
        if measures:
            hs = draw_measures(ax, folder, measures, grid)
            if hs:
                ax.legend(handles=hs, loc="lower left", fontsize=7)
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
             finals: dict, measures: list[dict] | None = None) -> list[Path]:
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
    measures : list of dict, optional
        Measure records (``run.json``), drawn on the habitat map.
    """
    import xarray as xr

    maps = folder / "maps"
    names = {"prey": sc.prey.name, "predator": sc.predator.name}
    classes = ({c.code: c.name or str(c.code) for c in sc.landscape.classes}
               if sc.landscape.values == "classes" else None)
    title = f"Habitat: {sc.title or sc.path.stem}"
    if getattr(sc, "variant", "baseline") != "baseline":
        title += f" [{sc.variant}]"
    out = [habitat_map(grid, habitat, classes, title, maps / "habitat.png", folder, measures)]
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
