"""Tests for preyscape.ensemble.summaries: change classes, probabilities, robust change, ranking."""

from __future__ import annotations

import numpy as np
import pytest

from preyscape.ensemble.design import Parameter, plan_design
from preyscape.ensemble.members import MemberFailure, MemberResult
from preyscape.ensemble.store import MemberStore, open_members
from preyscape.ensemble.summaries import NO_DATA, classify_change, ranking, summarise
from preyscape.landscape.grid import Grid

MASK = np.array([[True, True, True, True, False]])
GRID = Grid((1, 5), 0.0, 100.0, 100.0, 100.0, "", MASK)  # cells of 0.01 km²
AREA = 0.01


def test_classification_keeps_the_comparison_rules():
    # the same rules as preyscape.analysis.compare.change_classes (a change beyond the
    # threshold relative to A; appearing where A is absent), with the direction added
    from preyscape.analysis.compare import change_classes

    rng = np.random.default_rng(0)
    a = rng.choice([0.0, 0.5, 5.0, 50.0], size=(30, 30)) * rng.uniform(0.5, 1.5, (30, 30))
    b = a * rng.uniform(0.7, 1.3, a.shape) + rng.choice([0.0, 3.0], size=a.shape)
    a[0, 0] = np.nan
    cls = classify_change(a, b, threshold=0.1, presence=1.0)
    ref = change_classes(a, b, a, a, threshold=0.1, presence=1.0)
    assert cls[0, 0] == NO_DATA and ref[0, 0] == -1
    ok = ref >= 0
    np.testing.assert_array_equal(cls[ok] != 0, (ref[ok] & 1) == 1)
    with np.errstate(invalid="ignore"):
        assert (cls[(b > a) & ok & (cls != 0)] == 1).all()
        assert (cls[(b < a) & ok & (cls != 0)] == -1).all()


def test_classification_edges():
    a = np.array([10.0, 10.0, 10.0, 0.5, 0.5, 10.0])
    b = np.array([11.0, 11.01, 0.0, 0.9, 1.0, np.inf])
    # exactly 10 % is not a change; a species that disappears is a loss; 0.9 < presence
    assert classify_change(a, b, threshold=0.1, presence=1.0).tolist() == [
        0, 1, -1, 0, 1, NO_DATA]
    with pytest.raises(ValueError, match="presence"):
        classify_change(a, b, threshold=0.1, presence=0.0)


def _result(variant, m, prey_mean, prey_final, totals):
    maps = {}
    for sp in ("prey", "predator"):
        maps[f"{sp}_mean"] = np.asarray(prey_mean, np.float32)[None, :]
        maps[f"{sp}_final"] = np.asarray(prey_final, np.float32)[None, :]
        maps[f"{sp}_persistence"] = np.ones((1, 5), np.float32)
        maps[f"{sp}_arrival"] = np.zeros((1, 5), np.float32)
    return MemberResult(variant, m, maps, {sp: np.asarray(totals, float)
                                           for sp in ("prey", "predator")}, 0.1, 0.0)


@pytest.fixture
def store(tmp_path):
    d = plan_design([Parameter("prey.growth", "uniform", 1.0, 2.0)], members=5,
                    design="latin-hypercube", seed=1)
    st = MemberStore.create(tmp_path / "m.zarr", grid=GRID, variants=["baseline", "alt"],
                            design=d, times=np.array([0.0, 1.0, 2.0]),
                            attrs={"plan": "x", "presence": 1.0})
    base = [10.0, 10.0, 0.0, 10.0, np.nan]
    alts = [  # member m of the alternative: cell 0 gains in 4 of 4 pairs, cell 1 loses in 3
        [20.0, 5.0, 0.0, 10.0, np.nan],
        [20.0, 5.0, 2.0, 10.0, np.nan],
        [20.0, 5.0, 0.0, 10.0, np.nan],
        [20.0, 10.0, 0.0, 10.0, np.nan],
        [0.0, 0.0, 0.0, 0.0, np.nan],  # member 4 fails in the baseline: no pair
    ]
    for m in range(5):
        if m == 4:
            st.fail(MemberFailure("baseline", 4, "InputError: bad"))
        else:
            st.write(_result("baseline", m, base, [2.0, 0.0, 0.0, 2.0, np.nan],
                             [0.0, 100.0, 100.0]))
        st.write(_result("alt", m, alts[m], [2.0, 2.0 if m < 2 else 0.0, 0.0, 0.0, np.nan],
                         [0.0, 100.0 + 10 * m, 100.0 + 30 * m]))
    return open_members(tmp_path / "m.zarr")


