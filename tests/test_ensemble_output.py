"""Tests for preyscape.ensemble.output (and its figures): the summary folder and the
report's uncertainty section."""

from __future__ import annotations

import csv

import numpy as np
import pytest
import rasterio
from ensemble_cases import ensemble_scenario
from PIL import Image

from preyscape.ensemble.engine import run_ensemble
from preyscape.ensemble.output import open_ensemble, write_summaries
from preyscape.ensemble.store import open_members
from preyscape.ensemble.summaries import NO_DATA, summarise
from preyscape.errors import FileProblem


@pytest.fixture(scope="module")
def ensemble(tmp_path_factory):
    folder = tmp_path_factory.mktemp("output")
    scenario = ensemble_scenario(folder / "s", members=6)
    run = run_ensemble(scenario, folder / "e", in_process=True, progress=False)
    return {"folder": folder, "scenario": scenario, "run": run}


def test_every_file_is_named_with_its_role(ensemble):
    out = ensemble["run"].summary
    names = {f.name for f in out.files}
    for sp in ("prey", "predator"):
        for stem in (f"persistence_baseline_{sp}", f"persistence_fenced_{sp}",
                     f"gain_fenced_{sp}", f"loss_fenced_{sp}", f"robust_fenced_{sp}"):
            assert {f"{stem}.tif", f"{stem}.png"} <= names
    assert {"ranking.csv", "ranking.png", "outcomes.csv", "prcc.csv", "prcc.png"} <= names
    assert sorted(p.name for p in out.folder.iterdir()) == sorted(names | {"summary.json"})
    for f in out.files:
        if f.name.endswith(".png"):
            with Image.open(out.path(f)) as im:
                assert im.size[0] > 300 and im.size[1] > 150


def test_rasters_hold_the_summaries(ensemble):
    out = ensemble["run"].summary
    ds = open_members(ensemble["run"].folder / "members.zarr")
    s = summarise(ds, presence=1.0, threshold=0.1, agreement=0.9)
    with rasterio.open(out.folder / "persistence_fenced_predator.tif") as r:
        np.testing.assert_array_equal(r.read(1), s.persistence[("fenced", "predator")])
        assert r.crs is not None and r.descriptions[0].startswith("Probability of persistence")
    with rasterio.open(out.folder / "robust_fenced_prey.tif") as r:
        assert r.nodata == NO_DATA and r.dtypes[0] == "int8"
        np.testing.assert_array_equal(r.read(1), s.robust[("fenced", "prey")])
    with rasterio.open(out.folder / "gain_fenced_predator.tif") as r:
        g = r.read(1)
        ok = np.isfinite(g)
        assert ((g[ok] >= 0) & (g[ok] <= 1)).all()
        # gains are counted in steps of one member pair out of six
        np.testing.assert_allclose(g[ok] * 6, np.round(g[ok] * 6), atol=1e-5)


def test_tables(ensemble):
    out = ensemble["run"].summary
    with open(out.folder / "ranking.csv") as fh:
        (row,) = list(csv.DictReader(fh))
    assert row["alternative"] == "fenced" and row["pairs"] == "6"
    lo, med, hi = (float(row[f"prey_total_change_{k}"]) for k in ("low", "median", "high"))
    assert lo <= med <= hi
    with open(out.folder / "prcc.csv") as fh:
        rows = list(csv.DictReader(fh))
    keys = {r["parameter"] for r in rows}
    assert keys == {"predator.mortality", "prey.growth",
                    "measures.predator fence.permeability.predator"}
    assert {r["variant"] for r in rows} == {"baseline", "fenced"}
    # the fence is not in the baseline: its permeability cannot matter there
    growth = [r for r in rows if r["variant"] == "baseline" and r["outcome"] == "prey_total"
              and r["parameter"] == "prey.growth"]
    assert float(growth[0]["prcc"]) > 0.5  # faster growth, more prey (Fisher 1937 logic)
    with open(out.folder / "outcomes.csv") as fh:
        assert len(list(csv.DictReader(fh))) == 12  # six members, two variants


def test_open_ensemble_reads_the_record_back(ensemble):
    out = ensemble["run"].summary
    again = open_ensemble(ensemble["run"].folder)
    assert again.files == out.files and again.ranking == out.ranking
    places = [p.place for p in again.report_parts()]
    assert places == ["answer", "detail", "detail", "method"]
    assert any("fenced" in h and "landscape total" in h for h in again.headlines())
    lines = again.summary_lines()
    assert "6 members per variant" in lines[1] and "fenced: prey total" in lines[2]
    with pytest.raises(FileProblem, match="no ensemble summary"):
        open_ensemble(ensemble["folder"])


def test_summaries_can_be_rewritten_without_maps(ensemble, tmp_path):
    import shutil

    copy = tmp_path / "e"
    shutil.copytree(ensemble["run"].folder, copy)
    out = write_summaries(copy, threshold=0.1, agreement=0.6, maps=False)
    assert not list(out.folder.glob("*.png"))
    assert out.record["agreement"] == 0.6
    assert not list(tmp_path.glob(".summary.partial-*"))


def test_report_gains_the_uncertainty_section(ensemble, tmp_path, capsys):
    from preyscape.cli import main
    from preyscape.runfolder import simulate

    run = simulate(ensemble["scenario"], tmp_path / "run", maps=True, progress=False)
    status = main(["report", str(run), "--out", str(tmp_path / "r.html"), "--no-animation",
                   "--ensemble", str(ensemble["run"].folder)])
    assert status == 0
    html = (tmp_path / "r.html").read_text(encoding="utf-8")
    for needle in ("Uncertainty: how sure each answer is", "Uncertainty: which parameters "
                   "matter", "Marino", "Saltelli", "Robust change", "A model is not a field "
                   "survey"):
        assert needle in html
