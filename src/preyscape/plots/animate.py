"""An animated GIF of a run: both species side by side, one frame per snapshot.

Each frame is drawn with matplotlib's object API on an Agg canvas and handed
to Pillow; no ffmpeg and no pyplot. The figure is built once and only the
image data and the time stamp change between frames, so the layout does not
jump. Every species keeps ONE colour scale for the whole animation (0 to a
high percentile of all its shown values), so colours can be compared across
frames. All frames share one fixed palette built from the two colour maps,
so colours do not flicker either. With ``scale="log"`` (or ``"auto"``, which
picks it when the densities present span more than two orders of magnitude)
the scale is logarithmic from the presence threshold up, so a front invading
at low density shows; the colour bar says so.

Memory: one snapshot of the grid at a time is read from ``results.nc``
(a first pass for the colour scales, a second to draw), plus the encoded
frames, which Pillow keeps until it writes the file (one byte per pixel,
about 0.3 MB per frame at the default size).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Sequence
from pathlib import Path

import numpy as np

from preyscape.errors import InputError
from preyscape.plots import (
    LOG_SPAN,
    MEASURE_STYLE,
    NO_DATA,
    SPECIES_CMAP,
    _base_layers,
    _cmap,
    _current,
    _extent_km,
    _new,
    below_floor,
    decorate_map,
    density_norm,
    draw_outlines,
    map_caption,
)

__all__ = ["animate_run", "MAX_SIDE", "VMAX_PERCENTILE"]

MAX_SIDE = 300
"""Largest number of cells per map side drawn in a frame (every k-th cell beyond)."""

VMAX_PERCENTILE = 99.5
"""Top of each species' colour scale: this percentile of all its shown values."""

UNITS = "animals per km²"


class _StreamingQuantile:
    """Quantiles of a stream of non-negative values in fixed memory.

    Values are counted in bins of their binary exponent, each split into
    ``SUB`` equal steps of the mantissa, so a quantile is found to a relative
    accuracy of 1/``SUB`` (0.4 %) over the whole float range, whatever the
    values are, without keeping them. Zero, negative and non-finite values
    count as zero (a density can only be negative by rounding).
    """

    SUB = 256
    EMIN, EMAX = -150, 130  # binary exponents covered (float32 range and a margin)

    def __init__(self) -> None:
        self.counts = np.zeros((self.EMAX - self.EMIN + 1) * self.SUB, dtype=np.int64)
        self.zeros = 0
        self.n = 0
        self.max = 0.0

    def add(self, values: np.ndarray) -> None:
        """Count the finite values of ``values`` (NaN means no data and is skipped)."""
        v = np.asarray(values, dtype=np.float64).ravel()
        v = v[np.isfinite(v)]
        self.n += v.size
        pos = v[v > 0]
        self.zeros += v.size - pos.size
        if not pos.size:
            return
        self.max = max(self.max, float(pos.max()))
        m, e = np.frexp(pos)  # pos = m * 2**e with 0.5 <= m < 1
        e = np.clip(e, self.EMIN, self.EMAX)
        sub = np.minimum(((m - 0.5) * (2 * self.SUB)).astype(np.int64), self.SUB - 1)
        idx = (e.astype(np.int64) - self.EMIN) * self.SUB + sub
        self.counts += np.bincount(idx, minlength=self.counts.size)

    def quantile(self, q: float) -> float:
        """The ``q``-th percentile (0–100), nearest rank, rounded up to its bin's top.

        Never above the largest value seen; 0 if nothing was added.
        """
        if self.n == 0:
            return 0.0
        rank = max(1, math.ceil(q / 100.0 * self.n))
        if rank <= self.zeros:
            return 0.0
        k = int(np.searchsorted(np.cumsum(self.counts), rank - self.zeros))
        e, sub = divmod(k, self.SUB)
        top = (0.5 + (sub + 1) / (2 * self.SUB)) * 2.0 ** (e + self.EMIN)
        return min(top, self.max)


def _frame_indices(n: int, max_frames: int) -> np.ndarray:
    """Snapshot indices to show: all, or ``max_frames`` spread evenly incl. first and last."""
    if n <= max_frames:
        return np.arange(n)
    # spacing (n-1)/(max_frames-1) >= 1, so rounding keeps them distinct
    return np.linspace(0, n - 1, max_frames).round().astype(int)