def test_probabilities_count_member_pairs(store):
    s = summarise(store, presence=1.0, threshold=0.1, agreement=0.75)
    assert s.stored == {"baseline": 4, "alt": 5} and s.pairs == {"alt": 4}
    np.testing.assert_allclose(s.persistence[("baseline", "prey")][0, :4], [1, 0, 0, 1])
    np.testing.assert_allclose(s.persistence[("alt", "prey")][0, :4], [1, 0.4, 0, 0])
    assert np.isnan(s.persistence[("alt", "prey")][0, 4])
    np.testing.assert_allclose(s.gain[("alt", "prey")][0, :4], [1.0, 0.0, 0.25, 0.0])
    np.testing.assert_allclose(s.loss[("alt", "prey")][0, :4], [0.0, 0.75, 0.0, 0.0])
    assert s.robust[("alt", "prey")].tolist() == [[1, -1, 0, 0, NO_DATA]]
    strict = summarise(store, presence=1.0, threshold=0.1, agreement=0.9)
    assert strict.robust[("alt", "prey")].tolist() == [[1, 0, 0, 0, NO_DATA]]


def test_ranking_columns_and_intervals(store):
    s = summarise(store, presence=1.0, threshold=0.1, agreement=0.75)
    ch = [s.changes[("alt", m)] for m in range(4)]
    # time-mean total over the snapshots after the start: baseline 100, alt 100 + 20 m
    np.testing.assert_allclose([c["prey_total_change"] for c in ch], [0.0, 0.2, 0.4, 0.6])
    assert [c["prey_area_gained_km2"] for c in ch] == pytest.approx([AREA, 2 * AREA, AREA,
                                                                     AREA])
    assert [c["prey_area_lost_km2"] for c in ch] == pytest.approx([AREA, AREA, AREA, 0.0])
    assert [c["prey_occupied_change_km2"] for c in ch] == pytest.approx(
        [0.0, 0.0, -AREA, -AREA])
    (row,) = ranking(s)
    vals = np.array([0.0, 0.2, 0.4, 0.6])
    # reference library: numpy.quantile (linear interpolation between order statistics)
    assert row["prey_total_change_median"] == pytest.approx(np.quantile(vals, 0.5))
    assert row["prey_total_change_low"] == pytest.approx(np.quantile(vals, 0.05))
    assert row["prey_total_change_high"] == pytest.approx(np.quantile(vals, 0.95))
    assert row["rank_median"] == 1 and row["share_best"] == 1.0 and row["pairs"] == 4
    with pytest.raises(ValueError, match="rank_by"):
        ranking(s, rank_by="nonsense")


def test_ranking_orders_alternatives_member_by_member():
    from preyscape.ensemble.summaries import Summaries

    changes = {}
    for m in range(10):
        changes[("a", m)] = {f"{sp}_{c}": 0.0 for sp in ("prey", "predator") for c in
                             ("total_change", "area_gained_km2", "area_lost_km2",
                              "occupied_change_km2")}
        changes[("b", m)] = dict(changes[("a", m)])
        changes[("a", m)]["prey_total_change"] = 0.1 * m
        changes[("b", m)]["prey_total_change"] = 0.35
    s = Summaries({}, {}, {}, {}, {}, {"a": 10, "b": 10}, {}, changes, 0.9)
    rows = {r["alternative"]: r for r in ranking(s)}
    assert rows["a"]["share_best"] == pytest.approx(0.6)  # members 4..9 beat 0.35
    assert rows["b"]["share_best"] == pytest.approx(0.4)
    assert [r["alternative"] for r in ranking(s)] == ["a", "b"]  # median rank 1 vs 2
