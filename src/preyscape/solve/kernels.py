"""Compiled kernels: the per-cell reaction and the fused tridiagonal sweeps.

A species' movement is stored as face conductances (see
:mod:`preyscape.model.movement`): ``cx`` on the faces between columns, shape
``(rows, cols+1)``, ``cy`` on the faces between rows, shape ``(rows+1, cols)``,
both already divided by the squared cell size (1/yr), and per-cell weights
``w`` (motility for ecological movement; none for Fickian). Along a row::

    (Lx u)[j] = cx[j] (w u)[j-1] + cx[j+1] (w u)[j+1] - (cx[j] + cx[j+1]) (w u)[j]

Densities beyond the grid and on no-data cells are zero, so a hostile face is
just a face with a conductance, a closed face one without. No-data cells are
kept at exactly zero by zero pivots.

One Peaceman–Rachford step of both species is two calls of
:func:`half_step`, each one pass over memory:

* pass 1 reacts the densities and solves the x-implicit half,
  ``W = (I - tau Lx)^-1 (I + tau_e Ly) R(u)``, with the reacted rows kept in
  a three-row ring buffer (they are never stored), and writes ``W``
  transposed;
* pass 2 runs the same kernel on ``W^T`` with the transposed coefficients:
  ``u = (I - tau Ly)^-1 (I + tau_e Lx) W``, written back in grid order, and
  returns per-column sums of the negative parts so the positivity fix only
  runs when needed.

Every tridiagonal solve thus runs along contiguous memory with prefactored
pivots. The Thomas recurrences are latency-bound: each is one dependent chain
of multiply-adds along a row. The sweeps therefore solve blocks of
:data:`BLOCK` rows, whose recurrences advance together in one loop iteration
with each chain in a register (:func:`_solve8`): ``2 x BLOCK`` independent
chains per core (both species) instead of two. The back substitution writes
the solution straight into the transposed output, a cache line per column.

Threads: the rows are split into one contiguous range per thread, run by
:func:`_in_parallel` on the compiled kernels (which release the GIL). Every
row's result is computed by the same arithmetic in the same order whatever
the split, and sums are formed per row and added in a fixed order, so
results do not depend on the number of threads (bitwise reproducible runs
and resumes).

Compilation: every kernel is compiled on first use and cached on disk
(:func:`cache_folder` says where). The common path needs two compiled
functions (:func:`_band`, :func:`_factor_rows`); the explicit scheme and the
positivity clip are compiled only when a run uses them.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
import threading
from collections.abc import Callable, Iterator, Mapping
from concurrent.futures import ThreadPoolExecutor, wait
from pathlib import Path

import numba
import numpy as np
from numba import njit, prange


# ---------------------------------------------------------------------------
# where the compiled code is cached
# ---------------------------------------------------------------------------
def _writable(folder: Path) -> bool:
    # the test numba itself makes: create the folder and a temporary file in it
    try:
        folder.mkdir(parents=True, exist_ok=True)
        tempfile.TemporaryFile(dir=folder).close()
    except OSError:
        return False
    return True


def cache_folder(package_dir: str | os.PathLike | None = None,
                 environ: Mapping[str, str] | None = None) -> Path | None:
    """Folder for numba's on-disk cache of these kernels, or None for numba's default.

    numba caches beside the source (``__pycache__``). That fails in a
    read-only installation (a system or container site-packages), and every
    run would compile again. Then the cache goes to a per-user folder:
    ``$XDG_CACHE_HOME/preyscape/numba``, else ``~/.cache/preyscape/numba``.

    Parameters
    ----------
    package_dir : path, optional
        Folder of this module (default: where this file is).
    environ : mapping, optional
        Environment variables (default: ``os.environ``).

    Returns
    -------
    pathlib.Path or None
        The per-user folder when ``__pycache__`` in ``package_dir`` is not
        writable and the user folder is; None when numba's own choice
        stands (``NUMBA_CACHE_DIR`` is set, or ``__pycache__`` is writable,
        or no user folder can be written either).
    """
    env = os.environ if environ is None else environ
    if env.get("NUMBA_CACHE_DIR"):
        return None  # the user's choice wins
    here = Path(package_dir) if package_dir is not None else Path(__file__).resolve().parent
    if _writable(here / "__pycache__"):
        return None
    base = env.get("XDG_CACHE_HOME") or os.path.join(os.path.expanduser("~"), ".cache")
    folder = Path(base) / "preyscape" / "numba"
    return folder if _writable(folder) else None


CACHE_FOLDER = cache_folder()
"""The per-user cache folder in use, or None where numba's default applies."""


