"""End to end: ``preyscape demo`` runs, compares and reports the bundled Veldrun Moor.

This is the one slow test module (the demo runs four 8-year variants on a
400 x 400 grid, about a minute and a half): the demo is run once, through
``preyscape.cli.main``, and every test reads its output.
"""

from __future__ import annotations

import contextlib
import csv
import html
import io
import json

import numpy as np
import pytest
import xarray as xr

from preyscape.cli import main
from preyscape.demo import demo_scenario
from preyscape.store import grid_of

VARIANTS = ("baseline", "fence", "corridor", "no-refuge")


def run_main(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main(argv)
    return status, out.getvalue(), err.getvalue()


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> dict:
    out = tmp_path_factory.mktemp("demo") / "moor"
    status, stdout, stderr = run_main(["demo", "--out", str(out)])
    return {"out": out, "status": status, "stdout": stdout, "stderr": stderr}


def sides_of_fence(mask: np.ndarray, faces_x: np.ndarray, faces_y: np.ndarray) -> np.ndarray:
    """Connected components (4-neighbour) of the data cells with the fence faces removed.

    ``faces_x`` (rows, cols+1): face ``k`` separates columns ``k-1`` and ``k``;
    ``faces_y`` (rows+1, cols): face ``k`` separates rows ``k-1`` and ``k``. Returns a
    label per cell, -1 off the data mask.
    """
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    ny, nx = mask.shape
    idx = np.arange(ny * nx).reshape(ny, nx)
    across = mask[:, :-1] & mask[:, 1:] & ~faces_x[:, 1:-1]
    down = mask[:-1, :] & mask[1:, :] & ~faces_y[1:-1, :]
    a = np.concatenate([idx[:, :-1][across], idx[:-1, :][down]])
    b = np.concatenate([idx[:, 1:][across], idx[1:, :][down]])
    graph = coo_matrix((np.ones(a.size), (a, b)), shape=(ny * nx, ny * nx))
    _, labels = connected_components(graph, directed=False)
    return np.where(mask, labels.reshape(ny, nx), -1)


def test_demo_exits_0_and_prints_its_folders(demo):
    assert demo["status"] == 0, demo["stderr"]
    out = demo["out"]
    text = demo["stdout"]
    for name in VARIANTS:
        assert f"run folder: {out / name}" in text
    assert f"comparison baseline → fence: {out / 'compare-fence'}" in text
    assert f"report: {out / 'report.html'}" in text
    assert "Traceback" not in demo["stderr"]


def test_demo_writes_runs_comparisons_and_report(demo):
    out = demo["out"]
    for name in VARIANTS:
        assert (out / name / "results.nc").is_file() and (out / name / "run.json").is_file()
        assert json.loads((out / name / "run.json").read_text())["variant"] == name
    for name in ("fence", "corridor"):
        folder = out / f"compare-{name}"
        for f in ("change.tif", "change.png", "zones.csv"):
            assert (folder / f).is_file() and (folder / f).stat().st_size > 0, f
        with open(folder / "zones.csv", newline="") as fh:
            rows = list(csv.DictReader(fh))
        assert {r["species"] for r in rows} == {"prey", "predator"}
    assert (out / "report.html").is_file()
    # no temporary folders left behind (runs, comparisons and the report's work folder)
    assert not [p.name for p in out.iterdir() if p.name.startswith(".")]
    assert not [p.name for p in out.parent.iterdir() if p.name.startswith(".")]


def test_complete_predator_fence_keeps_released_predators_on_their_side(demo):
    # design requirement (issue 3): a complete predator-proof fence keeps released
    # predators on their side: their density beyond it is exactly 0 at every snapshot
    out = demo["out"]
    with np.load(out / "fence" / "measures" / "eastfield-fence_faces.npz") as z:
        fx, fy = z["between_columns"], z["between_rows"]
    release = demo_scenario().start.releases[0]
    beyond = {}
    for name in ("fence", "baseline"):
        with xr.open_dataset(out / name / "results.nc", decode_times=False) as ds:
            grid = grid_of(ds)
            labels = sides_of_fence(grid.mask, fx, fy)
            home = labels[grid.rowcol(release.x, release.y)]
            far = grid.mask & (labels != home)
            assert far.sum() > 0.2 * grid.mask.sum()  # the fence closes off a large area
            P = ds["predator"]
            beyond[name] = [float(np.asarray(P.isel(time=k).values)[far].max())
                            for k in range(P.shape[0])]
            if name == "fence":
                home_end = float(np.nansum(np.asarray(P.isel(time=-1).values)[labels == home]))
    assert len(beyond["fence"]) == 65
    assert all(v == 0.0 for v in beyond["fence"])
    assert home_end > 0  # the predators live on, on their side
    assert max(beyond["baseline"]) > 1.0  # without the fence they do get there


def test_report_mentions_predator_front_speed_and_the_refuge(demo):
    out = demo["out"]
    doc = (out / "report.html").read_text(encoding="utf-8")
    speed = json.loads((out / "baseline" / "run.json").read_text())["predictions"][
        "predator_front_speed"]
    assert f"predators into prey at capacity {speed:.4g} km/yr" in doc
    assert "fen refuge" in doc
    assert html.escape("fen refuge: decay length of the spill-over") in doc


def test_demo_again_without_overwrite_is_refused(demo):
    out = demo["out"]
    before = sorted(p.name for p in out.iterdir())
    status, stdout, stderr = run_main(["demo", "--out", str(out)])
    assert status == 2
    assert stderr.count("preyscape: error:") == 1 and stderr.startswith("preyscape: error:")
    assert "Traceback" not in stderr
    assert str(out) in stderr and "--overwrite" in stderr
    assert stdout == ""
    assert sorted(p.name for p in out.iterdir()) == before



def test_demo_hotspots_single_out_a_minority_and_hardly_move_with_the_band(demo, tmp_path):
    # design requirement (issue 16): on the demo, plain Gi* with the FDR marks almost the
    # whole landscape; with the effect-size floor the hotspots cover a minority of it, and
    # halving or doubling the distance band changes them little (share within 5 points,
    # most cells shared: Jaccard overlap above 0.6)
    from preyscape.analysis.hotspots_output import write_hotspots

    out = write_hotspots(demo["out"] / "baseline", tmp_path / "hotspots")
    for sp, d in out.species.items():
        assert 0 < d.hot_share_of_landscape < 0.25, sp
        assert d.significant_hot_cells > 3 * d.hot_cells, sp
        assert d.places and d.places[0].ratio > 1.2, sp
        assert [b.band_m for b in d.bands] == [250.0, 1000.0]
        for b in d.bands:
            assert abs(b.share - d.hot_share_of_landscape) < 0.05, (sp, b)
            assert b.overlap > 0.6, (sp, b)


def test_demo_report_opens_with_the_summary_and_stays_small(demo):
    # design requirement (issue 16): summary first, under 5 MB with its alternatives
    path = demo["out"] / "report.html"
    doc = path.read_text(encoding="utf-8")
    assert doc.index('id="summary"') < doc.index('id="alternatives"') \
        < doc.index('id="cautions"') < doc.index('id="maps"') < doc.index('id="model"')
    assert path.stat().st_size < 5_000_000
