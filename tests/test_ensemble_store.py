"""Tests for preyscape.ensemble.store: the zarr member store."""

from __future__ import annotations

import numpy as np
import pytest

from preyscape.ensemble.design import Parameter, plan_design
from preyscape.ensemble.members import MAPS, MemberFailure, MemberResult
from preyscape.ensemble.store import MemberStore, open_members
from preyscape.errors import FileProblem
from preyscape.landscape.grid import Grid
from preyscape.store import grid_of

GRID = Grid((2, 3), 500_000.0, 5_000_200.0, 100.0, 100.0, "",
            np.array([[True, True, True], [True, False, True]]))
TIMES = np.array([0.0, 0.5, 1.0])


def result(variant: str, m: int, value: float) -> MemberResult:
    maps = {f"{sp}_{k}": np.full(GRID.shape, value + j, dtype=np.float32)
            for j, sp in enumerate(("prey", "predator"))
            for k in MAPS}
    totals = {sp: np.array([1.0, 2.0, 3.0]) * value for sp in ("prey", "predator")}
    return MemberResult(variant, m, maps, totals, 0.01, 0.1)


def make(path, members=4):
    d = plan_design([Parameter("prey.growth", "uniform", 1.0, 2.0)], members=members,
                    design="latin-hypercube", seed=1)
    return MemberStore.create(path, grid=GRID, variants=["baseline", "alt"], design=d,
                              times=TIMES, attrs={"plan": "abc", "presence": 1.0}), d


def test_new_store_holds_the_design_and_no_member(tmp_path):
    st, d = make(tmp_path / "m.zarr")
    assert st.todo() == [(v, m) for v in ("baseline", "alt") for m in range(4)]
    ds = open_members(tmp_path / "m.zarr")
    np.testing.assert_array_equal(ds["value"].values, d.values)
    assert [int(s) for s in ds["seed"].values] == list(d.seeds)
    assert list(ds["parameter"].values) == ["prey.growth"]
    assert list(ds["variant"].values) == ["baseline", "alt"]
    np.testing.assert_array_equal(ds["time"].values, TIMES)
    assert (ds["status"].values == 0).all() and np.isnan(ds["prey_mean"].values).all()
    g = grid_of(ds)  # the run-folder grid reader reads the store's grid too
    assert g.shape == GRID.shape and g.x0 == GRID.x0 and g.y0 == GRID.y0
    np.testing.assert_array_equal(g.mask, GRID.mask)
    assert not list(tmp_path.glob(".m.zarr.partial-*"))


def test_members_are_written_in_their_own_places_and_read_lazily(tmp_path):
    import dask.array as da

    st, _ = make(tmp_path / "m.zarr")
    st.write(result("alt", 2, 5.0))
    st.fail(MemberFailure("baseline", 1, "ValueError: no"))
    assert ("alt", 2) not in st.todo() and ("baseline", 1) not in st.todo()
    ds = open_members(tmp_path / "m.zarr")
    assert isinstance(ds["prey_mean"].data, da.Array)  # lazy, one chunk per member
    assert ds["prey_mean"].data.chunksize == (1, 1, 2, 3)
    assert ds["status"].values.tolist() == [[0, 2, 0, 0], [0, 0, 1, 0]]
    np.testing.assert_array_equal(ds["predator_final"].sel(variant="alt", member=2).values,
                                  np.full(GRID.shape, 6.0, dtype=np.float32))
    np.testing.assert_array_equal(ds["prey_total"].sel(variant="alt", member=2).values,
                                  [5.0, 10.0, 15.0])
    assert np.isnan(ds["prey_mean"].sel(variant="alt", member=1).values).all()
    assert MemberStore.open(tmp_path / "m.zarr").todo() == st.todo()


def test_status_is_written_last(tmp_path, monkeypatch):
    # design requirement: a member interrupted while its chunks are written has no status,
    # so readers skip it and a rerun writes it again
    st, _ = make(tmp_path / "m.zarr")
    order = []
    real = st._g.__class__.__getitem__

    def spy(self, name):
        order.append(name)
        return real(self, name)

    monkeypatch.setattr(st._g.__class__, "__getitem__", spy)
    st.write(result("baseline", 0, 1.0))
    assert order[-1] == "status" and order.count("status") == 1
    assert len(order) == 10 + 2 + 2  # ten maps, two totals, the step, then the status


def test_open_refuses_what_is_not_a_store(tmp_path):
    with pytest.raises(FileProblem, match="not a member store"):
        open_members(tmp_path)
    with pytest.raises(FileProblem, match="not a member store"):
        MemberStore.open(tmp_path / "none.zarr")


def test_a_store_without_the_timing_margin_is_refused(tmp_path):
    # design requirement: a store written before the timing margin cannot be continued
    # (its members would lack the maps the change rule needs); the message says what to do
    import zarr

    make(tmp_path / "m.zarr")
    g = zarr.open_group(tmp_path / "m.zarr", mode="r+", zarr_format=3)
    for sp in ("prey", "predator"):
        del g[f"{sp}_margin"]
    with pytest.raises(FileProblem, match="prey_margin, predator_margin.*--overwrite"):
        MemberStore.open(tmp_path / "m.zarr")
