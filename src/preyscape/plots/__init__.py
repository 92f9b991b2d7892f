"""Maps and figures of a run (matplotlib object API, no global state).

Every figure is built on its own :class:`matplotlib.figure.Figure` with an Agg
canvas, so long runs and many figures leak no memory and need no display.

The map standard
----------------
Every map is made by :func:`map_figure` and :func:`finish_map` (one raster),
:func:`map_panels` (the same grid several times, one colour scale) or, for
the animation, :func:`decorate_map` on each panel. They draw, on every map:

- cells without habitat data hatched grey (``////``), unlike every real
  value; data cells that have no value of the quantity shown (a front that
  never arrived) dotted (``....``) over white or the habitat underlay;
- where the values leave cells empty, a faint habitat underlay (the class
  colours mixed with white, named in the legend);
- every measure of the run shown (fences, corridors, refuges) with a legend
  entry, by line style as well as colour;
- a scale bar and a north arrow (grid north: the grid is north-up);
- axes in km from the map's south-west corner, and a caption naming the
  coordinate reference system, the corner's easting and northing and the
  cell size, so the map can be found in a GIS;
- a title naming the quantity (with units) and the run or variant;
- perceptually uniform colour maps (viridis, magma, cividis) for amounts,
  colour-blind-safe diverging ones (ColorBrewer RdBu) for differences;
- a legend and caption below the map, never clipped (the PNG is cut to its
  content).

What a map shows of its run (measures, habitat, the run's name) can be
passed to each call or set once for a block of code with :func:`map_context`;
the analysis commands and the report set it from the run they analyse, so
every writer's maps carry them.

Examples
--------
>>> import numpy as np
>>> from preyscape.landscape.grid import Grid
>>> grid = Grid((40, 50), 455_000.0, 6_846_000.0, 25.0, 25.0)
>>> crs_label(grid)
'no coordinate reference system (plain metres)'
>>> nice_length(1.25)
1.0
>>> fig, ax, _ = map_figure(grid, np.ones(grid.shape), "Prey density", "viridis",
...                         vmin=0, vmax=2, units="animals per km²", run="baseline")
>>> finish_map(fig, out_folder / "map.png").is_file()
True
"""

from __future__ import annotations

import gc
import io
import math
import re
import textwrap
from collections.abc import Iterator, Mapping, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch, Rectangle

from preyscape.landscape.grid import Grid
from preyscape.plots.palettes import CLASS_PALETTE, NO_DATA, habitat_colours, pastel

__all__ = ["CLASS_COLOURS", "Habitat", "MapContext", "NO_DATA", "SPECIES_CMAP", "crs_label",
           "decorate_map", "density_map", "draw_outlines", "finish_map", "habitat_colours",
           "habitat_map", "map_caption", "map_context", "map_figure", "map_panels",
           "nice_length", "snapshot_panels", "thin", "totals_plot"]

NO_DATA_EDGE = "#9a9a9a"  # the hatch lines of no-data cells
NO_DATA_HATCH = "////"
NO_VALUE_HATCH = "...."
SPECIES_CMAP = {"prey": "viridis", "predator": "magma"}
CLASS_COLOURS = list(CLASS_PALETTE)
DPI = 110
TRANSPARENT = (0.0, 0.0, 0.0, 0.0)

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
    fig = Figure(figsize=figsize, dpi=DPI, layout=layout)
    FigureCanvasAgg(fig)
    return fig


