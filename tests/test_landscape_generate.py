"""Neutral landscape generators (landscape/generate.py) and writing them (landscape/make.py)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import rasterio
from scipy import ndimage

from preyscape.errors import InputError
from preyscape.landscape import generate
from preyscape.landscape.generate import (
    SITE_PERCOLATION_THRESHOLD,
    classify_by_fractions,
    cluster_field,
    fractal_field,
    fractal_surface,
    gaussian_field,
    habitat_classes,
    random_field,
    random_sites,
    spans,
    spans_west_east,
)
from preyscape.landscape.io import read_habitat
from preyscape.landscape.make import PATTERNS, make_landscape, pattern_field

FOUR = ndimage.generate_binary_structure(2, 1)


# --- helpers independent of the code under test --------------------------------
def radial_spectrum(z: np.ndarray, fmin: float, fmax: float, bins: int = 15):
    """Radially averaged periodogram: mean |FFT|² over log-spaced annuli of |k| (cycles/cell)."""
    power = np.abs(np.fft.fft2(z - z.mean())) ** 2
    k = np.hypot(np.fft.fftfreq(z.shape[1])[None, :], np.fft.fftfreq(z.shape[0])[:, None])
    edges = np.geomspace(fmin, fmax, bins + 1)
    idx = np.digitize(k.ravel(), edges)
    f, p = [], []
    for i in range(1, bins + 1):
        sel = idx == i
        if sel.any():
            f.append(k.ravel()[sel].mean())
            p.append(power.ravel()[sel].mean())
    return np.array(f), np.array(p)


def spectral_exponent(z: np.ndarray, fmin: float = 1 / 128, fmax: float = 0.5) -> float:
    """beta in P(f) ∝ f^-beta, least squares on log-log axes."""
    f, p = radial_spectrum(z, fmin, fmax)
    return -np.polyfit(np.log(f), np.log(p), 1)[0]


def variogram_exponent(z: np.ndarray, lags=(2, 4, 8, 16)) -> float:
    """Slope of log E[(z(x+r) - z(x))²] against log r, along rows and columns."""
    v = [0.5 * (np.mean((z[:, r:] - z[:, :-r]) ** 2) + np.mean((z[r:] - z[:-r]) ** 2))
         for r in lags]
    return np.polyfit(np.log(lags), np.log(v), 1)[0]


def spanning_threshold(field: np.ndarray) -> float:
    """Smallest habitat share (in whole cells) at which habitat_classes' class 1 spans N-S.

    Class 1 at share q is the top round(q N) cells of the field, so the landscapes are nested
    as q grows and spanning is monotone in q: bisection on the cell count.
    """
    n = field.size
    lo, hi = 0, n
    while hi - lo > 1:
        mid = (lo + hi) // 2
        cl = habitat_classes(field, [mid / n, 1 - mid / n])
        if spans(cl == 1):
            hi = mid
        else:
            lo = mid
    return hi / n


# --- existing building blocks ----------------------------------------------------
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


# --- exact fractions, reproducibility -------------------------------------------
@pytest.mark.parametrize("pattern", PATTERNS)
@pytest.mark.parametrize("shape", [(37, 53), (64, 64)])
def test_habitat_fraction_is_exact_to_the_cell(pattern, shape):
    # design requirement: cumulative class areas are round(F_k * cells) exactly
    n = shape[0] * shape[1]
    field = pattern_field(pattern, shape, seed=11, hurst=0.3, marked=0.4)
    for fractions in ([0.3, 0.7], [0.123, 0.877], [0.2, 0.3, 0.1, 0.4], [1.0]):
        cl = habitat_classes(field, fractions)
        cum = np.cumsum(fractions)
        for k in range(1, len(fractions) + 1):
            assert (cl <= k).sum() == round(cum[k - 1] * n)
            assert abs((cl == k).sum() - fractions[k - 1] * n) <= 1.0


@pytest.mark.parametrize("pattern", PATTERNS)
def test_rank_fields_are_uniform_and_distinct(pattern):
    f = pattern_field(pattern, (40, 50), seed=2)
    assert np.unique(f).size == f.size
    assert 0.0 < f.min() and f.max() < 1.0
    np.testing.assert_allclose(np.sort(f.ravel()), (np.arange(f.size) + 0.5) / f.size)


@pytest.mark.parametrize("pattern", PATTERNS)
def test_same_seed_same_field_other_seed_other_field(pattern):
    a = pattern_field(pattern, (48, 40), seed=7, hurst=0.6, marked=0.3)
    b = pattern_field(pattern, (48, 40), seed=7, hurst=0.6, marked=0.3)
    c = pattern_field(pattern, (48, 40), seed=8, hurst=0.6, marked=0.3)
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_habitat_classes_puts_class_one_on_the_highest_values():
    field = np.arange(10.0).reshape(2, 5)
    cl = habitat_classes(field, [0.2, 0.3, 0.5])
    assert cl.tolist() == [[3, 3, 3, 3, 3], [2, 2, 2, 1, 1]]


# --- fractal surfaces ---------------------------------------------------------------
@pytest.mark.parametrize("hurst", [0.2, 0.5, 0.8])
def test_fractal_spectral_exponent_matches_hurst(hurst):
    # A 2-D fractional Brownian surface has spectral density S(k) ∝ |k|^-(2H+2), so its
    # radially *averaged* power spectrum (mean over an annulus) falls as f^-(2H+2) (Saupe
    # 1988, in Peitgen & Saupe (eds), The Science of Fractal Images, Springer, pp. 71-136;
    # from memory). Fitted over 1/128-1/2 cycles per cell on 256 x 256 surfaces, mean of
    # four seeds: the estimate scatters by about 0.05 per surface (periodogram noise) and
    # log-spaced bins bias it by about +0.04; tolerance 0.1.
    beta = np.mean([spectral_exponent(fractal_surface((256, 256), hurst, s)) for s in range(4)])
    assert beta == pytest.approx(2 * hurst + 2, abs=0.1)


def test_fractal_spectral_exponent_of_a_non_square_map():
    # same convention on a 192 x 320 map (frequencies per axis differ): Saupe 1988
    beta = np.mean([spectral_exponent(fractal_surface((192, 320), 0.6, s), 1 / 96, 0.5)
                    for s in range(4)])
    assert beta == pytest.approx(3.2, abs=0.12)


@pytest.mark.parametrize("hurst", [0.3, 0.5, 0.7])
def test_fractal_increments_scale_with_hurst(hurst):
    # Defining property of fractional Brownian motion: E[(z(x+r) - z(x))²] ∝ r^(2H)
    # (Mandelbrot & Van Ness 1968, SIAM Review 10:422). On a 512 x 512 periodic lattice at
    # lags of 2-16 cells half the fitted exponent lies within 0.1 of H for 0.3 <= H <= 0.7
    # (measured 0.37, 0.52, 0.69; spread 0.01-0.02 between seeds); outside that range the
    # grid's shortest and longest wavelengths bend the curve, which is why the test stops
    # there.
    slope = np.mean([variogram_exponent(fractal_surface((512, 512), hurst, s))
                     for s in range(3)])
    assert slope / 2 == pytest.approx(hurst, abs=0.1)


def test_rougher_fractals_make_more_patches():
    # design requirement: lower H, rougher surface, more and smaller patches at 40 % habitat
    def n_patches(h):
        return ndimage.label(habitat_classes(fractal_field((128, 128), h, 5), [0.4, 0.6]) == 1,
                             FOUR)[1]
    assert n_patches(0.1) > n_patches(0.5) > n_patches(0.9)


def test_fractal_surface_refuses_bad_hurst():
    with pytest.raises(ValueError, match="hurst"):
        fractal_surface((8, 8), 1.5)


# --- random landscapes and percolation --------------------------------------------------
def test_spanning_probability_crosses_one_half_at_the_percolation_threshold():
    # Site percolation on the square lattice: p_c = 0.592746 (Newman & Ziff 2000, Phys. Rev.
    # Lett. 85:4104). On a square L x L lattice the probability of a top-to-bottom crossing
    # at p_c tends to 1/2 (square aspect ratio), so the median of the spanning threshold of
    # random landscapes estimates p_c. L = 128, 200 landscapes: the threshold scatters with
    # s.d. ~0.013 (width ∝ L^(-1/nu), nu = 4/3), so the median's standard error is ~0.0012;
    # the finite-size shift of the crossing point is smaller than 0.003 at this size
    # (measured medians 0.5934, 0.5951, 0.5924 at L = 64, 128, 256 with 300 landscapes
    # each; 0.5954 with the 200 here). Tolerance 0.01.
    thresholds = [spanning_threshold(random_field((128, 128), s)) for s in range(200)]
    assert np.median(thresholds) == pytest.approx(SITE_PERCOLATION_THRESHOLD, abs=0.01)
    # and the crossing is sharp: almost never spans 0.05 below, almost always 0.05 above
    th = np.array(thresholds)
    assert np.mean(th <= SITE_PERCOLATION_THRESHOLD - 0.05) < 0.05
    assert np.mean(th <= SITE_PERCOLATION_THRESHOLD + 0.05) > 0.95


def test_spans_in_both_directions():
    a = np.zeros((5, 6), dtype=bool)
    a[:, 2] = True
    assert spans(a) and not spans_west_east(a)
    assert spans_west_east(a.T) and not spans(a.T)


# --- modified random clusters ---------------------------------------------------------------
def test_clusters_fill_by_majority_of_eight_neighbours():
    # Saura & Martínez-Millán 2000 (Landscape Ecology 15:661), filling step: an unmarked cell
    # takes the most frequent value among its (already filled) 8 neighbours
    labels = np.array([[1, 1, 0],
                       [1, 0, 2],
                       [0, 2, 2]])
    # the centre sees three 1s and three 2s: ties go either way with the random stream
    centre = {int(generate._fill_by_majority(labels, np.random.default_rng(s))[1, 1])
              for s in range(20)}
    assert centre == {1, 2}
    # a clear majority always wins, whatever the random tie-break
    labels = np.array([[1, 1, 1],
                       [1, 0, 2],
                       [1, 2, 2]])
    for s in range(20):
        assert generate._fill_by_majority(labels, np.random.default_rng(s))[1, 1] == 1


def test_clusters_keep_percolation_clusters_whole():
    # The method assigns whole clusters to classes (Saura & Martínez-Millán 2000); with exact
    # areas at most one cluster per class boundary is split. Rebuild the marked clusters from
    # the same random stream and count clusters that hold two classes.
    shape, marked, seed = (60, 70), 0.35, 4
    rng = np.random.default_rng(seed)
    marks = rng.random(shape) < marked
    clusters, n = ndimage.label(marks, FOUR)
    cl = habitat_classes(cluster_field(shape, marked, seed), [0.3, 0.45, 0.25])
    mixed = sum(np.unique(cl[clusters == k]).size > 1 for k in range(1, n + 1))
    assert mixed <= 2


def test_clusters_patches_grow_near_the_percolation_threshold():
    # As the marked share p approaches the percolation threshold 0.5927 (Newman & Ziff 2000),
    # marked clusters grow large, so do the patches, and edges get fewer (Saura &
    # Martínez-Millán 2000, Landscape Ecology 15:661; from memory). Mean of three seeds at 40 %
    # habitat: largest patch and total edge at p = 0.3 and 0.55.
    def stats(p):
        largest, edge = [], []
        for s in range(3):
            cl = habitat_classes(cluster_field((150, 150), p, s), [0.4, 0.6])
            lab, _ = ndimage.label(cl == 1, FOUR)
            largest.append(np.bincount(lab.ravel())[1:].max())
            edge.append((cl[:, 1:] != cl[:, :-1]).sum() + (cl[1:] != cl[:-1]).sum())
        return np.mean(largest), np.mean(edge)
    (big_lo, edge_lo), (big_hi, edge_hi) = stats(0.3), stats(0.55)
    assert big_hi > 2 * big_lo
    assert edge_hi < 0.75 * edge_lo


def test_cluster_field_refuses_bad_share():
    with pytest.raises(ValueError, match="marked"):
        cluster_field((8, 8), 1.0)


# --- writing (make.py) -------------------------------------------------------------------------
def test_make_landscape_writes_what_read_habitat_reads(tmp_path: Path):
    r = make_landscape(tmp_path / "m.tif", "fractal", rows=30, cols=40, cell_size=25.0,
                       seed=3, fractions=[0.25, 0.75], hurst=0.7)
    grid, values = read_habitat(tmp_path / "m.tif", "classes")
    assert grid.shape == (30, 40) and grid.dx == grid.dy == 25.0
    # default corner: EPSG:3035's false origin is the south-west corner
    assert (grid.x0, grid.y0 - 30 * 25.0) == (4_321_000.0, 3_210_000.0)
    assert (values == 1).sum() == 300 and (values == 2).sum() == 900
    expected = habitat_classes(fractal_field((30, 40), 0.7, 3), [0.25, 0.75])
    assert np.array_equal(values, expected)
    assert r["metrics_file"].is_file()
    with rasterio.open(tmp_path / "m.tif") as ds:
        assert ds.crs.to_epsg() == 3035
        assert ds.tags(1)["CLASS_1"] == "habitat"
        assert ds.tags()["PREYSCAPE_SEED"] == "3"


def test_make_landscape_same_seed_same_file(tmp_path: Path):
    for name in ("a.tif", "b.tif"):
        make_landscape(tmp_path / name, "clusters", rows=25, cols=25, seed=9, marked=0.4)
    assert (tmp_path / "a.tif").read_bytes() == (tmp_path / "b.tif").read_bytes()


def test_make_landscape_suitability_is_uniform(tmp_path: Path):
    make_landscape(tmp_path / "s.tif", "random", rows=20, cols=30, suitability=True)
    grid, s = read_habitat(tmp_path / "s.tif", "suitability")
    # share of cells above q is exactly 1 - q for the rank field (to float32 rounding)
    assert np.sum(s >= 0.5) == 300


@pytest.mark.parametrize("kwargs, needle", [
    ({"fractions": [0.5, 0.6]}, "add up to 1"),
    ({"fractions": [1.2, -0.2]}, "[0, 1]"),
    ({"rows": 1}, "--rows"),
    ({"cell_size": 0.0}, "--cell-size"),
    ({"crs": "EPSG:4326"}, "projected CRS in metres"),
    ({"crs": "not a crs"}, "not a coordinate reference system"),
    ({"hurst": 1.5}, "--hurst"),
    ({"seed": -1}, "--seed"),
])
def test_make_landscape_refuses_bad_choices_and_writes_nothing(tmp_path: Path, kwargs, needle):
    pattern = "fractal" if "hurst" in kwargs else "random"
    with pytest.raises(InputError) as info:
        make_landscape(tmp_path / "x.tif", pattern, rows=kwargs.pop("rows", 10), cols=10,
                       **kwargs)
    assert needle in str(info.value)
    assert list(tmp_path.iterdir()) == []


def test_make_landscape_never_overwrites_unless_asked(tmp_path: Path):
    make_landscape(tmp_path / "m.tif", "random", rows=10, cols=10, seed=1)
    before = (tmp_path / "m.tif").read_bytes()
    with pytest.raises(InputError, match="--overwrite"):
        make_landscape(tmp_path / "m.tif", "random", rows=10, cols=10, seed=2)
    assert (tmp_path / "m.tif").read_bytes() == before
    make_landscape(tmp_path / "m.tif", "random", rows=10, cols=10, seed=2, overwrite=True)
    assert (tmp_path / "m.tif").read_bytes() != before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["m.metrics.json", "m.tif"]
