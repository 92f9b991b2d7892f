"""Per-cell parameter fields from habitat.

A habitat raster holds either class codes, each mapped by a class table to
multipliers of the species' best-habitat values, or a suitability in 0–1
that scales the prey carrying capacity. Cells whose prey capacity is zero are
sinks: with a logistic form, prey there decline at their growth rate
(per-capita rate ``-r`` times the class's growth multiplier) instead of growing.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

MULTIPLIERS = (
    "prey_capacity",
    "prey_growth",
    "prey_movement",
    "predator_mortality",
    "predator_movement",
)
"""Quantities a habitat class can scale, each by a non-negative factor."""


@dataclass(frozen=True, eq=False)
class Fields:
    """Parameter fields on the grid, shape ``(rows, cols)``, float32, zero on no-data cells.

    Attributes
    ----------
    K : numpy.ndarray
        Prey carrying capacity, animals/km².
    r : numpy.ndarray
        Prey per-capita growth rate at low density, 1/yr (negative in sinks).
    inv_K : numpy.ndarray
        1/K where growth is density-limited, else 0, km².
    m : numpy.ndarray
        Predator mortality, 1/yr.
    prey_move, predator_move : numpy.ndarray
        Diffusivity or motility, km²/yr.
    """

    K: np.ndarray
    r: np.ndarray
    inv_K: np.ndarray
    m: np.ndarray
    prey_move: np.ndarray
    predator_move: np.ndarray


def multipliers_from_classes(
    codes: np.ndarray, mask: np.ndarray, table: Mapping[int, Mapping[str, float]]
) -> dict[str, np.ndarray]:
    """Per-cell multipliers from class codes and a class table.

    Parameters
    ----------
    codes : numpy.ndarray of int
        Habitat class per cell.
    mask : numpy.ndarray of bool
        Cells with data.
    table : mapping
        ``{code: {multiplier name: factor}}``; missing names default to 1.

    Raises
    ------
    KeyError
        With the first code that has data cells but no table row.
    """
    out = {k: np.zeros(codes.shape) for k in MULTIPLIERS}
    present = np.unique(codes[mask])
    missing = [int(c) for c in present if int(c) not in table]
    if missing:
        raise KeyError(missing[0])
    for code in present:
        sel = mask & (codes == code)
        row = table[int(code)]
        for k in MULTIPLIERS:
            out[k][sel] = float(row.get(k, 1.0))
    return out


def multipliers_from_suitability(s: np.ndarray, mask: np.ndarray) -> dict[str, np.ndarray]:
    """Per-cell multipliers from a 0–1 suitability: capacity scales with it, the rest is 1."""
    one = np.where(mask, 1.0, 0.0)
    out = {k: one.copy() for k in MULTIPLIERS}
    out["prey_capacity"] = np.where(mask, np.nan_to_num(s), 0.0)
    return out


def build_fields(
    mult: Mapping[str, np.ndarray],
    mask: np.ndarray,
    growth: float,
    capacity: float | None,
    mortality: float,
    prey_move: float,
    predator_move: float,
    logistic: bool,
) -> Fields:
    """Combine best-habitat species values with per-cell multipliers.

    Parameters
    ----------
    mult : mapping
        Multiplier arrays named as in :data:`MULTIPLIERS`.
    mask : numpy.ndarray of bool
        Cells with data.
    growth : float
        Prey growth rate r at best habitat, 1/yr.
    capacity : float or None
        Prey carrying capacity at best habitat, animals/km² (None: unlimited,
        allowed only when ``logistic`` is False).
    mortality : float
        Predator mortality m at best habitat, 1/yr.
    prey_move, predator_move : float
        Diffusivity or motility at best habitat, km²/yr.
    logistic : bool
        Whether prey growth is density-limited.
    """
    z = np.where(mask, 1.0, 0.0)
    K = z * (capacity if capacity is not None else 0.0) * mult["prey_capacity"]
    r = z * growth * mult["prey_growth"]
    inv_K = np.zeros_like(K)
    if logistic:
        if capacity is None:
            raise ValueError("a density-limited form needs a carrying capacity")
        pos = mask & (K > 0)
        inv_K[pos] = 1.0 / K[pos]
        sink = mask & (K <= 0)
        r[sink] = -growth * mult["prey_growth"][sink]
    f4 = np.float32  # stored as float32: 7 significant digits, half the memory
    return Fields(
        K=K.astype(f4),
        r=r.astype(f4),
        inv_K=inv_K.astype(f4),
        m=(z * mortality * mult["predator_mortality"]).astype(f4),
        prey_move=(z * prey_move * mult["prey_movement"]).astype(f4),
        predator_move=(z * predator_move * mult["predator_movement"]).astype(f4),
    )