def _save(fig: Figure, path: Path, *, palette: bool = True) -> Path:
    """Save a figure as PNG, cut to its content, atomically.

    ``palette``: store 256 indexed colours, about a third of the bytes of full
    colour (:func:`_indexed`).
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name("." + path.name + ".tmp.png")
    buf = io.BytesIO()
    fig.savefig(buf, format="png", bbox_inches="tight", pad_inches=0.08)
    if palette:
        from PIL import Image

        buf.seek(0)
        ramps = [im.get_cmap()(np.linspace(0.0, 1.0, 256))[:, :3]
                 for ax in fig.axes for im in ax.get_images()]
        with Image.open(buf) as im:
            _indexed(im.convert("RGB"), ramps).save(tmp, format="PNG", optimize=True)
    else:
        tmp.write_bytes(buf.getvalue())
    tmp.replace(path)
    # A figure holds reference cycles (figure, canvas, axes), so the figures saved before,
    # with their copies of the grid, are freed only by the cycle collector, which large
    # arrays do not set off: collect now, so a run of maps holds about one figure at a time
    # (a third less peak memory on 1000 x 1000 cells, at no measurable cost).
    gc.collect()
    return path


def _indexed(rgb, ramps: list[np.ndarray]):
    """``rgb`` with a 256-colour palette that keeps every colour-map ramp smooth.

    A median cut of the picture alone spends its colours on the large areas
    and bands the rarely used ends of a colour bar; so the ramps of the
    figure's colour maps are added to the picture it is cut from, as half as
    many pixels again, before the palette is applied to the picture itself.
    """
    from PIL import Image

    if not ramps:
        return rgb.quantize(colors=256, method=Image.Quantize.MEDIANCUT,
                            dither=Image.Dither.NONE)
    ramp = np.unique(np.round(np.concatenate(ramps) * 255).astype(np.uint8), axis=0)
    reps = max(1, int(0.5 * rgb.width * rgb.height / len(ramp)))
    strip = np.repeat(ramp[:, None, :], reps, axis=1).reshape(-1, 3)
    rows = -(-len(strip) // rgb.width)
    fill = np.full((rows * rgb.width - len(strip), 3), 255, np.uint8)
    both = np.concatenate([np.asarray(rgb), np.concatenate([strip, fill]).reshape(
        rows, rgb.width, 3)])
    pal = Image.fromarray(both).quantize(colors=256, method=Image.Quantize.MEDIANCUT,
                                         dither=Image.Dither.NONE)
    return rgb.quantize(palette=pal, dither=Image.Dither.NONE)


def _cmap(name):
    from matplotlib import colormaps

    cm = colormaps[name] if isinstance(name, str) else name
    return cm.with_extremes(bad=TRANSPARENT)


# --- what a map shows of its run ---------------------------------------------------------
@dataclass(frozen=True)
class Habitat:
    """The habitat layer of a run, for underlays and habitat maps.

    Attributes
    ----------
    values : numpy.ndarray
        Class codes or suitability (0–1), shape of the grid (anything off data).
    classes : dict, optional
        Class code to name (None for suitability).
    colours : dict, optional
        Class code to colour; missing classes get :func:`habitat_colours`.
    """

    values: np.ndarray
    classes: dict[int, str] | None = None
    colours: dict[int, str] | None = None

    def colour_of(self) -> dict[int, str]:
        """Every class's colour (``#rrggbb``)."""
        return habitat_colours(self.classes or {}, self.colours)


@dataclass(frozen=True)
class MapContext:
    """What every map of a run shows besides its values (see :func:`map_context`)."""

    run: str | None = None
    outlines: tuple = ()
    habitat: Habitat | None = None
    note: str | None = None


_CONTEXT: ContextVar[MapContext | None] = ContextVar("preyscape_map_context", default=None)


def _current() -> MapContext:
    return _CONTEXT.get() or MapContext()


@contextmanager
def map_context(*, run: str | None = None, outlines: Sequence = (),
                habitat: np.ndarray | Habitat | None = None,
                classes: Mapping[int, str] | None = None,
                colours: Mapping[int, str] | None = None,
                note: str | None = None) -> Iterator[MapContext]:
    """Set what every map drawn inside the block shows of its run.

    Arguments given to a map function directly take precedence.

    Parameters
    ----------
    run : str, optional
        The run's name for titles (a variant, or ``"baseline → fence"``).
    outlines : sequence of Outline
        The run's measures (:class:`~preyscape.landscape.placed.Outline`).
    habitat : numpy.ndarray or Habitat, optional
        The habitat layer for underlays.
    classes, colours : mapping, optional
        Class names and colours of ``habitat`` (when it is an array).
    note : str, optional
        A sentence added to every caption.
    """
    if habitat is not None and not isinstance(habitat, Habitat):
        habitat = Habitat(np.asarray(habitat), dict(classes) if classes else None,
                          dict(colours) if colours else None)
    token = _CONTEXT.set(MapContext(run, tuple(outlines or ()), habitat, note))
    try:
        yield _current()
    finally:
        _CONTEXT.reset(token)


def _context(run, outlines, underlay, note) -> MapContext:
    """The context of a map: the arguments given, else the enclosing :func:`map_context`."""
    ctx = _current()
    if underlay is not None and not isinstance(underlay, Habitat):
        underlay = Habitat(np.asarray(underlay))
    return replace(ctx, run=run if run is not None else ctx.run,
                   outlines=tuple(outlines) if outlines is not None else ctx.outlines,
                   habitat=underlay if underlay is not None else ctx.habitat,
                   note=note if note is not None else ctx.note)


