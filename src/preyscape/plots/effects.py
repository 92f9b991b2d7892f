"""Figures of measure effects: flows across a transect over time."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from preyscape.plots import _new, _save

COLOURS = {"prey": "#2a788e", "predator": "#b5367a"}


def flux_plot(series: dict, names: dict, transect: str, path: Path) -> Path:
    """Net flow across a transect (animals/yr) and its running total (animals).

    Parameters
    ----------
    series : dict
        ``{species: (times in years, flow in animals/yr, cumulative animals)}``.
    names : dict
        Common names per species.
    transect : str
        The transect's name, for the title.
    path : pathlib.Path
        PNG to write.
    """
    fig = _new((7.0, 5.0))
    top = fig.add_subplot(2, 1, 1)
    bottom = fig.add_subplot(2, 1, 2, sharex=top)
    for sp, (t, flow, total) in series.items():
        label = f"{sp} ({names.get(sp) or sp})"
        top.plot(t, flow, color=COLOURS.get(sp), label=label)
        bottom.plot(t, total, color=COLOURS.get(sp), label=label)
    for ax in (top, bottom):
        ax.axhline(0.0, color="0.6", lw=0.8)
    top.set_ylabel("net flow (animals/yr)")
    bottom.set_ylabel("running total (animals)")
    bottom.set_xlabel("time (years)")
    top.legend(fontsize=8)
    top.set_title(f"Animals crossing '{transect}' (positive: from its left to its right)",
                  fontsize=10)
    top.set_xlim(float(np.min([s[0][0] for s in series.values()])),
                 float(np.max([s[0][-1] for s in series.values()])))
    fig.tight_layout()
    return _save(fig, path)
