"""Figures comparing two runs and showing the effect of a measure.

Maps use map coordinates in km and draw no-data cells in light grey
(:data:`preyscape.plots.NO_DATA`); densities are animals per km², times years.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
from matplotlib.colors import BoundaryNorm, ListedColormap, TwoSlopeNorm
from matplotlib.patches import Patch

from preyscape.landscape.grid import Grid
from preyscape.plots import (
    NO_DATA,
    _new,
    _save,
    _shown,
    finish_map,
    map_figure,
)

CHANGE_COLOURS = {
    0: "#f2f0e6",  # no change
    1: "#2a788e",  # prey only
    2: "#b5367a",  # predator only
    3: "#e0a84f",  # both
}
CHANGE_LABELS = {0: "no change", 1: "prey only", 2: "predator only", 3: "both"}


def difference_map(grid: Grid, diff: np.ndarray, title: str, path: Path,
                   units: str = "animals per km²") -> Path:
    """Draw a difference map (B − A) on a diverging scale centred on zero.

    Parameters
    ----------
    grid : Grid
        The grid (metres, data mask).
    diff : numpy.ndarray
        B − A per cell, in ``units``; NaN or off-mask cells are shown as no data.
    title : str
        Figure title.
    path : pathlib.Path
        PNG to write.
    units : str
        Label of the colour bar.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    data = _shown(grid, diff)
    # symmetric limits, so equal gains and losses get equally strong colours
    lim = float(np.abs(data).max()) if data.count() else 0.0
    lim = lim if lim > 0 else 1e-12
    fig, _, _ = map_figure(grid, diff, title, "RdBu_r",
                           norm=TwoSlopeNorm(vcenter=0.0, vmin=-lim, vmax=lim), units=units)
    return finish_map(fig, path)


def change_map(grid: Grid, classes: np.ndarray, title: str, path: Path) -> Path:
    """Draw the change classes (0 none, 1 prey only, 2 predator only, 3 both; −1 no data).

    Parameters
    ----------
    grid : Grid
        The grid (metres, data mask).
    classes : numpy.ndarray of int
        Codes as from :func:`preyscape.analysis.compare.change_classes`.
    title : str
        Figure title.
    path : pathlib.Path
        PNG to write.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    codes = np.asarray(classes)
    colours = [CHANGE_COLOURS[k] for k in range(4)]
    fig, ax, _ = map_figure(grid, np.where(codes < 0, np.nan, codes).astype(float), title,
                            ListedColormap(colours), norm=BoundaryNorm(np.arange(5) - 0.5, 4))
    handles = [Patch(facecolor=CHANGE_COLOURS[k], edgecolor="#808080", label=CHANGE_LABELS[k])
               for k in range(4)]
    handles.append(Patch(facecolor=NO_DATA, edgecolor="#808080", label="no data"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
              frameon=False)
    return finish_map(fig, path)


def totals_compare_plot(
    times_a: np.ndarray,
    tot_a: Mapping[str, np.ndarray],
    times_b: np.ndarray,
    tot_b: Mapping[str, np.ndarray],
    labels: Sequence[str],
    names: Mapping[str, str],
    path: Path,
) -> Path:
    """Landscape totals of both species in two runs, one panel per species.

    Parameters
    ----------
    times_a, times_b : numpy.ndarray
        Snapshot times of runs A and B, years (they may differ).
    tot_a, tot_b : mapping
        ``{"prey": animals, "predator": animals}`` at those times.
    labels : sequence of str
        Names of runs A and B for the legend.
    names : mapping
        Common names of the species, ``{"prey": ..., "predator": ...}``.
    path : pathlib.Path
        PNG to write.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    fig = _new((7.0, 5.4))
    colour = {"prey": "#2a788e", "predator": "#b5367a"}
    axes = []
    for k, sp in enumerate(("prey", "predator")):
        ax = fig.add_subplot(2, 1, k + 1, sharex=axes[0] if axes else None)
        axes.append(ax)
        ax.plot(times_a, tot_a[sp], color=colour[sp], lw=1.6, label=labels[0])
        ax.plot(times_b, tot_b[sp], color=colour[sp], lw=1.6, ls="--", label=labels[1])
        nm = names.get(sp) or sp
        ax.set_ylabel(f"{sp} ({nm})\n(animals)", fontsize=9)
        ax.legend(fontsize=8, loc="best")
        ax.grid(alpha=0.3)
    axes[-1].set_xlabel("time (years)")
    axes[0].set_title("Landscape totals of both runs", fontsize=10)
    fig.tight_layout()
    return _save(fig, path)


def profile_plot(distance: np.ndarray, density: np.ndarray, fit: Mapping | None,
                 path: Path, ylabel: str = "density (animals per km²)") -> Path:
    """Spill-over profile: density against distance from the refuge edge, with its fit.

    Parameters
    ----------
    distance : numpy.ndarray
        Distance from the refuge edge, km.
    density : numpy.ndarray
        Mean density at that distance, animals/km².
    fit : mapping or None
        As from :func:`preyscape.analysis.effects.decay_length`: ``amplitude``,
        ``length_km`` and ``baseline`` draw the curve
        ``baseline + amplitude · exp(−d/length)``; nothing is drawn if any is NaN.
    path : pathlib.Path
        PNG to write.
    ylabel : str
        Label of the density axis.

    Returns
    -------
    pathlib.Path
        ``path``.
    """
    fig = _new((6.4, 4.0))
    ax = fig.add_subplot()
    d = np.asarray(distance, dtype=float)
    ax.plot(d, density, "o", ms=4, color="#2a788e", label="mean over cells at that distance")
    if fit is not None:
        a, ell, b = (float(fit.get(k, np.nan)) for k in ("amplitude", "length_km", "baseline"))
        if np.isfinite([a, ell, b]).all() and d.size:
            xs = np.linspace(0.0, float(d.max()), 200)
            ax.plot(xs, b + a * np.exp(-xs / ell), color="#b5367a",
                    label=f"fit: decay length {ell:.3g} km")
    ax.axhline(0.0, color="#808080", lw=0.8)
    ax.set_xlabel("distance from the refuge edge (km)")
    ax.set_ylabel(ylabel)
    ax.set_title("Spill-over from the refuge", fontsize=10)
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return _save(fig, path)