# --- where a map is ------------------------------------------------------------------
def crs_label(grid: Grid) -> str:
    """The grid's coordinate reference system in words, with its EPSG code if it has one."""
    if not grid.crs_wkt:
        return "no coordinate reference system (plain metres)"
    from pyproj import CRS

    crs = CRS.from_wkt(grid.crs_wkt)
    epsg = crs.to_epsg()
    return f"{crs.name} (EPSG:{epsg})" if epsg else crs.name


def map_caption(grid: Grid, note: str | None = None) -> str:
    """The caption every map carries: CRS, where its origin is, cell size, north."""
    left, bottom, _, _ = grid.bounds

    def num(v: float) -> str:
        return f"{v:,.0f}".replace(",", "\u2009")  # thin space between thousands

    text = (f"Coordinates: {crs_label(grid)}. Axes in km from the map's south-west corner "
            f"(easting {num(left)} m, northing {num(bottom)} m). Cells {grid.dx:g} m × "
            f"{grid.dy:g} m. North arrow: grid north.")
    return f"{text} {note}" if note else text


def nice_length(span: float) -> float:
    """The largest 1, 2 or 5 × 10^k not above ``span`` (a scale-bar length)."""
    if not span > 0:
        return 1.0
    k = math.floor(math.log10(span))
    for m in (5.0, 2.0, 1.0):
        if m * 10.0 ** k <= span * (1 + 1e-9):
            return m * 10.0 ** k
    return 10.0 ** k


def _length_label(km: float) -> str:
    return f"{km:g} km" if km >= 1 else f"{km * 1000:g} m"


def decorate_map(ax, grid: Grid, *, small: bool = False, xlabel: bool = True,
                 ylabel: bool = True) -> None:
    """Axes in km from the south-west corner, a scale bar and a north arrow.

    The axis limits stay in map km (east, north), so anything drawn in map
    coordinates divided by 1000 lands in place; only the tick labels count
    from the corner.
    """
    from matplotlib.ticker import FuncFormatter, MultipleLocator
    from mpl_toolkits.axes_grid1.anchored_artists import AnchoredSizeBar

    left, right, bottom, top = _extent_km(grid)
    step = nice_length(max(right - left, top - bottom) / 4.0)
    ax.xaxis.set_major_locator(MultipleLocator(step, offset=left))
    ax.yaxis.set_major_locator(MultipleLocator(step, offset=bottom))
    ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v - left:.6g}"))
    ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v - bottom:.6g}"))
    fs = 6 if small else 8
    ax.tick_params(labelsize=fs)
    ax.set_xlabel("km east of the south-west corner" if xlabel else "", fontsize=fs)
    ax.set_ylabel("km north of the south-west corner" if ylabel else "", fontsize=fs)
    ax.set_aspect("equal")
    ax.set_xlim(left, right)
    ax.set_ylim(bottom, top)
    bar = nice_length((right - left) / 4.0)
    sb = AnchoredSizeBar(ax.transData, bar, _length_label(bar), "lower right", pad=0.3,
                         borderpad=0.4, sep=2, frameon=True, size_vertical=0,
                         fontproperties={"size": fs - 1})
    sb.patch.set_alpha(0.8)
    sb.patch.set_edgecolor("none")
    sb.set_zorder(6)
    ax.add_artist(sb)
    ax.annotate("N", xy=(0.94, 0.96), xytext=(0.94, 0.82), xycoords="axes fraction",
                ha="center", va="center", fontsize=fs, weight="bold", zorder=6,
                arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.2},
                bbox={"boxstyle": "circle,pad=0.15", "fc": "white", "ec": "none",
                      "alpha": 0.8})


def _axes_labels(ax, grid: Grid) -> None:
    decorate_map(ax, grid)