@contextlib.contextmanager
def _cache_dir(folder: Path | None) -> Iterator[None]:
    # numba picks a function's cache folder when the function is decorated,
    # from numba.config.CACHE_DIR: set it for our kernels only, then restore it
    if folder is None:
        yield
        return
    old = numba.config.CACHE_DIR
    numba.config.CACHE_DIR = str(folder)
    try:
        yield
    finally:
        numba.config.CACHE_DIR = old


# error_model="numpy": a division by zero gives inf/nan instead of raising, as in
# numba's parallel loops; without it the per-cell loops cannot be vectorised.
_OPTS = dict(cache=True, nogil=True, fastmath=False, error_model="numpy")


def _jit(**kw) -> Callable:
    """``numba.njit`` with the kernels' options and cache folder."""
    opts = {**_OPTS, **kw}

    def deco(f):
        with _cache_dir(CACHE_FOLDER):
            try:
                return njit(**opts)(f)
            except RuntimeError:  # no writable cache folder at all: compile each run
                return njit(**{**opts, "cache": False})(f)

    return deco


# helpers inlined by LLVM into their callers (compiled once, not copied in numba's IR)
_inline = _jit(forceinline=True)
f8 = np.float64  # coefficients are stored as float32 and combined in float64 only


# ---------------------------------------------------------------------------
# threads
# ---------------------------------------------------------------------------
BLOCK = 8
"""Rows whose Thomas recurrences advance together (independent chains per core).

:func:`_solve8` is written out for 8 lanes."""


_pool: ThreadPoolExecutor | None = None
_pool_lock = threading.Lock()


def _workers() -> ThreadPoolExecutor:
    global _pool
    with _pool_lock:
        if _pool is None:
            _pool = ThreadPoolExecutor(max(1, numba.config.NUMBA_NUM_THREADS - 1),
                                       thread_name_prefix="preyscape-kernel")
        return _pool


