"""Baseline solvers of the same physics, written for the benchmark only (not shipped).

Both advance the same semi-discrete system as preyscape (the same face
conductances, the same interaction) with forward Euler in time, the way a
hand-written loop usually does it; their step is limited by the explicit
stability bound ``dt <= 1 / max(dg_x + dg_y)``.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

from preyscape.model.movement import Movement
from preyscape.model.reactions import Interaction


def stable_step(*movements: Movement) -> float:
    """Largest forward-Euler step for the movement operators, years (90 % of the bound)."""
    return 0.9 / max(mv.max_rate for mv in movements)


class NumpyExplicit:
    """A naive numpy solver: whole-array expressions, temporaries every step."""

    def __init__(self, mv_n: Movement, mv_p: Movement, r, inv_K, m, inter: Interaction, dt):
        self.ops = []
        for mv in (mv_n, mv_p):
            w = np.ones(mv.mask.shape) if mv.w is None else mv.w.astype(float)
            self.ops.append((mv.cx.astype(float), mv.cy.astype(float), w, mv.mask))
        self.r, self.inv_K, self.m, self.it, self.dt = r, inv_K, m, inter, dt

    @staticmethod
    def _move(u, cx, cy, w, mask):
        wu = w * u
        out = -(cx[:, :-1] + cx[:, 1:] + cy[:-1, :] + cy[1:, :]) * wu
        out[:, 1:] += cx[:, 1:-1] * wu[:, :-1]
        out[:, :-1] += cx[:, 1:-1] * wu[:, 1:]
        out[1:, :] += cy[1:-1, :] * wu[:-1, :]
        out[:-1, :] += cy[1:-1, :] * wu[1:, :]
        return np.where(mask, out, 0.0)

    def step(self, N, P):
        """One step; returns the new ``(N, P)``."""
        it = self.it
        f = it.attack_rate * N / (1.0 + it.attack_rate * it.h * N + it.c * P)
        dN = self.r * N * (1.0 - N * self.inv_K) - f * P + self._move(N, *self.ops[0])
        dP = it.efficiency * f * P - self.m * P + self._move(P, *self.ops[1])
        return N + self.dt * dN, P + self.dt * dP


@njit(parallel=True, cache=True)
def _numba_step(N, P, N2, P2, dt, r, ik, m, a, h, c, e, cxn, cyn, wn, cxp, cyp, wp, mask):
    ny, nx = N.shape
    for i in prange(ny):
        for j in range(nx):
            if not mask[i, j]:
                N2[i, j] = 0.0
                P2[i, j] = 0.0
                continue
            n = N[i, j]
            p = P[i, j]
            f = a * n / (1.0 + a * h * n + c * p)
            sn = -(cxn[i, j] + cxn[i, j + 1] + cyn[i, j] + cyn[i + 1, j]) * wn[i, j] * n
            sp = -(cxp[i, j] + cxp[i, j + 1] + cyp[i, j] + cyp[i + 1, j]) * wp[i, j] * p
            if j > 0:
                sn += cxn[i, j] * wn[i, j - 1] * N[i, j - 1]
                sp += cxp[i, j] * wp[i, j - 1] * P[i, j - 1]
            if j < nx - 1:
                sn += cxn[i, j + 1] * wn[i, j + 1] * N[i, j + 1]
                sp += cxp[i, j + 1] * wp[i, j + 1] * P[i, j + 1]
            if i > 0:
                sn += cyn[i, j] * wn[i - 1, j] * N[i - 1, j]
                sp += cyp[i, j] * wp[i - 1, j] * P[i - 1, j]
            if i < ny - 1:
                sn += cyn[i + 1, j] * wn[i + 1, j] * N[i + 1, j]
                sp += cyp[i + 1, j] * wp[i + 1, j] * P[i + 1, j]
            N2[i, j] = n + dt * (r[i, j] * n * (1.0 - n * ik[i, j]) - f * p + sn)
            P2[i, j] = p + dt * (e * f * p - m[i, j] * p + sp)


class NumbaExplicit:
    """A fused, parallel numba forward-Euler solver: one pass over memory per step."""

    def __init__(self, mv_n: Movement, mv_p: Movement, r, inv_K, m, inter: Interaction, dt):
        self.args = []
        for mv in (mv_n, mv_p):
            w = np.ones(mv.mask.shape) if mv.w is None else mv.w.astype(float)
            self.args += [mv.cx.astype(float), mv.cy.astype(float), w]
        self.mask = mv_n.mask
        self.r, self.inv_K, self.m, self.it, self.dt = r, inv_K, m, inter, dt
        self.buf = None

    def step(self, N, P):
        """One step; returns the new ``(N, P)`` (the old arrays become the next buffers)."""
        if self.buf is None:
            self.buf = (np.empty_like(N), np.empty_like(P))
        it = self.it
        N2, P2 = self.buf
        _numba_step(N, P, N2, P2, self.dt, self.r, self.inv_K, self.m, it.attack_rate, it.h,
                    it.c, it.efficiency, *self.args, self.mask)
        self.buf = (N, P)
        return N2, P2
