"""Neutral landscape generators."""

from __future__ import annotations

import numpy as np

from preyscape.landscape.generate import (
    classify_by_fractions,
    gaussian_field,
    random_sites,
    spans,
)


def test_site_percolation_threshold():
    # Newman & Ziff 2000 (PRL 85:4104): site percolation on the square lattice spans at
    # p_c = 0.592746. On 128 x 128 lattices the spanning probability is near 0 at
    # p_c - 0.06 and near 1 at p_c + 0.06 (finite-size width ~ L^(-3/4)).
    pc = 0.592746
    below = np.mean([spans(random_sites((128, 128), pc - 0.06, seed=s)) for s in range(20)])
    above = np.mean([spans(random_sites((128, 128), pc + 0.06, seed=s)) for s in range(20)])
    assert below <= 0.1
    assert above >= 0.9


def test_gaussian_field_is_uniform_ranks_and_reproducible():
    a = gaussian_field((64, 80), 6.0, seed=5)
    b = gaussian_field((64, 80), 6.0, seed=5)
    assert np.array_equal(a, b)
    assert 0.0 < a.min() and a.max() < 1.0
    # uniform marginal: the quartiles sit at 0.25, 0.5, 0.75
    np.testing.assert_allclose(np.quantile(a, [0.25, 0.5, 0.75]), [0.25, 0.5, 0.75], atol=0.01)
    # spatially correlated: neighbours are alike
    assert np.corrcoef(a[:, :-1].ravel(), a[:, 1:].ravel())[0, 1] > 0.8


def test_classify_by_fractions_hits_the_fractions():
    f = gaussian_field((50, 50), 4.0, seed=1)
    c = classify_by_fractions(f, {1: 0.5, 2: 0.3, 3: 0.2})
    for code, frac in ((1, 0.5), (2, 0.3), (3, 0.2)):
        assert abs((c == code).mean() - frac) < 0.01
