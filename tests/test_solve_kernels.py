"""Compiled kernels against reference libraries (scipy) and exact identities."""

from __future__ import annotations

import numpy as np
from scipy.linalg import solve_banded

from preyscape.model.movement import apply, build_movement
from preyscape.solve import kernels


def _operator(shape, seed=0, kind="fickian"):
    rng = np.random.default_rng(seed)
    mask = rng.uniform(size=shape) > 0.15
    D = rng.uniform(0.1, 3.0, shape)
    return build_movement(D, mask, 120.0, 90.0, kind, edge="hostile", nodata="hostile"), mask


def _banded(lo, up, dg, tau):
    # rows of (I - tau L) along one line in scipy's banded layout
    n = lo.size
    ab = np.zeros((3, n))
    ab[0, 1:] = -tau * up[:-1]
    ab[1] = 1.0 + tau * dg
    ab[2, :-1] = -tau * lo[1:]
    return ab


def test_sweeps_match_scipy_banded_solves():
    # Reference library: scipy.linalg.solve_banded on every row / column.
    shape = (17, 23)
    tau = 0.37
    for kind in ("fickian", "ecological"):
        mv, mask = _operator(shape, kind=kind)
        rng = np.random.default_rng(1)
        u = np.where(mask, rng.uniform(size=shape), 0.0)
        f = [np.empty(shape) for _ in range(6)]
        kernels.factor_x(mv.x.lo, mv.x.up, mv.x.dg, tau, f[0], f[1], f[2])
        kernels.factor_y(mv.y.lo, mv.y.up, mv.y.dg, tau, f[3], f[4], f[5])
        out = np.empty(shape)
        kernels.sweep_x(u, out, 0.0, mv.y.lo, mv.y.up, mv.y.dg, f[0], f[1], f[2])
        for i in range(shape[0]):
            ref = solve_banded((1, 1), _banded(mv.x.lo[i], mv.x.up[i], mv.x.dg[i], tau), u[i])
            np.testing.assert_allclose(out[i], ref, rtol=1e-12, atol=1e-14)
        kernels.sweep_y(u, out, 0.0, mv.x.lo, mv.x.up, mv.x.dg, f[3], f[4], f[5])
        for j in range(shape[1]):
            ref = solve_banded((1, 1), _banded(mv.y.lo[:, j], mv.y.up[:, j], mv.y.dg[:, j], tau),
                               u[:, j])
            np.testing.assert_allclose(out[:, j], ref, rtol=1e-12, atol=1e-14)
        # with the explicit half: (I - tau Lx)^-1 (I + tau Ly) u
        kernels.sweep_x(u, out, tau, mv.y.lo, mv.y.up, mv.y.dg, f[0], f[1], f[2])
        rhs = u.copy()
        rhs[1:] += tau * mv.y.lo[1:] * u[:-1]
        rhs[:-1] += tau * mv.y.up[:-1] * u[1:]
        rhs -= tau * mv.y.dg * u
        for i in range(shape[0]):
            ref = solve_banded((1, 1), _banded(mv.x.lo[i], mv.x.up[i], mv.x.dg[i], tau), rhs[i])
            np.testing.assert_allclose(out[i], ref, rtol=1e-12, atol=1e-14)


def test_explicit_step_is_forward_euler_of_the_operator():
    # identity: out = u + dt (Lx + Ly) u, with the numpy reference operator
    shape = (9, 11)
    mv, mask = _operator(shape, seed=4, kind="ecological")
    u = np.where(mask, np.random.default_rng(2).uniform(size=shape), 0.0)
    out = np.empty(shape)
    kernels.explicit_step(u, out, 0.01, mv.x.lo, mv.x.up, mv.x.dg, mv.y.lo, mv.y.up, mv.y.dg)
    np.testing.assert_allclose(out, u + 0.01 * apply(mv, u), rtol=1e-13, atol=1e-15)


def test_make_positive_clips_and_keeps_the_total():
    u = np.array([[1.0, -0.1, 2.0], [0.5, -0.2, 0.3]])
    total = u.sum()
    clipped = kernels.make_positive(u, np.empty(2), np.empty(2))
    assert abs(clipped - 0.3) < 1e-15
    assert u.min() == 0.0
    assert abs(u.sum() - total) < 1e-14
    # the positive cells keep their proportions
    np.testing.assert_allclose(u[0, 2] / u[0, 0], 2.0)


def test_reaction_keeps_zero_cells_at_zero_and_skips_no_data():
    N = np.array([[0.0, 1.0, 5.0]])
    P = np.array([[1.0, 0.0, 2.0]])
    mask = np.array([[True, True, False]])
    z = np.zeros((1, 3))
    kernels.react(N, P, 0.5, 2, np.ones((1, 3)), z, np.full((1, 3), 0.5), 1.0, 0.0, 0.0, 0.5,
                  z, mask)
    assert N[0, 0] == 0.0 and P[0, 1] == 0.0
    # pure exponential growth: RK4 on ln N is exact
    assert abs(N[0, 1] - np.exp(0.5)) < 1e-12
    assert N[0, 2] == 5.0 and P[0, 2] == 2.0  # untouched
