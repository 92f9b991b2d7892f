"""Tests for preyscape.ensemble.sensitivity: PRCC with p-values and Sobol' indices."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from preyscape.ensemble.design import Parameter, plan_design
from preyscape.ensemble.sensitivity import prcc, sobol_indices


def test_prcc_equals_the_partial_correlation_of_the_rank_correlation_matrix():
    # reference library: scipy.stats.spearmanr; the partial correlation of variables i and
    # j given all others is -P_ij / sqrt(P_ii P_jj) with P the inverse correlation matrix
    # (textbook identity, e.g. Whittaker 1990, Graphical Models in Applied Multivariate
    # Statistics, Wiley; from memory)
    rng = np.random.default_rng(1)
    X = rng.uniform(size=(300, 3))
    y = X[:, 0] + 2 * X[:, 1] ** 3 + 0.3 * rng.normal(size=300)
    r, _ = prcc(X, y)
    P = np.linalg.inv(stats.spearmanr(np.column_stack([X, y])).statistic)
    ref = -P[:3, 3] / np.sqrt(np.diag(P)[:3] * P[3, 3])
    np.testing.assert_allclose(r, ref, atol=1e-12)


def test_one_parameter_gives_spearmans_coefficient_and_p_value():
    # with no other parameter the PRCC is Spearman's rho and its t-test has N - 2 degrees
    # of freedom (Marino et al. 2008, J Theor Biol 254:178); reference: scipy.stats.spearmanr
    rng = np.random.default_rng(2)
    x = rng.normal(size=40)
    y = x + rng.normal(size=40)
    r, p = prcc(x[:, None], y)
    ref = stats.spearmanr(x, y)
    assert r[0] == pytest.approx(ref.statistic, abs=1e-12)
    assert p[0] == pytest.approx(ref.pvalue, rel=1e-9)


def test_partial_correlations_of_a_linear_model_match_the_analytic_values():
    # Y = X1 + 2 X2 + e with independent standard normal X1, X2, e: the partial correlation
    # of Y and Xj given the other is b_j / sqrt(b_j^2 + var(e)), i.e. 1/sqrt(2) and
    # 2/sqrt(5) (analytic, linear regression); sampling error about (1 - rho^2)/sqrt(N)
    rng = np.random.default_rng(3)
    X = rng.normal(size=(4000, 2))
    y = X[:, 0] + 2 * X[:, 1] + rng.normal(size=4000)
    r, p = prcc(X, y, rank=False)
    np.testing.assert_allclose(r, [1 / np.sqrt(2), 2 / np.sqrt(5)], atol=0.03)
    assert (p < 1e-10).all()


def test_front_speed_depends_on_growth_and_diffusivity_alike():
    # Fisher 1937 (Ann Eugen 7:355): front speed 2 sqrt(r D) rises monotonically with both,
    # so both PRCCs are positive and close to 1 (Marino et al. 2008: PRCC measures monotone
    # association); a parameter the speed ignores has a small, insignificant PRCC
    ps = [Parameter("prey.growth", "log-uniform", 0.5, 8.0),
          Parameter("prey.diffusivity", "log-uniform", 0.5, 8.0),
          Parameter("predator.mortality", "uniform", 0.5, 1.5)]
    d = plan_design(ps, members=64, design="latin-hypercube", seed=1)
    speed = 2 * np.sqrt(d.values[:, 0] * d.values[:, 1])
    r, p = prcc(d.values, speed)
    assert r[0] > 0.95 and r[1] > 0.95 and abs(r[0] - r[1]) < 0.03
    assert p[0] < 1e-20 and p[1] < 1e-20
    assert abs(r[2]) < 0.3 and p[2] > 0.05


def test_prcc_is_undefined_for_a_constant_outcome_or_too_few_members():
    X = np.random.default_rng(0).uniform(size=(10, 2))
    r, p = prcc(X, np.ones(10))
    assert np.isnan(r).all() and np.isnan(p).all()
    r, p = prcc(X[:3], np.arange(3.0))
    assert np.isnan(p).all()  # N - 2 - (D - 1) = 0 degrees of freedom


@pytest.mark.parametrize("widths,expected", [((1.0, 1.0), (0.5, 0.5)),
                                             ((2.0, 1.0), (0.8, 0.2))])
def test_sobol_indices_of_log_front_speed_match_the_analytic_shares(widths, expected):
    # ln(2 sqrt(r D)) = ln 2 + (ln r + ln D)/2 is additive in ln r and ln D, uniform under
    # log-uniform ranges, so S1 = ST = var share of each term: 1/2 and 1/2 for equal
    # log-ranges, 4/5 and 1/5 when ln r spans twice the width (analytic; Saltelli et al.
    # 2010, Comput Phys Commun 181:259 for the estimators); within the bootstrap interval
    wr, wd = widths
    ps = [Parameter("prey.growth", "log-uniform", 1.0, float(np.exp(wr))),
          Parameter("prey.diffusivity", "log-uniform", 1.0, float(np.exp(wd)))]
    d = plan_design(ps, members=512 * 4, design="sobol", seed=7)
    y = np.log(2 * np.sqrt(d.values[:, 0] * d.values[:, 1]))
    ix = sobol_indices(y, 2, seed=1)
    for key in ("S1", "ST"):
        for j in range(2):
            tol = max(0.03, 2 * ix[f"{key}_conf"][j])
            assert ix[key][j] == pytest.approx(expected[j], abs=tol), (key, j)


def test_sobol_indices_are_nan_with_a_failed_member():
    y = np.arange(16.0)
    y[3] = np.nan
    assert np.isnan(sobol_indices(y, 2)["S1"]).all()
