"""Compiled kernels against reference libraries (scipy) and exact identities."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import solve_banded

from preyscape.model.movement import apply, build_movement
from preyscape.model.reactions import Interaction, rates
from preyscape.solve import kernels

Z1 = np.zeros((1, 1))


def _operator(shape, seed=0, kind="fickian"):
    rng = np.random.default_rng(seed)
    mask = rng.uniform(size=shape) > 0.15
    D = rng.uniform(0.1, 3.0, shape)
    return build_movement(D, mask, 120.0, 90.0, kind, edge="hostile", nodata="hostile"), mask


def _banded(op, i, tau):
    # row i of (I - tau L) in scipy's banded layout, from the float64 view of the operator
    lo, up, dg = op.lo[i], op.up[i], op.dg[i]
    n = lo.size
    ab = np.zeros((3, n))
    ab[0, 1:] = -tau * up[:-1]
    ab[1] = 1.0 + tau * dg
    ab[2, :-1] = -tau * lo[1:]
    return ab


@pytest.mark.parametrize("kind", ["fickian", "ecological"])
@pytest.mark.parametrize("tau_e", [0.0, 0.37])
def test_half_step_matches_scipy_banded_solves(kind, tau_e):
    # Reference library: scipy.linalg.solve_banded on every row of
    # (I - tau Lx) x = (I + tau_e Ly) u, with the result written transposed.
    shape = (17, 23)
    tau = 0.37
    mv, mask = _operator(shape, kind=kind)
    w = mv.w if mv.w is not None else np.ones(shape, np.float32)
    rng = np.random.default_rng(1)
    u = np.where(mask, rng.uniform(size=shape), 0.0)
    inv = np.empty(shape)
    kernels.factor_x(mv.cx, w, mask, tau, inv)
    T, T2 = np.empty(shape[::-1]), np.empty(shape[::-1])
    negT, neg2 = np.zeros(shape[0]), np.zeros(shape[0])
    o = np.ones(shape)
    kernels.half_step(u, u, T, T2, 0.0, 1, o, o, o, 0.0, 0.0, 0.0, 0.0, Z1, tau, tau_e,
                      mv.cx, mv.cy, w, inv, mv.cx, mv.cy, w, inv, negT, neg2)
    ox, oy = mv.x, mv.y
    rhs = u + tau_e * (apply(mv, u) - (-(ox.dg) * u + _shift_x(ox, u)))
    for i in range(shape[0]):
        if not mask[i].any():
            continue
        ref = solve_banded((1, 1), _banded(ox, i, tau), rhs[i])
        np.testing.assert_allclose(T[:, i], np.where(mask[i], ref, 0.0), rtol=1e-12,
                                   atol=1e-14)
    assert np.array_equal(T, T2)
    np.testing.assert_allclose(negT, np.minimum(T, 0).sum(axis=0), atol=1e-15)
    assert oy.dg.shape == shape


def _shift_x(ox, u):
    out = np.zeros_like(u)
    out[:, 1:] += ox.lo[:, 1:] * u[:, :-1]
    out[:, :-1] += ox.up[:, :-1] * u[:, 1:]
    return out


def test_explicit_step_is_forward_euler_of_the_operator():
    # identity: out = u + dt (Lx + Ly) u, with the numpy reference operator
    shape = (9, 11)
    mv, mask = _operator(shape, seed=4, kind="ecological")
    u = np.where(mask, np.random.default_rng(2).uniform(size=shape), 0.0)
    out = np.empty(shape)
    kernels.explicit_step(u, out, 0.01, mv.cx, mv.cy, mv.w, mask)
    np.testing.assert_allclose(out, u + 0.01 * apply(mv, u), rtol=1e-13, atol=1e-15)


def test_fix_negative_clips_and_keeps_the_total():
    u = np.array([[1.0, -0.1, 2.0], [0.5, -0.2, 0.3]])
    total = u.sum()
    neg = np.minimum(u, 0).sum(axis=0)
    clipped = kernels.fix_negative(u, neg, np.empty(2))
    assert abs(clipped - 0.3) < 1e-15
    assert u.min() == 0.0
    assert abs(u.sum() - total) < 1e-14
    np.testing.assert_allclose(u[0, 2] / u[0, 0], 2.0)  # proportions kept
    v = np.ones((2, 2))
    assert kernels.fix_negative(v, np.zeros(2), np.empty(2)) == 0.0 and v.sum() == 4.0


def test_reaction_is_rk4_and_keeps_zero_cells_at_zero():
    # pure exponential growth is integrated exactly by RK4 on logs and to O(h^5) by RK4
    N = np.array([[0.0, 1.0, 1.0]])
    P = np.array([[1.0, 0.0, 0.0]])
    o = np.ones((1, 3))
    z = np.zeros((1, 3))
    kernels.react(N, P, 0.01, 1, o, z, np.full((1, 3), 0.5), 1.0, 0.0, 0.0, 0.5, Z1)
    assert N[0, 0] == 0.0 and P[0, 1] == 0.0
    assert abs(N[0, 1] - np.exp(0.01)) < 1e-12
    # a step far beyond the rates switches to RK4 on logs: still positive and exact
    N = np.array([[1.0]])
    P = np.array([[0.0]])
    kernels.react(N, P, 5.0, 1, np.full((1, 1), -3.0), np.zeros((1, 1)), np.zeros((1, 1)),
                  1.0, 0.0, 0.0, 0.5, Z1)
    assert N[0, 0] == pytest.approx(np.exp(-15.0), rel=1e-12)


def test_reaction_step_against_scipy_one_step_error():
    # one RK4 step of size h has error O(h^5): halving h cuts it ~32-fold (Butcher 2008,
    # Numerical Methods for ODEs, §23); reference: scipy solve_ivp at rtol 1e-13
    from scipy.integrate import solve_ivp

    inter = Interaction("holling-ii", 1.5, 0.3, 0.6)
    errs = []
    for hstep in (0.1, 0.05):
        N = np.array([[2.0]])
        P = np.array([[1.0]])
        kernels.react(N, P, hstep, 1, np.ones((1, 1)), np.full((1, 1), 0.2),
                      np.full((1, 1), 0.4), 1.5, inter.h, 0.0, 0.6, Z1)
        ref = solve_ivp(lambda t, y: rates(y[0], y[1], 1.0, 0.2, 0.4, inter), (0, hstep),
                        [2.0, 1.0], method="DOP853", rtol=1e-13, atol=1e-15).y[:, -1]
        errs.append(abs(N[0, 0] - ref[0]) + abs(P[0, 0] - ref[1]))
    assert 20 < errs[0] / errs[1] < 45


def test_log_fall_back_keeps_absent_predators_at_zero_when_the_exponent_overflows():
    # a prey-only Lotka-Volterra cell with prey near 2e8 per km²: the predators' per-capita
    # rate e a N - m = 5e5 /yr times the step is far past exp's range (709), and 0 * inf
    # would be NaN; absent predators stay absent and prey grow exactly as dN/dt = rN
    # (exact solution N0 e^{r t}, textbook), since RK4 on logs is exact for constant rates
    f4 = np.float32
    N = np.array([[2e8, 2e8]])
    P = np.array([[0.0, 0.0]])
    r = np.full((1, 2), 2.0, dtype=f4)
    kernels.react(N, P, 0.02, 1, r, np.zeros((1, 2), f4), np.ones((1, 2), f4),
                  0.25, 0.0, 0.0, 0.01, np.zeros((1, 1), f4))
    assert np.all(P == 0.0)
    assert N == pytest.approx(np.full((1, 2), 2e8 * np.exp(2.0 * 0.02)), rel=1e-12)
    # the same with substeps (nsub > 1: RK4 on logs throughout)
    N = np.array([[2e8]])
    P = np.array([[0.0]])
    kernels.react(N, P, 0.02, 4, r[:, :1], np.zeros((1, 1), f4), np.ones((1, 1), f4),
                  0.25, 0.0, 0.0, 0.01, np.zeros((1, 1), f4))
    assert P[0, 0] == 0.0 and N[0, 0] == pytest.approx(2e8 * np.exp(0.04), rel=1e-12)