# --- layers ----------------------------------------------------------------------------
def _base_layers(ax, grid: Grid, habitat: Habitat | None) -> list:
    """No-data hatch everywhere, then data cells white or the faint habitat underlay.

    Returns the legend handles of the underlay's classes (empty without one).
    """
    left, right, bottom, top = _extent_km(grid)
    ax.add_patch(Rectangle((left, bottom), right - left, top - bottom, facecolor=NO_DATA,
                           edgecolor=NO_DATA_EDGE, hatch=NO_DATA_HATCH, lw=0, zorder=0))
    k = thin(grid)
    mask = grid.mask[::k, ::k]
    extent = _extent_km(grid)
    if habitat is None or habitat.values is None:
        ax.imshow(np.ma.masked_where(~mask, np.ones(mask.shape)), extent=extent,
                  cmap=ListedColormap(["white"]).with_extremes(bad=TRANSPARENT),
                  interpolation="nearest", zorder=0.1)
        return []
    vals = np.asarray(habitat.values, dtype=float)[::k, ::k]
    ok = mask & np.isfinite(vals)
    if habitat.classes:
        codes = sorted(habitat.classes)
        colours = habitat.colour_of()
        pos = np.clip(np.searchsorted(codes, np.where(ok, vals, codes[0])), 0, len(codes) - 1)
        cm = ListedColormap([pastel(colours[c]) for c in codes]).with_extremes(bad=TRANSPARENT)
        ax.imshow(np.ma.masked_where(~ok, pos), extent=extent, cmap=cm,
                  norm=BoundaryNorm(np.arange(len(codes) + 1) - 0.5, len(codes)),
                  interpolation="nearest", zorder=0.1)
        present = set(np.unique(vals[ok]).astype(int).tolist()) if ok.any() else set()
        return [Patch(facecolor=pastel(colours[c]), edgecolor="#bbbbbb",
                      label=f"habitat: {habitat.classes[c] or c}") for c in codes if c in present]
    cm = _cmap("Greys")
    ax.imshow(np.ma.masked_where(~ok, vals), extent=extent, cmap=cm, vmin=-0.5, vmax=2.5,
              interpolation="nearest", zorder=0.1)
    return [Patch(facecolor="#e0e0e0", edgecolor="#bbbbbb",
                  label="habitat suitability (faint grey, darker = better)")]


def _no_value(ax, grid: Grid, values: np.ndarray) -> bool:
    """Dot the data cells without a value; False if there are none."""
    k = thin(grid)
    sel = grid.mask[::k, ::k] & ~np.isfinite(np.asarray(values, dtype=float)[::k, ::k])
    if not sel.any() or min(sel.shape) < 2:
        return False
    x, y = grid.x[::k] / 1e3, grid.y[::k] / 1e3
    ax.contourf(x, y, sel.astype(float), levels=[0.5, 1.5], colors="none",
                hatches=[NO_VALUE_HATCH], zorder=0.6)
    return True


@dataclass
class _MapState:
    """What :func:`finish_map` needs of a map started by :func:`map_figure`."""

    grid: Grid
    axes: list
    handles: list = field(default_factory=list)
    note: str | None = None


def _state(fig: Figure) -> _MapState | None:
    return getattr(fig, "_preyscape_map", None)


def add_legend_items(fig: Figure, handles: Sequence) -> None:
    """Add entries to the legend :func:`finish_map` draws below the map."""
    st = _state(fig)
    if st is None:
        raise ValueError("add_legend_items needs a figure from map_figure or map_panels")
    st.handles.extend(handles)


def _unit(units: str) -> str:
    """The unit in a colour-bar label: "arrival time (years); ..." -> "years"."""
    first = units.split(";")[0].strip()
    m = re.search(r"\(([^()]*)\)\s*$", first)
    return m.group(1) if m else first


def _title(title: str, units: str | None, run: str | None) -> str:
    """The quantity with its unit in square brackets, then the run."""
    text = title
    if units and _unit(units) not in title:
        text += f" [{_unit(units)}]"
    text = "\n".join(textwrap.wrap(text, 62)) or text
    return text + (f"\nRun: {run}" if run else "")


def _map_size(grid: Grid, colorbar: bool, width: float = 4.6) -> tuple[float, float]:
    aspect = grid.height_m / grid.width_m
    w = width if colorbar else width + 0.6
    h = w * aspect
    if h > 5.6:  # tall maps: keep them on a printed page
        h, w = 5.6, 5.6 / aspect
    return w, h


