"""Analytic results used by `check`, against published values and scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.special import jn_zeros

from preyscape.model import theory
from preyscape.model.reactions import Interaction, rates


def test_bessel_zero_matches_scipy():
    # Abramowitz & Stegun 1964, Table 9.5; reference library scipy.special.jn_zeros
    assert theory.J01 == pytest.approx(jn_zeros(0, 1)[0], rel=1e-15)


def test_lotka_volterra_equilibrium_and_first_integral_along_solve_ivp():
    # Lotka 1925; Volterra 1926: equilibrium (m/(e a), r/a); V conserved on orbits.
    r, a, e, m = 1.1, 0.7, 0.4, 0.9
    inter = Interaction("lotka-volterra", attack_rate=a, efficiency=e)
    n, p = theory.equilibrium(inter, r, None, m)
    assert (n, p) == pytest.approx((m / (e * a), r / a))
    sol = solve_ivp(lambda t, y: rates(y[0], y[1], r, 0.0, m, inter), (0, 20), [2.0, 1.0],
                    rtol=1e-11, atol=1e-12, dense_output=True)
    V = theory.lv_first_integral(sol.y[0], sol.y[1], r, a, e, m)
    assert np.ptp(V) < 1e-8 * abs(V[0])


def test_rosenzweig_macarthur_hopf_threshold():
    # Rosenzweig 1971 (Science 171:385): equilibrium N* = m/(a(e - m h)) is stable below
    # K_H = (e + m h)/(a h (e - m h)) and unstable above (paradox of enrichment).
    inter = Interaction("holling-ii", attack_rate=0.25, handling_time=0.002, efficiency=0.01)
    m, r = 1.0, 4.0
    KH = theory.hopf_capacity(inter, m)
    assert KH == pytest.approx(3000.0)
    n, _ = theory.equilibrium(inter, r, 8000.0, m)
    assert n == pytest.approx(500.0)
    assert theory.local_stability(inter, r, 0.95 * KH, m)["stable"] is True
    assert theory.local_stability(inter, r, 1.05 * KH, m)["stable"] is False
    # at K_H the eigenvalues are purely imaginary
    lam = theory.local_stability(inter, r, KH, m)["eigenvalues"]
    assert np.max(np.abs(lam.real)) < 1e-6 * np.max(np.abs(lam.imag))


def test_beddington_deangelis_equilibrium_is_a_root_of_the_rates():
    # the returned point makes both rates vanish (Beddington 1975; DeAngelis et al. 1975)
    inter = Interaction("beddington-deangelis", attack_rate=1.0, handling_time=0.2,
                        efficiency=0.6, interference=0.5)
    n, p = theory.equilibrium(inter, 1.0, 5.0, 0.3)
    dn, dp = rates(n, p, 1.0, 1 / 5.0, 0.3, inter)
    assert n > 0 and p > 0
    assert abs(dn) < 1e-12 and abs(dp) < 1e-12


def test_lv_small_amplitude_period_formula():
    # Lotka-Volterra linearisation: eigenvalues +-i sqrt(r m), period 2 pi / sqrt(r m)
    inter = Interaction("lotka-volterra", attack_rate=0.5, efficiency=0.5)
    st = theory.local_stability(inter, 2.0, None, 0.5)
    assert st["period"] == pytest.approx(theory.lv_period(2.0, 0.5), rel=1e-6)
    assert theory.lv_period(2.0, 0.5) == pytest.approx(2 * math.pi)


def test_speeds_and_patch_sizes():
    # Fisher 1937 / KPP 1937; Dunbar 1983; Skellam 1951
    assert theory.fisher_speed(4.0, 0.25) == pytest.approx(2.0)
    inter = Interaction("holling-ii", attack_rate=2.0, handling_time=0.5, efficiency=0.5)
    # e a K / (1 + a h K) - m = 0.5*2*2/(1+2) - 0.1 = 0.5667
    assert theory.predator_speed(inter, 2.0, 0.1, 3.0) == pytest.approx(
        2 * math.sqrt(3.0 * (2.0 / 3.0 - 0.1)))
    assert theory.predator_speed(inter, 0.01, 1.0, 3.0) == 0.0
    # Lotka-Volterra prey have no capacity: the speed is undefined, not an error
    lv = Interaction("lotka-volterra", attack_rate=0.5, efficiency=0.5)
    assert math.isnan(theory.predator_speed(lv, None, 1.0, 3.0))
    assert math.isnan(theory.predator_speed(lv, math.nan, 1.0, 3.0))
    cp = theory.critical_patch(2.0, 0.5)
    assert cp["strip_width"] == pytest.approx(math.pi / 2)
    assert cp["square_side"] == pytest.approx(math.pi * math.sqrt(0.5))
    assert cp["disc_radius"] == pytest.approx(2.404825557695773 / 2)
    # the discrete decay rate tends to the continuum pi^2 D / L^2 as h -> 0
    assert theory.grid_decay_rate(1.0, 1e-4, 1.0) == pytest.approx(math.pi**2, rel=1e-7)


def test_bramson_correction_for_a_slow_landscape():
    # A landscape growth of 0.045 /yr and diffusivity 250 km²/yr (invented example):
    # c* = 2 sqrt(11.25) = 6.71 km/yr, lambda* = sqrt(0.045/250) = 0.0134 /km; fitted
    # over 20-40 years the front lags by (3/2)(74.5 km) ln 2 / 20 yr = 3.87 km/yr.
    c_star = theory.fisher_speed(0.045, 250.0)
    w = theory.mean_front_speed(c_star, math.sqrt(0.045 / 250.0), 20.0, 40.0)
    assert c_star == pytest.approx(6.708, rel=1e-3)
    assert w.correction == pytest.approx(3.875, rel=1e-3)
    assert w.mean == pytest.approx(2.833, rel=1e-3)
    assert w.far_from_asymptotic and w.fraction > 0.5
    with pytest.raises(ValueError):
        theory.mean_front_speed(c_star, 0.01, 0.0, 10.0)
    # with sample times: the slope a least-squares line through c* t - (3/(2 lambda*)) ln t
    # would have (reference library: numpy.polyfit)
    t = np.linspace(20.0, 40.0, 11)
    lam = math.sqrt(0.045 / 250.0)
    slope = np.polyfit(t, c_star * t - 1.5 / lam * np.log(t), 1)[0]
    assert theory.mean_front_speed(c_star, lam, 0, 0, times=t).mean == pytest.approx(
        slope, rel=1e-10)
