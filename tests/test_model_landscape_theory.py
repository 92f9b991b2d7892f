"""Predictions for a mixed landscape against published results and the solver.

Striped landscapes are simulated with the solver itself (prey-only
Fisher–KPP, predators absent) on a one-row grid of 50 m cells: the stripes lie
across the direction of travel. Fronts are timed when they reach the same
point of every period (the middle of the first stripe), and the speed is the
slope of a line fitted to those positions against the arrival times. Units:
km, years, animals per km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from preyscape.model import landscape_theory as LT
from preyscape.model import theory
from preyscape.model.fields import build_fields
from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.stepper import Stepper

H_M = 50.0  # cell size, metres
H_KM = H_M / 1000.0
PREY_ONLY = Interaction("logistic-prey", attack_rate=0.0)


# ---------------------------------------------------------------------------
# the solver on stripes
# ---------------------------------------------------------------------------
def _stripe_fields(cells, growth, capacity, movement, ncol):
    """Class multipliers per column for stripes of ``cells[i]`` cells repeating, and fields."""
    pattern = np.concatenate([np.full(c, i) for i, c in enumerate(cells)])
    cls = np.resize(pattern, ncol)[None, :]
    mask = np.ones(cls.shape, bool)
    mult = {
        "prey_capacity": np.asarray(capacity, float)[cls],
        "prey_growth": np.asarray(growth, float)[cls],
        "prey_movement": np.asarray(movement, float)[cls],
        "predator_mortality": np.ones(cls.shape),
        "predator_movement": np.ones(cls.shape),
    }
    # best-habitat values 1 (r = 1/yr, K = 1, D = 1 km²/yr): the multipliers are the values
    return mask, build_fields(mult, mask, 1.0, 1.0, 1.0, 1.0, 1.0, logistic=True)


def simulate_stripes(cells, growth, capacity, movement, ncol, years, kind="fickian",
                     dt=0.02, level=0.1, phase=None, every=0.1):
    """Arrival times (years) of density ``level`` at the same point of every period.

    Returns the positions (km), the arrival times (NaN: not reached) and the
    final prey density.
    """
    mask, f = _stripe_fields(cells, growth, capacity, movement, ncol)
    mv_n = build_movement(f.prey_move, mask, H_M, H_M, kind)
    mv_p = build_movement(f.predator_move, mask, H_M, H_M, "fickian")
    st = Stepper(mask, mv_n, mv_p, f.r, f.inv_K, f.m, PREY_ONLY, dt)
    period = sum(cells)
    N = np.zeros(mask.shape)
    N[0, :period] = np.where(f.K[0, :period] > 0, 1.0, 0.0)  # one period at capacity
    P = np.zeros(mask.shape)
    idx = np.arange(cells[0] // 2 if phase is None else phase, ncol, period)
    T = np.full(idx.size, np.nan)
    n = round(every / dt)
    k = 0
    prev = N[0, idx].copy()
    while k * dt < years - 1e-9:
        st.advance(N, P, k, n)
        k += n
        cur = N[0, idx]
        new = np.isnan(T) & (cur >= level)
        T[new] = k * dt - every * (cur[new] - level) / (cur[new] - prev[new])
        prev = cur.copy()
    return (idx + 0.5) * H_KM, T, N


def fitted_speed(x, T, t0, t1):
    """Slope of position on arrival time for arrivals in [t0, t1], km/yr, and those times."""
    sel = np.isfinite(T) & (T >= t0) & (T <= t1)
    assert sel.sum() >= 5
    return float(np.polyfit(T[sel], x[sel], 1)[0]), T[sel]


def _layers(cells, growth, capacity):
    lengths = np.asarray(cells, float) * H_KM
    r = np.asarray(growth, float) * np.where(np.asarray(capacity) > 0, 1.0, -1.0)
    return lengths, r


def _front_in_window(p, cells, growth, capacity, movement, kind="fickian"):
    """Simulate over [30, 60] / k(0) years; return (fitted speed, corrected prediction)."""
    t0, t1 = 30.0 / p.persistence_rate, 60.0 / p.persistence_rate
    ncol = int((1.1 * p.speed * t1 + 5.0) / H_KM)
    x, T, _ = simulate_stripes(cells, growth, capacity, movement, ncol, t1, kind)
    c, used = fitted_speed(x, T, t0, t1)
    return c, theory.mean_front_speed(p.speed, p.decay_rate, t0, t1, times=used)


# ---------------------------------------------------------------------------
# stripes across the direction of travel
# ---------------------------------------------------------------------------
def test_coarse_stripes_front_matches_the_periodic_dispersion_relation():
    # Shigesada, Kawasaki & Teramoto 1986 (Theor Popul Biol 30:143): two alternating
    # stripes, speed min k(lambda)/lambda from the Floquet relation cosh(lambda L) =
    # tr M(k)/2 (derived here with transfer matrices). 2 km of habitat (r = 1, D = 1)
    # and 2 km of sink (zero capacity, r = -0.5, D = 0.25): patches of 2-6 spread lengths.
    cells, growth, capacity, movement = (40, 40), (1.0, 0.5), (1.0, 0.0), (1.0, 0.25)
    lengths, r = _layers(cells, growth, capacity)
    p = LT.periodic_speed(lengths, r, movement)
    hom = LT.homogenised_speed(r, movement, lengths, patch_length_km=lengths)
    assert hom.coarse and p.status == LT.INVASION
    assert p.speed > 1.1 * hom.speed  # the two predictions differ: the test can tell them apart
    c, corrected = _front_in_window(p, cells, growth, capacity, movement)
    assert c / p.speed == pytest.approx(1.0, abs=0.03)  # measured 0.980
    # with the finite-time correction (Bramson 1983; Hamel et al. 2016) much closer
    assert c / corrected.mean == pytest.approx(1.0, abs=0.01)  # measured 1.003


def test_fine_stripes_front_matches_the_homogenised_speed():
    # Shigesada & Kawasaki 1997 (Biological Invasions, OUP); SKT 1986: fine stripes
    # spread at 2 sqrt(<r> D_h) with D_h the harmonic mean. 0.1 km stripes of r = 4,
    # D = 1 and r = -2 (sink), D = 0.25: <r> = 1, D_h = 0.4.
    cells, growth, capacity, movement = (2, 2), (4.0, 2.0), (1.0, 0.0), (1.0, 0.25)
    lengths, r = _layers(cells, growth, capacity)
    hom = LT.homogenised_speed(r, movement, [0.5, 0.5], patch_length_km=lengths)
    assert hom.growth == pytest.approx(1.0) and hom.movement == pytest.approx(0.4)
    assert hom.speed == pytest.approx(2 * math.sqrt(0.4)) and not hom.coarse
    assert hom.upper == pytest.approx(2 * math.sqrt(0.625))  # arithmetic mean D
    p = LT.periodic_speed(lengths, r, movement)
    assert p.speed == pytest.approx(hom.speed, rel=0.01)
    c, corrected = _front_in_window(p, cells, growth, capacity, movement)
    assert c / hom.speed == pytest.approx(1.0, abs=0.03)  # measured 0.996
    assert c / corrected.mean == pytest.approx(1.0, abs=0.01)  # measured 1.007


def test_negative_mean_growth_in_fine_stripes_gives_no_front():
    # Shigesada & Kawasaki 1997: with <r> <= 0 a fine mix cannot be invaded. 0.1 km of
    # habitat (r = 1) and 0.1 km of sink (r = -1.5): <r> = -0.25.
    cells, growth, capacity, movement = (2, 2), (1.0, 1.5), (1.0, 0.0), (1.0, 1.0)
    lengths, r = _layers(cells, growth, capacity)
    hom = LT.homogenised_speed(r, movement, lengths, patch_length_km=lengths)
    assert hom.status == LT.NO_INVASION and hom.speed == 0.0 and not hom.coarse
    assert "no invasion is expected" in hom.message
    p = LT.periodic_speed(lengths, r, movement)
    assert p.status == LT.NO_INVASION and p.persistence_rate == pytest.approx(-0.25, abs=0.01)
    x, T, N = simulate_stripes(cells, growth, capacity, movement, 800, 20.0)
    # two cells released at capacity; after 20 years the front never got beyond the
    # first few periods and the animals are dying out
    assert np.isfinite(T).sum() <= 3
    assert N.max() < 1e-3 and N.sum() < 0.01 * 2.0


def test_coarse_patches_carry_a_front_although_the_mean_growth_is_negative():
    # SKT 1986; Shigesada & Kawasaki 1997: in a coarse periodic landscape the species
    # persists iff k(0) > 0, and k(0) >= <r>. 4 km of habitat (r = 1) and 4 km of sink
    # (r = -1.5): <r> = -0.25, yet each habitat stripe is above the critical width
    # pi sqrt(D/r) (Skellam 1951) and a front crosses the sinks.
    cells, growth, capacity, movement = (80, 80), (1.0, 1.5), (1.0, 0.0), (1.0, 1.0)
    lengths, r = _layers(cells, growth, capacity)
    hom = LT.homogenised_speed(r, movement, lengths, patch_length_km=lengths)
    assert hom.status == LT.NO_INVASION and hom.coarse
    assert "only a guide" in hom.message
    p = LT.periodic_speed(lengths, r, movement)
    assert p.status == LT.INVASION and p.persistence_rate > 0
    c, corrected = _front_in_window(p, cells, growth, capacity, movement)
    assert c / p.speed == pytest.approx(1.0, abs=0.03)  # measured 0.98
    assert c / corrected.mean == pytest.approx(1.0, abs=0.01)


def test_ecological_movement_homogenises_to_harmonic_motility_and_residence_weighted_growth():
    # Derived here (docs/method.md): with v = mu u, <1/mu> v_t = v_xx + <r/mu> v, so
    # c = 2 sqrt(<r/mu>) / <1/mu> (harmonic mean motility as in Garlick et al. 2011,
    # Bull Math Biol 73:2088). Fine stripes mu = 1, 4 and r = 1, 0.2:
    # <1/mu> = 0.625, <r/mu> = 0.525, c = 2.3186; the Fickian formula gives 1.960.
    cells, growth, capacity, movement = (2, 2), (1.0, 0.2), (1.0, 1.0), (1.0, 4.0)
    lengths, r = _layers(cells, growth, capacity)
    hom = LT.homogenised_speed(r, movement, lengths, "ecological", patch_length_km=lengths)
    assert hom.speed == pytest.approx(2 * math.sqrt(0.525) / 0.625)
    assert hom.movement == pytest.approx(1.6) and hom.growth == pytest.approx(0.84)
    assert hom.upper == hom.speed and not hom.coarse
    fickian = LT.homogenised_speed(r, movement, lengths, "fickian")
    p = LT.periodic_speed(lengths, r, movement, "ecological")
    c, corrected = _front_in_window(p, cells, growth, capacity, movement, "ecological")
    assert c / hom.speed == pytest.approx(1.0, abs=0.03)  # measured 0.985
    assert c / corrected.mean == pytest.approx(1.0, abs=0.01)  # measured 1.002
    assert c / fickian.speed > 1.1  # the Fickian formula would be wrong here


def test_ecological_movement_coarse_stripes_match_the_periodic_relation():
    # The Floquet relation with v = mu u and v_x continuous at interfaces (derived here,
    # following SKT 1986): 2 km habitat (r = 1, mu = 1), 2 km sink (r = -0.5, mu = 4).
    cells, growth, capacity, movement = (40, 40), (1.0, 0.5), (1.0, 0.0), (1.0, 4.0)
    lengths, r = _layers(cells, growth, capacity)
    p = LT.periodic_speed(lengths, r, movement, "ecological")
    assert p.speed > 1.2 * LT.periodic_speed(lengths, r, movement, "fickian").speed
    c, corrected = _front_in_window(p, cells, growth, capacity, movement, "ecological")
    assert c / p.speed == pytest.approx(1.0, abs=0.03)  # measured 0.984
    assert c / corrected.mean == pytest.approx(1.0, abs=0.01)


# ---------------------------------------------------------------------------
# the dispersion relation itself
# ---------------------------------------------------------------------------
def test_periodic_speed_of_a_uniform_medium_is_fisher():
    # Fisher 1937; KPP 1937: layers with equal values are a uniform medium, c = 2 sqrt(rD),
    # lambda* = sqrt(r/D), k(0) = r, whatever the layering.
    for kind in ("fickian", "ecological"):
        p = LT.periodic_speed([0.3, 1.7, 2.0], [0.8, 0.8, 0.8], [2.5, 2.5, 2.5], kind)
        assert p.speed == pytest.approx(theory.fisher_speed(0.8, 2.5), rel=1e-7)
        assert p.decay_rate == pytest.approx(math.sqrt(0.8 / 2.5), rel=1e-3)
        assert p.persistence_rate == pytest.approx(0.8, rel=1e-9)


def test_two_layer_relation_matches_the_closed_form():
    # The two-layer form (SKT 1986, written out here): cosh(lambda L) = C1 C2 +
    # (1/2)(D1 q1/(D2 q2) + D2 q2/(D1 q1)) S1 S2; checked at the computed k(lambda*).
    lengths, r, D = (1.3, 0.7), (1.2, -0.4), (0.9, 2.2)
    p = LT.periodic_speed(lengths, r, D)
    lam = p.decay_rate
    k = p.speed * lam
    q = [math.sqrt((k - ri) / Di) for ri, Di in zip(r, D, strict=True)]
    C = [math.cosh(qi * li) for qi, li in zip(q, lengths, strict=True)]
    S = [math.sinh(qi * li) for qi, li in zip(q, lengths, strict=True)]
    a = D[0] * q[0] / (D[1] * q[1])
    rhs = C[0] * C[1] + 0.5 * (a + 1 / a) * S[0] * S[1]
    assert math.cosh(lam * sum(lengths)) == pytest.approx(rhs, rel=1e-9)


def test_periodic_speed_tends_to_the_homogenised_speed_and_repeats_with_the_period():
    # Homogenisation limit (Shigesada & Kawasaki 1997; Garlick et al. 2011): layers
    # 1000 times finer than the spread length give the homogenised speed.
    r, D = (1.0, -0.3, 0.5), (1.0, 0.2, 3.0)
    for kind in ("fickian", "ecological"):
        fine = LT.periodic_speed([1e-3, 2e-3, 1e-3], r, D, kind)
        hom = LT.homogenised_speed(r, D, [1, 2, 1], kind)
        assert fine.speed == pytest.approx(hom.speed, rel=1e-4)
        # Floquet: two periods taken as one give the same medium, the same speed
        one = LT.periodic_speed([0.6, 1.1, 0.9], r, D, kind)
        two = LT.periodic_speed([0.6, 1.1, 0.9] * 2, r * 2, D * 2, kind)
        assert two.speed == pytest.approx(one.speed, rel=1e-7)


def test_many_layers_in_one_period_give_the_speed_of_one():
    # Floquet theory (textbook): 60 repeats of two layers taken as one period are the same
    # medium as the two layers, so the speed and k(0) are the same.
    r, D, ell = [3.0, -0.2], [5.0, 5.0], [0.1, 0.3]
    for kind in ("fickian", "ecological"):
        one = LT.periodic_speed(ell, r, D, kind)
        many = LT.periodic_speed(ell * 60, r * 60, D * 60, kind)
        assert many.persistence_rate == pytest.approx(one.persistence_rate, rel=1e-6)
        assert many.speed == pytest.approx(one.speed, rel=1e-5)


def test_a_long_transect_of_patches_keeps_the_rayleigh_bound():
    # 200 random patches (as a transect crosses them): k(0) is at least the mean growth
    # <r> (Fickian) or <r/mu>/<1/mu> (ecological), the Rayleigh quotient of a constant
    # (textbook; docs/method.md), and with fine patches the speed is near the homogenised
    # one (Shigesada & Kawasaki 1997). The trace of the transfer matrix oscillates with the
    # phase summed over all layers: a root scan stepping by one layer's phase skipped
    # crossings here and gave k(0) = 0.79 against the bound 0.96 (ecological).
    rng = np.random.default_rng(4)
    cls = rng.integers(0, 4, 200)
    r = np.array([3.0, -0.2, 0.875, -1.5])[cls]
    D = np.array([5.0, 5.0, 10.0, 15.0])[cls]
    ell = rng.uniform(0.1, 0.3, 200)
    for kind in ("fickian", "ecological"):
        p = LT.periodic_speed(ell, r, D, kind)
        h = LT.homogenised_speed(r, D, ell, kind, patch_length_km=ell)
        assert not h.coarse
        assert p.persistence_rate >= h.growth - 1e-9
        assert p.speed == pytest.approx(h.speed, rel=0.05)


def test_uniform_habitat_is_never_coarse():
    # design requirement: one kind of habitat has nothing to homogenise, whatever the
    # length of its patches; the speed is Fisher's 2 sqrt(rD) (Fisher 1937)
    hom = LT.homogenised_speed([2.0, 2.0], [0.5, 0.5], [1, 3], patch_length_km=[40.0, 40.0])
    assert hom.grain == 0.0 and not hom.coarse
    assert hom.speed == pytest.approx(2.0)


def test_map_classes_of_a_class_map_and_of_a_suitability_map():
    # hand counts (design requirement): shares, multipliers, patch lengths (the longer of
    # the mean runs along rows and columns), suitability bands with zero on its own
    hab = np.array([[1, 1, 2, 2, 2], [1, 1, 2, 2, 0], [3, 3, 3, 3, 0]])
    mask = hab > 0
    table = {1: {"prey_capacity": 1.0}, 2: {"prey_capacity": 0.5, "predator_movement": 2.0},
             3: {"prey_capacity": 0.0}}
    mc = LT.map_classes(hab, mask, 100.0, 200.0, table, {1: "meadow", 2: "scrub"})
    assert mc.codes.tolist() == [1, 2, 3] and mc.names == ("meadow", "scrub", "3")
    assert mc.cells.tolist() == [4, 5, 4] and mc.shares.sum() == pytest.approx(1.0)
    assert mc.multipliers["prey_capacity"].tolist() == [1.0, 0.5, 0.0]
    assert mc.multipliers["predator_movement"].tolist() == [1.0, 2.0, 1.0]
    # class 1: runs of 2 cells (0.2 km) along rows, 2 cells (0.4 km) along columns
    # class 2: 3 and 2 cells along rows (0.25 km); 2, 2, 1 along columns (0.333 km)
    # class 3: 4 cells along a row (0.4 km); 1 cell along columns (0.2 km)
    assert mc.patch_km == pytest.approx([0.4, 0.2 * 5 / 3, 0.4])
    s = np.array([[0.0, 0.0, 0.05, 0.35], [0.31, 1.0, 0.95, np.nan]])
    ms = LT.map_classes(s, np.isfinite(s), 50.0, 50.0)
    assert ms.kind == "suitability"
    assert ms.names == ("suitability 0", "suitability 0–0.1", "suitability 0.3–0.4",
                        "suitability 0.9–1.0")
    assert ms.cells.tolist() == [2, 1, 2, 2]
    assert ms.multipliers["prey_capacity"] == pytest.approx([0.0, 0.05, 0.33, 0.975])


def test_prey_spread_ratio_flags_patches_shorter_than_the_prey_spread():
    # Skellam 1951 (Biometrika 38:196): prey settle over sqrt(D/r); r = 4, D = 0.5 gives
    # 0.354 km against patches of 0.4 and 2 km; a class under 1 % of the map is left out
    ratio = LT.prey_spread_ratio([4.0, 4.0, -4.0], [0.5, 0.5, 0.5], [0.4, 2.0, 0.01],
                                 [0.6, 0.395, 0.005])
    assert ratio == pytest.approx(math.sqrt(0.125) / 0.4)
    assert ratio > LT.PREY_SMOOTHING


def test_transect_merges_cells_into_patches():
    # design requirement: a transect of cells is the sequence of patches it crosses
    r_class, D_class = np.array([1.0, -0.5]), np.array([1.0, 0.25])
    cls = np.array([0] * 40 + [1] * 40 + [0] * 40 + [1] * 40)
    tr = LT.transect_speed(np.full(cls.size, H_KM), r_class[cls], D_class[cls])
    assert tr.segments == 4 and tr.length_km == pytest.approx(8.0)
    p = LT.periodic_speed([2.0, 2.0], [1.0, -0.5], [1.0, 0.25])
    assert tr.periodic.speed == pytest.approx(p.speed, rel=1e-7)
    assert tr.homogenised.speed == pytest.approx(2 * math.sqrt(0.25 * 0.4))
    assert tr.homogenised.coarse


def test_coarse_flag_is_where_homogenisation_fails():
    # Design choice checked against the exact periodic speed (SKT 1986): below the grain
    # limit the homogenised speed is within 4 %, well above it off by more than 10 %.
    r, D = np.array([1.0, -0.5]), np.array([1.0, 1.0])
    for ell in (0.1, 0.3, 0.5, 3.0, 6.0):
        hom = LT.homogenised_speed(r, D, [ell, ell], patch_length_km=ell)
        err = abs(hom.speed / LT.periodic_speed([ell, ell], r, D).speed - 1)
        if hom.grain <= LT.COARSE_GRAIN:
            assert not hom.coarse and err < 0.04
        if hom.grain >= 3 * LT.COARSE_GRAIN:
            assert hom.coarse and err > 0.10


# ---------------------------------------------------------------------------
# sources and sinks
# ---------------------------------------------------------------------------
HOLLING = Interaction("holling-ii", attack_rate=0.25, handling_time=0.002, efficiency=0.01)
MULT = {
    "prey_capacity": [1.0, 0.6, 0.3, 0.0],
    "predator_mortality": [1.0, 1.0, 1.5, 1.0],
    "prey_growth": [1.0, 1.0, 0.5, 1.0],
}
SHARES = [20.0, 15.0, 40.0, 25.0]  # cell counts


def test_source_sink_table_holling_ii_by_hand():
    # Holling 1959 (Can Entomol 91:385); Rosenzweig & MacArthur 1963 (Am Nat 97:209):
    # predators at low density on prey at K grow at e a K/(1 + a h K) - m. With a = 0.25,
    # h = 0.002, e = 0.01, m = 1, K = 1000 by hand:
    #   K = 1000: 0.01 * 250/1.5 - 1 = 0.666667
    #   K = 600:  0.01 * 150/1.3 - 1 = 0.153846
    #   K = 300:  0.01 * 75/1.15 - 1.5 = -0.847826
    #   K = 0:    -1
    g = LT.low_density_growth(HOLLING, 3.7, 1000.0, 1.0, MULT, SHARES,
                              names=["meadow", "scrub", "marsh", "car park"])
    assert g.predator.growth == pytest.approx([0.666667, 0.153846, -0.847826, -1.0], rel=1e-5)
    assert g.predator.source.tolist() == [True, True, False, False]
    assert g.predator.sink_share == pytest.approx(0.65)
    assert g.predator.source_share == pytest.approx(0.35)
    # prey: r times the growth multiplier; zero capacity is a sink at -r (model.fields)
    assert g.prey.growth == pytest.approx([3.7, 3.7, 1.85, -3.7])
    assert g.prey.sink_share == pytest.approx(0.25)
    assert g.prey.mean_growth == pytest.approx(0.2 * 3.7 + 0.15 * 3.7 + 0.4 * 1.85 - 0.25 * 3.7)
    # the verdict names the source classes and says "minority" for predators only
    assert "minority" in g.predator.verdict and "meadow, scrub" in g.predator.verdict
    assert "35 %" in g.predator.verdict and "minority" not in g.prey.verdict
    # the break-even capacity is the equilibrium prey density N* (Rosenzweig & MacArthur)
    n_star = theory.equilibrium(HOLLING, 3.7, 1000.0, 1.0)[0]
    at = LT.low_density_growth(HOLLING, 3.7, 1000.0, 1.0,
                               {"prey_capacity": [n_star / 1000.0]}, [1.0])
    assert at.predator.growth[0] == pytest.approx(0.0, abs=1e-12)


def test_source_sink_table_other_forms():
    # Beddington 1975; DeAngelis et al. 1975: at P -> 0 the response is Holling's
    bd = Interaction("beddington-deangelis", attack_rate=0.25, handling_time=0.002,
                     efficiency=0.01, interference=0.3)
    g_bd = LT.low_density_growth(bd, 3.7, 1000.0, 1.0, MULT, SHARES)
    g_h2 = LT.low_density_growth(HOLLING, 3.7, 1000.0, 1.0, MULT, SHARES)
    assert g_bd.predator.growth == pytest.approx(g_h2.predator.growth, rel=1e-14)
    # logistic prey with mass action (Lotka 1925; Volterra 1926): e a K - m
    lp = Interaction("logistic-prey", attack_rate=0.002, efficiency=0.5)
    g = LT.low_density_growth(lp, 2.0, 1000.0, 1.0, {"prey_capacity": [1.0, 0.5]}, [1, 1])
    assert g.predator.growth == pytest.approx([0.0, -0.5], abs=1e-12)
    assert g.predator.sink_share == 1.0 and "cannot grow anywhere" in g.predator.verdict
    # Lotka-Volterra prey have no capacity: the predators' rate is undefined
    lv = Interaction("lotka-volterra", attack_rate=0.5, efficiency=0.5)
    g = LT.low_density_growth(lv, 2.0, None, 1.0, {"prey_growth": [1.0, 0.0]}, [3, 1])
    assert g.prey.growth.tolist() == [2.0, 0.0] and g.prey.sink_share == 0.25
    assert np.isnan(g.predator.growth).all() and "not defined" in g.predator.verdict


def test_landscape_prediction_combines_table_and_speeds():
    # homogenised predator speed from the Holling II table (Dunbar 1983 per class;
    # Shigesada & Kawasaki 1997 for the mix): mean growth < 0 here
    mult = dict(MULT, predator_movement=[1.0, 2.0, 0.5, 1.0])
    pred = LT.landscape_prediction(HOLLING, 3.7, 1000.0, 1.0, 0.5, 2.0, mult, SHARES)
    w = np.asarray(SHARES) / 100.0
    rp = pred.growth.predator.growth
    assert pred.predator.growth == pytest.approx(float(np.dot(w, rp)))
    assert pred.predator.movement == pytest.approx(1.0 / np.dot(w, 1.0 / (2.0 * np.array(
        [1.0, 2.0, 0.5, 1.0]))))
    assert pred.predator.status == LT.NO_INVASION and pred.predator.speed == 0.0
    assert pred.prey.speed == pytest.approx(2 * math.sqrt(pred.growth.prey.mean_growth * 0.5))
    # best habitat alone gives Dunbar's speed (Dunbar 1983, J Math Biol 17:11)
    best = LT.landscape_prediction(HOLLING, 3.7, 1000.0, 1.0, 0.5, 2.0, {}, [1.0])
    assert best.predator.speed == pytest.approx(theory.predator_speed(HOLLING, 1000.0, 1.0, 2.0))


def test_suitability_bands_and_patch_lengths():
    # hand counts (design requirement)
    s = np.array([[0.05, 0.15, 0.12, 0.95], [0.5, 0.5, np.nan, 1.0]])
    mask = np.array([[True, True, True, True], [True, True, False, True]])
    means, shares = LT.suitability_bands(s, mask)
    assert means == pytest.approx([0.05, 0.135, 0.5, 0.975])
    assert shares == pytest.approx([1 / 7, 2 / 7, 2 / 7, 2 / 7])
    codes = np.array([[1, 1, 2, 2, 2, 1], [1, 3, 2, 2, 1, 1]])
    mask = np.ones(codes.shape, bool)
    mask[1, 2] = False
    L = LT.patch_lengths(codes, mask, 100.0, 200.0)
    # class 1: runs of 2, 1 (row 0) and 1, 2 (row 1) cells along rows; 2 (column 0),
    # 1 (column 1), 1 (column 4), 2 (column 5) along columns. Class 2: 3 and 1 along
    # rows (the no-data cell ends a run); class 3: a single cell.
    assert L[1][0] == pytest.approx(0.1 * (2 + 1 + 1 + 2) / 4)
    assert L[1][1] == pytest.approx(0.2 * (2 + 1 + 1 + 2) / 4)
    assert L[2][0] == pytest.approx(0.1 * (3 + 1) / 2)
    assert L[3] == pytest.approx((0.1, 0.2))


# ---------------------------------------------------------------------------
# finite-time correction
# ---------------------------------------------------------------------------
def test_bramson_correction_brings_the_window_mean_closer():
    # Bramson 1983 (Mem AMS 44(285)); Ebert & van Saarloos 2000 (Physica D 146:1):
    # x(t) = c* t - (3/(2 lambda*)) ln t + C. A Fisher front (r = D = 1) timed over
    # 10-20 years is 4.6 % below c* = 2; the corrected mean is within 1 %.
    x, T, _ = simulate_stripes((1,), (1.0,), (1.0,), (1.0,), 1000, 20.0, dt=0.01,
                               level=0.5, phase=0, every=0.01)
    c, used = fitted_speed(x, T, 10.0, 20.0)
    w = theory.mean_front_speed(2.0, 1.0, 10.0, 20.0, times=used)
    assert abs(c - w.mean) < 0.25 * abs(c - 2.0)
    assert c / w.mean == pytest.approx(1.0, abs=0.01)  # measured 1.005
    assert not w.far_from_asymptotic
    # the secant form: c* - (3/2) sqrt(D/r) ln(t1/t0)/(t1 - t0)
    sec = theory.mean_front_speed(2.0, 1.0, 10.0, 20.0)
    assert sec.correction == pytest.approx(1.5 * math.log(2.0) / 10.0)
