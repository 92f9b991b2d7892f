"""Comparing alternatives with a reference run: where, when and by how much each changes.

:func:`compare` is the Python API behind ``preyscape compare BASE ALT1 [ALT2 ...]``:
it reads a reference run (usually the baseline) and one or more alternatives
of the same landscape and returns a typed :class:`Comparison` with

* per-cell maps as an :class:`xarray.Dataset` over (alternative, y, x): the
  window means, their difference, the timing margin, gains and losses of the
  level (:func:`preyscape.analysis.change.level_change`), the change of
  persistence, and the arrival delay of each species;
* a ranking table (:class:`pandas.DataFrame`), one row per alternative;
* tables per zone (habitat classes with their names, or polygons), per side
  of each fence, and of each fence's topology (length, open ends, whether
  it separates), with the warnings a planner must read.

Densities are animals/km², areas km², times years. The statistics and why
they single out places are explained in :mod:`preyscape.analysis.change`.
Runs are named by their variant everywhere. Runs on different grids are
refused (:func:`check_same_grid`); runs of different lengths or snapshot
times are compared at their common times, with a warning.

Examples
--------
``run_folder`` and ``other_run`` are finished runs of one scenario (its
baseline and the variant ``fenced``):

>>> result = compare(run_folder, [other_run])
>>> result.base, result.alternatives
('baseline', ('fenced',))
>>> list(result.ranking["alternative"])
['fenced']
>>> result.maps["predator_level_change"].dims
('alternative', 'y', 'x')
>>> result.species
('prey', 'predator')

Runs of prey alone (``run.json`` ``species_present: ["prey"]``) are compared
on the prey only: the comparison's :attr:`Comparison.species` is the species
every run models, and nothing about predators is computed or written.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from preyscape.analysis.results import RunResults, open_run
from preyscape.analysis.settings import DEFAULTS, AnalysisSettings, check_goal
from preyscape.errors import InputError
from preyscape.store import SPECIES, data_mask, frames, grid_of

__all__ = ["CHANGE_THRESHOLD", "PRESENCE", "Comparison", "Zoning", "check_same_grid",
           "compare", "load_zones", "run_labels", "shared_species", "zone_table"]

PRESENCE = DEFAULTS["presence"]
"""Default presence threshold, animals/km² (:data:`~preyscape.analysis.settings.DEFAULTS`)."""

CHANGE_THRESHOLD = DEFAULTS["change_threshold"]
"""Default smallest relative change of a level that matters (10 %)."""

ZONE_STATISTICS = (
    "mean_density",
    "mean_animals",
    "min_animals",
    "persistence",
    "occupied_fraction",
)
"""Per-zone statistics of :func:`zone_table`, in table order."""


def _check_presence(presence: float) -> None:
    if not (np.isfinite(presence) and presence > 0):
        raise ValueError(f"presence threshold must be a positive density (animals/km²), "
                         f"not {presence!r}")


# ---------------------------------------------------------------------------
# grids
# ---------------------------------------------------------------------------
def _same_crs(a: str, b: str) -> bool:
    if a == b:
        return True
    if not a or not b:
        return False
    from pyproj import CRS

    return CRS.from_wkt(a).equals(CRS.from_wkt(b), ignore_axis_order=True)


def same_times(ds_a, ds_b) -> bool:
    """Whether two results datasets hold the same snapshot times (to 1e-9 years)."""
    ta = np.asarray(ds_a["time"].values, dtype=float)
    tb = np.asarray(ds_b["time"].values, dtype=float)
    return ta.shape == tb.shape and bool(np.allclose(ta, tb, rtol=0, atol=1e-9))


def check_same_grid(ds_a, ds_b, names: tuple[str, str] = ("A", "B")) -> None:
    """Refuse two runs that do not lie on the same grid.

    The grids (read with :func:`preyscape.store.grid_of`) must agree in shape,
    cell size and top-left corner (to a thousandth of a cell, metres), CRS and
    data mask. Snapshot times may differ (see the module docstring): each
    run's statistics are taken over its own snapshots.

    Parameters
    ----------
    ds_a, ds_b : xarray.Dataset
        Results datasets of runs A and B.
    names : tuple of str
        How the two runs are named in the message (for example their folders).

    Raises
    ------
    InputError
        Naming both runs and the first difference found.
    """
    ga, gb = grid_of(ds_a), grid_of(ds_b)
    na, nb = names
    lead = f"runs {na} and {nb} cannot be compared cell by cell: "
    tail = "; compare runs made on the same habitat raster, cell size and data mask"
    if ga.shape != gb.shape:
        raise InputError(lead + f"their grids have {ga.ny} x {ga.nx} and {gb.ny} x {gb.nx} "
                         "cells (rows x cols)" + tail)
    tol = 1e-3 * min(ga.dx, ga.dy, gb.dx, gb.dy)
    for label, va, vb in (("cell width (m)", ga.dx, gb.dx), ("cell height (m)", ga.dy, gb.dy),
                          ("west edge x0 (m)", ga.x0, gb.x0),
                          ("north edge y0 (m)", ga.y0, gb.y0)):
        if abs(va - vb) > tol:
            raise InputError(lead + f"their {label} differ: {va:g} and {vb:g}" + tail)
    if not _same_crs(ga.crs_wkt, gb.crs_wkt):
        raise InputError(lead + "their coordinate reference systems differ" + tail)
    diff = ga.mask != gb.mask
    if diff.any():
        r, c = (int(v) for v in np.argwhere(diff)[0])
        raise InputError(lead + f"their data masks differ in {int(diff.sum())} cells, "
                         f"first at row {r}, col {c}" + tail)


# ---------------------------------------------------------------------------
# zones
# ---------------------------------------------------------------------------
def zone_table(
    ds,
    labels: np.ndarray,
    names: Sequence[str],
    species: str,
    *,
    presence: float = PRESENCE,
    indices: Sequence[int] | None = None,
) -> list[dict]:
    """Statistics of one species per zone, over the snapshots after the start.

    Parameters
    ----------
    ds : xarray.Dataset
        A results dataset.
    labels : numpy.ndarray of int
        Zone of every cell, shape (rows, cols): ``k`` is zone ``names[k]``,
        −1 no zone. Cells without data are left out whatever their label.
    names : sequence of str
        Zone names, indexed by label.
    species : str
        ``"prey"`` or ``"predator"``.
    presence : float
        Presence threshold, animals/km².
    indices : sequence of int, optional
        The snapshots to use; default those after the start.

    Returns
    -------
    list of dict
        One per zone, in label order: ``zone`` (name), ``code`` (label),
        ``species``, ``cells`` (data cells), ``area_km2``; ``mean_density``
        (time-mean animals per km² of the zone: ``mean_animals / area_km2``);
        ``mean_animals`` (time mean of the animals in the zone);
        ``min_animals`` (smallest number of animals in the zone in any
        snapshot used); ``persistence`` (mean persistence of its cells, 0–1);
        ``occupied_fraction`` (fraction of snapshots in which the zone holds
        at least ``presence × area_km2`` animals). Statistics are NaN for a
        zone without data cells. Zones covering all data cells add up to the
        landscape totals.
    """
    _check_presence(presence)
    mask = data_mask(ds)
    labels = np.asarray(labels)
    if labels.shape != mask.shape:
        raise ValueError(f"labels have shape {labels.shape}, the grid {mask.shape}")
    nz = len(names)
    if labels.size and (labels.max(initial=-1) >= nz or labels.min(initial=0) < -1):
        raise ValueError(f"labels must be -1 (no zone) or 0..{nz - 1}")
    sel = mask & (labels >= 0)
    lab = labels[sel].astype(np.intp)
    area_cell = grid_of(ds).cell_area_km2
    cells = np.bincount(lab, minlength=nz).astype(float)
    area = cells * area_cell
    acc = np.zeros(nz)
    lo = np.full(nz, np.inf)
    occ_cells = np.zeros(nz)
    occ_zone = np.zeros(nz)
    n = 0
    for _, u in frames(ds, species, indices, mask=mask):
        v = u[sel]
        animals = np.bincount(lab, weights=v, minlength=nz) * area_cell
        acc += animals
        np.minimum(lo, animals, out=lo)
        occ_cells += np.bincount(lab, weights=(v >= presence).astype(float), minlength=nz)
        occ_zone += animals >= presence * area
        n += 1
    if n == 0:
        raise InputError("the run holds no snapshots", f"results: {species}")
    rows = []
    for k in range(nz):
        has = cells[k] > 0
        mean_animals = acc[k] / n if has else np.nan
        rows.append({
            "zone": str(names[k]),
            "code": k,
            "species": species,
            "cells": int(cells[k]),
            "area_km2": float(area[k]),
            "mean_density": float(mean_animals / area[k]) if has else np.nan,
            "mean_animals": float(mean_animals),
            "min_animals": float(lo[k]) if has else np.nan,
            "persistence": float(occ_cells[k] / (n * cells[k])) if has else np.nan,
            "occupied_fraction": float(occ_zone[k] / n) if has else np.nan,
        })
    return rows


# ---------------------------------------------------------------------------
# the comparison of alternatives
# ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class Zoning:
    """One way of cutting the landscape into zones for the tables.

    Attributes
    ----------
    kind : str
        ``"habitat class"``, ``"zone"`` (a user file) or ``"side"`` (of a fence).
    labels : numpy.ndarray of int
        Zone of every cell, 0..k−1; −1 none.
    names : tuple of str
        Zone names, indexed by label.
    fence : str or None
        The fence whose sides these are.
    alternatives : tuple of str
        The alternatives the zoning belongs to (all for classes and zones;
        those with the fence for sides).
    """

    kind: str
    labels: np.ndarray
    names: tuple[str, ...]
    fence: str | None = None
    alternatives: tuple[str, ...] = ()


@dataclass(frozen=True, eq=False)
class Comparison:
    """What each alternative changes against the reference run (see :func:`compare`).

    Attributes
    ----------
    base : str
        The reference run's name (its variant).
    alternatives : tuple of str
        The alternatives' names, in the order given.
    window : Window
        The years and common snapshot times compared
        (:class:`preyscape.analysis.change.Window`).
    maps : xarray.Dataset
        Per species ``sp`` of :attr:`species`: ``{sp}_mean_base`` (y, x) and, over (alternative,
        y, x), ``{sp}_mean`` (window means, animals/km²), ``{sp}_difference``
        (alternative − base), ``{sp}_margin`` (what a difference must exceed),
        ``{sp}_ratio`` (difference / margin), ``{sp}_level_change`` (int8,
        :data:`~preyscape.analysis.change.LEVEL_CODES`),
        ``{sp}_persistence_difference``, ``{sp}_arrival_delay`` (years) and
        ``{sp}_arrival_status`` (int8,
        :data:`~preyscape.analysis.change.ARRIVAL_CODES`); int8 maps hold
        −128 off the data mask.
    ranking : pandas.DataFrame
        One row per alternative (:func:`preyscape.analysis.ranking.ranking_table`).
    zones : pandas.DataFrame
        Per alternative, zone and species: the reference and the alternative.
    sides : pandas.DataFrame
        The same per side of each fence.
    fences : pandas.DataFrame
        Per alternative, line and species it stops: length, open ends,
        separation (:mod:`preyscape.landscape.topology`).
    warnings : tuple of str
        Plain sentences: runs compared at common times only, fences that can
        be walked round, a window shorter than a cycle.
    settings : AnalysisSettings
        The settings used.
    species : tuple of str
        The species every run models, in :data:`preyscape.store.SPECIES`
        order (:func:`shared_species`): ``("prey",)`` when a run models prey
        alone. Maps, tables and columns exist for these species only.
    """

    base: str
    alternatives: tuple[str, ...]
    window: Any
    maps: Any
    ranking: Any
    zones: Any
    sides: Any
    fences: Any
    warnings: tuple[str, ...] = ()
    settings: AnalysisSettings = field(default_factory=AnalysisSettings)
    species: tuple[str, ...] = SPECIES


def shared_species(runs: Sequence[RunResults]) -> tuple[str, ...]:
    """The species every run models (:attr:`RunResults.species`), in ``SPECIES`` order."""
    return tuple(sp for sp in SPECIES if all(sp in r.species for r in runs))


def run_labels(runs: Sequence[RunResults]) -> list[str]:
    """Each run's name (its variant); folder names, then numbers, keep them apart."""
    labels = [r.label for r in runs]
    if len(set(labels)) < len(labels):
        labels = [r.label if labels.count(r.label) == 1 else f"{r.label} ({r.path.name})"
                  for r in runs]
    seen: dict[str, int] = {}
    out = []
    for lab in labels:
        seen[lab] = seen.get(lab, 0) + 1
        out.append(lab if seen[lab] == 1 else f"{lab} #{seen[lab]}")
    return out