def _stride(ny: int, nx: int) -> int:
    """Every k-th cell to draw so that a map side has at most :data:`MAX_SIDE` cells."""
    return max(1, -(-max(ny, nx) // MAX_SIDE))


def _stamp_format(times: np.ndarray) -> str:
    """Enough decimals (at least 2) that different snapshot times get different stamps."""
    steps = np.diff(np.asarray(times, dtype=float))
    steps = steps[steps > 0]
    decimals = 2
    if steps.size:
        decimals = int(min(6, max(2, math.ceil(-math.log10(float(steps.min()))))))
    return f"t = {{:.{decimals}f}} yr"


def _palette(cmaps: Sequence[str]) -> list[int]:
    """A fixed 256-colour palette: ramps of the colour maps, greys, the no-data grey."""
    from matplotlib import colormaps
    from matplotlib.colors import to_rgb

    greys = np.linspace(0.0, 1.0, 32)
    rgb = [tuple(to_rgb(NO_DATA))] + [(g, g, g) for g in greys]
    rgb += [tuple(to_rgb(st["color"])) for st in MEASURE_STYLE.values()]
    per = (256 - len(rgb)) // max(1, len(cmaps))
    for name in cmaps:
        ramp = colormaps[name](np.linspace(0.0, 1.0, per))[:, :3]
        rgb += [tuple(c) for c in ramp]
    flat = [int(round(255 * c)) for col in rgb for c in col]
    return flat + [0] * (768 - len(flat))


def animate_run(
    grid,
    times: Sequence[float],
    frame_of: Callable[[str, int], np.ndarray],
    path: Path,
    *,
    fps: int = 6,
    max_frames: int = 120,
    species: Sequence[str] = ("prey", "predator"),
    names: dict[str, str] | None = None,
    title: str = "",
    scale: str = "linear",
    floor: float | None = None,
    outlines=None,
) -> Path:
    """Write an animated GIF of the densities of a run, one frame per snapshot shown.

    Parameters
    ----------
    grid : Grid
        The run grid (metres, data mask).
    times : sequence of float
        Snapshot times, years.
    frame_of : callable
        ``frame_of(species, index)`` returns the density of ``species`` at
        snapshot ``index`` (animals per km², shape of the grid); called once
        per species and frame in each of two passes, so only one snapshot is
        in memory at a time.
    path : pathlib.Path
        The GIF to write (replaced if it exists; written under a temporary
        name, then renamed).
    fps : int, optional
        Frames per second.
    max_frames : int, optional
        At most this many frames; longer runs show snapshots spread evenly
        over the run, always including the first and the last.
    species : sequence of str, optional
        Densities to show side by side.
    names : dict, optional
        Common names per species for the panel titles, e.g.
        ``{"prey": "field vole"}``.
    title : str, optional
        Title above the panels (the run's name from
        :func:`preyscape.plots.map_context` is added).
    outlines : sequence of Outline, optional
        Measures drawn on every panel (default: those of the map context).
    scale : {"linear", "log", "auto"}, optional
        Colour scale of each species: 0 to the top, logarithmic from
        ``floor`` to the top, or log for a species whose densities at or
        above ``floor`` span more than two orders of magnitude.
    floor : float, optional
        The presence threshold, animals per km² (needed for a log scale).

    Returns
    -------
    pathlib.Path
        ``path``.

    Raises
    ------
    InputError
        If there is no snapshot.
    """
    from PIL import Image

    if fps < 1 or max_frames < 1:
        raise ValueError("fps and max_frames must be at least 1")
    path = Path(path)
    names = names or {}
    species = list(species)
    if not species:
        raise ValueError("give at least one species to animate")
    times = np.asarray(times, dtype=float)
    if times.size == 0:
        raise InputError("the run holds no snapshot")
    pick = _frame_indices(times.size, max_frames)
    k = _stride(grid.ny, grid.nx)
    shown_mask = grid.mask[::k, ::k]

    def frame(sp: str, i: int) -> np.ndarray:
        # one snapshot in memory at a time, thinned to what the frame can show
        v = np.asarray(frame_of(sp, int(i)), dtype=np.float32)[::k, ::k]
        return np.where(shown_mask, v, np.nan)

    # pass 1: one colour scale per species for the whole animation
    vmax = {}
    above = {}
    scales = {}
    for sp in species:
        q = _StreamingQuantile()
        low = math.inf  # lowest density present (at or above the floor)
        for i in pick:
            f = frame(sp, i)
            q.add(f)
            if floor is not None and floor > 0:
                present = f[np.isfinite(f) & (f >= floor)]
                low = min(low, float(present.min())) if present.size else low
        top = q.quantile(VMAX_PERCENTILE)
        vmax[sp] = top if top > 0 else (q.max if q.max > 0 else 1.0)
        above[sp] = q.max > vmax[sp]
        scales[sp] = scale
        if scale == "auto":
            scales[sp] = "log" if math.isfinite(low) and q.max > LOG_SPAN * low else "linear"

    # the figure is built once; frames only swap image data and the stamp
    norms = {sp: density_norm(scales[sp], floor, vmax[sp]) for sp in species}
    n = len(species)
    ctx = _current()
    outlines = ctx.outlines if outlines is None else outlines
    fig = _new(figsize=(3.7 * n + 0.5, 4.3))
    extent = _extent_km(grid)
    images = []
    legend = []
    for j, sp in enumerate(species):
        ax = fig.add_subplot(1, n, j + 1)
        cm = _cmap(SPECIES_CMAP.get(sp, "viridis"))
        norm, words, low_end = norms[sp]
        _base_layers(ax, grid, None)  # no-data hatch under the frames (the map standard)
        im = ax.imshow(np.ma.masked_invalid(below_floor(frame(sp, pick[0]), norm)),
                       extent=extent, cmap=cm, norm=norm, interpolation="nearest", zorder=0.5)
        decorate_map(ax, grid, small=True, ylabel=j == 0)
        legend = draw_outlines(ax, outlines, grid) or legend
        nm = names.get(sp)
        ax.set_title(f"{sp} ({nm})" if nm and nm != sp else sp, fontsize=9)
        ends = {(True, True): "both", (True, False): "min", (False, True): "max"}
        cb = fig.colorbar(im, ax=ax, shrink=0.85,
                          extend=ends.get((low_end == "min", above[sp]), "neither"))
        cb.set_label(UNITS + (f"\n({words})" if words else ""), fontsize=8 if not words else 7)
        cb.ax.tick_params(labelsize=7)
        images.append(im)
    head = title or "Population density"
    if ctx.run:
        head += f" — run: {ctx.run}"
    fig.text(0.01, 0.985, head, ha="left", va="top", fontsize=10, weight="bold")
    fmt = _stamp_format(times[pick])
    stamp = fig.text(0.99, 0.985, fmt.format(times[pick[0]]), ha="right", va="top",
                     fontsize=10, family="monospace")
    import textwrap

    caption = "\n".join(textwrap.wrap(map_caption(grid, "Each species keeps one colour "
                                                        "scale for the whole animation."),
                                       int(16 * 3.7 * n)))
    fig.text(0.01, 0.01, caption, ha="left", va="bottom", fontsize=6, color="#333333")
    if legend:
        fig.legend(handles=legend, loc="lower right", bbox_to_anchor=(0.99, 0.005),
                   fontsize=6.5, frameon=False, ncols=min(3, len(legend)))
    fig.tight_layout(rect=(0, 0.09, 1, 0.95))  # once: later frames keep this layout

    palette = Image.new("P", (1, 1))
    palette.putpalette(_palette([SPECIES_CMAP.get(sp, "viridis") for sp in species]))

    def frames():
        for i in pick:
            for sp, im in zip(species, images, strict=True):
                im.set_data(np.ma.masked_invalid(below_floor(frame(sp, i), norms[sp][0])))
            stamp.set_text(fmt.format(times[i]))
            fig.canvas.draw()
            rgb = Image.frombuffer("RGBA", fig.canvas.get_width_height(),
                                   fig.canvas.buffer_rgba()).convert("RGB")
            yield rgb.quantize(palette=palette, dither=Image.Dither.NONE)

    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name("." + path.name + ".tmp.gif")
    try:
        it = frames()
        first = next(it)
        first.save(tmp, format="GIF", save_all=True, append_images=it,
                   duration=max(20, round(1000 / fps)), loop=0, optimize=False)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
    return path
