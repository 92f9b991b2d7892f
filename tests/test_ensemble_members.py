"""Tests for preyscape.ensemble.members: derived setups, one member's run and summaries."""

from __future__ import annotations

import numpy as np
import pytest
from conftest import X0
from ensemble_cases import ensemble_scenario

from preyscape.assemble import prepare
from preyscape.ensemble import members
from preyscape.ensemble.members import (
    MemberFailure,
    MemberResult,
    ScratchProblem,
    derive_setup,
    prepare_variant,
    run_member,
)
from preyscape.scenario import load_scenario

THR = {"prey": 1.0, "predator": 1.0}


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    path = ensemble_scenario(tmp_path_factory.mktemp("members"))
    text = path.read_text()
    path.write_text(text.replace('[start]\nprey = "capacity"\n',
                                 '[start]\nprey = "capacity"\nnoise = 0.05\n'))
    sc = load_scenario(path)
    assert sc.start.noise == 0.05  # every member redraws its start with its own seed
    return sc


def assert_same_setup(a, b):
    for f in ("K", "r", "inv_K", "m", "prey_move", "predator_move"):
        assert np.array_equal(getattr(a.fields, f), getattr(b.fields, f)), f
    for mv in ("prey_movement", "predator_movement"):
        assert np.array_equal(getattr(a, mv).cx, getattr(b, mv).cx)
        assert np.array_equal(getattr(a, mv).cy, getattr(b, mv).cy)
    assert (a.refuge is None) == (b.refuge is None)
    if a.refuge is not None:
        assert np.array_equal(a.refuge, b.refuge)
    assert np.array_equal(a.N0, b.N0) and np.array_equal(a.P0, b.P0)
    assert a.dt == b.dt and a.epochs == b.epochs


@pytest.mark.parametrize("key,value", [
    ("interaction.attack_rate", 0.31),
    ("prey.growth", 2.2),
    ("prey.capacity", 700.0),
    ("predator.mortality", 1.3),
    ("prey.diffusivity", 0.9),
    ("landscape.classes.2.predator_movement", 3.0),
    ("measures.predator fence.permeability.predator", 0.25),
    ("measures.fen refuge.protected_fraction", 0.4),
    ("start.releases.0.density", 25.0),
])
def test_derived_setup_equals_a_fresh_prepare(scenario, key, value):
    # design requirement: rebuilding only what a key changes gives exactly the setup that
    # preyscape.assemble.prepare builds from scratch for the member's scenario
    sc = scenario.for_variant("fenced")
    land = prepare_variant(sc, [key], presence=1.0, thresholds=THR)
    member = sc.with_values({key: value, "run.seed": 1234})
    derived = derive_setup(land, member)
    assert_same_setup(derived, prepare(member))
    if key.startswith("interaction"):  # nothing per cell was rebuilt
        assert derived.prey_movement is land.setup.prey_movement
        assert derived.fields is land.setup.fields
    if key in ("prey.growth", "predator.mortality"):  # fields only; operators shared
        assert derived.predator_movement is land.setup.predator_movement


def test_the_shared_landscape_is_never_changed(scenario):
    sc = scenario.with_values({"start.noise": 0.0})  # no redrawn start: N0 is shared
    land = prepare_variant(sc, ["interaction.attack_rate"], presence=1.0, thresholds=THR)
    assert "start" not in land.rebuilds
    N0, P0 = land.setup.N0.copy(), land.setup.P0.copy()
    a = run_member(land, 0, {"interaction.attack_rate": 0.3}, 7, threads=1)
    b = run_member(land, 0, {"interaction.attack_rate": 0.3}, 7, threads=1)
    assert np.array_equal(land.setup.N0, N0) and np.array_equal(land.setup.P0, P0)
    assert np.array_equal(a.maps["prey_mean"], b.maps["prey_mean"], equal_nan=True)


