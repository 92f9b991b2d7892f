"""The split step against published analytic results and reference libraries.

Each test names its source. Units: km, years, animals per km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from preyscape.model import theory
from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction, rates
from preyscape.solve.stepper import Stepper, auto_step

H_M = 100.0  # cell size in metres for most tests (0.1 km)


def make_stepper(shape, D_prey, D_pred, inter, dt, r=1.0, K=None, m=0.5, mask=None,
                 kind="fickian", edge="closed", nodata="closed", dx=H_M, dy=H_M, **kw):
    mask = np.ones(shape, bool) if mask is None else mask
    Dn = np.broadcast_to(np.asarray(D_prey, float), shape)
    Dp = np.broadcast_to(np.asarray(D_pred, float), shape)
    mv_n = build_movement(Dn, mask, dx, dy, kind, edge, nodata)
    mv_p = build_movement(Dp, mask, dx, dy, kind, edge, nodata)
    inv_K = 0.0 if K is None else 1.0 / K
    return Stepper(mask, mv_n, mv_p, np.full(shape, r), np.full(shape, inv_K),
                   np.full(shape, m), inter, dt, **kw)


def run(st, N, P, years):
    n = round(years / st.dt)
    for k in range(n):
        st.step(N, P, k)
    return N, P


# ---------------------------------------------------------------------------
# well-mixed: every cell is the ODE
# ---------------------------------------------------------------------------
@pytest.mark.parametrize("form,K,h,c", [
    ("lotka-volterra", None, 0.0, 0.0),
    ("holling-ii", 3.0, 0.4, 0.0),
    ("beddington-deangelis", 3.0, 0.4, 0.3),
])
def test_uniform_landscape_without_dispersal_matches_solve_ivp(form, K, h, c):
    # Reference library: scipy.integrate.solve_ivp (DOP853, rtol 1e-12) per cell.
    inter = Interaction(form, attack_rate=1.2, handling_time=h, efficiency=0.6, interference=c)
    shape = (3, 4)
    rng = np.random.default_rng(3)
    N = rng.uniform(0.5, 2.0, shape)
    P = rng.uniform(0.2, 1.5, shape)
    N0, P0 = N.copy(), P.copy()
    st = make_stepper(shape, 0.0, 0.0, inter, dt=0.01, r=1.0, K=K, m=0.5,
                      reaction_substeps=8)
    run(st, N, P, 6.0)
    # the ODE with the parameters as the stepper stores them (float32 per-cell fields)
    r, inv_K, m = float(st.r[0, 0]), float(st.inv_K[0, 0]), float(st.m[0, 0])
    assert inv_K == pytest.approx(0.0 if K is None else 1.0 / K, rel=1e-7)

    def rhs(t, y):
        dn, dp = rates(y[0], y[1], r, inv_K, m, inter)
        return [dn, dp]

    for i in range(shape[0]):
        for j in range(shape[1]):
            sol = solve_ivp(rhs, (0, 6.0), [N0[i, j], P0[i, j]], method="DOP853",
                            rtol=1e-12, atol=1e-14)
            np.testing.assert_allclose([N[i, j], P[i, j]], sol.y[:, -1], rtol=1e-10)


def test_lotka_volterra_first_integral_and_small_amplitude_period():
    # Lotka 1925; Volterra 1926 (Nature 118:558): V = e a N - m ln N + a P - r ln P is
    # conserved; small oscillations about (m/(e a), r/a) have period 2 pi / sqrt(r m).
    r, a, e, m = 1.5, 0.8, 0.5, 0.6
    inter = Interaction("lotka-volterra", attack_rate=a, efficiency=e)
    n_eq, p_eq = m / (e * a), r / a
    # large orbit: first integral
    N = np.full((1, 1), 2.0 * n_eq)
    P = np.full((1, 1), 0.5 * p_eq)
    st = make_stepper((1, 1), 0.0, 0.0, inter, dt=0.005, r=r, m=m, reaction_substeps=2)
    r, m = float(st.r[0, 0]), float(st.m[0, 0])  # as stored (float32 per-cell fields)
    V0 = theory.lv_first_integral(N[0, 0], P[0, 0], r, a, e, m)
    Vs = []
    for k in range(4000):
        st.step(N, P, k)
        Vs.append(theory.lv_first_integral(N[0, 0], P[0, 0], r, a, e, m))
    assert np.max(np.abs(np.array(Vs) - V0)) < 1e-9 * abs(V0)
    # small orbit: period from successive upward crossings of the equilibrium
    N = np.full((1, 1), n_eq * 1.001)
    P = np.full((1, 1), p_eq)
    dt = 0.002
    st = make_stepper((1, 1), 0.0, 0.0, inter, dt=dt, r=r, m=m)
    n_eq = float(st.m[0, 0]) / (e * a)
    xs = [N[0, 0] - n_eq]
    for k in range(int(20 / dt)):
        st.step(N, P, k)
        xs.append(N[0, 0] - n_eq)
    xs = np.array(xs)
    up = np.where((xs[:-1] < 0) & (xs[1:] >= 0))[0]
    t_up = (up + xs[up] / (xs[up] - xs[up + 1])) * dt
    period = np.mean(np.diff(t_up))
    assert period == pytest.approx(theory.lv_period(r, float(st.m[0, 0])), rel=1e-4)


# ---------------------------------------------------------------------------
# movement alone
# ---------------------------------------------------------------------------
NO_REACTION = Interaction("lotka-volterra", attack_rate=0.0)


def mover(shape, D_prey, D_pred, dt, **kw):
    """A stepper with movement only (no growth, no mortality, no predation)."""
    return make_stepper(shape, D_prey, D_pred, NO_REACTION, dt, r=0.0, m=0.0, **kw)


@pytest.mark.parametrize("kind", ["fickian", "ecological"])
@pytest.mark.parametrize("damping", [0, 2])
def test_mass_is_conserved_exactly_with_closed_edges_fences_and_holes(kind, damping):
    # Finite-volume flux form: every face flux leaves one cell and enters its neighbour
    # (conservation to rounding; Hundsdorfer & Verwer 2003, §I.4). Large steps make the
    # positivity clip act, which rescales to keep the total.
    rng = np.random.default_rng(11)
    shape = (40, 50)
    mask = rng.uniform(size=shape) > 0.1
    D = rng.uniform(0.2, 5.0, shape)
    px = rng.uniform(size=(shape[0], shape[1] + 1)) * (rng.uniform(size=(40, 51)) > 0.2)
    py = rng.uniform(size=(shape[0] + 1, shape[1]))
    mv = build_movement(D, mask, H_M, 80.0, kind, perm_x=px, perm_y=py)
    zero = np.zeros(shape)
    st = Stepper(mask, mv, mv, zero, zero, zero, NO_REACTION, dt=0.05,
                 damping_steps=damping)
    N = np.where(mask, rng.uniform(size=shape), 0.0)
    N[20, 25] = 500.0 if mask[20, 25] else 0.0
    P = N.copy()
    M0 = N.sum()
    for k in range(30):
        st.step(N, P, k)
        assert N.min() >= 0.0
    assert abs(N.sum() - M0) <= 1e-12 * M0
    assert np.all(N[~mask] == 0.0)


@pytest.mark.parametrize("damping", [0, 2])
def test_point_release_variance_grows_as_2Dt(damping):
    # Heat kernel (textbook; e.g. Crank 1975, The Mathematics of Diffusion): the second
    # moment of a point release grows by exactly 2 D dt M per step and axis away from edges.
    shape = (121, 101)
    D = 1.3
    st = mover(shape, D, D, dt=0.004, damping_steps=damping)
    N = np.zeros(shape)
    N[60, 50] = 1.0
    P = N.copy()
    t = 0.2
    run(st, N, P, t)
    x = (np.arange(shape[1]) - 50) * H_M / 1000
    y = (np.arange(shape[0]) - 60) * H_M / 1000
    M = N.sum()
    var_x = (N.sum(axis=0) * x**2).sum() / M
    var_y = (N.sum(axis=1) * y**2).sum() / M
    assert var_x == pytest.approx(2 * D * t, rel=1e-10)
    assert var_y == pytest.approx(2 * D * t, rel=1e-10)
    # mean squared displacement <r^2> = 4 D t
    assert var_x + var_y == pytest.approx(4 * D * t, rel=1e-10)


def test_ecological_steady_state_is_inverse_motility_and_fickian_is_uniform():
    # Garlick et al. 2011 (Bull Math Biol 73:2088); Turchin 1998: under laplacian(mu u)
    # with no flux, mu u is constant, so patches mu = 1 and 4 hold 1.6 and 0.4 at mean 1;
    # Fickian diffusion levels out to the mean.
    shape = (6, 40)
    mu = np.ones(shape)
    mu[:, 20:] = 4.0
    for kind, left, right in (("ecological", 1.6, 0.4), ("fickian", 1.0, 1.0)):
        st = mover(shape, mu, mu, dt=0.5, kind=kind)
        N = np.ones(shape)
        P = np.ones(shape)
        run(st, N, P, 400.0)
        np.testing.assert_allclose(N[:, :20], left, rtol=1e-8)
        np.testing.assert_allclose(N[:, 20:], right, rtol=1e-8)


# ---------------------------------------------------------------------------
# fronts
# ---------------------------------------------------------------------------
def _front_position(u, level, h_km):
    # last cell from the left above `level`, linearly interpolated (km)
    above = np.where(u >= level)[0]
    k = above.max()
    if k + 1 >= u.size:
        return math.nan
    return (k + (u[k] - level) / (u[k] - u[k + 1])) * h_km + 0.5 * h_km


def _front_speed(st, N, P, species, level, t0=40.0, t1=80.0):
    # regression of the front position on time, sampled every 2 years in [t0, t1] (km/yr)
    ts, xs = [], []
    k = 0
    for t_out in np.arange(t0, t1 + 0.01, 2.0):
        while k * st.dt < t_out - 1e-9:
            st.step(N, P, k)
            k += 1
        ts.append(t_out)
        xs.append(_front_position((N, P)[species][0], level, H_M / 1000))
    return np.polyfit(ts, xs, 1)[0]


def test_fisher_kpp_front_speed():
    # Fisher 1937; Kolmogorov, Petrovsky & Piskunov 1937: c* = 2 sqrt(r D). The front
    # approaches c* from below, x(t) = c* t - (3/2) sqrt(D/r) ln t + C (Bramson 1983;
    # Hamel et al. 2013, NHM 8:275): over t in [40, 80] the mean speed is ~1.3 % low.
    r, D = 1.0, 1.0
    ncol = 2000
    inter = Interaction("logistic-prey", attack_rate=0.0)
    st = make_stepper((1, ncol), D, 0.0, inter, dt=0.05, r=r, K=1.0)
    N = np.zeros((1, ncol))
    N[0, :20] = 1.0
    P = np.zeros((1, ncol))
    c = _front_speed(st, N, P, 0, 0.5)
    c_star = theory.fisher_speed(r, D)
    assert c == pytest.approx(c_star, rel=0.02)
    assert c < c_star
    # log correction: the mean speed predicted by Bramson's expansion over the same window
    bramson = c_star - 1.5 * math.sqrt(D / r) * math.log(80 / 40) / 40
    assert c == pytest.approx(bramson, rel=0.005)


def test_predator_invasion_speed_into_prey_at_capacity():
    # Dunbar 1983 (J Math Biol 17:11): predators invading prey at K spread at
    # c* = 2 sqrt(D_P (e a K/(1 + a h K) - m)), from the linearisation at (K, 0).
    inter = Interaction("logistic-prey", attack_rate=1.0, efficiency=1.0)
    r, K, m, D_P = 1.0, 1.0, 0.5, 2.0
    c_star = theory.predator_speed(inter, K, m, D_P)
    assert c_star == pytest.approx(2.0)
    ncol = 2000
    st = make_stepper((1, ncol), 1.0, D_P, inter, dt=0.05, r=r, K=K, m=m)
    N = np.full((1, ncol), K)
    P = np.zeros((1, ncol))
    P[0, :20] = 0.1
    c = _front_speed(st, N, P, 1, 0.05)
    assert c == pytest.approx(c_star, rel=0.03)
    assert c < c_star * 1.001


# ---------------------------------------------------------------------------
# critical patch size
# ---------------------------------------------------------------------------
LOGISTIC = Interaction("logistic-prey", attack_rate=0.0)


def _total_after(shape, years, mask=None, nodata="closed", edge="hostile", dt=0.05):
    st = make_stepper(shape, 1.0, 0.0, LOGISTIC, dt=dt, r=1.0, K=1.0, mask=mask,
                      edge=edge, nodata=nodata)
    mk = np.ones(shape, bool) if mask is None else mask
    N = np.where(mk, 1e-3, 0.0)
    P = np.zeros(shape)
    M0 = N.sum()
    run(st, N, P, years)
    return N.sum() / M0, N


@pytest.mark.parametrize("factor,persists", [(0.8, False), (1.25, True)])
def test_critical_strip_width_1d(factor, persists):
    # Skellam 1951 (Biometrika 38:196): a strip with lethal edges supports growth iff its
    # width exceeds pi sqrt(D/r). The strip is one row of n data cells between two
    # no-data cells with nodata = "hostile" (the grid edges stay closed).
    L = factor * theory.critical_patch(1.0, 1.0)["strip_width"]
    n = 50
    h_m = L / n * 1000
    mask = np.ones((1, n + 2), bool)
    mask[0, [0, -1]] = False
    st = make_stepper((1, n + 2), 1.0, 0.0, LOGISTIC, dt=0.05, r=1.0, K=1.0, mask=mask,
                      nodata="hostile", dx=h_m, dy=h_m)
    N = np.where(mask, 1e-4, 0.0)
    P = np.zeros((1, n + 2))
    totals = []
    for k in range(600):
        st.step(N, P, k)
        totals.append(N.sum())
    if persists:
        assert N.max() > 0.1
    else:
        assert N.max() < 1e-8
    # in the linear regime the total changes at r - lambda_1, lambda_1 the slowest decay
    # rate of the discrete operator (eigenvalues of the second-difference matrix)
    rate = np.log(totals[200] / totals[100]) / (100 * 0.05)
    expected = 1.0 - theory.grid_decay_rate(1.0, L / n, L)
    assert rate == pytest.approx(expected, rel=0.01)


@pytest.mark.parametrize("factor,persists", [(0.85, False), (1.2, True)])
def test_critical_square_side_2d(factor, persists):
    # Skellam 1951; Kierstead & Slobodkin 1953 (J Mar Res 12:141): a square with lethal
    # edges persists iff its side exceeds pi sqrt(2 D/r).
    L = factor * theory.critical_patch(1.0, 1.0)["square_side"]
    n = 30
    h_m = L / n * 1000
    st = make_stepper((n, n), 1.0, 0.0, LOGISTIC, dt=0.05, r=1.0, K=1.0, edge="hostile",
                      dx=h_m, dy=h_m)
    N = np.full((n, n), 1e-3)
    P = np.zeros((n, n))
    run(st, N, P, 40.0)
    assert (N.max() > 0.05) == persists
    if not persists:
        assert N.max() < 1e-6


@pytest.mark.parametrize("factor,persists", [(0.85, False), (1.2, True)])
def test_critical_disc_radius_with_hostile_no_data(factor, persists):
    # Skellam 1951: a disc of radius R with lethal surroundings persists iff
    # R > j01 sqrt(D/r), j01 = 2.404825557695773 (Abramowitz & Stegun 1964, Table 9.5).
    # The surroundings are no-data cells with nodata = "hostile" (staircase boundary).
    R = factor * theory.critical_patch(1.0, 1.0)["disc_radius"]
    n = 64
    h = 2.2 * R / n
    yy, xx = np.mgrid[0:n, 0:n]
    mask = np.hypot((xx + 0.5) * h - n * h / 2, (yy + 0.5) * h - n * h / 2) <= R
    st = make_stepper((n, n), 1.0, 0.0, LOGISTIC, dt=0.05, r=1.0, K=1.0, mask=mask,
                      nodata="hostile", dx=h * 1000, dy=h * 1000)
    N = np.where(mask, 1e-3, 0.0)
    P = np.zeros((n, n))
    run(st, N, P, 40.0)
    assert (N.max() > 0.05) == persists


# ---------------------------------------------------------------------------
# order of accuracy and positivity
# ---------------------------------------------------------------------------
def _smooth_problem(dt, scheme="adi"):
    shape = (24, 28)
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    D = 0.05 * (1.0 + 0.5 * np.sin(xx / 5.0) * np.cos(yy / 7.0))
    inter = Interaction("holling-ii", attack_rate=1.0, handling_time=0.3, efficiency=0.7)
    st = make_stepper(shape, D, 0.5 * D, inter, dt=dt, r=1.0, K=2.0, m=0.4, scheme=scheme)
    N = 1.0 + 0.5 * np.cos(np.pi * xx / shape[1]) * np.cos(np.pi * yy / shape[0])
    P = 0.4 + 0.2 * np.sin(np.pi * xx / shape[1])
    run(st, N, P, 1.0)
    return N


@pytest.mark.parametrize("scheme,order", [("adi", 2.0), ("implicit-euler", 1.0)])
def test_observed_order_in_time(scheme, order):
    # Strang splitting (Strang 1968, SIAM J Numer Anal 5:506) with Peaceman-Rachford ADI
    # (Peaceman & Rachford 1955) is second order; backward-Euler sweeps are first order
    # (Hundsdorfer & Verwer 2003, §IV.3). Reference: the same scheme at dt/64.
    ref = _smooth_problem(1.0 / 1280, scheme)
    errs = [np.abs(_smooth_problem(dt, scheme) - ref).max() for dt in (0.05, 0.025, 0.0125)]
    observed = np.log2(np.array(errs[:-1]) / np.array(errs[1:]))
    assert np.all(np.abs(observed - order) < 0.25), observed


def test_adi_agrees_with_the_explicit_cross_check():
    # Two independent discretisations of the same semi-discrete system agree to O(dt^2).
    a = _smooth_problem(0.005, "adi")
    b = _smooth_problem(0.005, "explicit")
    assert np.abs(a - b).max() < 1e-4 * np.abs(a).max()


def test_positivity_at_large_steps():
    # Densities never go negative, whatever the step (design requirement): a point release
    # at D dt / h^2 = 500, and a predator crash at a reaction step far beyond the automatic
    # one (log-RK4 keeps densities positive).
    shape = (41, 41)
    inter = Interaction("holling-ii", attack_rate=5.0, handling_time=0.1, efficiency=0.8)
    st = make_stepper(shape, 5.0, 10.0, inter, dt=1.0, r=2.0, K=10.0, m=0.3,
                      damping_steps=0)
    assert 5.0 * st.dt / (H_M / 1000) ** 2 == pytest.approx(500.0)
    N = np.full(shape, 10.0)
    P = np.zeros(shape)
    P[20, 20] = 1e4
    M0 = P.sum()
    st_move = mover(shape, 5.0, 10.0, dt=1.0, damping_steps=0)
    Q = P.copy()
    for k in range(10):
        st_move.step(N.copy(), Q, k)
        assert Q.min() >= 0.0
    assert st_move.stats.clipped > 0  # without the clip this release would undershoot
    # conserved to rounding; the explicit half at D dt/h^2 = 500 cancels terms of size 1e3 u
    assert Q.sum() == pytest.approx(M0, rel=1e-10)
    for k in range(10):
        st.step(N, P, k)
        assert N.min() >= 0.0 and P.min() >= 0.0
        assert np.isfinite(N).all() and np.isfinite(P).all()


def test_auto_step_divides_the_save_interval():
    # the step fits a whole number of times into the save interval, at most 0.05 / rate
    dt = auto_step([4.0, 1.0, 7.3], period_years=3.7, save_every=0.125)
    n = 0.125 / dt
    assert abs(n - round(n)) < 1e-9
    assert dt <= 0.05 / 7.3


def test_merged_half_steps_match_single_steps():
    # advance() takes the two half reaction steps between steps together: R(dt) in place
    # of R(dt/2) R(dt/2). Both are RK4 approximations of the same flow, so the two runs
    # differ only by the reaction integrator's error, far below the splitting error
    shape = (24, 28)
    yy, xx = np.mgrid[0:shape[0], 0:shape[1]]
    inter = Interaction("holling-ii", attack_rate=1.0, handling_time=0.3, efficiency=0.7)
    diffs = []
    for dt in (0.02, 0.01):
        a = make_stepper(shape, 0.05, 0.02, inter, dt=dt, r=1.0, K=2.0, m=0.4)
        b = make_stepper(shape, 0.05, 0.02, inter, dt=dt, r=1.0, K=2.0, m=0.4)
        N1 = 1.0 + 0.5 * np.cos(np.pi * xx / shape[1]) * np.cos(np.pi * yy / shape[0])
        P1 = 0.4 + 0.2 * np.sin(np.pi * xx / shape[1])
        N2, P2 = N1.copy(), P1.copy()
        n = round(1.0 / dt)
        a.advance(N1, P1, 0, n)
        run(b, N2, P2, 1.0)
        diffs.append(np.abs(N1 - N2).max())
    assert diffs[0] < 1e-8
    assert diffs[0] / diffs[1] > 3.0  # and the difference shrinks with the step


def test_full_refuge_gives_logistic_growth():
    # With every prey shielded (refuge fraction 1 in each cell) predators cannot eat and
    # prey follow the logistic law N(t) = K / (1 + (K/N0 - 1) exp(-r t)) (Verhulst 1838),
    # while predators decline at their mortality, P0 exp(-m t).
    shape = (5, 6)
    inter = Interaction("holling-ii", attack_rate=2.0, handling_time=0.1, efficiency=0.5)
    st = make_stepper(shape, 0.0, 0.0, inter, dt=0.01, r=1.2, K=50.0, m=0.4,
                      refuge=np.ones(shape))
    N = np.full(shape, 2.0)
    P = np.full(shape, 10.0)
    run(st, N, P, 5.0)
    r, K, m = float(st.r[0, 0]), 1.0 / float(st.inv_K[0, 0]), float(st.m[0, 0])
    np.testing.assert_allclose(N, K / (1 + (K / 2.0 - 1) * np.exp(-r * 5.0)), rtol=1e-8)
    np.testing.assert_allclose(P, 10.0 * np.exp(-m * 5.0), rtol=1e-8)


@pytest.mark.parametrize("threads", [1, 3])
def test_results_do_not_depend_on_the_thread_count(threads, monkeypatch):
    # design requirement (bitwise reproducible runs): rows are split into one range per
    # thread, and every row is computed the same way whatever the split. Sides that are
    # not multiples of the 8-row blocks, holes, a refuge map and a step large enough for
    # the positivity clip; split over 1, 3 and the default number of ranges.
    from preyscape.solve import kernels

    rng = np.random.default_rng(5)
    shape = (45, 38)
    mask = rng.uniform(size=shape) > 0.1
    D = rng.uniform(1.0, 10.0, shape)
    refuge = rng.uniform(0.0, 0.5, shape)
    inter = Interaction("holling-ii", attack_rate=0.01, handling_time=0.2, efficiency=0.5)

    def run():
        st = make_stepper(shape, D, 5.0, inter, dt=0.5, r=1.0, K=500.0, m=0.3, mask=mask,
                          kind="ecological", refuge=refuge, damping_steps=0)
        N = np.where(mask, 400.0, 0.0)
        P = np.where(mask, 1.0, 0.0)
        P[20, 20] = 1e3 if mask[20, 20] else 0.0
        st.advance(N, P, 0, 6)
        return N, P, st.stats.clipped

    default = run()
    monkeypatch.setattr(kernels.numba, "get_num_threads", lambda: threads)
    other = run()
    assert default[2] > 0 and np.isfinite(default[0]).all()  # the clip acted
    assert all(np.array_equal(a, b) for a, b in zip(default, other, strict=True))


def test_stepper_hands_the_kernels_one_array_type():
    # design requirement (first-run time): the kernels are compiled for writable
    # C-contiguous arrays; read-only inputs (views, broadcasts, a read-only mask) are
    # turned into that type, and float32 fields are used without a copy
    shape = (6, 7)
    r = np.full(shape, 1.0, np.float32)
    frozen = r.copy()
    frozen.flags.writeable = False
    mask = np.ones(shape, bool)
    mask.flags.writeable = False
    mv = build_movement(np.ones(shape), mask, H_M, H_M, "fickian")
    st = Stepper(mask, mv, mv, r, frozen, np.broadcast_to(np.float32(0.3), shape),
                 NO_REACTION, 0.1, refuge=np.broadcast_to(0.2, shape))
    for a in (st.r, st.inv_K, st.m, st._refuge, st.mask):
        assert a.flags.c_contiguous and a.flags.writeable and a.shape == shape
    assert st.r is r