def _open(run) -> RunResults:
    return run if isinstance(run, RunResults) else open_run(run)


def compare(base, alternatives, *, settings: AnalysisSettings | None = None,
            zones: Path | None = None, zone_field: str | None = None) -> Comparison:
    """Compare one or more alternatives with a reference run.

    Parameters
    ----------
    base : RunResults or path
        The reference run (the landscape as it is).
    alternatives : RunResults, path, or a sequence of them
        The runs to compare with it, on the same grid.
    settings : AnalysisSettings, optional
        ``years`` (the window), ``change_threshold``, ``presence``, the
        arrival thresholds and ``goal`` (how to rank); default the
        reference run's own (keyword only).
    zones : pathlib.Path, optional
        Zones for the tables instead of the habitat classes
        (:func:`load_zones`).
    zone_field : str, optional
        Polygon attribute naming the zones.

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        If a run lies on another grid (naming both runs), the runs share no
        snapshot in the window, the zone file is unusable, or the goal ranks
        by predators and a run models prey alone
        (:func:`preyscape.analysis.settings.check_goal`).
    FileProblem
        If a folder is not a finished run.
    """
    from preyscape.analysis import ranking
    from preyscape.analysis.change import window_of

    alts = [alternatives] if isinstance(alternatives, (str, Path, RunResults)) else list(
        alternatives)
    if not alts:
        raise InputError("give at least one run to compare with the reference run",
                         "alternatives")
    runs = [_open(base)] + [_open(a) for a in alts]
    labels = run_labels(runs)
    for r, lab in zip(runs[1:], labels[1:], strict=True):
        check_same_grid(runs[0].ds, r.ds, (f"'{labels[0]}' ({runs[0].path})",
                                           f"'{lab}' ({r.path})"))
    settings = settings or runs[0].settings()
    species = shared_species(runs)
    check_goal(settings.goal, species)
    try:
        window = window_of([r.times for r in runs], settings.years)
    except ValueError as err:
        raise InputError(str(err), "years") from None
    zonings = _zonings(runs, labels, zones, zone_field)
    per_run = [_statistics(r, window.indices[k], window.upto_indices[k], window.upto,
                           settings, zonings, runs[0].targets(), species)
               for k, r in enumerate(runs)]
    maps = ranking.change_maps(runs[0].grid, per_run, labels, settings, window,
                               species=species)
    fences = ranking.fence_table(runs[1:], labels[1:], species=species)
    tables = ranking.zone_tables(zonings, per_run, labels, runs[0].grid, settings.presence,
                                 species=species)
    warn = (ranking.time_warnings(runs, labels, window, settings.years)
            + ranking.fence_warnings(fences))
    table = ranking.ranking_table(runs, labels, per_run, maps, window, fences, settings,
                                  species=species)
    return Comparison(labels[0], tuple(labels[1:]), window, maps, table, tables["zones"],
                      tables["sides"], fences, tuple(warn), settings, species)