def _in_parallel(run: Callable[[int, int], object], n: int) -> None:
    """Call ``run(i0, i1)`` on contiguous row ranges covering ``0..n``, one per thread.

    The number of threads is numba's (``numba.get_num_threads()``, set by
    ``NUMBA_NUM_THREADS`` or ``numba.set_num_threads``). Range limits are
    multiples of :data:`BLOCK`; the kernels release the GIL.
    """
    k = max(1, min(numba.get_num_threads(), n // BLOCK))
    if k == 1:
        run(0, n)
        return
    cuts = [n * t // k // BLOCK * BLOCK for t in range(k)] + [n]
    pool = _workers()
    futures = [pool.submit(run, cuts[t], cuts[t + 1]) for t in range(1, k)]
    try:
        run(cuts[0], cuts[1])
    finally:
        wait(futures)  # every range is finished before anything is raised or returned
    for f in futures:
        f.result()


# ---------------------------------------------------------------------------
# reaction
# ---------------------------------------------------------------------------
@_inline
def _per_capita(N, P, r, inv_K, m, a, h, c, e, shield):
    # per-capita rates, 1/yr; f/N = a / (1 + a h N + c P) is finite at N = 0
    fn = a / (1.0 + a * h * N + c * P) * shield
    return r * (1.0 - N * inv_K) - fn * P, e * fn * N - m


@_inline
def _xexp(u, z):
    # u e^z with zero kept at zero: e^z overflows past z = 709 and 0 * inf is NaN
    return u * np.exp(z) if u != 0.0 else 0.0


@_inline
def _rk4_log(n0, p0, hs, nsub, r, ik, m, a, h, c, e, sh):
    # classical RK4 on (ln N, ln P): positive and stable for any step
    for _ in range(nsub):
        k1n, k1p = _per_capita(n0, p0, r, ik, m, a, h, c, e, sh)
        n1 = _xexp(n0, 0.5 * hs * k1n)
        p1 = _xexp(p0, 0.5 * hs * k1p)
        k2n, k2p = _per_capita(n1, p1, r, ik, m, a, h, c, e, sh)
        n2 = _xexp(n0, 0.5 * hs * k2n)
        p2 = _xexp(p0, 0.5 * hs * k2p)
        k3n, k3p = _per_capita(n2, p2, r, ik, m, a, h, c, e, sh)
        n3 = _xexp(n0, hs * k3n)
        p3 = _xexp(p0, hs * k3p)
        k4n, k4p = _per_capita(n3, p3, r, ik, m, a, h, c, e, sh)
        n0 = _xexp(n0, hs / 6.0 * (k1n + 2.0 * k2n + 2.0 * k3n + k4n))
        p0 = _xexp(p0, hs / 6.0 * (k1p + 2.0 * k2p + 2.0 * k3p + k4p))
    return n0, p0


@_inline
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


@_inline
def _react_row(N, P, i, dt, nsub, r, ik, m, a, h, c, e, refuge, outN, outP, zb):
    # Plain RK4 over the row first (straight-line code the compiler vectorises),
    # then RK4 on logs for the rare cells where plain RK4 was not safe. zb holds
    # the shield factor (1 - refuge) on entry and is overwritten.
    nx = N.shape[1]
    if refuge.size == 1:
        sh0 = 1.0 - f8(refuge[0, 0])
        for j in range(nx):
            zb[j] = sh0
    else:
        for j in range(nx):
            zb[j] = 1.0 - f8(refuge[i, j])
    bad = 0
    if nsub == 1:
        for j in range(nx):
            n4, p4, z = _rk4(N[i, j], P[i, j], dt, f8(r[i, j]), f8(ik[i, j]),
                             f8(m[i, j]), a, h, c, e, zb[j])
            outN[j] = n4
            outP[j] = p4
            # counting (not branching) keeps this loop vectorised
            bad += (z > SAFE) | (n4 < 0.0) | (p4 < 0.0)
    else:
        bad = nx
    if bad == 0:
        return
    for j in range(nx):
        if nsub > 1 or outN[j] < 0.0 or outP[j] < 0.0 or _rk4_unsafe(N[i, j], P[i, j], dt,
                                                                     f8(r[i, j]), f8(ik[i, j]),
                                                                     f8(m[i, j]), a, h, c, e,
                                                                     zb[j]):
            n, p = _rk4_log(N[i, j], P[i, j], dt / nsub, nsub, f8(r[i, j]), f8(ik[i, j]),
                            f8(m[i, j]), a, h, c, e, zb[j])
            outN[j] = n
            outP[j] = p


@_inline
def _rk4_unsafe(n0, p0, hs, r, ik, m, a, h, c, e, sh):
    # the first-stage test of _rk4 again, for the rare rows that need it
    g1n, g1p = _per_capita(n0, p0, r, ik, m, a, h, c, e, sh)
    return max(abs(g1n), abs(g1p)) * hs > SAFE


# ---------------------------------------------------------------------------
# factorisation of the x-implicit part (fixed while dt and conductances are)
# ---------------------------------------------------------------------------
@_jit()
def _factor_rows(i0, i1, cx, w, mask, tau, inv):
    nx = mask.shape[1]
    for i in range(i0, i1):
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


def factor_x(cx: np.ndarray, w: np.ndarray, mask: np.ndarray, tau: float,
             inv: np.ndarray) -> None:
    """Prefactor ``I - tau Lx`` row by row (Thomas algorithm): inverse pivots.

    The modified super-diagonal is ``cp_j = -tau cx[j+1] w[j+1] inv_j``, which
    the sweeps recompute from the faces instead of reading a second array.
    ``inv`` is zero on no-data cells, which decouples them (density stays 0).

    Parameters
    ----------
    cx : numpy.ndarray of float32
        Face conductances along the rows, shape ``(rows, cols+1)``, 1/yr.
    w : numpy.ndarray of float32
        Per-cell weights (ones for Fickian movement).
    mask : numpy.ndarray of bool
        Cells with data.
    tau : float
        Implicit weight, years (half the step).
    inv : numpy.ndarray of float64
        Output, shape ``(rows, cols)``: the inverse pivots, dimensionless.
    """
    _in_parallel(lambda i0, i1: _factor_rows(i0, i1, cx, w, mask, float(tau), inv),
                 mask.shape[0])


# ---------------------------------------------------------------------------
# one half step: (reaction +) row sweeps of both species, written transposed
# ---------------------------------------------------------------------------
@_inline
def _coef_row(i, up, rc, dn, tau, tau_e, c_al, c_ac, w, inv, beta, alpha, gamma):
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


@_inline
def _solve8(b, a, g, T, t0):
    # The Thomas recurrences of the 8 rows b[0:8] side by side: 8 independent chains
    # held in registers (one per row, the same operations as for the row alone), so
    # the core overlaps them instead of waiting on one multiply-add at a time. The
    # forward elimination overwrites b; the back substitution writes the solution
    # straight into T, transposed (T[j, t0 + k]: 8 contiguous values per column j).
    # Returns the sum of the negative values written (in no particular order): < 0
    # if there is a negative value, nan if there is a nan.
    nx = b.shape[1]
    d0 = b[0, 0] + 0.0  # d_0 = beta_0 + alpha_0 * 0
    d1 = b[1, 0] + 0.0
    d2 = b[2, 0] + 0.0
    d3 = b[3, 0] + 0.0
    d4 = b[4, 0] + 0.0
    d5 = b[5, 0] + 0.0
    d6 = b[6, 0] + 0.0
    d7 = b[7, 0] + 0.0
    b[0, 0] = d0
    b[1, 0] = d1
    b[2, 0] = d2
    b[3, 0] = d3
    b[4, 0] = d4
    b[5, 0] = d5
    b[6, 0] = d6
    b[7, 0] = d7
    for j in range(1, nx):
        d0 = b[0, j] + a[0, j] * d0
        d1 = b[1, j] + a[1, j] * d1
        d2 = b[2, j] + a[2, j] * d2
        d3 = b[3, j] + a[3, j] * d3
        d4 = b[4, j] + a[4, j] * d4
        d5 = b[5, j] + a[5, j] * d5
        d6 = b[6, j] + a[6, j] * d6
        d7 = b[7, j] + a[7, j] * d7
        b[0, j] = d0
        b[1, j] = d1
        b[2, j] = d2
        b[3, j] = d3
        b[4, j] = d4
        b[5, j] = d5
        b[6, j] = d6
        b[7, j] = d7
    j = nx - 1
    T[j, t0] = d0
    T[j, t0 + 1] = d1
    T[j, t0 + 2] = d2
    T[j, t0 + 3] = d3
    T[j, t0 + 4] = d4
    T[j, t0 + 5] = d5
    T[j, t0 + 6] = d6
    T[j, t0 + 7] = d7
    m0 = min(d0, 0.0) + min(d4, 0.0)
    m1 = min(d1, 0.0) + min(d5, 0.0)
    m2 = min(d2, 0.0) + min(d6, 0.0)
    m3 = min(d3, 0.0) + min(d7, 0.0)
    for j in range(nx - 2, -1, -1):
        d0 = b[0, j] + g[0, j] * d0
        d1 = b[1, j] + g[1, j] * d1
        d2 = b[2, j] + g[2, j] * d2
        d3 = b[3, j] + g[3, j] * d3
        d4 = b[4, j] + g[4, j] * d4
        d5 = b[5, j] + g[5, j] * d5
        d6 = b[6, j] + g[6, j] * d6
        d7 = b[7, j] + g[7, j] * d7
        T[j, t0] = d0
        T[j, t0 + 1] = d1
        T[j, t0 + 2] = d2
        T[j, t0 + 3] = d3
        T[j, t0 + 4] = d4
        T[j, t0 + 5] = d5
        T[j, t0 + 6] = d6
        T[j, t0 + 7] = d7
        m0 = m0 + min(d0, 0.0) + min(d4, 0.0)
        m1 = m1 + min(d1, 0.0) + min(d5, 0.0)
        m2 = m2 + min(d2, 0.0) + min(d6, 0.0)
        m3 = m3 + min(d3, 0.0) + min(d7, 0.0)
    return (m0 + m1) + (m2 + m3)


@_inline
def _negative_sums(T, t0, nb, neg):
    # per output column t0 + k: the sum of the negative values, added in the
    # order of the back substitution (the last row of T first)
    nx = T.shape[0]
    for k in range(nb):
        q = min(T[nx - 1, t0 + k], 0.0)
        for j in range(nx - 2, -1, -1):
            q += min(T[j, t0 + k], 0.0)
        neg[t0 + k] = q


@_jit()
def _band(i0, i1, only_react, N, P, TN, TP, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
          tau, tau_e, alN, acN, wN, invN, alP, acP, wP, invP, negN, negP, want_neg):
    # rows i0..i1 of half_step (i0 a multiple of BLOCK); only_react: react these
    # rows in place instead (N, P are then written)
    ny, nx = N.shape
    react = dt_r != 0.0
    RN = np.zeros((3, nx))
    RP = np.zeros((3, nx))
    zb = np.empty(nx)
    # a block's right-hand sides (then forward-eliminated values) and recurrence
    # coefficients, one row per lane; idle lanes of a short last block hold zeros
    bN = np.zeros((BLOCK, nx))
    aN = np.zeros((BLOCK, nx))
    gN = np.zeros((BLOCK, nx))
    bP = np.zeros((BLOCK, nx))
    aP = np.zeros((BLOCK, nx))
    gP = np.zeros((BLOCK, nx))
    nxt = i0 if only_react else max(i0 - 1, 0)  # the next row to react
    for s0 in range(i0, i1, BLOCK):
        nb = min(BLOCK, i1 - s0)
        for i in range(s0, s0 + nb):
            if react:
                # one call site: the reaction is the largest piece of compiled code
                last = i if only_react else min(i + 1, ny - 1)
                while nxt <= last:
                    q = nxt % 3
                    _react_row(N, P, nxt, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
                               RN[q], RP[q], zb)
                    if only_react:
                        for j in range(nx):
                            N[nxt, j] = RN[q, j]
                            P[nxt, j] = RP[q, j]
                    nxt += 1
            if only_react:
                continue
            iu = i - 1 if i > 0 else 0
            idn = i + 1 if i < ny - 1 else ny - 1
            if react:
                uN, cN, dN = RN[iu % 3], RN[i % 3], RN[idn % 3]
                uP, cP, dP = RP[iu % 3], RP[i % 3], RP[idn % 3]
            else:  # no reaction: read the input rows directly
                uN, cN, dN = N[iu], N[i], N[idn]
                uP, cP, dP = P[iu], P[i], P[idn]
            k = i - s0
            _coef_row(i, uN, cN, dN, tau, tau_e, alN, acN, wN, invN, bN[k], aN[k], gN[k])
            _coef_row(i, uP, cP, dP, tau, tau_e, alP, acP, wP, invP, bP[k], aP[k], gP[k])
        if only_react:
            continue
        if nb == BLOCK:
            loN = _solve8(bN, aN, gN, TN, s0)
            loP = _solve8(bP, aP, gP, TP, s0)
        else:
            # a short last block: solve all lanes into a scratch array, keep nb of them
            for k in range(nb, BLOCK):
                for j in range(nx):
                    bN[k, j] = 0.0
                    bP[k, j] = 0.0
            scratch = np.empty((nx, BLOCK))
            zero = s0 - s0  # not a literal 0: that would compile _solve8 a second time
            loN = _solve8(bN, aN, gN, scratch, zero)
            for j in range(nx):
                for k in range(nb):
                    TN[j, s0 + k] = scratch[j, k]
            loP = _solve8(bP, aP, gP, scratch, zero)
            for j in range(nx):
                for k in range(nb):
                    TP[j, s0 + k] = scratch[j, k]
        for k in range(nb):
            negN[s0 + k] = 0.0
            negP[s0 + k] = 0.0
        # the sums of negative parts, in their own order, are only formed where
        # there is a negative value (rare) or a nan (then they are nan too)
        if want_neg and not loN >= 0.0:
            _negative_sums(TN, s0, nb, negN)
        if want_neg and not loP >= 0.0:
            _negative_sums(TP, s0, nb, negP)


def half_step(N, P, TN, TP, dt_r, nsub, r, ik, m, a, h, c, e, refuge,
              tau, tau_e,
              alN, acN, wN, invN,
              alP, acP, wP, invP, negN, negP, negatives: bool = True) -> None:
    """One ADI half step of both species, along rows, output transposed.

    ``T = ((I - tau L_along)^-1 (I + tau_e L_across) R_dt(u))^T`` where *along*
    is the row direction of the inputs (faces ``al``, shape ``(rows, cols+1)``)
    and *across* the column direction (faces ``ac``, shape ``(rows+1, cols)``);
    ``R_dt`` is the reaction over ``dt_r`` years (skipped when 0). ``inv``
    holds the prefactored pivots of ``I - tau L_along`` (:func:`factor_x`).
    Writing the result transposed lets the next half step sweep the other
    direction along contiguous rows too. ``negN[i]``, ``negP[i]`` receive the
    sums of negative values of output column ``i`` (zeros unless
    ``negatives``). ``N, P`` are read only; no output may overlap an input.

    Parameters
    ----------
    N, P : numpy.ndarray of float64
        Prey and predator densities, animals/km², shape ``(rows, cols)``.
    TN, TP : numpy.ndarray of float64
        Output, shape ``(cols, rows)``, animals/km².
    dt_r : float
        Reaction time, years (0: no reaction).
    nsub : int
        Reaction substeps (see :func:`react`).
    r, ik, m : numpy.ndarray of float32
        Growth rate (1/yr), inverse capacity (km²), mortality (1/yr) per cell.
    a, h, c, e : float
        Attack rate (km²/yr), handling time (yr), interference (km²), efficiency.
    refuge : numpy.ndarray of float32
        Refuge fraction per cell, or a 1 x 1 array (the same everywhere).
    tau, tau_e : float
        Implicit and explicit weights, years.
    alN, acN, wN, invN, alP, acP, wP, invP
        Each species' faces along and across (1/yr), weights and pivots.
    negN, negP : numpy.ndarray of float64
        Output, one value per row of the input, animals/km².
    negatives : bool
        Form the sums of negative values (only the positivity fix needs them).
    """
    args = (N, P, TN, TP, float(dt_r), int(nsub), r, ik, m, float(a), float(h), float(c),
            float(e), refuge, float(tau), float(tau_e), alN, acN, wN, invN, alP, acP, wP,
            invP, negN, negP, bool(negatives))
    _in_parallel(lambda i0, i1: _band(i0, i1, False, *args), N.shape[0])


def react(N, P, dt, nsub, r, inv_K, m, a, h, c, e, refuge) -> None:
    """Advance the local interaction by ``dt`` years in every cell, in place.

    Plain RK4 where the step is small against the per-capita rates (the
    usual case), RK4 on (ln N, ln P) elsewhere or where plain RK4 would turn
    negative; cells at zero stay at zero. ``nsub > 1``: that many RK4 substeps
    on the logs. ``refuge`` may be a 1x1 array (the same everywhere).

    Parameters
    ----------
    N, P : numpy.ndarray of float64
        Densities, animals/km², advanced in place.
    dt : float
        Time, years.
    nsub : int
        Substeps (1: plain RK4 where safe).
    r, inv_K, m : numpy.ndarray
        Growth rate (1/yr), inverse capacity (km²), mortality (1/yr) per cell.
    a, h, c, e : float
        Attack rate (km²/yr), handling time (yr), interference (km²), efficiency.
    refuge : numpy.ndarray
        Refuge fraction per cell, or a 1 x 1 array.
    """
    # the sweep kernel in its react-only mode; the arrays it does not read are stand-ins
    # of the types the stepper passes, so no second version is compiled
    t4 = np.zeros((1, 1), np.float32)
    t8 = np.zeros((1, 1))
    n1 = np.zeros(1)
    args = (N, P, t8, t8, float(dt), int(nsub), r, inv_K, m, float(a), float(h), float(c),
            float(e), refuge, 0.0, 0.0, t4, t4, t4, t8, t4, t4, t4, t8, n1, n1, False)
    _in_parallel(lambda i0, i1: _band(i0, i1, True, *args), N.shape[0])


# ---------------------------------------------------------------------------
# the explicit scheme (cross-checks only; compiled when first used)
# ---------------------------------------------------------------------------
@_jit(parallel=True)
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
# the positivity fix (compiled when a run first undershoots)
# ---------------------------------------------------------------------------
@_jit()
def _clip(u, neg, tot):
    clipped = 0.0
    for k in range(neg.shape[0]):
        clipped -= neg[k]
    ny, nx = u.shape
    for i in range(ny):
        s = 0.0
        for j in range(nx):
            s += u[i, j]
        tot[i] = s
    total = 0.0
    for i in range(ny):
        total += tot[i]
    positive = total + clipped
    scale = total / positive if positive > 0.0 else 0.0
    for i in range(ny):
        for j in range(nx):
            v = u[i, j]
            u[i, j] = v * scale if v > 0.0 else 0.0
    return clipped


def fix_negative(u: np.ndarray, neg: np.ndarray, tot: np.ndarray) -> float:
    """Clip negative densities to zero and rescale so the total is unchanged.

    ``neg`` holds per-column sums of negative values (from :func:`half_step`);
    nothing is done when they are all zero; ``tot`` is a work array of one
    value per row. The second-order sweeps are positive only while
    ``tau * dg <= 1`` (no linear scheme of order above one is positive for
    every step: Bolley & Crouzeix 1978, RAIRO Anal Numer 12:237), so rare
    undershoots are removed here with mass kept exactly.

    Returns
    -------
    float
        The clipped amount (sum of the negative parts, ≥ 0), animals/km².
    """
    if not neg.any():  # the usual case: no compiled code needed
        return 0.0
    return _clip(u, neg, tot)


def warm_up() -> None:
    """Compile (or load from the cache) the kernels every run uses, on a tiny problem."""
    sh = (3, 4)
    o = np.ones(sh)
    z4 = np.zeros(sh, dtype=np.float32)
    o4 = np.ones(sh, dtype=np.float32)
    mk = np.ones(sh, dtype=np.bool_)
    cx = np.zeros((3, 5), dtype=np.float32)
    cy = np.zeros((4, 4), dtype=np.float32)
    ref = np.zeros((1, 1), dtype=np.float32)
    inv = np.zeros(sh)
    factor_x(cx, o4, mk, 0.5, inv)
    TN, TP = np.zeros((4, 3)), np.zeros((4, 3))
    neg = np.zeros(3)
    half_step(o, o, TN, TP, 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, ref, 0.5, 0.5,
              cx, cy, o4, inv, cx, cy, o4, inv, neg, neg.copy())
    react(o.copy(), o.copy(), 0.1, 1, o4, z4, o4, 1.0, 0.0, 0.0, 0.5, ref)


__all__ = [
    "react", "factor_x", "half_step", "explicit_step", "fix_negative", "warm_up",
    "cache_folder", "CACHE_FOLDER", "BLOCK",
]
