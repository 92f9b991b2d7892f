"""The extinction threshold: exactly zero below it, nothing changed without it.

Units: km, years, animals per km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.extinction import apply_thresholds, floor_below
from preyscape.solve.stepper import Stepper

H_M = 100.0  # cell size, metres (0.1 km)


def make_stepper(shape, D_prey, D_pred, inter, dt, r=1.0, K=None, m=0.5, **kw):
    mask = np.ones(shape, bool)
    mv_n = build_movement(np.full(shape, float(D_prey)), mask, H_M, H_M)
    mv_p = build_movement(np.full(shape, float(D_pred)), mask, H_M, H_M)
    inv_K = 0.0 if K is None else 1.0 / K
    return Stepper(mask, mv_n, mv_p, np.full(shape, r), np.full(shape, inv_K),
                   np.full(shape, m), inter, dt, **kw)


def test_floor_sets_exactly_zero_below_and_keeps_the_rest_bitwise():
    # Design requirement: densities strictly below the threshold become exactly 0.0; the
    # others (the threshold itself included) keep their bits; the removed total is their sum
    # (reference: math.fsum).
    rng = np.random.default_rng(4)
    u = rng.lognormal(0.0, 3.0, (37, 23))
    u[3, 4] = 0.25  # exactly the threshold: kept
    u[5, 6] = 0.0
    before = u.copy()
    removed = floor_below(u, 0.25, np.zeros(u.shape[0]))
    below = before < 0.25
    assert below.sum() > 50
    assert np.all(u[below] == 0.0)
    assert np.array_equal(u[~below], before[~below])
    assert u[3, 4] == 0.25
    assert removed == pytest.approx(math.fsum(before[below]), rel=1e-12)


def test_thresholds_apply_per_species_and_zero_means_none():
    # Design requirement: a threshold of 0 leaves that species alone.
    N = np.array([[0.5, 2.0], [3.0, 0.1]])
    P = np.array([[0.5, 2.0], [3.0, 0.1]])
    removed = apply_thresholds(N, P, (0.0, 1.0), np.zeros(2))
    assert N.tolist() == [[0.5, 2.0], [3.0, 0.1]]
    assert P.tolist() == [[0.0, 2.0], [3.0, 0.0]]
    assert removed == pytest.approx(0.6)


@pytest.mark.parametrize("scheme", ["adi", "explicit"])
def test_stepper_leaves_no_density_between_zero_and_the_threshold(scheme):
    # Design requirement: after every advance (a census), each density is 0 or at least the
    # threshold.
    inter = Interaction("holling-ii", attack_rate=1.0, handling_time=0.3, efficiency=0.5)
    shape = (12, 14)
    N = np.zeros(shape)
    P = np.zeros(shape)
    N[3:9, 4:10] = 80.0  # blocks that spread into empty cells around them
    P[4:8, 5:9] = 20.0
    st = make_stepper(shape, 0.05, 0.02, inter, 0.02, r=2.0, K=100.0, scheme=scheme,
                      extinction=(0.5, 0.2))
    for k in range(10):  # a census after every 5 steps
        st.advance(N, P, 5 * k, 5)
        assert np.all((N == 0.0) | (N >= 0.5))
        assert np.all((P == 0.0) | (P >= 0.2))
    assert np.count_nonzero(N) > 1 and np.count_nonzero(P) > 1
    assert st.stats.floored > 0.0


def test_zero_thresholds_change_nothing_bitwise():
    # Design requirement: the hook is inert when it removes nothing, so runs without a
    # threshold are bitwise those of the stepper without one.
    inter = Interaction("holling-ii", attack_rate=1.0, handling_time=0.3, efficiency=0.5)
    shape = (9, 11)
    rng = np.random.default_rng(2)
    N0, P0 = rng.uniform(0, 3, shape), rng.uniform(0, 1, shape)
    out = []
    for ext in (None, (0.0, 0.0)):
        N, P = N0.copy(), P0.copy()
        st = make_stepper(shape, 0.05, 0.1, inter, 0.02, r=2.0, K=5.0, extinction=ext)
        st.advance(N, P, 0, 20)
        out.append((N, P))
    assert np.array_equal(out[0][0], out[1][0]) and np.array_equal(out[0][1], out[1][1])


def test_predators_below_the_threshold_do_not_return():
    # The "atto-fox" (Mollison 1991, Math Biosci 107:255; from memory): without a threshold
    # a predator density of 1e-9 per km² grows back to order one on prey at capacity;
    # with a threshold above it the predators are gone for good (common practice, no source).
    inter = Interaction("holling-ii", attack_rate=1.0, handling_time=0.1, efficiency=0.5)
    shape = (4, 4)
    ends = []
    for ext in (None, (0.0, 1e-3)):
        N, P = np.full(shape, 10.0), np.full(shape, 1e-9)
        st = make_stepper(shape, 0.0, 0.0, inter, 0.01, r=1.0, K=10.0, m=0.5, extinction=ext)
        for k in range(80):  # 20 years, a census every quarter year
            st.advance(N, P, 25 * k, 25)
        ends.append(P.copy())
    assert ends[0].min() > 0.05  # grown back by a factor of more than 1e7
    assert np.all(ends[1] == 0.0)


def _front_speed(eps: float | None, dt: float = 0.05) -> float:
    """Fisher–KPP front (r = D = K = 1) on a strip, census every 0.5 yr, fitted over 10-20 yr."""
    shape = (3, 500)
    inter = Interaction("logistic-prey", attack_rate=0.0, efficiency=0.0)
    N = np.zeros(shape)
    P = np.zeros(shape)
    N[:, :3] = 1.0
    ext = None if eps is None else (eps, 0.0)
    st = make_stepper(shape, 1.0, 0.0, inter, dt, r=1.0, K=1.0, m=0.0, extinction=ext)
    per = round(0.5 / dt)  # steps per census (the run loop: per save interval)
    x = (np.arange(shape[1]) + 0.5) * H_M / 1000.0
    times, pos = [], []
    for k in range(40):
        st.advance(N, P, per * k, per)
        t = 0.5 * (k + 1)
        row = N[1]
        if t >= 10.0:
            j = int(np.nonzero(row >= 0.5)[0].max())
            times.append(t)
            pos.append(x[j] + (row[j] - 0.5) / (row[j] - row[j + 1]) * H_M / 1000.0)
    return float(np.polyfit(times, pos, 1)[0])


def test_threshold_slows_a_front_less_as_it_falls():
    # Brunet & Derrida 1997 (Phys Rev E 56:2597; abstract read): a cut-off eps slows a
    # pulled front below 2 sqrt(rD), and its speed converges to 2 sqrt(rD) as eps -> 0.
    # Measured (10-20 yr, census every 0.5 yr): 1.561, 1.850 and 1.890 km/yr for eps = 1e-2,
    # 1e-4 and none (the last lags 2 km/yr by Bramson's finite-time delay).
    v = [_front_speed(eps) for eps in (1e-2, 1e-4, None)]
    assert v[0] < v[1] < v[2] < 2.0
    assert v[0] < 0.9 * v[2]
    assert v[1] > 0.95 * v[2]


def test_census_does_not_depend_on_the_step():
    # Design requirement: the threshold acts at the end of each advance (a save interval in
    # a run), so a shorter step gives the same front; applied after every step it would not
    # (a cell's density rises from zero continuously, so a floor applied ever more often lets
    # animals enter an empty cell ever less). Measured: 1.5608 and 1.5605 km/yr.
    assert _front_speed(1e-2, dt=0.01) == pytest.approx(_front_speed(1e-2, dt=0.05), rel=2e-3)