def _zonings(runs: Sequence[RunResults], labels: list[str], zones: Path | None,
             zone_field: str | None) -> list[Zoning]:
    """Habitat classes (or the user's zones) for all, and the sides of every fence."""
    from preyscape.landscape.topology import fence_sides

    base = runs[0]
    lab, names, kind = load_zones(zones, zone_field, base.grid, base.ds, base.classes)
    out = [Zoning("habitat class" if kind == "habitat classes" else "zone", lab,
                  tuple(names), None, tuple(labels[1:]))]
    sides: dict[str, Zoning] = {}
    for run, name in zip(runs[1:], labels[1:], strict=True):
        for m in run.measures:
            faces = run.faces_of(m)
            if faces is None:
                continue
            if m["name"] in sides:
                z = sides[m["name"]]
                sides[m["name"]] = Zoning(z.kind, z.labels, z.names, z.fence,
                                          z.alternatives + (name,))
                continue
            side_labels, side_names = fence_sides(base.grid, faces)
            if len(side_names) >= 2:
                sides[m["name"]] = Zoning("side", side_labels, tuple(side_names),
                                          m["name"], (name,))
    return out + list(sides.values())


@dataclass(frozen=True, eq=False)
class RunSpecies:
    """One run's statistics of one species: the window, arrival times and target times."""

    stats: Any
    arrival: np.ndarray
    targets: dict