def map_figure(grid: Grid, values: np.ndarray, title: str, cmap, *, norm=None,
               vmin: float | None = None, vmax: float | None = None,
               units: str | None = None, extend: str = "neither",
               outlines=None, underlay: np.ndarray | Habitat | None = None,
               run: str | None = None, undefined: str | None = "no value",
               note: str | None = None):
    """Start a map of one raster: the one helper every single map uses.

    Parameters
    ----------
    grid : Grid
        The map's grid (metres, CRS, data mask).
    values : numpy.ndarray
        The raster (NaN: no value on that cell).
    title : str
        The quantity shown (units are added from ``units``).
    cmap : str or Colormap
        Colour map (perceptually uniform or colour-blind safe).
    norm, vmin, vmax
        The colour scale (pass the same ones to maps meant to be compared).
    units : str, optional
        Units of the values: draws a colour bar labelled with them.
    extend : str
        Colour-bar arrows for values beyond the scale.
    outlines : sequence of Outline, optional
        Measures to draw (default: those of :func:`map_context`).
    underlay : numpy.ndarray or Habitat, optional
        Habitat drawn faintly where ``values`` leaves cells empty (default:
        that of :func:`map_context`).
    run : str, optional
        The run or variant shown, for the title (default: the context's).
    undefined : str or None
        Legend text of data cells without a value (dotted); None draws them
        as plain underlay, without a legend entry.
    note : str, optional
        A sentence for the caption (e.g. that the colour scale is shared).

    Returns
    -------
    (Figure, Axes, AxesImage)
        Finish with :func:`finish_map`.
    """
    ctx = _context(run, outlines, underlay, note)
    colorbar = units is not None
    w, h = _map_size(grid, colorbar)
    title = _title(title, units, ctx.run)
    top = 0.25 + 0.17 * (title.count("\n") + 1)
    left, bottom = 0.7, 0.5
    fig_w = left + w + (1.25 if colorbar else 0.25)
    fig_h = bottom + h + top
    fig = _new((fig_w, fig_h))
    ax = fig.add_axes((left / fig_w, bottom / fig_h, w / fig_w, h / fig_h))
    handles = _base_layers(ax, grid, ctx.habitat)
    im = ax.imshow(_shown(grid, values), extent=_extent_km(grid), cmap=_cmap(cmap), norm=norm,
                   vmin=vmin, vmax=vmax, interpolation="nearest", zorder=0.5)
    if undefined and _no_value(ax, grid, values):
        handles.insert(0, Patch(facecolor="white", edgecolor="#555555", hatch=NO_VALUE_HATCH,
                                label=undefined))
    elif not (grid.mask & ~np.isfinite(np.asarray(values, dtype=float))).any():
        handles = []  # the underlay is hidden under the values: no legend for it
    decorate_map(ax, grid)
    ax.set_title(title, fontsize=9.5, loc="left")
    if colorbar:
        cax = fig.add_axes(((left + w + 0.15) / fig_w, bottom / fig_h, 0.14 / fig_w,
                            h / fig_h))
        cb = fig.colorbar(im, cax=cax, extend=extend)
        cb.set_label("\n".join(textwrap.wrap(units, 40)), fontsize=8)
        cb.ax.tick_params(labelsize=7)
    handles = draw_outlines(ax, ctx.outlines, grid) + handles
    if (~grid.mask).any():
        handles.append(Patch(facecolor=NO_DATA, edgecolor=NO_DATA_EDGE, hatch=NO_DATA_HATCH,
                             label="no habitat data"))
    fig._preyscape_map = _MapState(grid, [ax], handles, ctx.note)
    return fig, ax, im


