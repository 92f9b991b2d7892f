"""Figures of the summaries across members: probability maps, robust change, ranking, sensitivity.

Each function takes arrays, a :class:`~preyscape.landscape.grid.Grid` and
labels, draws with the :mod:`preyscape.plots` helpers (or its own figure with
the Agg canvas) and writes one PNG.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["interval_plot", "probability_map", "robust_map", "sensitivity_plot"]

ROBUST_COLOURS = {-1: "#d95f02", 0: "#f4f4f4", 1: "#1f78b4"}
"""Ours: robust loss (orange), no robust change (near white), robust gain (blue)."""
ROBUST_LABELS = {-1: "robust loss", 0: "no robust change", 1: "robust gain"}


def probability_map(grid, values: np.ndarray, title: str, path: Path, *,
                    cmap: str = "viridis", label: str = "share of members") -> Path:
    """A map of a probability (0–1) on a fixed scale from 0 to 1."""
    from preyscape.plots import finish_map, map_figure

    fig, _, _ = map_figure(grid, values, title, cmap, vmin=0.0, vmax=1.0, units=label)
    return finish_map(fig, path)


def robust_map(grid, codes: np.ndarray, title: str, path: Path) -> Path:
    """Robust change: 1 gain, −1 loss, 0 none; other codes are no data."""
    from matplotlib.colors import BoundaryNorm, ListedColormap
    from matplotlib.patches import Patch

    from preyscape.plots import NO_DATA, finish_map, map_figure

    c = np.asarray(codes).astype(float)
    c[(c < -1) | (c > 1)] = np.nan
    cmap = ListedColormap([ROBUST_COLOURS[k] for k in (-1, 0, 1)])
    fig, ax, _ = map_figure(grid, c, title, cmap, norm=BoundaryNorm([-1.5, -0.5, 0.5, 1.5], 3))
    handles = [Patch(facecolor=ROBUST_COLOURS[k], edgecolor="#808080", label=ROBUST_LABELS[k])
               for k in (1, -1, 0)]
    handles.append(Patch(facecolor=NO_DATA, edgecolor="#808080", label="no data"))
    ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1), fontsize=8,
              frameon=False)
    return finish_map(fig, path)


def _figure(width: float, height: float):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _save(fig, path: Path) -> Path:
    import os

    tmp = path.with_name(path.name + ".tmp.png")
    fig.savefig(tmp, dpi=110)
    os.replace(tmp, path)
    return path


def interval_plot(rows: list[dict], columns: list[tuple[str, str, float]], title: str,
                  path: Path) -> Path:
    """Medians and 5–95 % intervals of ranking columns, one panel per column.

    Parameters
    ----------
    rows : list of dict
        :func:`preyscape.ensemble.summaries.ranking` rows.
    columns : list of (str, str, float)
        ``(column, axis label, scale)``: the value shown is the column times ``scale``
        (100 for a fraction shown in %).
    title : str
        Figure title.
    path : pathlib.Path
        PNG to write.
    """
    fig = _figure(3.2 * len(columns) + 0.8, 0.5 * max(len(rows), 1) + 1.6)
    names = [r["alternative"] for r in rows]
    y = np.arange(len(rows))[::-1]
    for k, (col, label, scale) in enumerate(columns):
        ax = fig.add_subplot(1, len(columns), k + 1)
        med = np.array([r[f"{col}_median"] for r in rows]) * scale
        lo = np.array([r[f"{col}_low"] for r in rows]) * scale
        hi = np.array([r[f"{col}_high"] for r in rows]) * scale
        ax.axvline(0.0, color="#999999", lw=0.8)
        ax.errorbar(med, y, xerr=[med - lo, hi - med], fmt="o", color="#1f78b4", capsize=3)
        ax.set_yticks(y, names if k == 0 else [""] * len(names))
        ax.set_xlabel(label, fontsize=8)
        ax.tick_params(labelsize=8)
        ax.set_ylim(-0.7, len(rows) - 0.3)
    fig.suptitle(title, fontsize=10)
    return _save(fig, path)


def sensitivity_plot(parameters: list[str], panels: list[tuple], title: str, path: Path, *,
                     label: str = "PRCC", limits: tuple[float, float] = (-1.0, 1.0),
                     legend: tuple[str, str] | None = None) -> Path:
    """Horizontal bars of a sensitivity index per parameter, one panel per outcome.

    Parameters
    ----------
    parameters : list of str
        Parameter keys (bar labels).
    panels : list of tuple
        ``(outcome, values, solid)`` or ``(outcome, values, solid, second)``: the
        index per parameter, a boolean per parameter drawn solid (True) or
        hatched, and optionally a second index drawn as a hatched bar below
        the first (a total index beside a first-order one). NaN values are
        marked "n/a".
    title : str
        Figure title.
    path : pathlib.Path
        PNG to write.
    label : str
        Axis label (keyword only).
    limits : (float, float)
        Axis limits.
    legend : (str, str), optional
        Names of the first and second index, for a legend.
    """
    cols = min(3, max(len(panels), 1))
    rows = -(-len(panels) // cols) if panels else 1
    fig = _figure(3.4 * cols + 1.6, 0.42 * len(parameters) * rows + 1.2 * rows + 0.6)
    y = np.arange(len(parameters))[::-1].astype(float)
    for k, panel in enumerate(panels):
        outcome, values, marks = panel[:3]
        second = panel[3] if len(panel) > 3 else None
        ax = fig.add_subplot(rows, cols, k + 1)
        h = 0.38 if second is not None else 0.7
        vals = np.asarray(values, dtype=float)
        shown = np.nan_to_num(vals)
        colours = ["#1f78b4" if v >= 0 else "#d95f02" for v in shown]
        bars = ax.barh(y + (h / 2 if second is not None else 0), shown, height=h,
                       color=colours, edgecolor="#333333", linewidth=0.5,
                       label=legend[0] if legend else None)
        for bar, solid in zip(bars, marks, strict=True):
            if not solid:
                bar.set_alpha(0.35)
                bar.set_hatch("///")
        if second is not None:
            ax.barh(y - h / 2, np.nan_to_num(np.asarray(second, dtype=float)), height=h,
                    color="#a6cee3", edgecolor="#333333", linewidth=0.5, hatch="///",
                    label=legend[1] if legend else None)
        for yy, v in zip(y, vals, strict=True):
            if not np.isfinite(v):
                ax.text(0.02 * (limits[1] - limits[0]) + max(limits[0], 0.0), yy, "n/a",
                        va="center", fontsize=7, color="#666666")
        ax.axvline(0.0, color="#999999", lw=0.8)
        ax.set_xlim(*limits)
        ax.set_yticks(y, parameters if k % cols == 0 else [""] * len(parameters), fontsize=7)
        ax.set_title(outcome, fontsize=8)
        ax.set_xlabel(label, fontsize=8)
        ax.tick_params(axis="x", labelsize=7)
        if legend and k == 0:
            ax.legend(fontsize=7, loc="lower right")
    fig.suptitle(title, fontsize=10)
    return _save(fig, path)
