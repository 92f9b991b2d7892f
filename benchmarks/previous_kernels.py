"""The kernels as they were before the row-block sweeps (benchmark baseline, not shipped).

A verbatim copy of ``preyscape.solve.kernels`` at commit 5b066ac (its module
docstring aside), kept so the benchmark can time the current kernels against
the previous ones in the same process and check that both give bitwise the
same result. Its ``half_step`` takes the band count as a last argument; see
``benchmarks/run.py`` (``previous_kernels``) for the adapter.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

_OPTS = dict(cache=True, nogil=True, fastmath=False)
f8 = np.float64  # coefficients are stored as float32 and combined in float64 only


# ---------------------------------------------------------------------------
# reaction
# ---------------------------------------------------------------------------
@njit(inline="always")
def _per_capita(N, P, r, inv_K, m, a, h, c, e, shield):
    # per-capita rates, 1/yr; f/N = a / (1 + a h N + c P) is finite at N = 0
    fn = a / (1.0 + a * h * N + c * P) * shield
    return r * (1.0 - N * inv_K) - fn * P, e * fn * N - m


@njit(inline="always")
def _rk4_log(n0, p0, hs, nsub, r, ik, m, a, h, c, e, sh):
    # classical RK4 on (ln N, ln P): positive and stable for any step
    for _ in range(nsub):
        k1n, k1p = _per_capita(n0, p0, r, ik, m, a, h, c, e, sh)
        n1 = n0 * np.exp(0.5 * hs * k1n)
        p1 = p0 * np.exp(0.5 * hs * k1p)
        k2n, k2p = _per_capita(n1, p1, r, ik, m, a, h, c, e, sh)
        n2 = n0 * np.exp(0.5 * hs * k2n)
        p2 = p0 * np.exp(0.5 * hs * k2p)
        k3n, k3p = _per_capita(n2, p2, r, ik, m, a, h, c, e, sh)
        n3 = n0 * np.exp(hs * k3n)
        p3 = p0 * np.exp(hs * k3p)
        k4n, k4p = _per_capita(n3, p3, r, ik, m, a, h, c, e, sh)
        n0 = n0 * np.exp(hs / 6.0 * (k1n + 2.0 * k2n + 2.0 * k3n + k4n))
        p0 = p0 * np.exp(hs / 6.0 * (k1p + 2.0 * k2p + 2.0 * k3p + k4p))
    return n0, p0


@njit(inline="always")
def _rk4(n0, p0, hs, r, ik, m, a, h, c, e, sh):
    # classical RK4 on (N, P), written as N * per-capita rate; also returns
    # the largest |rate * step| of the first stage to decide if it was safe
    g1n, g1p = _per_capita(n0, p0, r, ik, m, a, h, c, e, sh)
    n1 = n0 + 0.5 * hs * n0 * g1n
    p1 = p0 + 0.5 * hs * p0 * g1p
    g2n, g2p = _per_capita(n1, p1, r, ik, m, a, h, c, e, sh)
    n2 = n0 + 0.5 * hs * n1 * g2n
    p2 = p0 + 0.5 * hs * p1 * g2p
    g3n, g3p = _per_capita(n2, p2, r, ik, m, a, h, c, e, sh)
    n3 = n0 + hs * n2 * g3n
    p3 = p0 + hs * p2 * g3p
    g4n, g4p = _per_capita(n3, p3, r, ik, m, a, h, c, e, sh)
    n4 = n0 + hs / 6.0 * (n0 * g1n + 2.0 * n1 * g2n + 2.0 * n2 * g3n + n3 * g4n)
    p4 = p0 + hs / 6.0 * (p0 * g1p + 2.0 * p1 * g2p + 2.0 * p2 * g3p + p3 * g4p)
    return n4, p4, max(abs(g1n), abs(g1p)) * hs


SAFE = 0.25
"""Largest |per-capita rate x step| for plain RK4; beyond it, RK4 on logs."""


@njit(inline="always")
def _react_row(N, P, i, dt, nsub, r, ik, m, a, h, c, e, refuge, outN, outP, zb):
    # Plain RK4 over the row first (straight-line code the compiler vectorises),
    # then RK4 on logs for the rare cells where plain RK4 was not safe.
    nx = N.shape[1]
    uniform = refuge.size == 1
    sh0 = 1.0 - f8(refuge[0, 0])
    if nsub == 1:
        if uniform:
            for j in range(nx):
                n4, p4, z = _rk4(N[i, j], P[i, j], dt, f8(r[i, j]), f8(ik[i, j]),
                                 f8(m[i, j]), a, h, c, e, sh0)
                outN[j] = n4
                outP[j] = p4
                zb[j] = z
        else:
            for j in range(nx):
                n4, p4, z = _rk4(N[i, j], P[i, j], dt, f8(r[i, j]), f8(ik[i, j]),
                                 f8(m[i, j]), a, h, c, e, 1.0 - f8(refuge[i, j]))
                outN[j] = n4
                outP[j] = p4
                zb[j] = z
    else:
        for j in range(nx):
            zb[j] = np.inf
    for j in range(nx):
        if zb[j] > SAFE or outN[j] < 0.0 or outP[j] < 0.0:
            sh = sh0 if uniform else 1.0 - f8(refuge[i, j])
            n, p = _rk4_log(N[i, j], P[i, j], dt / nsub, nsub, f8(r[i, j]), f8(ik[i, j]),
                            f8(m[i, j]), a, h, c, e, sh)
            outN[j] = n
            outP[j] = p


@njit(parallel=True, **_OPTS)
def react(N, P, dt, nsub, r, inv_K, m, a, h, c, e, refuge):
    """Advance the local interaction by ``dt`` years in every cell, in place.

    Plain RK4 where the step is small against the per-capita rates (the
    usual case), RK4 on (ln N, ln P) elsewhere or where plain RK4 would turn
    negative; cells at zero stay at zero. ``nsub > 1``: that many RK4 substeps
    on the logs. ``refuge`` may be a 1x1 array (the same everywhere).
    """
    ny, nx = N.shape
    for i in prange(ny):
        rn = np.empty(nx)
        rp = np.empty(nx)
        zb = np.empty(nx)
        _react_row(N, P, i, dt, nsub, r, inv_K, m, a, h, c, e, refuge, rn, rp, zb)
        N[i, :] = rn
        P[i, :] = rp


# ---------------------------------------------------------------------------
# factorisation of the x-implicit part (fixed while dt and conductances are)
# ---------------------------------------------------------------------------
@njit(parallel=True, **_OPTS)
def factor_x(cx, w, mask, tau, inv):
    """Prefactor ``I - tau Lx`` row by row (Thomas algorithm): inverse pivots.

    The modified super-diagonal is ``cp_j = -tau cx[j+1] w[j+1] inv_j``, which
    the sweeps recompute from the faces instead of reading a second array.
    ``inv`` is zero on no-data cells, which decouples them (density stays 0).
    ``w`` holds the per-cell weights (ones for Fickian movement).
    """
    ny, nx = mask.shape
    for i in prange(ny):
        prev = 0.0
        for j in range(nx):
            if not mask[i, j]:
                inv[i, j] = 0.0
                prev = 0.0
                continue
            wl = f8(w[i, j - 1]) if j > 0 else 0.0
            wr = f8(w[i, j + 1]) if j < nx - 1 else 0.0
            wj = f8(w[i, j])
            lo = -tau * f8(cx[i, j]) * wl
            piv = 1.0 + tau * (f8(cx[i, j]) * wj + f8(cx[i, j + 1]) * wj) - lo * prev
            iv = 1.0 / piv
            inv[i, j] = iv
            prev = -tau * f8(cx[i, j + 1]) * wr * iv


# ---------------------------------------------------------------------------
# one half step: (reaction +) row sweeps of both species, written transposed
# ---------------------------------------------------------------------------
@njit(inline="always")
def _rhs_row(i, up, rc, dn, tau, tau_e, c_al, c_ac, w, inv, beta, alpha, gamma):
    # beta = inv * (I + tau_e L_across) u at row i (rows up, rc, dn: i-1, i, i+1),
    # alpha = inv * tau * c * w_left, so the forward elimination is the one-FMA
    # recurrence d_j = beta_j + alpha_j d_j-1; gamma = -cp (see factor_x) for the
    # back substitution x_j = d_j + gamma_j x_j+1
    ny = w.shape[0]
    nx = w.shape[1]
    fu = 1.0 if i > 0 else 0.0
    fd = 1.0 if i < ny - 1 else 0.0
    iu = i - 1 if i > 0 else 0
    idn = i + 1 if i < ny - 1 else ny - 1
    for j in range(nx):
        cu = f8(c_ac[i, j])
        cd = f8(c_ac[i + 1, j])
        wj = f8(w[i, j])
        s = (fu * cu * f8(w[iu, j]) * up[j] + fd * cd * f8(w[idn, j]) * dn[j]
             - (cu * wj + cd * wj) * rc[j])
        beta[j] = (rc[j] + tau_e * s) * inv[i, j]
    alpha[0] = 0.0
    gamma[nx - 1] = 0.0
    for j in range(1, nx):
        # face j lies between cells j-1 and j: it couples both ways
        cj = tau * f8(c_al[i, j])
        alpha[j] = cj * f8(w[i, j - 1]) * inv[i, j]
        gamma[j - 1] = cj * f8(w[i, j]) * inv[i, j - 1]


TILE = 8  # rows solved before they are written out as columns (one cache line)


@njit(parallel=True, **_OPTS)
def half_step(N, P, TN, TP, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
              tau, tau_e,
              alN, acN, wN, invN,
              alP, acP, wP, invP, negN, negP, nbands):
    """One ADI half step of both species, along rows, output transposed.

    ``T = ((I - tau L_along)^-1 (I + tau_e L_across) R_dt(u))^T`` where *along*
    is the row direction of the inputs (faces ``al``, shape ``(rows, cols+1)``)
    and *across* the column direction (faces ``ac``, shape ``(rows+1, cols)``);
    ``R_dt`` is the reaction over ``dt_r`` years (skipped when 0). ``inv``
    holds the prefactored pivots of ``I - tau L_along`` (:func:`factor_x`).
    Writing the result transposed lets the next half step sweep the other
    direction along contiguous rows too. ``negN[i]``, ``negP[i]`` receive the
    sums of negative values of output column ``i``. ``N, P`` are read only.
    """
    ny, nx = N.shape
    for b in prange(nbands):
        i0 = (b * ny // nbands) // TILE * TILE
        i1 = ((b + 1) * ny // nbands) // TILE * TILE if b < nbands - 1 else ny
        if i0 >= i1:
            continue
        RN = np.zeros((3, nx))
        RP = np.zeros((3, nx))
        zb = np.empty(nx)
        bN = np.empty(nx)
        aN = np.empty(nx)
        bP = np.empty(nx)
        aP = np.empty(nx)
        gN = np.empty(nx)
        gP = np.empty(nx)
        tN = np.empty((TILE, nx))
        tP = np.empty((TILE, nx))
        if dt_r != 0.0:
            for k in range(max(i0 - 1, 0), min(i0 + 1, ny)):
                _react_row(N, P, k, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
                           RN[k % 3], RP[k % 3], zb)
        for t0 in range(i0, i1, TILE):
            t1 = min(t0 + TILE, i1)
            for i in range(t0, t1):
                if i + 1 < ny and dt_r != 0.0:
                    _react_row(N, P, i + 1, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
                               RN[(i + 1) % 3], RP[(i + 1) % 3], zb)
                iu = i - 1 if i > 0 else 0
                idn = i + 1 if i < ny - 1 else ny - 1
                if dt_r != 0.0:
                    _rhs_row(i, RN[iu % 3], RN[i % 3], RN[idn % 3], tau, tau_e, alN, acN, wN,
                             invN, bN, aN, gN)
                    _rhs_row(i, RP[iu % 3], RP[i % 3], RP[idn % 3], tau, tau_e, alP, acP, wP,
                             invP, bP, aP, gP)
                else:  # no reaction: read the input rows directly
                    _rhs_row(i, N[iu], N[i], N[idn], tau, tau_e, alN, acN, wN, invN, bN, aN, gN)
                    _rhs_row(i, P[iu], P[i], P[idn], tau, tau_e, alP, acP, wP, invP, bP, aP, gP)
                k = i - t0
                dn = 0.0
                dp = 0.0
                for j in range(nx):
                    dn = bN[j] + aN[j] * dn
                    dp = bP[j] + aP[j] * dp
                    tN[k, j] = dn
                    tP[k, j] = dp
                qn = min(dn, 0.0)
                qp = min(dp, 0.0)
                for j in range(nx - 2, -1, -1):
                    dn = tN[k, j] + gN[j] * dn
                    dp = tP[k, j] + gP[j] * dp
                    tN[k, j] = dn
                    tP[k, j] = dp
                    qn += min(dn, 0.0)
                    qp += min(dp, 0.0)
                negN[i] = qn
                negP[i] = qp
            for j in range(nx):
                for k in range(t1 - t0):
                    TN[j, t0 + k] = tN[k, j]
                    TP[j, t0 + k] = tP[k, j]


@njit(parallel=True, **_OPTS)
def explicit_step(u, out, dt, cx, cy, w, mask):
    """Forward-Euler movement step ``out = (I + dt (Lx + Ly)) u`` (0 on no-data cells).

    Kept for cross-checks; stable only for ``dt * max(dg_x + dg_y) <= 1``.
    """
    ny, nx = u.shape
    for i in prange(ny):
        for j in range(nx):
            if not mask[i, j]:
                out[i, j] = 0.0
                continue
            wj = f8(w[i, j])
            s = -(f8(cx[i, j]) * wj + f8(cx[i, j + 1]) * wj + f8(cy[i, j]) * wj
                  + f8(cy[i + 1, j]) * wj) * u[i, j]
            if j > 0:
                s += f8(cx[i, j]) * f8(w[i, j - 1]) * u[i, j - 1]
            if j < nx - 1:
                s += f8(cx[i, j + 1]) * f8(w[i, j + 1]) * u[i, j + 1]
            if i > 0:
                s += f8(cy[i, j]) * f8(w[i - 1, j]) * u[i - 1, j]
            if i < ny - 1:
                s += f8(cy[i + 1, j]) * f8(w[i + 1, j]) * u[i + 1, j]
            out[i, j] = u[i, j] + dt * s


# ---------------------------------------------------------------------------
# the positivity fix
# ---------------------------------------------------------------------------
@njit(parallel=True, **_OPTS)
def _row_sums(u, tot):
    ny, nx = u.shape
    for i in prange(ny):
        s = 0.0
        for j in range(nx):
            s += u[i, j]
        tot[i] = s


@njit(**_OPTS)
def _ordered_sum(a):
    s = 0.0
    for k in range(a.shape[0]):
        s += a[k]
    return s


@njit(parallel=True, **_OPTS)
def _clip_scale(u, scale):
    ny, nx = u.shape
    for i in prange(ny):
        for j in range(nx):
            v = u[i, j]
            u[i, j] = v * scale if v > 0.0 else 0.0


@njit(**_OPTS)
def fix_negative(u, neg, tot):
    """Clip negative densities to zero and rescale so the total is unchanged.

    ``neg`` holds per-column sums of negative values (from :func:`half_step`);
    nothing is done when they are all zero; ``tot`` is a work array of one
    value per row. The second-order sweeps are
    positive only while ``tau * dg <= 1`` (no linear scheme of order above one
    is positive for every step: Bolley & Crouzeix 1978, RAIRO Anal Numer
    12:237), so rare undershoots are removed here with mass kept exactly.
    Returns the clipped amount (sum of the negative parts, ≥ 0).
    """
    clipped = -_ordered_sum(neg)
    if clipped == 0.0:
        return 0.0
    _row_sums(u, tot)
    total = _ordered_sum(tot)
    positive = total + clipped
    _clip_scale(u, total / positive if positive > 0.0 else 0.0)
    return clipped


def n_bands(ny: int) -> int:
    """Row bands for pass 1: a few per thread (a fixed count keeps results bitwise stable)."""
    return max(1, min(ny, 16))


def warm_up() -> None:
    """Compile (or load from cache) every kernel on a tiny problem."""
    sh = (3, 4)
    z = np.zeros(sh)
    o = np.ones(sh)
    z4 = np.zeros(sh, dtype=np.float32)
    o4 = np.ones(sh, dtype=np.float32)
    mk = np.ones(sh, dtype=np.bool_)
    cx = np.zeros((3, 5), dtype=np.float32)
    cy = np.zeros((4, 4), dtype=np.float32)
    w = np.ones(sh, dtype=np.float32)
    ref = np.zeros((1, 1), dtype=np.float32)
    react(o.copy(), o.copy(), 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, ref)
    react(o.copy(), o.copy(), 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, z4)
    inv = z.copy()
    factor_x(cx, w, mk, 0.5, inv)
    TN, TP = np.zeros((4, 3)), np.zeros((4, 3))
    neg = np.zeros(3)
    half_step(o, o, TN, TP, 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, ref, 0.5, 0.5,
              cx, cy, w, inv, cx, cy, w, inv, neg, neg.copy(), 2)
    half_step(o, o, TN, TP, 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, z4, 0.5, 0.5,
              cx, cy, w, inv, cx, cy, w, inv, neg, neg.copy(), 2)
    explicit_step(o, z.copy(), 0.1, cx, cy, w, mk)
    fix_negative(o.copy(), neg, np.zeros(3))


__all__ = [
    "react", "factor_x", "half_step", "explicit_step",
    "fix_negative", "n_bands", "warm_up",
]
