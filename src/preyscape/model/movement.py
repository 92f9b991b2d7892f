"""Movement operators as face conductances on the finite-volume grid.

Two published forms, per species:

* Fickian diffusion ``div(D grad u)``: the face coefficient is the harmonic
  mean of the two cells' diffusivities (the flux-continuous choice for
  piecewise-constant D).
* Ecological diffusion ``laplacian(mu u)`` (motility mu, residence time
  proportional to 1/mu): the flux across a face is ``-(mu_j u_j - mu_i u_i)/h``
  (Turchin 1998, Quantitative Analysis of Movement; Garlick et al. 2011,
  Bull Math Biol 73:2088).

A fence multiplies a face's coefficient by its permeability (0 = impassable).
Faces on the grid edge and faces to no-data cells are *closed* (no flux) or
*hostile* (density zero on the face: a lethal boundary half a cell from the
cell centre). Closed faces conserve mass exactly.

The result is the per-direction triple ``(lo, up, dg)`` used by
:mod:`preyscape.solve.kernels`, in 1/yr.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MOVEMENT_KINDS = ("fickian", "ecological")
EDGE_RULES = ("closed", "hostile")


@dataclass(frozen=True, eq=False)
class Operator1D:
    """One direction of a movement operator, coefficients in 1/yr.

    ``(L u)[i] = lo[i] u[i-1] + up[i] u[i+1] - dg[i] u[i]`` along the axis.
    """

    lo: np.ndarray
    up: np.ndarray
    dg: np.ndarray


@dataclass(frozen=True, eq=False)
class Movement:
    """A species' movement operator, split by direction.

    Attributes
    ----------
    x, y : Operator1D
        Along rows (east–west) and along columns (north–south).
    """

    x: Operator1D
    y: Operator1D

    @property
    def max_rate(self) -> float:
        """Largest diagonal coefficient ``max(dg_x + dg_y)``, 1/yr.

        ``dt * max_rate <= 1`` is the forward-Euler stability limit.
        """
        return float(np.max(self.x.dg + self.y.dg)) if self.x.dg.size else 0.0

    def max_rate_along(self) -> tuple[float, float]:
        """Largest diagonal coefficient per direction ``(x, y)``, 1/yr."""
        return float(np.max(self.x.dg)), float(np.max(self.y.dg))


def _harmonic(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    s = a + b
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(s > 0, 2.0 * a * b / np.where(s > 0, s, 1.0), 0.0)


def _axis(
    coef: np.ndarray,
    mask: np.ndarray,
    perm: np.ndarray,
    kind: str,
    edge: str,
    nodata: str,
    h_km: float,
) -> Operator1D:
    """Build one direction along the last axis of ``coef`` (shape (m, n)).

    ``perm`` has shape (m, n + 1): face k lies between cells k-1 and k.
    """
    m, n = coef.shape
    c = np.where(mask, coef, 0.0)
    inside = np.zeros((m, n + 2), dtype=bool)
    inside[:, 1:-1] = mask
    left_in = inside[:, :-2]  # neighbour at k-1 has data
    right_in = inside[:, 2:]
    lo = np.zeros((m, n))
    up = np.zeros((m, n))
    dg = np.zeros((m, n))
    # interior faces between two data cells
    p_int = perm[:, 1:-1]  # faces between k-1 and k for k = 1..n-1
    both = mask[:, :-1] & mask[:, 1:]
    if kind == "fickian":
        face = _harmonic(c[:, :-1], c[:, 1:]) * p_int * both
        up[:, :-1] = face
        lo[:, 1:] = face
        dg[:, :-1] += face
        dg[:, 1:] += face
        own = c  # coefficient on a hostile face: the cell's own D
    elif kind == "ecological":
        face = p_int * both
        up[:, :-1] = face * c[:, 1:]
        lo[:, 1:] = face * c[:, :-1]
        dg[:, :-1] += face * c[:, :-1]
        dg[:, 1:] += face * c[:, 1:]
        own = c
    else:
        raise ValueError(f"movement must be one of {MOVEMENT_KINDS}, not {kind!r}")
    # hostile faces: density zero on the face, half a cell away -> factor 2
    for side, neighbour_in, face_perm in (
        ("left", left_in, perm[:, :-1]),
        ("right", right_in, perm[:, 1:]),
    ):
        on_edge = np.zeros((m, n), dtype=bool)
        if side == "left":
            on_edge[:, 0] = True
        else:
            on_edge[:, -1] = True
        lethal = np.zeros((m, n), dtype=bool)
        if edge == "hostile":
            lethal |= on_edge
        if nodata == "hostile":
            lethal |= ~on_edge & ~neighbour_in
        lethal &= mask
        dg += np.where(lethal, 2.0 * own * face_perm, 0.0)
    scale = 1.0 / (h_km * h_km)
    return Operator1D(
        np.ascontiguousarray(lo * scale),
        np.ascontiguousarray(up * scale),
        np.ascontiguousarray(dg * scale),
    )


def build_movement(
    coef: np.ndarray,
    mask: np.ndarray,
    dx_m: float,
    dy_m: float,
    kind: str = "fickian",
    edge: str = "closed",
    nodata: str = "closed",
    perm_x: np.ndarray | None = None,
    perm_y: np.ndarray | None = None,
) -> Movement:
    """Assemble a species' movement operator.

    Parameters
    ----------
    coef : numpy.ndarray
        Diffusivity D (Fickian) or motility mu (ecological) per cell,
        km²/yr, shape ``(rows, cols)``.
    mask : numpy.ndarray of bool
        Cells with data.
    dx_m, dy_m : float
        Cell width and height, metres.
    kind : {"fickian", "ecological"}
        Movement form.
    edge, nodata : {"closed", "hostile"}
        What lies beyond the grid edge and on no-data cells.
    perm_x : numpy.ndarray, optional
        Permeability of the faces between columns, shape ``(rows, cols+1)``;
        face ``k`` separates columns ``k-1`` and ``k``. Default 1.
    perm_y : numpy.ndarray, optional
        Permeability of the faces between rows, shape ``(rows+1, cols)``.

    Returns
    -------
    Movement
        Coefficients in 1/yr.
    """
    for name, rule in (("edge", edge), ("nodata", nodata)):
        if rule not in EDGE_RULES:
            raise ValueError(f"{name} must be one of {EDGE_RULES}, not {rule!r}")
    coef = np.asarray(coef, dtype=float)
    mask = np.asarray(mask, dtype=bool)
    ny, nx = coef.shape
    if np.any(coef[mask] < 0):
        raise ValueError("diffusivity/motility must be non-negative")
    px = np.ones((ny, nx + 1)) if perm_x is None else np.asarray(perm_x, dtype=float)
    py = np.ones((ny + 1, nx)) if perm_y is None else np.asarray(perm_y, dtype=float)
    if px.shape != (ny, nx + 1) or py.shape != (ny + 1, nx):
        raise ValueError("perm_x must have shape (rows, cols+1) and perm_y (rows+1, cols)")
    ox = _axis(coef, mask, px, kind, edge, nodata, dx_m / 1000.0)
    # y: transpose so the same code runs along the last axis
    oy_t = _axis(coef.T, mask.T, py.T, kind, edge, nodata, dy_m / 1000.0)
    oy = Operator1D(
        np.ascontiguousarray(oy_t.lo.T),
        np.ascontiguousarray(oy_t.up.T),
        np.ascontiguousarray(oy_t.dg.T),
    )
    return Movement(ox, oy)


def apply(mv: Movement, u: np.ndarray) -> np.ndarray:
    """``(Lx + Ly) u`` with numpy (reference for tests and checks), 1/yr · density."""
    out = -(mv.x.dg + mv.y.dg) * u
    out[:, 1:] += mv.x.lo[:, 1:] * u[:, :-1]
    out[:, :-1] += mv.x.up[:, :-1] * u[:, 1:]
    out[1:, :] += mv.y.lo[1:, :] * u[:-1, :]
    out[:-1, :] += mv.y.up[:-1, :] * u[1:, :]
    return out