def _statistics(run: RunResults, indices, upto_indices, upto_times, settings: AnalysisSettings,
                zonings: list[Zoning], targets, species: Sequence[str] = SPECIES,
                ) -> dict[str, RunSpecies]:
    """Window statistics, arrival-time map and target colonisation of each species compared."""
    from preyscape.analysis.change import first_crossing, window_statistics
    from preyscape.analysis.settings import COLONISED_SHARE
    from preyscape.analysis.waves import ArrivalClock

    mask = run.mask
    out = {}
    for sp in species:
        thr = settings.arrival_threshold(sp)
        shares: dict[str, list[float]] = {name: [] for name, _ in targets}
        clock = ArrivalClock(thr)

        def tracked(sp=sp, thr=thr, shares=shares, clock=clock, used=frozenset(indices)):
            # every snapshot up to the window's end: arrival times and targets; the
            # window's snapshots also go on to the statistics (one read for both)
            for (k, u), t in zip(run.frames(sp, upto_indices), upto_times, strict=True):
                clock.add(u, t)
                for name, cells in targets:
                    c = cells & mask
                    shares[name].append(float(np.count_nonzero(u[c] >= thr)) / max(1, c.sum()))
                if k in used:
                    yield u

        first = [tracked()]

        def window(sp=sp, first=first):
            # the statistics' first pass is the one above; their second reads the window
            return first.pop() if first else (u for _, u in run.frames(sp, indices))

        stats = window_statistics(window, presence=settings.presence, mask=mask,
                                  zones=[z.labels for z in zonings])
        arrival = clock.result(mask)
        reached = {name: first_crossing(upto_times, f, COLONISED_SHARE)
                   for name, f in shares.items()}
        out[sp] = RunSpecies(stats, arrival, reached)
    return out


