"""Compiled kernels: the per-cell reaction step and the tridiagonal sweeps.

Every movement operator is stored, per direction, as three per-cell arrays
(already divided by the squared cell size, units 1/yr)::

    (L u)[i] = lo[i] * u[i-1] + up[i] * u[i+1] - dg[i] * u[i]

``lo``/``up`` are zero where the neighbour is outside, no-data, or behind an
impassable face, so no kernel needs to know about edges or masks. The
prefactored Thomas coefficients of ``I - tau L`` are ``(a, cp, inv)`` with
``a = -tau lo``, ``cp`` the modified super-diagonal and ``inv`` the inverse
pivot (Thomas algorithm; Hundsdorfer & Verwer 2003, §IV.1).

All kernels write into preallocated arrays, so the step loop makes no
temporaries; sums are taken per row and then added in order so results do
not depend on the number of threads.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

_OPTS = dict(cache=True, nogil=True, fastmath=False)


# ---------------------------------------------------------------------------
# reaction
# ---------------------------------------------------------------------------
@njit(inline="always")
def _per_capita(N, P, r, inv_K, m, a, h, c, e, shield):
    # Per-capita rates; f/N = a / (1 + a h N + c P) is finite at N = 0.
    fn = a / (1.0 + a * h * N + c * P) * shield
    gN = r * (1.0 - N * inv_K) - fn * P
    gP = e * fn * N - m
    return gN, gP


@njit(parallel=True, **_OPTS)
def react(N, P, dt, nsub, r, inv_K, m, a, h, c, e, refuge, mask):
    """Advance the local interaction by ``dt`` years in every cell, in place.

    Classical RK4 on (ln N, ln P): densities stay positive for any step and a
    cell at zero stays at zero. ``nsub`` substeps of ``dt / nsub``.
    """
    ny, nx = N.shape
    hs = dt / nsub
    for i in prange(ny):
        for j in range(nx):
            if not mask[i, j]:
                continue
            n0 = N[i, j]
            p0 = P[i, j]
            ri = r[i, j]
            ki = inv_K[i, j]
            mi = m[i, j]
            sh = 1.0 - refuge[i, j]
            for _ in range(nsub):
                k1n, k1p = _per_capita(n0, p0, ri, ki, mi, a, h, c, e, sh)
                n1 = n0 * np.exp(0.5 * hs * k1n)
                p1 = p0 * np.exp(0.5 * hs * k1p)
                k2n, k2p = _per_capita(n1, p1, ri, ki, mi, a, h, c, e, sh)
                n2 = n0 * np.exp(0.5 * hs * k2n)
                p2 = p0 * np.exp(0.5 * hs * k2p)
                k3n, k3p = _per_capita(n2, p2, ri, ki, mi, a, h, c, e, sh)
                n3 = n0 * np.exp(hs * k3n)
                p3 = p0 * np.exp(hs * k3p)
                k4n, k4p = _per_capita(n3, p3, ri, ki, mi, a, h, c, e, sh)
                n0 = n0 * np.exp(hs / 6.0 * (k1n + 2.0 * k2n + 2.0 * k3n + k4n))
                p0 = p0 * np.exp(hs / 6.0 * (k1p + 2.0 * k2p + 2.0 * k3p + k4p))
            N[i, j] = n0
            P[i, j] = p0


# ---------------------------------------------------------------------------
# movement: factorisation and sweeps
# ---------------------------------------------------------------------------
@njit(parallel=True, **_OPTS)
def factor_x(lo, up, dg, tau, a, cp, inv):
    """Prefactor ``I - tau Lx`` for sweeps along rows (x), Thomas algorithm."""
    ny, nx = lo.shape
    for i in prange(ny):
        prev = 0.0
        for j in range(nx):
            aj = -tau * lo[i, j]
            piv = 1.0 + tau * dg[i, j] - aj * prev
            a[i, j] = aj
            inv[i, j] = 1.0 / piv
            prev = -tau * up[i, j] / piv
            cp[i, j] = prev


@njit(**_OPTS)
def factor_y(lo, up, dg, tau, a, cp, inv):
    """Prefactor ``I - tau Ly`` for sweeps along columns (y), Thomas algorithm."""
    ny, nx = lo.shape
    for j in range(nx):
        a[0, j] = -tau * lo[0, j]
        piv = 1.0 + tau * dg[0, j]
        inv[0, j] = 1.0 / piv
        cp[0, j] = -tau * up[0, j] / piv
    for i in range(1, ny):
        for j in range(nx):
            aj = -tau * lo[i, j]
            piv = 1.0 + tau * dg[i, j] - aj * cp[i - 1, j]
            a[i, j] = aj
            inv[i, j] = 1.0 / piv
            cp[i, j] = -tau * up[i, j] / piv


@njit(parallel=True, **_OPTS)
def sweep_x(u, out, tau_e, lo_y, up_y, dg_y, a, cp, inv):
    """``out = (I - tau Lx)^-1 (I + tau_e Ly) u`` (``tau_e = 0``: implicit only).

    The explicit y part is computed row by row inside the same pass, so the
    right-hand side never exists as a whole array.
    """
    ny, nx = u.shape
    for i in prange(ny):
        prev = 0.0
        for j in range(nx):
            rhs = u[i, j]
            if tau_e != 0.0:
                s = -dg_y[i, j] * u[i, j]
                if i > 0:
                    s += lo_y[i, j] * u[i - 1, j]
                if i < ny - 1:
                    s += up_y[i, j] * u[i + 1, j]
                rhs += tau_e * s
            prev = (rhs - a[i, j] * prev) * inv[i, j]
            out[i, j] = prev
        for j in range(nx - 2, -1, -1):
            out[i, j] -= cp[i, j] * out[i, j + 1]


_BLOCK = 64  # columns per task in y sweeps: rows of a block stay in cache


@njit(parallel=True, **_OPTS)
def sweep_y(u, out, tau_e, lo_x, up_x, dg_x, a, cp, inv):
    """``out = (I - tau Ly)^-1 (I + tau_e Lx) u`` (``tau_e = 0``: implicit only).

    Columns are solved together, a block at a time, so every inner loop runs
    along contiguous memory.
    """
    ny, nx = u.shape
    nb = (nx + _BLOCK - 1) // _BLOCK
    for b in prange(nb):
        j0 = b * _BLOCK
        j1 = min(nx, j0 + _BLOCK)
        for i in range(ny):
            for j in range(j0, j1):
                rhs = u[i, j]
                if tau_e != 0.0:
                    s = -dg_x[i, j] * u[i, j]
                    if j > 0:
                        s += lo_x[i, j] * u[i, j - 1]
                    if j < nx - 1:
                        s += up_x[i, j] * u[i, j + 1]
                    rhs += tau_e * s
                if i > 0:
                    rhs -= a[i, j] * out[i - 1, j]
                out[i, j] = rhs * inv[i, j]
        for i in range(ny - 2, -1, -1):
            for j in range(j0, j1):
                out[i, j] -= cp[i, j] * out[i + 1, j]


@njit(parallel=True, **_OPTS)
def explicit_step(u, out, dt, lo_x, up_x, dg_x, lo_y, up_y, dg_y):
    """Forward-Euler movement step ``out = (I + dt (Lx + Ly)) u``.

    Kept for cross-checks; stable only for ``dt * max(dg_x + dg_y) <= 1``.
    """
    ny, nx = u.shape
    for i in prange(ny):
        for j in range(nx):
            s = -(dg_x[i, j] + dg_y[i, j]) * u[i, j]
            if j > 0:
                s += lo_x[i, j] * u[i, j - 1]
            if j < nx - 1:
                s += up_x[i, j] * u[i, j + 1]
            if i > 0:
                s += lo_y[i, j] * u[i - 1, j]
            if i < ny - 1:
                s += up_y[i, j] * u[i + 1, j]
            out[i, j] = u[i, j] + dt * s


# ---------------------------------------------------------------------------
# sums and the positivity fix
# ---------------------------------------------------------------------------
@njit(parallel=True, **_OPTS)
def _row_sums(u, rows, neg):
    ny, nx = u.shape
    for i in prange(ny):
        s = 0.0
        q = 0.0
        for j in range(nx):
            v = u[i, j]
            s += v
            if v < 0.0:
                q += v
        rows[i] = s
        neg[i] = q


@njit(**_OPTS)
def _ordered_sum(rows):
    s = 0.0
    for k in range(rows.shape[0]):
        s += rows[k]
    return s


@njit(parallel=True, **_OPTS)
def _clip_scale(u, scale):
    ny, nx = u.shape
    for i in prange(ny):
        for j in range(nx):
            v = u[i, j]
            u[i, j] = v * scale if v > 0.0 else 0.0


@njit(**_OPTS)
def make_positive(u, rows, neg):
    """Set negative densities to zero, keeping the field's total unchanged.

    The second-order sweeps are positive only while ``tau * dg <= 1``
    (no linear scheme of order above one is positive for every step:
    Bolley & Crouzeix 1978). Undershoots are removed by clipping and the
    field is rescaled so mass is conserved exactly. Returns the clipped
    amount (sum of the negative parts, animals·cells; ≥ 0).
    """
    _row_sums(u, rows, neg)
    clipped = -_ordered_sum(neg)
    if clipped == 0.0:
        return 0.0
    total = _ordered_sum(rows)
    positive = total + clipped
    _clip_scale(u, total / positive if positive > 0.0 else 0.0)
    return clipped


def warm_up() -> None:
    """Compile (or load from cache) every kernel on a tiny problem."""
    z = np.zeros((2, 3))
    o = np.ones((2, 3))
    mk = np.ones((2, 3), dtype=np.bool_)
    react(o.copy(), o.copy(), 0.1, 1, o, z, o, 1.0, 0.0, 0.0, 0.5, z, mk)
    a, cp, inv = z.copy(), z.copy(), z.copy()
    factor_x(z, z, z, 0.5, a, cp, inv)
    factor_y(z, z, z, 0.5, a, cp, inv)
    out = z.copy()
    sweep_x(o, out, 0.5, z, z, z, a, cp, inv)
    sweep_y(o, out, 0.5, z, z, z, a, cp, inv)
    explicit_step(o, out, 0.1, z, z, z, z, z, z)
    make_positive(o.copy(), np.zeros(2), np.zeros(2))
