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

The result holds face conductances (float32, 1/yr) as used by
:mod:`preyscape.solve.kernels`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

MOVEMENT_KINDS = ("fickian", "ecological")
EDGE_RULES = ("closed", "hostile")


@dataclass(frozen=True, eq=False)
class Operator1D:
    """One direction of a movement operator as per-cell coefficients, 1/yr.

    ``(L u)[i] = lo[i] u[i-1] + up[i] u[i+1] - dg[i] u[i]`` along the axis
    (a float64 view for checks; the solver works on the face conductances).
    """

    lo: np.ndarray
    up: np.ndarray
    dg: np.ndarray


@dataclass(frozen=True, eq=False)
class Movement:
    """A species' movement operator as face conductances.

    Attributes
    ----------
    cx : numpy.ndarray of float32
        Conductance of the faces between columns divided by dx², shape
        ``(rows, cols+1)``, 1/yr (Fickian: face diffusivity; ecological:
        permeability, multiplied by the motility of the cell the animals
        leave). Face ``k`` separates columns ``k-1`` and ``k``.
    cy : numpy.ndarray of float32
        The same for the faces between rows, shape ``(rows+1, cols)``.
    w : numpy.ndarray of float32 or None
        Motility per cell, km²/yr (ecological), None for Fickian.
    mask : numpy.ndarray of bool
        Cells with data.

    Notes
    -----
    A face to a no-data cell or beyond the grid edge has conductance zero
    (closed) or ``2 x`` the cell's own value (hostile: density zero on the
    face, half a cell from the centre); the density beyond it is zero.
    Coefficients are float32: each face value is used by both of its cells,
    so the operator conserves mass exactly, and 7 significant digits are far
    beyond the accuracy of any habitat parameter.
    """

    cx: np.ndarray
    cy: np.ndarray
    w: np.ndarray | None
    mask: np.ndarray

    @property
    def ecological(self) -> bool:
        """Whether this is ecological (motility) movement."""
        return self.w is not None

    def _weights(self) -> np.ndarray:
        return np.ones(self.mask.shape) if self.w is None else self.w.astype(float)

    @staticmethod
    def _along(c: np.ndarray, w: np.ndarray, m: np.ndarray) -> Operator1D:
        c = c.astype(float)
        n = w.shape[1]
        lo = np.zeros_like(w)
        up = np.zeros_like(w)
        lo[:, 1:] = c[:, 1:n] * w[:, :-1] * m[:, :-1]  # no coupling to no-data neighbours
        up[:, :-1] = c[:, 1:n] * w[:, 1:] * m[:, 1:]
        dg = (c[:, :-1] + c[:, 1:]) * w
        return Operator1D(lo * m, up * m, dg * m)

    @property
    def x(self) -> Operator1D:
        """Per-cell coefficients along rows (east–west), 1/yr."""
        return self._along(self.cx, self._weights(), self.mask)

    @property
    def y(self) -> Operator1D:
        """Per-cell coefficients along columns (north–south), 1/yr."""
        t = self._along(self.cy.T, self._weights().T, self.mask.T)
        return Operator1D(t.lo.T, t.up.T, t.dg.T)

    def max_rate_along(self) -> tuple[float, float]:
        """Largest diagonal coefficient per direction ``(x, y)``, 1/yr."""
        w = self._weights()
        dx = (self.cx[:, :-1].astype(float) + self.cx[:, 1:]) * w
        dy = (self.cy[:-1, :].astype(float) + self.cy[1:, :]) * w
        return float(dx[self.mask].max(initial=0.0)), float(dy[self.mask].max(initial=0.0))

    @property
    def max_rate(self) -> float:
        """Largest ``dg_x + dg_y``, 1/yr: ``dt * max_rate <= 1`` is the forward-Euler limit."""
        w = self._weights()
        d = (self.cx[:, :-1].astype(float) + self.cx[:, 1:] + self.cy[:-1, :] + self.cy[1:, :])
        return float((d * w)[self.mask].max(initial=0.0))


def _harmonic(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    s = a + b
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(s > 0, 2.0 * a * b / np.where(s > 0, s, 1.0), 0.0)


def _faces(
    coef: np.ndarray,
    mask: np.ndarray,
    perm: np.ndarray,
    kind: str,
    edge: str,
    nodata: str,
    h_km: float,
) -> np.ndarray:
    """Conductances of the faces along the last axis, shape (m, n + 1), 1/yr."""
    m, n = coef.shape
    c = np.where(mask, coef, 0.0)
    fickian = kind == "fickian"
    face = np.zeros((m, n + 1))
    both = mask[:, :-1] & mask[:, 1:]
    if fickian:
        face[:, 1:-1] = np.where(both, _harmonic(c[:, :-1], c[:, 1:]), 0.0)
    else:
        face[:, 1:-1] = both
    # one-sided faces: density zero on the face, half a cell from the data cell,
    # so twice the cell's own coefficient (Fickian) or twice its weight (ecological)
    own = c if fickian else mask.astype(float)
    if nodata == "hostile":
        face[:, 1:-1] += 2.0 * (own[:, :-1] * ~mask[:, 1:] + own[:, 1:] * ~mask[:, :-1])
    if edge == "hostile":
        face[:, 0] = 2.0 * own[:, 0]
        face[:, -1] = 2.0 * own[:, -1]
    face *= perm
    face /= h_km * h_km
    return face


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
        Face conductances in 1/yr.
    """
    for name, rule in (("edge", edge), ("nodata", nodata)):
        if rule not in EDGE_RULES:
            raise ValueError(f"{name} must be one of {EDGE_RULES}, not {rule!r}")
    if kind not in MOVEMENT_KINDS:
        raise ValueError(f"movement must be one of {MOVEMENT_KINDS}, not {kind!r}")
    coef = np.asarray(coef, dtype=float)
    mask = np.ascontiguousarray(mask, dtype=bool)
    ny, nx = coef.shape
    if np.any(coef[mask] < 0):
        raise ValueError("diffusivity/motility must be non-negative")
    px = np.ones((ny, nx + 1)) if perm_x is None else np.asarray(perm_x, dtype=float)
    py = np.ones((ny + 1, nx)) if perm_y is None else np.asarray(perm_y, dtype=float)
    if px.shape != (ny, nx + 1) or py.shape != (ny + 1, nx):
        raise ValueError("perm_x must have shape (rows, cols+1) and perm_y (rows+1, cols)")
    cx = _faces(coef, mask, px, kind, edge, nodata, dx_m / 1000.0)
    cy = _faces(coef.T, mask.T, py.T, kind, edge, nodata, dy_m / 1000.0).T
    w = np.ascontiguousarray(np.where(mask, coef, 0.0), dtype=np.float32)
    return Movement(
        np.ascontiguousarray(cx, dtype=np.float32),
        np.ascontiguousarray(cy, dtype=np.float32),
        w if kind == "ecological" else None,
        mask,
    )


def apply(mv: Movement, u: np.ndarray) -> np.ndarray:
    """``(Lx + Ly) u`` with numpy (reference for tests and checks), 1/yr · density."""
    ox, oy = mv.x, mv.y
    out = -(ox.dg + oy.dg) * u
    out[:, 1:] += ox.lo[:, 1:] * u[:, :-1]
    out[:, :-1] += ox.up[:, :-1] * u[:, 1:]
    out[1:, :] += oy.lo[1:, :] * u[:-1, :]
    out[:-1, :] += oy.up[:-1, :] * u[1:, :]
    return out