# ---------------------------------------------------------------------------
# zones from files
# ---------------------------------------------------------------------------
POLYGON_SUFFIXES = (".geojson", ".json")
"""Zone files read as polygons; any other file is read as a class raster."""


def _codes_to_labels(values: np.ndarray, valid: np.ndarray, prefix: str,
                     source: str, named: dict[int, str] | None = None,
                     ) -> tuple[np.ndarray, list[str]]:
    """Integer labels 0..n-1 for the distinct integer codes in ``values`` on ``valid``."""
    v = values[valid]
    if v.size and not np.all(v == np.round(v)):
        raise InputError("zones must be integer class codes; the raster holds fractional "
                         "values", source)
    codes = np.unique(v.astype(np.int64))
    labels = np.full(values.shape, -1, dtype=np.int32)
    labels[valid] = np.searchsorted(codes, values[valid].astype(np.int64))
    named = named or {}
    return labels, [named.get(int(c)) or f"{prefix} {int(c)}" for c in codes]


def load_zones(zones: Path | None, zone_field: str | None, grid, ds,
               classes: dict[int, str] | None = None) -> tuple[np.ndarray, list[str], str]:
    """Zone labels on ``grid`` from a file or from the run's habitat classes.

    Parameters
    ----------
    zones : pathlib.Path or None
        A polygon file (``.geojson``/``.json``, read with
        :func:`preyscape.landscape.measures.zones_from_polygons`) or a class
        raster (any other suffix; read with
        :func:`preyscape.landscape.io.read_layer_onto`, majority per cell).
        None: the habitat classes stored in ``ds`` (``habitat``), named by
        ``classes`` (else ``"class <code>"``), when they are integer codes;
        otherwise one zone, the whole landscape.
    zone_field : str or None
        Polygon attribute naming the zones (polygons only).
    grid : Grid
        The run grid.
    ds : xarray.Dataset
        The results of run A (for its habitat layer).
    classes : dict, optional
        Habitat class code to name (:attr:`RunResults.classes`).

    Returns
    -------
    labels : numpy.ndarray of int32
        Zone per cell, −1 none.
    names : list of str
        Zone names, indexed by label.
    kind : str
        ``"polygons"``, ``"raster"``, ``"habitat classes"`` or ``"whole landscape"``.
    """
    mask = grid.mask
    if zones is None:
        if "habitat" in ds:
            hab = np.asarray(ds["habitat"].values, dtype=np.float64)
            valid = mask & np.isfinite(hab)
            if valid.any() and np.all(hab[valid] == np.round(hab[valid])):
                labels, names = _codes_to_labels(hab, valid, "class", "results.nc: habitat",
                                                 classes)
                return labels, names, "habitat classes"
        return np.where(mask, 0, -1).astype(np.int32), ["whole landscape"], "whole landscape"
    zones = Path(zones)
    src = str(zones)
    if not zones.is_file():
        raise InputError("zone file not found; give a polygon GeoJSON or a class raster", src)
    if zones.suffix.lower() in POLYGON_SUFFIXES:
        from preyscape.landscape.measures import zones_from_polygons

        labels, names = zones_from_polygons(zones, grid, field=zone_field, source=src)
        return np.asarray(labels, dtype=np.int32), [str(n) for n in names], "polygons"
    if zone_field is not None:
        raise InputError(f"zone_field {zone_field!r} applies to polygon zones only "
                         f"({', '.join(POLYGON_SUFFIXES)}); a raster's zones are its codes", src)
    from preyscape.landscape.io import read_layer_onto

    arr = read_layer_onto(zones, grid, "mode", source=src)
    labels, names = _codes_to_labels(arr, mask & np.isfinite(arr), "zone", src)
    return labels, names, "raster"
