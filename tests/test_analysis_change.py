"""Change statistics for cycling populations (preyscape.analysis.change).

Cases whose answer is known: the same cycle shifted in time (no level change), a
halving of predators in part of the landscape during four years (a loss there and
then), and a travelling front held back by a known distance (a delay of distance
over speed). Densities animals/km², times years.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from preyscape.analysis.change import (
    NO_DATA,
    arrival_delay,
    first_crossing,
    level_change,
    window_of,
    window_statistics,
)
from preyscape.analysis.waves import arrival_time

STEP = 0.125  # years between snapshots (8 a year, as in the bundled demo)


def rm_cycle(period: float):
    """The predator density of a Rosenzweig–MacArthur limit cycle, time rescaled to ``period``.

    Solved with scipy.integrate.solve_ivp (reference library) for the bundled demo's
    constants (r 4/yr, K 8000, a 0.25, h 0.002, e 0.01, m 1/yr), where K is above the
    Hopf capacity so the populations cycle (Rosenzweig 1971, Science 171:385). Returns
    a function of time (years) and the cycle's own period.
    """
    r, K, a, h, e, m = 4.0, 8000.0, 0.25, 0.002, 0.01, 1.0

    def f(_t, y):
        N, P = y
        fr = a * N / (1 + a * h * N)
        return [r * N * (1 - N / K) - fr * P, e * fr * P - m * P]

    sol = solve_ivp(f, (0, 120), [4000.0, 10.0], rtol=1e-10, atol=1e-10,
                    dense_output=True, method="LSODA")
    t = np.linspace(80, 120, 80001)
    P = sol.sol(t)[1]
    peaks = t[1:-1][(P[1:-1] > P[:-2]) & (P[1:-1] > P[2:])]
    own = float(np.mean(np.diff(peaks)))
    def predators(s):
        s = np.asarray(s, dtype=float)
        return sol.sol(80.0 + s.ravel() * own / period)[1].reshape(s.shape)

    return predators, own


def series_frames(values: np.ndarray) -> list[np.ndarray]:
    """Snapshots (n, cells) as a list of 1 × cells frames."""
    return [v[None, :] for v in np.asarray(values)]


def old_rule(mean_a: np.ndarray, mean_b: np.ndarray) -> np.ndarray:
    """The rule this replaces: the time mean changes by more than 10 %."""
    return np.abs(mean_b - mean_a) > 0.1 * mean_a


@pytest.mark.parametrize("shape", ["sinusoid", "rosenzweig-macarthur"])
def test_half_period_shift_is_no_level_change(shape):
    # published case (the phase-shift case): two runs holding the same cycle,
    # half a period apart, have the same level; for windows of one to four periods and
    # every starting phase the new statistic marks nothing, while the old 10 % rule
    # raises false alarms
    period = 3.0
    if shape == "sinusoid":
        cycle = lambda s: 20.0 + 18.0 * np.sin(2 * np.pi * np.asarray(s) / period)  # noqa: E731
    else:
        cycle, _ = rm_cycle(period)
    starts = np.linspace(0.0, period, 24, endpoint=False)  # one cell per phase
    alarms = 0
    worst = 0.0
    for length in np.arange(period, 4 * period + 1e-9, period / 4):
        t = np.arange(STEP, length + 1e-9, STEP)
        a = cycle(t[:, None] + starts[None, :])
        b = cycle(t[:, None] + starts[None, :] + period / 2)
        sa = window_statistics(series_frames(a), presence=1.0)
        sb = window_statistics(series_frames(b), presence=1.0)
        lc = level_change(sa, sb, threshold=0.1, presence=1.0)
        assert np.all(lc.classes == 0), (shape, length)
        worst = max(worst, float(np.nanmax(np.abs(lc.difference) / (sa.margin + sb.margin))))
        alarms += int(old_rule(sa.mean, sb.mean).sum())
    assert worst < 0.8  # the documented bound: a shift moves the means by < 0.8 margin
    assert alarms > 0  # the old rule's false alarm, which must not come back


def test_predators_halved_south_in_the_first_four_years_are_found_there_and_then():
    # known answer: predators cycle everywhere (a Rosenzweig–MacArthur limit cycle with a
    # two-year period); in the alternative they are halved in the southern half during
    # years 0-4 only. In the 0-4 window exactly the southern cells are "fewer"; in the
    # 4-8 window nothing changes
    cycle, _ = rm_cycle(2.0)
    rows, cols = 8, 5
    t = np.arange(0.0, 8.0 + 1e-9, STEP)
    base = np.broadcast_to(cycle(t)[:, None, None], (t.size, rows, cols)).copy()
    alt = base.copy()
    south = np.zeros((rows, cols), bool)
    south[rows // 2:] = True
    alt[(t <= 4.0)[:, None, None] & south[None]] *= 0.5
    for years, expect in (((0.0, 4.0), south), ((4.0, 8.0), np.zeros_like(south))):
        w = window_of([t, t], years)
        sa = window_statistics([base[k] for k in w.indices[0]], presence=1.0)
        sb = window_statistics([alt[k] for k in w.indices[1]], presence=1.0)
        cls = level_change(sa, sb, threshold=0.1, presence=1.0).classes
        np.testing.assert_array_equal(cls == -1, expect)
        assert not np.any(cls > 0)


def test_gone_and_new_where_a_species_is_absent_in_one_run():
    # design requirement: losses to below presence are "gone" (−2), gains from below
    # presence "new" (2); no data is NO_DATA; both absent is no change
    a = np.array([[50.0, 0.1, 0.1, 50.0, np.nan]])
    b = np.array([[0.0, 40.0, 0.2, 50.0, np.nan]])
    mask = np.isfinite(a)
    sa = window_statistics([a, a], presence=1.0, mask=mask)
    sb = window_statistics([b, b], presence=1.0, mask=mask)
    cls = level_change(sa, sb, threshold=0.1, presence=1.0).classes
    assert cls.tolist() == [[-2, 2, 0, 0, NO_DATA]]


def test_margin_is_hursts_adjusted_range_over_n():
    # Hurst 1951 (Trans Am Soc Civ Eng 116:770): R = max - min of the cumulative sums of
    # departures from the mean, C_0 = 0 included; here divided by the number of snapshots
    rng = np.random.default_rng(3)
    u = rng.uniform(0, 100, (17, 3, 4))
    s = window_statistics(list(u), presence=10.0)
    c = np.concatenate([np.zeros((1, 3, 4)), np.cumsum(u - u.mean(0), axis=0)])
    np.testing.assert_allclose(s.margin, (c.max(0) - c.min(0)) / 17, rtol=1e-12)
    np.testing.assert_allclose(s.mean, u.mean(0), rtol=1e-12)
    np.testing.assert_array_equal(s.persistence, (u >= 10.0).mean(0))
    labels = np.zeros((3, 4), int)
    labels[:, 2:] = 1
    z = window_statistics(list(u), presence=10.0, zones=[labels]).zone_sums[0]
    np.testing.assert_allclose(z[:, 1], u[:, :, 2:].sum(axis=(1, 2)))


def fisher_wave(x: np.ndarray, t: float, shift: float = 0.0) -> np.ndarray:
    """Exact travelling wave of u_t = u_xx + u(1 − u) (Ablowitz & Zeppetella 1979,
    Bull Math Biol 41:835): u = (1 + e^{(x − ct)/√6})^−2, c = 5/√6 (r = D = K = 1)."""
    c = 5.0 / math.sqrt(6.0)
    return (1.0 + np.exp((x + shift - c * t) / math.sqrt(6.0))) ** -2


def test_front_held_back_by_a_distance_arrives_later_by_distance_over_speed():
    # published: the front of Fisher–KPP moves at c = 5/√6 for this exact wave (Ablowitz
    # & Zeppetella 1979); held back by d, it arrives everywhere d/c later. The delay map is
    # exactly the difference of the two arrival maps
    x = np.linspace(0.0, 30.0, 61)[None, :] * np.ones((3, 1))
    times = np.arange(0.0, 12.0 + 1e-9, 0.05)
    d = 4.0
    ta = arrival_time([fisher_wave(x, t) for t in times], times, 0.5)
    tb = arrival_time([fisher_wave(x, t, shift=d) for t in times], times, 0.5)
    out = arrival_delay(ta, tb, np.ones(x.shape, bool))
    both = out.status == 0
    np.testing.assert_array_equal(out.delay[both], (tb - ta)[both])
    assert both.sum() > 60
    c = 5.0 / math.sqrt(6.0)
    np.testing.assert_allclose(out.delay[both], d / c, rtol=0.01)
    # cells reached only in the run not held back: "arrives only without the measure"
    assert np.all(out.status[np.isfinite(ta) & ~np.isfinite(tb)] == 1)


def test_arrival_status_codes():
    ta = np.array([0.0, 1.0, 2.0, np.nan, np.nan, 0.5])
    tb = np.array([0.0, 1.5, np.nan, 3.0, np.nan, 0.0])
    mask = np.array([True, True, True, True, True, False])
    out = arrival_delay(ta, tb, mask)
    assert out.status.tolist() == [3, 0, 1, 2, 4, NO_DATA]
    assert out.delay[1] == 0.5 and np.isnan(out.delay[[0, 2, 3, 4, 5]]).all()


def test_window_uses_common_times_after_the_start():
    ta = np.arange(0.0, 8.01, 0.25)
    tb = np.arange(0.0, 4.01, 0.125)  # shorter and finer
    w = window_of([ta, tb], None)
    assert not w.same_times
    np.testing.assert_allclose(w.times, np.arange(0.25, 4.01, 0.25))
    assert w.end == 4.0 and w.upto[0] == 0.0
    np.testing.assert_allclose(ta[list(w.indices[0])], tb[list(w.indices[1])])
    w2 = window_of([ta, ta], (2.0, 3.0))
    np.testing.assert_allclose(w2.times, [2.0, 2.25, 2.5, 2.75, 3.0])
    with pytest.raises(ValueError, match="no common snapshot lies in years 5–6"):
        window_of([ta, tb], (5.0, 6.0))


def test_first_crossing_interpolates():
    assert first_crossing([0, 1, 2], [0.0, 0.25, 0.75], 0.5) == pytest.approx(1.5)
    assert first_crossing([0, 1], [0.6, 0.7], 0.5) == 0.0
    assert math.isnan(first_crossing([0, 1], [0.1, 0.2], 0.5))


def test_window_statistics_stream_the_snapshots(tmp_path):
    # Design requirement (DEVELOPERS.md, "memory O(grid) regardless of run length"): both
    # passes read the snapshots from the file one at a time, so 40 snapshots hold no more
    # memory than 10 beyond the zone totals (keeping them would add 30 grids).
    from conftest import STREAM_SHAPE, stream_peaks

    from preyscape.store import frames

    grid_bytes = 8 * STREAM_SHAPE[0] * STREAM_SHAPE[1]
    zones = np.where(np.arange(STREAM_SHAPE[1])[None, :] < 60, 0, 1) + np.zeros(
        STREAM_SHAPE, int)
    peaks, results = stream_peaks(tmp_path, lambda ds: window_statistics(
        lambda: (u for _, u in frames(ds, "predator")), presence=1.0, zones=[zones]))
    assert results[40].snapshots == 40 and results[40].zone_sums[0].shape == (40, 2)
    assert np.nanmax(results[40].margin) > 0
    assert peaks[40] < 1.5 * peaks[10]
    assert peaks[40] - peaks[10] < 3 * grid_bytes
