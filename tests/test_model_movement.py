"""Movement operators: conservation, the harmonic-mean face rule, fences and edges."""

from __future__ import annotations

import numpy as np
import pytest

from preyscape.model.movement import apply, build_movement


@pytest.mark.parametrize("kind", ["fickian", "ecological"])
def test_closed_operator_conserves_mass(kind):
    # sum over cells of (L u) is zero for closed edges (finite-volume flux form)
    rng = np.random.default_rng(0)
    shape = (13, 17)
    mask = rng.uniform(size=shape) > 0.2
    D = rng.uniform(0.0, 2.0, shape)
    mv = build_movement(D, mask, 50.0, 70.0, kind,
                        perm_x=rng.uniform(size=(13, 18)), perm_y=rng.uniform(size=(14, 17)))
    u = np.where(mask, rng.uniform(size=shape), 0.0)
    assert abs(apply(mv, u).sum()) < 1e-12 * np.abs(apply(mv, u)).sum()


def test_fickian_face_uses_the_harmonic_mean():
    # flux continuity for piecewise-constant D (e.g. Patankar 1980, Numerical Heat Transfer
    # and Fluid Flow, §4.2-3): face coefficient 2 D1 D2 / (D1 + D2)
    D = np.array([[1.0, 4.0]])
    mv = build_movement(D, np.ones((1, 2), bool), 1000.0, 1000.0, "fickian")
    assert mv.x.up[0, 0] == pytest.approx(1.6)
    assert mv.x.lo[0, 1] == pytest.approx(1.6)


def test_ecological_flux_uses_each_cells_motility():
    # Turchin 1998; Garlick et al. 2011: flux -(mu_j u_j - mu_i u_i)/h^2
    mu = np.array([[1.0, 4.0]])
    mv = build_movement(mu, np.ones((1, 2), bool), 1000.0, 1000.0, "ecological")
    assert (mv.x.up[0, 0], mv.x.dg[0, 0]) == (4.0, 1.0)
    assert (mv.x.lo[0, 1], mv.x.dg[0, 1]) == (1.0, 4.0)
    # steady state mu u = const is in the kernel
    u = np.array([[4.0, 1.0]])
    np.testing.assert_allclose(apply(mv, u), 0.0, atol=1e-15)


def test_impassable_face_and_hostile_edge():
    D = np.ones((1, 3))
    mask = np.ones((1, 3), bool)
    perm = np.ones((1, 4))
    perm[0, 2] = 0.0  # between columns 1 and 2
    mv = build_movement(D, mask, 1000.0, 1000.0, perm_x=perm, edge="hostile")
    assert mv.x.up[0, 1] == 0.0 and mv.x.lo[0, 2] == 0.0
    # hostile edge: density zero on the face half a cell away -> 2 D / h^2 on the diagonal
    assert mv.x.dg[0, 0] == pytest.approx(1.0 + 2.0)
    assert mv.x.dg[0, 2] == pytest.approx(2.0)  # blocked on the left, edge on the right
    # hostile in y too (rows): a single row loses to both y faces
    assert mv.y.dg[0, 1] == pytest.approx(4.0)


def test_no_data_cells_are_decoupled():
    D = np.ones((1, 3))
    mask = np.array([[True, False, True]])
    closed = build_movement(D, mask, 1000.0, 1000.0, nodata="closed")
    hostile = build_movement(D, mask, 1000.0, 1000.0, nodata="hostile")
    assert closed.x.dg.max() == 0.0 and closed.x.up.max() == 0.0
    assert hostile.x.dg[0, 0] == pytest.approx(2.0) and hostile.x.up[0, 0] == 0.0


def test_bad_arguments_are_refused():
    with pytest.raises(ValueError):
        build_movement(np.ones((2, 2)), np.ones((2, 2), bool), 1.0, 1.0, kind="levy")
    with pytest.raises(ValueError):
        build_movement(np.ones((2, 2)), np.ones((2, 2), bool), 1.0, 1.0, edge="open")
    with pytest.raises(ValueError):
        build_movement(-np.ones((2, 2)), np.ones((2, 2), bool), 1.0, 1.0)
