"""Measures placed on a grid, and the rules for combining them.

:mod:`preyscape.landscape.measures` burns a measure's geometry onto cells and
faces; this module holds the result as a plain value (:class:`PlacedMeasure`,
no scenario object) and the rules for what several measures acting at once
do (:func:`combine`). :class:`Outline` is what a map draws of a measure.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = ["Combined", "Outline", "PlacedMeasure", "combine"]


@dataclass(frozen=True, eq=False)
class Outline:
    """A measure as a map draws it: plain coordinates and cells, no files.

    Attributes
    ----------
    name : str
        The measure's name.
    kind : {"corridor", "fence", "refuge"}
        What it is.
    lines : tuple of numpy.ndarray
        Line and ring vertices, each ``(k, 2)`` in map metres (may be empty).
    cells : numpy.ndarray of bool or None
        Cells it covers (corridors, refuges).
    faces : (numpy.ndarray, numpy.ndarray) or None
        Faces it blocks, between columns ``(rows, cols+1)`` and between rows
        ``(rows+1, cols)`` (fences; a refuge closed to predators).
    """

    name: str
    kind: str
    lines: tuple[np.ndarray, ...] = ()
    cells: np.ndarray | None = None
    faces: tuple[np.ndarray, np.ndarray] | None = None


@dataclass(frozen=True, eq=False)
class PlacedMeasure:
    """A corridor, fence or refuge on the cells and faces of a grid (plain values).

    Attributes
    ----------
    name, kind : str
        The measure's name and kind (``"corridor"``, ``"fence"``, ``"refuge"``).
    cells : numpy.ndarray of bool or None
        Cells a corridor or refuge covers (cells with data only).
    faces : (numpy.ndarray, numpy.ndarray) or None
        Faces a fence acts on, between columns ``(rows, cols+1)`` and between
        rows ``(rows+1, cols)``; for a refuge closed to predators, its outline.
    shapes : tuple
        The geometries in the grid's CRS (:class:`~preyscape.landscape.measures.Shape`;
        empty for a raster measure).
    start_year : float
        When it starts acting, years since the start of the run.
    end_year : float or None
        When it stops (None: it acts to the end).
    baseline : bool
        Whether the scenario's baseline has it.
    source : str
        The file it was read from.
    permeability : dict
        Fences: species to the share (0–1) of movement the fence lets through.
    gaps : tuple of dict
        Fences: openings ``{"x", "y", "width"}`` in metres.
    protected_fraction : float or None
        Refuges: share (0–1) of prey shielded from predation on its cells.
    closed_to_predators : bool
        Refuges: whether its outline blocks predators.
    sets : dict
        Corridors: habitat values set on its cells (multipliers by name, or
        ``"suitability"``).
    """

    name: str
    kind: str
    cells: np.ndarray | None
    faces: tuple[np.ndarray, np.ndarray] | None
    shapes: tuple = ()
    start_year: float = 0.0
    end_year: float | None = None
    baseline: bool = True
    source: str = ""
    permeability: dict = field(default_factory=dict)
    gaps: tuple = ()
    protected_fraction: float | None = None
    closed_to_predators: bool = False
    sets: dict = field(default_factory=dict)

    def active(self, t0: float, t1: float) -> bool:
        """Whether the measure acts during ``[t0, t1)`` (years since the start)."""
        end = math.inf if self.end_year is None else self.end_year
        return self.start_year <= t0 and t1 <= end

    def summary(self, cell_area_km2: float) -> dict:
        """Name, kind, timing and size on the grid (cells, km², faces) for ``run.json``."""
        out = {"name": self.name, "kind": self.kind, "start_year": self.start_year,
               "end_year": self.end_year, "source": self.source}
        if self.cells is not None:
            n = int(self.cells.sum())
            out.update(cells=n, area_km2=round(n * cell_area_km2, 6))
        if self.faces is not None:
            out["faces"] = int(self.faces[0].sum() + self.faces[1].sum())
        if self.kind == "fence":
            out["permeability"] = dict(self.permeability)
            out["gaps"] = [dict(g) for g in self.gaps]
        elif self.kind == "refuge":
            out.update(protected_fraction=self.protected_fraction,
                       closed_to_predators=self.closed_to_predators)
        else:
            out["sets"] = dict(self.sets)
        return out


@dataclass(frozen=True, eq=False)
class Combined:
    """What the measures acting at one time do to the landscape.

    Attributes
    ----------
    multipliers : dict
        Habitat multiplier maps (float64) with the corridors applied.
    permeability : dict
        Species to ``(between columns, between rows)`` face permeabilities
        (0–1, float64) with every fence and closed refuge applied.
    refuge : numpy.ndarray or None
        Share of prey shielded from predation per cell (0–1), None without
        refuges.
    """

    multipliers: dict
    permeability: dict
    refuge: np.ndarray | None


SPECIES = ("prey", "predator")


def combine(measures: Sequence[PlacedMeasure], multipliers: Mapping[str, np.ndarray],
            ) -> Combined:
    """Combine measures acting at the same time into fields and face permeabilities.

    The rules:

    * a corridor replaces the habitat multipliers (or the suitability, which
      sets the prey-capacity multiplier) on its cells; a later corridor in
      ``measures`` wins where two overlap;
    * a fence multiplies the permeability of the faces it crosses by its
      permeability for each species, so two fences on one face act in series;
    * a refuge shields ``protected_fraction`` of prey on its cells;
      overlapping refuges combine as ``1 - (1 - f1)(1 - f2)``;
    * a refuge closed to predators blocks predators on its outline faces.

    Parameters
    ----------
    measures : sequence of PlacedMeasure
        The measures acting (any order for fences and refuges).
    multipliers : mapping
        Habitat multiplier maps before measures, by name (``prey_capacity``, ...).

    Returns
    -------
    Combined

    Examples
    --------
    >>> fx, fy = np.zeros((1, 3), bool), np.zeros((2, 2), bool)
    >>> fx[0, 1] = True
    >>> a = PlacedMeasure("a", "fence", None, (fx, fy), permeability={"prey": 0.5,
    ...                   "predator": 0.0})
    >>> b = PlacedMeasure("b", "fence", None, (fx, fy), permeability={"prey": 0.5,
    ...                   "predator": 1.0})
    >>> c = combine([a, b], {"prey_capacity": np.ones((1, 2))})
    >>> float(c.permeability["prey"][0][0, 1]), float(c.permeability["predator"][0][0, 1])
    (0.25, 0.0)
    """
    mult = {k: np.array(v, dtype=float) for k, v in multipliers.items()}
    shape = next(iter(mult.values())).shape
    ny, nx = shape
    perm = {sp: (np.ones((ny, nx + 1)), np.ones((ny + 1, nx))) for sp in SPECIES}
    refuge = None
    for m in measures:
        if m.kind == "corridor":
            for key, value in m.sets.items():
                mult["prey_capacity" if key == "suitability" else key][m.cells] = value
        elif m.kind == "fence":
            for sp in SPECIES:
                p = m.permeability.get(sp, 1.0)
                perm[sp][0][m.faces[0]] *= p
                perm[sp][1][m.faces[1]] *= p
        elif m.kind == "refuge":
            if refuge is None:
                refuge = np.zeros(shape)
            refuge[m.cells] = 1.0 - (1.0 - refuge[m.cells]) * (1.0 - m.protected_fraction)
            if m.closed_to_predators and m.faces is not None:
                perm["predator"][0][m.faces[0]] = 0.0
                perm["predator"][1][m.faces[1]] = 0.0
    return Combined(mult, perm, refuge)
