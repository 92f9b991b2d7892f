"""End to end: ``preyscape demo`` runs, compares and reports the bundled Veldrun Moor.

This is the one slow test module (the demo runs four 8-year variants on a
400 x 400 grid, about two minutes): the demo is run once, through
``preyscape.cli.main``, and every test reads its output. ``check`` on the
three-fence scenario (no runs) is tested here too, as it belongs to the bundled
landscapes.
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
    assert f"comparison baseline → fence, corridor: {out / 'compare'}" in text
    assert f"report: {out / 'report.html'}" in text
    assert "Traceback" not in demo["stderr"]


def test_demo_writes_runs_comparisons_and_report(demo):
    out = demo["out"]
    for name in VARIANTS:
        assert (out / name / "results.nc").is_file() and (out / name / "run.json").is_file()
        assert json.loads((out / name / "run.json").read_text())["variant"] == name
    folder = out / "compare"
    for f in ("ranking.csv", "zones.csv", "sides.csv", "fences.csv", "totals.png",
              "fence/predator_level_change.png", "fence/predator_arrival_delay.png",
              "corridor/predator_level_change.png"):
        assert (folder / f).is_file() and (folder / f).stat().st_size > 0, f
    with open(folder / "zones.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["species"] for r in rows} == {"prey", "predator"}
    assert {r["zone"] for r in rows} >= {"open grassland", "forest"}  # classes by name
    with open(folder / "ranking.csv", newline="") as fh:
        assert [r["alternative"] for r in csv.DictReader(fh)] == ["fence", "corridor"]
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



def level_classes(out, alternative: str, sp: str) -> np.ndarray:
    import rasterio

    with rasterio.open(out / "compare" / alternative / f"{sp}_level_change.tif") as src:
        return src.read(1)


def test_demo_fence_no_longer_marks_almost_the_whole_landscape(demo):
    # design requirement (issue 10): the old rule (time mean changed by more than 10 %)
    # marked nearly every cell; the level change marks the side the weasels cannot
    # reach (gone), and no more than half of the reserve
    out = demo["out"]
    with np.load(out / "fence" / "measures" / "eastfield-fence_faces.npz") as z:
        fx, fy = z["between_columns"], z["between_rows"]
    with xr.open_dataset(out / "baseline" / "results.nc", decode_times=False) as ds:
        grid = grid_of(ds)
        base = ds["predator"].values[1:].mean(axis=0)
    with xr.open_dataset(out / "fence" / "results.nc", decode_times=False) as ds:
        alt = ds["predator"].values[1:].mean(axis=0)
    release = demo_scenario().start.releases[0]
    labels = sides_of_fence(grid.mask, fx, fy)
    east = grid.mask & (labels != labels[grid.rowcol(release.x, release.y)])
    old = grid.mask & (np.abs(alt - base) > 0.1 * base)
    assert old.sum() > 0.6 * grid.mask.sum()  # the old false alarm, for the record
    for sp in ("prey", "predator"):
        cls = level_classes(out, "fence", sp)
        changed = grid.mask & (cls != 0)
        assert changed.sum() < 0.5 * grid.mask.sum(), sp
    gone = level_classes(out, "fence", "predator") == -2
    assert np.array_equal(gone, east)  # weasels gone exactly where they cannot get


def test_demo_corridor_changes_predators_along_the_rides(demo):
    # the redesigned corridor: more weasels on more than 1 km², on and beside the rides
    out = demo["out"]
    cls = level_classes(out, "corridor", "predator")
    area = 0.025 ** 2
    assert (cls > 0).sum() * area > 1.0
    import rasterio
    from scipy.ndimage import distance_transform_edt

    with rasterio.open(out / "corridor" / "measures" / "forest-rides.tif") as src:
        rides = src.read(1) == 1
    near = distance_transform_edt(~rides) * 25.0 <= 200.0  # metres
    assert ((cls > 0) & near).sum() >= 0.9 * (cls > 0).sum()


def test_report_answers_first_with_the_ranking(demo):
    doc = (demo["out"] / "report.html").read_text(encoding="utf-8")
    assert "Ranking of the alternatives" in doc
    assert html.escape("Change: baseline → fence") in doc


def test_check_of_three_fence_alignments_names_the_leaky_one():
    # the bundled planning example (docs/planning.md): one of three alignments ends short
    # of the southern rim, and check says where the weasels get round it
    from preyscape.demo import landscapes_dir

    status, stdout, _ = run_main(["check", str(landscapes_dir() / "veldrun_moor_fences.toml")])
    assert status == 0
    lines = [ln for ln in stdout.splitlines() if ln.startswith("WARNING")]
    assert len(lines) == 1
    assert "Fence 'eastfield short' is meant to stop predators (least weasel)" in lines[0]
    assert "from the landscape edge" in lines[0]
    assert sum("separates the landscape into" in ln for ln in stdout.splitlines()) == 2


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