def _place_info(fig: Figure, st: _MapState) -> None:
    """The legend and the caption below the map(s), left-aligned with the first one."""
    fig.draw_without_rendering()  # the layout, without rasterising: it is measured only
    renderer = fig.canvas.get_renderer()
    boxes = [a.get_tightbbox(renderer) for a in fig.axes]
    x0 = min(a.get_window_extent().x0 for a in st.axes)
    y = min(b.y0 for b in boxes) - 4
    inv = fig.transFigure.inverted()
    width_in = (max(b.x1 for b in boxes) - x0) / fig.dpi
    anchor = inv.transform((x0, y))
    leg = None
    if st.handles:
        ncol = max(1, min(3, int(width_in // 2.1)))
        leg = fig.legend(handles=st.handles, loc="upper left", bbox_to_anchor=anchor,
                         ncols=ncol, fontsize=7, frameon=False, handlelength=2.2,
                         borderaxespad=0.0, columnspacing=1.2)
        fig.draw_without_rendering()
        y = leg.get_window_extent(renderer).y0 - 4
    text = "\n".join(textwrap.wrap(map_caption(st.grid, st.note), int(width_in * 16)))
    fig.text(*inv.transform((x0, y)), text, ha="left", va="top", fontsize=6.5,
             color="#333333")


def finish_map(fig: Figure, path: Path) -> Path:
    """Add the legend and caption below a map from :func:`map_figure`; save it as PNG.

    Returns the path. Figures not made by :func:`map_figure` are saved as
    they are.
    """
    st = _state(fig)
    if st is None:
        fig.tight_layout()
    else:
        _place_info(fig, st)
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
    outlines=None,
    run: str | None = None,
    note: str | None = None,
) -> Path:
    """Draw one density map (animals/km²) on a scale from 0; returns the PNG path.

    ``vmax`` (animals/km²) sets the top of the scale: pass the same value to
    maps meant to be compared, and say so in ``note``. Default: the largest
    value shown.
    """
    data = _shown(grid, values)
    vmax = vmax if vmax is not None else (float(data.max()) if data.count() else 1.0)
    above = data.count() and float(data.max()) > vmax
    fig, _, _ = map_figure(grid, values, title, cmap, vmin=0.0, vmax=max(vmax, 1e-12),
                           units=units, outlines=outlines, run=run, note=note,
                           extend="max" if above else "neither")
    return finish_map(fig, path)


MEASURE_STYLE = {  # ours: line colour, width and style per kind of measure, with a halo
    "fence": {"color": "#111111", "lw": 2.0, "ls": "-", "halo": "white"},
    "corridor": {"color": "#e7298a", "lw": 1.8, "ls": (0, (5, 1.5, 1, 1.5)), "halo": "white"},
    "refuge": {"color": "#ffffff", "lw": 1.6, "ls": (0, (4, 2)), "halo": "#111111"},
    "target": {"color": "#1f78b4", "lw": 1.4, "ls": (0, (1, 1.5)), "halo": "white"},
}


def _effects(st: dict) -> list:
    from matplotlib import patheffects

    return [patheffects.Stroke(linewidth=st["lw"] + 1.8, foreground=st["halo"]),
            patheffects.Normal()]


def draw_outlines(ax, outlines, grid: Grid) -> list:
    """Draw measures on a map axis (km): fence lines, corridor and refuge outlines.

    Lines are told apart by style (solid fence, dash-dot corridor, dashed
    refuge) and colour, each with a contrasting halo, so they read on any
    colour map and without colour vision.

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
        kw = {"color": st["color"], "lw": st["lw"], "ls": st["ls"], "zorder": 4,
              "path_effects": _effects(st)}
        drawn = False
        if m.kind == "fence" and m.lines:
            for line in m.lines:
                ax.plot(line[:, 0] / 1e3, line[:, 1] / 1e3, **kw)
            drawn = True
        elif m.cells is not None and np.asarray(m.cells).any():
            k = thin(grid)
            cs = ax.contour(grid.x[::k] / 1e3, grid.y[::k] / 1e3,
                            np.asarray(m.cells)[::k, ::k].astype(float), levels=[0.5],
                            colors=[st["color"]], linewidths=st["lw"], linestyles=[st["ls"]],
                            zorder=4)
            cs.set_path_effects(_effects(st))
            drawn = True
        elif m.faces is not None:  # a fence from a raster: the outline of its cells
            _draw_faces(ax, grid, m.faces, kw)
            drawn = True
        if drawn:
            handles.append(Line2D([], [], color=st["color"], lw=st["lw"], ls=st["ls"],
                                  path_effects=_effects(st), label=f"{m.kind}: {m.name}"))
    return handles


def _draw_faces(ax, grid: Grid, faces, kw: dict) -> None:
    from matplotlib.collections import LineCollection

    fx, fy = faces
    xe = (grid.x0 + np.arange(grid.nx + 1) * grid.dx) / 1e3
    ye = (grid.y0 - np.arange(grid.ny + 1) * grid.dy) / 1e3
    segs = [((xe[k], ye[i]), (xe[k], ye[i + 1])) for i, k in zip(*np.nonzero(fx), strict=True)]
    segs += [((xe[j], ye[i]), (xe[j + 1], ye[i])) for i, j in zip(*np.nonzero(fy), strict=True)]
    lc = LineCollection(segs, colors=kw["color"], linewidths=kw["lw"], zorder=4,
                        path_effects=kw["path_effects"])
    ax.add_collection(lc)


def habitat_map(grid: Grid, habitat: np.ndarray, classes: dict[int, str] | None,
                title: str, path: Path, *, outlines=None,
                colours: Mapping[int, str] | None = None, run: str | None = None) -> Path:
    """Draw the habitat layer: class colours by meaning (named), or suitability 0–1.

    ``colours`` (class code to colour) overrides :func:`habitat_colours`; with
    ``outlines`` the fences, corridors and refuges are drawn on top.
    """
    values = np.where(grid.mask, np.asarray(habitat, dtype=float), np.nan)
    if classes:
        codes = sorted(classes)
        col = habitat_colours({c: classes[c] for c in codes}, colours)
        pos = np.searchsorted(codes, np.where(np.isfinite(values), values, codes[0]))
        idx = np.where(np.isfinite(values), np.clip(pos, 0, len(codes) - 1), np.nan)
        fig, ax, _ = map_figure(grid, idx, title, ListedColormap([col[c] for c in codes]),
                                norm=BoundaryNorm(np.arange(len(codes) + 1) - 0.5, len(codes)),
                                outlines=outlines, underlay=None, run=run)
        present = set(np.unique(values[np.isfinite(values)]).astype(int).tolist())
        add_legend_items(fig, [Patch(facecolor=col[c], edgecolor="#808080",
                                     label=f"{classes[c] or 'class'} ({c})")
                               for c in codes if c in present])
    else:
        fig, ax, _ = map_figure(grid, values, title, "cividis", vmin=0, vmax=1,
                                units="suitability (0–1)", outlines=outlines, run=run)
    return finish_map(fig, path)


def map_panels(grid: Grid, layers: Sequence[tuple[str, np.ndarray]], title: str, path: Path,
               *, cmap, norm=None, vmin: float | None = None, vmax: float | None = None,
               units: str | None = None, extend: str = "neither", outlines=None,
               panel_outlines: Sequence | None = None, run: str | None = None,
               note: str | None = None, ncols: int | None = None) -> Path:
    """Several maps of one grid side by side on ONE colour scale, with the map standard.

    Parameters
    ----------
    layers : sequence of (str, numpy.ndarray)
        Panel title and raster.
    outlines : sequence of Outline, optional
        Measures drawn on every panel (default: the context's).
    panel_outlines : sequence of sequences of Outline, optional
        Measures per panel (e.g. each alternative's own), instead of ``outlines``.
    Other parameters as for :func:`map_figure`; ``note`` goes into the caption
    (say there that the scale is shared, and with what).
    """
    ctx = _context(run, outlines, None, note)
    n = len(layers)
    ncols = ncols or (2 if n == 4 else min(n, 3))
    nrows = -(-n // ncols)
    pw, ph = _map_size(grid, False, width=2.6 if ncols > 1 else 4.6)
    head = _title(title, units, ctx.run)
    gap_w, gap_h, left, top = 0.45, 0.6, 0.6, 0.45 + 0.17 * (head.count("\n") + 1)
    fig_w = left + ncols * (pw + gap_w) + (1.2 if units else 0.2)
    fig_h = 0.4 + nrows * (ph + gap_h) + top
    fig = _new((fig_w, fig_h))
    axes, handles, im = [], [], None
    for k, (label, values) in enumerate(layers):
        r, c = divmod(k, ncols)
        x = left + c * (pw + gap_w)
        y = fig_h - top - (r + 1) * ph - r * gap_h
        ax = fig.add_axes((x / fig_w, y / fig_h, pw / fig_w, ph / fig_h))
        _base_layers(ax, grid, None)
        im = ax.imshow(_shown(grid, values), extent=_extent_km(grid), cmap=_cmap(cmap),
                       norm=norm, vmin=vmin, vmax=vmax, interpolation="nearest", zorder=0.5)
        decorate_map(ax, grid, small=True, xlabel=r == nrows - 1 or k + ncols >= n,
                     ylabel=c == 0)
        ax.set_title(label, fontsize=8, loc="left")
        mine = panel_outlines[k] if panel_outlines is not None else ctx.outlines
        for h in draw_outlines(ax, mine, grid):
            if h.get_label() not in {x.get_label() for x in handles}:
                handles.append(h)
        axes.append(ax)
    fig.suptitle(head, fontsize=9.5, x=left / fig_w, ha="left", y=1 - 0.08 / fig_h, va="top")
    if units is not None and im is not None:
        cax = fig.add_axes(((fig_w - 1.05) / fig_w, (fig_h - top - ph) / fig_h, 0.14 / fig_w,
                            ph / fig_h))
        cb = fig.colorbar(im, cax=cax, extend=extend)
        cb.set_label("\n".join(textwrap.wrap(units, 40)), fontsize=8)
        cb.ax.tick_params(labelsize=7)
    if (~grid.mask).any():
        handles.append(Patch(facecolor=NO_DATA, edgecolor=NO_DATA_EDGE, hatch=NO_DATA_HATCH,
                             label="no habitat data"))
    st = _MapState(grid, axes, handles, ctx.note)
    fig._preyscape_map = st
    _place_info(fig, st)
    return _save(fig, path)


def totals_plot(time: np.ndarray, prey: np.ndarray, predator: np.ndarray | None,
                names: dict[str, str], path: Path, *, run: str | None = None) -> Path:
    """Landscape totals of both species (``predator`` None: prey alone) against time (years)."""
    fig = _new((7.0, 3.8))
    ax = fig.add_subplot()
    ax.plot(time, prey, color="#2a788e", label=f"prey ({names.get('prey') or 'prey'})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("prey in the landscape (animals)", color="#2a788e")
    run = run if run is not None else _current().run
    suffix = f" — run: {run}" if run else ""
    if predator is None:
        ax.set_title(f"Animals in the whole landscape (no predator in this scenario){suffix}",
                     fontsize=10)
        fig.tight_layout()
        return _save(fig, path)
    ax2 = ax.twinx()
    ax2.plot(time, predator, color="#b5367a", ls="--",
             label=f"predator ({names.get('predator') or 'predator'})")
    ax2.set_ylabel("predators in the landscape (animals)", color="#b5367a")
    lines = ax.get_lines() + ax2.get_lines()
    ax.legend(lines, [ln.get_label() for ln in lines], loc="upper right", fontsize=8)
    ax.set_title(f"Animals in the whole landscape{suffix}", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


LOG_SPAN = 100.0
"""Densities present spanning more than this factor (two orders of magnitude) get a log scale."""


def choose_scale(frames, floor: float | None) -> str:
    """``"log"`` when the densities at or above ``floor`` span more than :data:`LOG_SPAN`.

    ``floor`` is the presence threshold (animals/km²): the highest density
    shown, divided by the lowest one at or above the floor, must exceed 100.
    A front invading at low density then shows on the map instead of
    vanishing in the bottom colour of a scale set by its peak. Without a
    positive floor the scale is linear.
    """
    if floor is None or not floor > 0:
        return "linear"
    top, low = 0.0, np.inf
    for f in frames:
        v = np.asarray(f, dtype=float)
        present = v[np.isfinite(v) & (v >= floor)]
        if present.size:
            top = max(top, float(present.max()))
            low = min(low, float(present.min()))
    return "log" if np.isfinite(low) and top > LOG_SPAN * low else "linear"


def density_norm(scale: str, floor: float | None, vmax: float):
    """Colour scale of a density map: ``(norm, legend words, colour-bar extend)``.

    ``"log"``: logarithmic from ``floor`` (the presence threshold) to
    ``vmax``; lower densities take the lowest colour, and the legend says so.
    ``"linear"``: 0 to ``vmax``.
    """
    from matplotlib.colors import LogNorm, Normalize

    if scale == "log" and floor is not None and 0 < floor < vmax:
        return (LogNorm(vmin=floor, vmax=vmax),
                f"log scale; below {floor:.3g} (presence threshold): lowest colour", "min")
    return Normalize(vmin=0.0, vmax=max(vmax, 1e-12)), "", "neither"


def below_floor(values: np.ndarray, norm) -> np.ndarray:
    """Values for ``norm``: on a log scale, densities under its floor (zeros included) are
    lifted to half the floor, so they take the lowest colour instead of the no-data grey."""
    from matplotlib.colors import LogNorm

    if not isinstance(norm, LogNorm):
        return values
    v = np.asarray(values, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(v) & (v < norm.vmin), 0.5 * norm.vmin, v)


def snapshot_panels(grid: Grid, times: np.ndarray, frames: list[np.ndarray], species: str,
                    name: str, path: Path, *, scale: str = "linear",
                    floor: float | None = None, outlines=None, run: str | None = None,
                    vmax: float | None = None, note: str | None = None) -> Path:
    """A row of density maps at chosen times on one shared colour scale (animals/km²).

    ``scale`` is ``"linear"`` (0 to the highest density), ``"log"`` (from
    ``floor``, the presence threshold in animals/km², to the highest density)
    or ``"auto"`` (log when the densities present span more than two orders
    of magnitude, :func:`choose_scale`); the caption says which.
    """
    top = vmax if vmax is not None else (
        max(float(np.nanmax(f, initial=0.0)) for f in frames) or 1.0)
    if scale == "auto":
        scale = choose_scale(frames, floor)
    norm, words, extend = density_norm(scale, floor, top)
    label = f"{species} ({name})" if name and name != species else species
    scale_note = f"One colour scale for all panels{f' ({words})' if words else ''}."
    return map_panels(grid, [(f"t = {t:g} yr", below_floor(f, norm))
                             for t, f in zip(times, frames, strict=True)],
                      f"{label.capitalize()} density from start to end", path,
                      cmap=SPECIES_CMAP.get(species, "viridis"), norm=norm,
                      units="animals per km²", extend=extend, outlines=outlines, run=run,
                      ncols=3 if len(frames) > 3 else len(frames),
                      note=(note + " " + scale_note) if note else scale_note)