def test_member_summaries_equal_those_of_a_run_folder(scenario, tmp_path):
    # design requirement: a member's summaries use the run folder's definitions (snapshots
    # after the start, float32 snapshots, presence at or above the threshold); checked
    # against simulate() and the one reader of run folders. The timing margin is that of
    # the run comparison (analysis.change.window_statistics, Hurst 1951, Trans Am Soc Civ
    # Eng 116:770) over the same snapshots
    from preyscape.analysis.change import window_statistics
    from preyscape.analysis.results import cell_statistics, open_run
    from preyscape.runfolder import simulate

    sc = scenario.for_variant("fenced")
    values = {"predator.mortality": 0.9, "prey.growth": 3.0,
              "measures.predator fence.permeability.predator": 0.1}
    land = prepare_variant(sc, list(values), presence=1.0, thresholds=THR)
    res = run_member(land, 2, values, 4321, threads=1)
    assert isinstance(res, MemberResult)
    folder = simulate(sc.with_values({**values, "run.seed": 4321}), tmp_path / "run",
                      maps=False, progress=False)
    run = open_run(folder)
    try:
        for sp in ("prey", "predator"):
            st = cell_statistics(run.ds, sp, 1.0)
            np.testing.assert_array_equal(res.maps[f"{sp}_mean"], st.mean)
            np.testing.assert_array_equal(res.maps[f"{sp}_persistence"], st.persistence)
            ws = window_statistics(lambda sp=sp: (u for _, u in run.frames(sp)),
                                   presence=1.0, mask=run.mask)
            assert ws.snapshots == run.ds.sizes["time"] - 1  # the snapshots after the start
            np.testing.assert_array_equal(res.maps[f"{sp}_margin"],
                                          ws.margin.astype(np.float32))
            assert np.nanmax(res.maps[f"{sp}_margin"]) > 0  # a margin that could fail
            np.testing.assert_array_equal(res.totals[sp], run.ds[f"{sp}_total"].values)
            last = run.ds[sp].isel(time=-1).values
            np.testing.assert_array_equal(np.nan_to_num(res.maps[f"{sp}_final"]),
                                          np.nan_to_num(last))
    finally:
        run.close()


def test_arrival_times_are_first_snapshots_at_the_threshold(scenario):
    land = prepare_variant(scenario, ["predator.mortality"], presence=1.0, thresholds=THR)
    res = run_member(land, 0, {"predator.mortality": 1.0}, 1, threads=1)
    arr = res.maps["predator_arrival"]
    # the release disc holds 10 predators per km² at the start: arrival 0 there
    assert np.nanmin(arr) == 0.0
    ok = np.isfinite(arr)
    assert set(np.unique(arr[ok])) <= {0.0, 0.25, 0.5}  # snapshot times, years
    assert np.all(np.isnan(res.maps["prey_arrival"]) | (res.maps["prey_arrival"] == 0.0))


def test_a_member_failing_on_its_values_returns_the_reason(scenario):
    # a release moved east of the landscape (which ends 3000 m east of X0) cannot be placed
    land = prepare_variant(scenario, ["start.releases.0.x"], presence=1.0, thresholds=THR)
    bad = run_member(land, 3, {"start.releases.0.x": X0 + 3500.0}, 1, threads=1)
    assert isinstance(bad, MemberFailure)
    assert bad.index == 3 and bad.variant == "baseline"
    assert "InputError" in bad.message and "outside the landscape" in bad.message
    good = run_member(land, 4, {"start.releases.0.x": X0 + 1500.0}, 1, threads=1)
    assert isinstance(good, MemberResult)


def test_snapshot_files_are_removed_however_the_member_ends(scenario, tmp_path, monkeypatch):
    # design requirement: the snapshots kept for the timing margin's second pass live in a
    # temporary folder that is removed after a member that ran, failed on its values, or
    # could not write them (that one is raised: it is not the member's fault)
    scratch = tmp_path / "scratch"
    scratch.mkdir()
    seen = []
    real = members.SummarySink.__init__

    def spy(self, *args, **kw):
        real(self, *args, **kw)
        seen.append(sorted(p.name for p in self.files.values()))
        assert all(p.parent.parent == scratch and p.is_file() for p in self.files.values())

    monkeypatch.setattr(members, "_scratch_folder", lambda: str(scratch))
    monkeypatch.setattr(members.SummarySink, "__init__", spy)
    land = prepare_variant(scenario, ["start.releases.0.x"], presence=1.0, thresholds=THR)
    good = run_member(land, 0, {"start.releases.0.x": X0 + 1500.0}, 1, threads=1)
    assert isinstance(good, MemberResult) and good.maps["prey_margin"].dtype == np.float32
    assert seen == [["predator_snapshots.npy", "prey_snapshots.npy"]]
    assert not list(scratch.iterdir())
    bad = run_member(land, 1, {"start.releases.0.x": X0 + 3500.0}, 1, threads=1)
    assert isinstance(bad, MemberFailure) and not list(scratch.iterdir())

    def full(path, mode="r", *args, **kw):
        if mode == "ab":
            raise OSError(28, "No space left on device")
        return open(path, mode, *args, **kw)

    monkeypatch.setattr(members, "open", full, raising=False)
    with pytest.raises(ScratchProblem, match="No space left on device") as err:
        run_member(land, 2, {"start.releases.0.x": X0 + 1500.0}, 1, threads=1)
    assert "snapshots.npy" in str(err.value) and not list(scratch.iterdir())
