"""Tests for the preyscape command line (preyscape.cli.main)."""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import (
    DELETE,
    DX,
    NODATA_CELLS,
    SHAPE,
    X0,
    Y0,
    habitat_array,
    make_landscape,
    write_habitat,
)
from rasterio.crs import CRS

from preyscape.cli import main
from preyscape.landscape.grid import Grid


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    """One ``preyscape run`` (with maps) shared by the tests of this module."""
    folder = tmp_path_factory.mktemp("cli")
    scenario = make_landscape(folder)
    out = folder / "runs" / "first"
    status = main(["run", str(scenario), "--out", str(out), "--quiet"])
    return {"status": status, "scenario": scenario, "out": out}


def assert_one_clean_error(capsys, status: int, scenario: Path, *needles: str) -> str:
    """Exit status 2, one message on stderr naming the scenario, no traceback."""
    cap = capsys.readouterr()
    assert status == 2
    assert cap.err.count("preyscape: error:") == 1
    assert cap.err.startswith("preyscape: error:")
    assert "Traceback" not in cap.err
    assert str(scenario) in cap.err
    for n in needles:
        assert n in cap.err
    return cap.err


def assert_no_run_folder(out: Path) -> None:
    assert not out.exists()
    assert list(out.parent.glob(f".{out.name}.partial-*")) == []


def test_check_prints_summary(scenario_path, capsys):
    assert main(["check", str(scenario_path)]) == 0
    text = capsys.readouterr().out
    assert f"{SHAPE[0]} rows x {SHAPE[1]} cols" in text
    assert "cell 100 x 100 m" in text
    for needle in ("time step", "front speed", "critical patch", "memory"):
        assert needle in text
    assert "2.72 km/yr" in text  # Fisher 1937: 2 sqrt(3.7 * 0.5) = 2.7203 km/yr


def test_check_prints_growth_per_class_and_the_landscape_prediction(write_scenario, tmp_path,
                                                                     capsys):
    # A farmed landscape: open ground on the western 30 % of the columns, cropland (prey
    # capacity x 0.3 = 300 per km², below the predators' break-even N* = 500) on the rest.
    # Holling 1959; Rosenzweig & MacArthur 1963, worked by hand: predators grow at
    # e a K/(1 + a h K) - m = 2.5/1.5 - 1 = 0.667 /yr on open ground and
    # 0.75/1.15 - 1 = -0.348 /yr on cropland, a sink over 70 % of the map.
    hab = np.ones(SHAPE, np.uint8)
    hab[:, 9:] = 2
    write_habitat(tmp_path / "farmed.tif", hab)
    path = write_scenario({"landscape.habitat": "farmed.tif",
                           "landscape.classes.1.name": "cropland",
                           "landscape.classes.1.prey_capacity": 0.3}, name="farmed.toml")
    assert main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    lines = text.splitlines()
    crop = next(ln for ln in lines if ln.strip().startswith("cropland"))
    assert "70.0 %" in crop and "-0.348 sink" in crop and "+3.7 source" in crop
    ground = next(ln for ln in lines if ln.strip().startswith("open ground"))
    assert "30.0 %" in ground and "+0.667 source" in ground
    assert "sink share          prey 0.0 %, predator 70.0 % of the landscape" in text
    flat = " ".join(text.split())
    assert "Predators can spread only through a minority of the map" in flat
    # the landscape's own speed beside the best-habitat one: <r> = 0.3 * 0.667 + 0.7 *
    # (-0.348) < 0, so in words, not "0 km/yr" (Shigesada & Kawasaki 1997)
    assert "predator landscape no invasion expected" in flat
    assert not re.search(r"(?<![\d.])0 km/yr", text)
    # Dunbar 1983: 2 sqrt(D_P (e a K/(1 + a h K) - m)) = 2 sqrt(2 * 0.667) = 2.309 km/yr
    assert "predator front      2.309 km/yr into prey at capacity (Dunbar 1983" in text
    # predators that cannot grow even in the best habitat: words instead of a speed
    path = write_scenario({"predator.mortality": 5.0}, name="starving.toml")
    assert main(["check", str(path)]) == 0
    flat = " ".join(capsys.readouterr().out.split())
    assert "predator front none: predators cannot invade or persist" in flat
    assert "predator landscape no front: predators cannot grow in any habitat class" in flat
    # Lotka-Volterra prey have no capacity: the predators' speed is undefined, in words
    # (theory.predator_speed used to raise TypeError on K = None)
    path = write_scenario({"interaction.form": "lotka-volterra",
                           "interaction.handling_time": DELETE, "prey.capacity": DELETE,
                           "start.prey": "uniform", "start.prey_density": 100.0},
                          name="lv.toml")
    assert main(["check", str(path)]) == 0
    flat = " ".join(capsys.readouterr().out.split())
    assert "predator front not defined: prey without a carrying capacity" in flat
    assert "sink share prey 0.0 %, predator n/a of the landscape" in flat


def test_check_json(scenario_path, capsys):
    assert main(["check", str(scenario_path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["grid"]["rows"] == SHAPE[0] and d["grid"]["cols"] == SHAPE[1]
    assert d["snapshots"] == 3


def test_run_creates_run_folder(first_run):
    assert first_run["status"] == 0
    out = first_run["out"]
    assert (out / "results.nc").is_file()
    assert (out / "summary" / "prey_mean.tif").is_file()
    assert (out / "run.json").is_file()
    pngs = sorted(p.name for p in (out / "maps").glob("*.png"))
    assert "habitat.png" in pngs and "prey_mean.png" in pngs
    assert all((out / "maps" / p).stat().st_size > 0 for p in pngs)
    assert list(out.parent.glob(".first.partial-*")) == []


def test_run_again_refused_and_first_folder_untouched(first_run, capsys):
    out = first_run["out"]
    record = out / "run.json"
    before = (record.stat().st_mtime_ns, record.read_bytes(),
              sorted(p.name for p in out.rglob("*")))
    capsys.readouterr()
    status = main(["run", str(first_run["scenario"]), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert status == 2
    assert "--overwrite" in err
    assert "Traceback" not in err
    after = (record.stat().st_mtime_ns, record.read_bytes(),
             sorted(p.name for p in out.rglob("*")))
    assert after == before
    assert list(out.parent.glob(".first.partial-*")) == []


def test_overwrite_replaces_run_folder(scenario_path, tmp_path, capsys):
    out = tmp_path / "runs" / "again"
    out.mkdir(parents=True)
    (out / "stale.txt").write_text("from an older run")
    status = main(["run", str(scenario_path), "--out", str(out), "--quiet", "--overwrite"])
    assert status == 0, capsys.readouterr().err
    assert not (out / "stale.txt").exists()
    assert (out / "results.nc").is_file() and (out / "run.json").is_file()
    assert list(out.parent.glob(".again.partial-*")) == []


def test_run_without_quiet_prints_summary(scenario_path, tmp_path, capsys, monkeypatch):
    import preyscape.runfolder as pipeline

    real = pipeline.simulate
    monkeypatch.setattr(pipeline, "simulate",
                        lambda *a, **k: real(*a, **{**k, "maps": False}))  # keep it fast
    out = tmp_path / "loud"
    assert main(["run", str(scenario_path), "--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert f"run folder: {out}" in text
    assert "steps of" in text


# --- bad inputs: exit status 2, one message, no traceback, no run folder -------------
def run_bad(tmp_path: Path, scenario: Path) -> tuple[int, Path]:
    out = tmp_path / "runs" / "bad"
    return main(["run", str(scenario), "--out", str(out), "--quiet"]), out


def test_misspelt_key(write_scenario, tmp_path, capsys):
    from conftest import DELETE

    path = write_scenario({"prey.growth": DELETE, "prey.grwoth": 3.7}, name="typo.toml")
    status, out = run_bad(tmp_path, path)
    assert_one_clean_error(capsys, status, path, "prey.grwoth", "did you mean 'growth'")
    assert_no_run_folder(out)


def test_negative_rate(write_scenario, tmp_path, capsys):
    path = write_scenario({"predator.mortality": -0.5}, name="negative.toml")
    status, out = run_bad(tmp_path, path)
    assert_one_clean_error(capsys, status, path, "predator.mortality")
    assert_no_run_folder(out)


def test_missing_raster(write_scenario, tmp_path, capsys):
    path = write_scenario({"landscape.habitat": "gone.tif"}, name="noraster.toml")
    status, out = run_bad(tmp_path, path)
    assert_one_clean_error(capsys, status, path, "landscape.habitat", "gone.tif")
    assert_no_run_folder(out)


def test_raster_in_degree_crs(write_scenario, tmp_path, capsys):
    grid = Grid(SHAPE, 14.0, 50.0, 0.001, 0.001, crs_wkt=CRS.from_epsg(4326).to_wkt())
    write_habitat(tmp_path / "degrees.tif", habitat_array(), grid)
    path = write_scenario({"landscape.habitat": "degrees.tif"}, name="degrees.toml")
    status, out = run_bad(tmp_path, path)
    err = assert_one_clean_error(capsys, status, path, "landscape.habitat", "degree")
    assert "EPSG:4326" in err
    assert_no_run_folder(out)


def test_release_outside_landscape(write_scenario, tmp_path, capsys):
    path = write_scenario({"start.releases.0.x": X0 - 5 * DX}, name="outside.toml")
    status, out = run_bad(tmp_path, path)
    assert_one_clean_error(capsys, status, path, "start.releases[0]", "outside")
    assert_no_run_folder(out)


def test_habitat_code_absent_from_class_table(write_scenario, tmp_path, capsys):
    hab = habitat_array()
    hab[20:22, 3:6] = 7  # six cells of a code the class table lacks
    write_habitat(tmp_path / "seven.tif", hab)
    path = write_scenario({"landscape.habitat": "seven.tif"}, name="code7.toml")
    status, out = run_bad(tmp_path, path)
    err = assert_one_clean_error(capsys, status, path, "landscape.classes", "code 7")
    assert "6 cells" in err
    assert_no_run_folder(out)


def test_check_reports_bad_input_the_same_way(write_scenario, capsys):
    path = write_scenario({"start.releases.0.y": Y0 + 1000.0}, name="north.toml")
    status = main(["check", str(path)])
    assert_one_clean_error(capsys, status, path, "start.releases[0]")


def test_missing_scenario_file(tmp_path, capsys):
    path = tmp_path / "nowhere.toml"
    status, out = run_bad(tmp_path, path)
    assert_one_clean_error(capsys, status, path)
    assert_no_run_folder(out)


def test_nodata_cells_in_fixture():
    # the bad-input tests above rely on the release cell having data
    assert all(habitat_array()[r, c] == 0 for r, c in NODATA_CELLS)
    assert np.count_nonzero(habitat_array()) == SHAPE[0] * SHAPE[1] - len(NODATA_CELLS)


def test_module_help_in_subprocess():
    proc = subprocess.run([sys.executable, "-m", "preyscape", "--help"],
                          capture_output=True, text=True, timeout=60)
    assert proc.returncode == 0, proc.stderr
    assert "run" in proc.stdout and "check" in proc.stdout and "demo" in proc.stdout


def test_interrupted_run_leaves_no_folder(scenario_path, tmp_path, capsys, monkeypatch):
    import preyscape.solve.run as solve_run

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(solve_run, "integrate_epochs", interrupted)
    out = tmp_path / "runs" / "stopped"
    status = main(["run", str(scenario_path), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert status == 130  # 128 + SIGINT, the shell convention
    assert "interrupted" in err and "Traceback" not in err
    assert_no_run_folder(out)


# ---------------------------------------------------------------------------
# variants and the analysis commands
# ---------------------------------------------------------------------------
REFUGE_BOX = (3, 9, 2, 8)  # rows 3..8, cols 2..7: 36 cells of 100 m, all with data
FENCE_COL = 15  # the fence runs along the face line between columns 14 and 15


def write_variant_scenario(folder: Path) -> Path:
    """The base landscape with a refuge (baseline), a predator fence and two variants."""
    from conftest import BASE, apply_overrides, to_toml
    from test_runfolder import box, face_line, geojson

    make_landscape(folder)
    geojson(folder / "refuge.geojson", box(*REFUGE_BOX))
    geojson(folder / "fence.geojson", face_line(FENCE_COL))
    over = {
        "measures": [
            {"name": "fen refuge", "kind": "refuge", "geometry": "refuge.geojson",
             "protected_fraction": 0.7},
            {"name": "predator fence", "kind": "fence", "geometry": "fence.geojson",
             "permeability": {"prey": 1.0, "predator": 0.0}, "baseline": False},
        ],
        "variants": [{"name": "fenced", "add": ["predator fence"]},
                     {"name": "no-refuge", "remove": ["fen refuge"]}],
    }
    path = folder / "variants.toml"
    path.write_text(to_toml(apply_overrides(BASE, over)))
    return path


@pytest.fixture(scope="module")
def variant_runs(tmp_path_factory):
    """One ``preyscape run`` of a scenario with variants, shared by the tests below."""
    folder = tmp_path_factory.mktemp("cli_variants")
    scenario = write_variant_scenario(folder)
    out = folder / "runs"
    status = main(["run", str(scenario), "--out", str(out), "--quiet"])
    return {"status": status, "scenario": scenario, "out": out, "folder": folder}


def test_run_with_variants_creates_one_folder_per_variant(variant_runs):
    assert variant_runs["status"] == 0
    out = variant_runs["out"]
    assert sorted(p.name for p in out.iterdir()) == ["baseline", "fenced", "no-refuge"]
    for name in ("baseline", "fenced", "no-refuge"):
        info = json.loads((out / name / "run.json").read_text())
        assert info["variant"] == name
        assert (out / name / "results.nc").is_file()
    measures = {n: [m["name"] for m in json.loads((out / n / "run.json").read_text())
                    ["measures"]] for n in ("baseline", "fenced", "no-refuge")}
    assert measures == {"baseline": ["fen refuge"], "fenced": ["fen refuge", "predator fence"],
                        "no-refuge": []}


def test_run_variant_runs_only_the_named_one(variant_runs, tmp_path, capsys):
    out = tmp_path / "only"
    status = main(["run", str(variant_runs["scenario"]), "--out", str(out), "--variant",
                   "fenced"])
    text = capsys.readouterr().out
    assert status == 0
    assert [p.name for p in out.iterdir()] == ["fenced"]
    assert f"run folder: {out / 'fenced'}" in text
    assert "variant fenced; measures: fen refuge, predator fence" in text


def test_run_unknown_variant_suggests_the_nearest(variant_runs, tmp_path, capsys):
    out = tmp_path / "none"
    status = main(["run", str(variant_runs["scenario"]), "--out", str(out), "--variant",
                   "fencd", "--quiet"])
    assert_one_clean_error(capsys, status, variant_runs["scenario"], "no variant named 'fencd'",
                           "did you mean 'fenced'")
    assert not out.exists()


def test_check_prints_measures_and_variants(variant_runs, capsys):
    assert main(["check", str(variant_runs["scenario"])]) == 0
    text = capsys.readouterr().out
    # the baseline's measures: 36 cells of 0.01 km² (100 m cells)
    assert "measure             refuge 'fen refuge': 36 cells, 0.36 km²; years 0–end" in text
    # a measure only a variant adds is placed too, and says which variants use it
    assert "measure             fence 'predator fence': 24 cell faces (in variants fenced)" in text
    assert "variant             fenced: +predator fence" in text
    assert "variant             no-refuge: -fen refuge" in text
    # the fence's topology, checked before any run: edge to edge, it separates (15 columns
    # of 24 cells on either side, less the no-data cells)
    assert ("fence topology      fence 'predator fence' [fenced], stops predators: 2.4 km, "
            "24 faces; separates the landscape into 3.58 and 3.57 km²") in text
    # no fence warning (the test scenario's short run.years draws a plausibility warning)
    assert not [ln for ln in text.splitlines()
                if "WARNING" in ln and "run.years" not in ln and "WARNINGS" not in ln]


def test_check_warns_when_a_fence_can_be_walked_round(write_scenario, capsys):
    # design requirement (issue 10): a fence meant to stop predators that ends 300 m
    # short of the southern edge is named, with where and how wide the way round is
    from test_runfolder import geojson

    folder = write_scenario().parent
    x = X0 + FENCE_COL * DX
    geojson(folder / "short.geojson", {"type": "LineString",
                                       "coordinates": [[x, Y0 + 500.0], [x, Y0 - 2100.0]]})
    path = write_scenario({"measures": [
        {"name": "north spur", "kind": "fence", "geometry": "short.geojson",
         "permeability": {"prey": 1.0, "predator": 0.0}}]}, name="short.toml")
    assert main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    where = "x 501\u2009500 m, y 4\u2009997\u2009900 m"  # thin spaces between thousands
    assert f"does not separate the landscape; open end at {where} (way round 300 m)" in text
    warning = next(line for line in text.splitlines() if line.startswith("WARNING"))
    assert "Fence 'north spur' is meant to stop predators (weasel)" in warning
    assert "300 m from the landscape edge" in warning
    assert main(["check", str(path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    end = d["fence_topology"][0]["open_ends"][0]
    assert end["way_round_m"] == 300.0 and d["fence_topology"][0]["separates"] is False


def test_compare_writes_folder_and_prints_the_ranking(variant_runs, capsys):
    out = variant_runs["out"]
    a, b, c = out / "baseline", out / "fenced", out / "no-refuge"
    status = main(["compare", str(a), str(b), str(c), "--years", "0:0.5", "--goal",
                   "fewer-predators"])
    text = capsys.readouterr().out
    assert status == 0
    folder = out / "compare-baseline-fenced-no-refuge"  # the default: beside the first
    assert text.startswith("comparison of 2 alternatives with baseline, years 0–0.5")
    assert str(folder) in text.splitlines()[0]
    for f in ("ranking.csv", "zones.csv", "sides.csv", "fences.csv", "comparison.json",
              "fenced/predator_level_change.png", "no-refuge/prey_arrival_delay.tif"):
        assert (folder / f).is_file(), f
    rec = json.loads((folder / "comparison.json").read_text())
    assert [r["alternative"] for r in rec["ranking"]] == [
        line.split()[1] for line in text.splitlines()[3:5]]
    assert rec["settings"]["goal"] == "fewer-predators"


def test_compare_bad_years_is_one_clean_error(variant_runs, capsys):
    out = variant_runs["out"]
    status = main(["compare", str(out / "baseline"), str(out / "fenced"), "--years", "3-4"])
    cap = capsys.readouterr()
    assert status == 2 and cap.err.count("preyscape: error:") == 1
    assert "--years" in cap.err and "A:B" in cap.err and "Traceback" not in cap.err


def write_transects(path: Path) -> Path:
    """A GeoJSON line from the predator release east to the rim (EPSG:32633)."""
    from conftest import RELEASE_X, RELEASE_Y

    doc = {"type": "FeatureCollection",
           "crs": {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32633"}},
           "features": [{"type": "Feature", "properties": {"name": "east line"},
                         "geometry": {"type": "LineString", "coordinates": [
                             [RELEASE_X, RELEASE_Y + 30.0],
                             [X0 + SHAPE[1] * DX - 50.0, RELEASE_Y + 30.0]]}}]}
    path.write_text(json.dumps(doc))
    return path


def analysis_argv(command: str, runs: Path, out: Path | None, transects: Path) -> list[str]:
    base = runs / "baseline"
    argv = {"hotspots": ["hotspots", str(base)],
            "waves": ["waves", str(base), "--transects", str(transects)],
            "effects": ["effects", str(base)],
            "report": ["report", str(base), str(runs / "fenced"), "--no-animation"]}[command]
    return argv + ([] if out is None else ["--out", str(out)])


ANALYSES = ("hotspots", "waves", "effects", "report")


@pytest.mark.parametrize("command", ANALYSES)
def test_analysis_command_writes_its_output(variant_runs, command, tmp_path, capsys):
    runs = variant_runs["out"]
    transects = write_transects(tmp_path / "transects.geojson")
    out = tmp_path / ("report.html" if command == "report" else command)
    status = main(analysis_argv(command, runs, out, transects))
    cap = capsys.readouterr()
    assert status == 0, cap.err
    if command == "report":
        assert out.is_file() and out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
        assert f"report: {out}" in cap.out
        assert "Change: baseline → fenced" in out.read_text(encoding="utf-8")
        return
    names = {p.name for p in out.iterdir()}
    if command == "hotspots":
        assert "hotspots (distance band" in cap.out
        assert any(n.endswith(".tif") for n in names) and any(n.endswith(".png") for n in names)
    elif command == "waves":
        assert {"fronts.csv", "predator_arrival.tif"} <= names
        # a fitted front, or the sentence saying none crossed the line (half a year run)
        assert ("east line, predator: front" in cap.out
                or "east line, predator: no front crossed this transect" in cap.out)
        assert "east line" in (out / "fronts.csv").read_text()
    else:
        assert {"refuges.csv", "effects.json"} <= names
        # the run without the refuge is found beside the baseline
        assert f"compared with the run without refuges: {runs / 'no-refuge'}" in cap.out
        assert "refuge fen refuge: spill-over decay length" in cap.out
        rec = json.loads((out / "effects.json").read_text())
        assert rec["refuges"][0]["prey"]["inside_outside_without"] is not None


@pytest.mark.parametrize("command", ANALYSES + ("compare",))
def test_analysis_command_on_a_folder_that_is_not_a_run(variant_runs, command, tmp_path,
                                                       capsys):
    empty = tmp_path / "not-a-run"
    empty.mkdir()
    (empty / "notes.txt").write_text("no run here")
    if command == "compare":
        argv = ["compare", str(empty), str(variant_runs["out"] / "baseline")]
    else:
        argv = analysis_argv(command, tmp_path, None, tmp_path / "t.geojson")
        argv[1] = str(empty)
    status = main(argv)
    assert_one_clean_error(capsys, status, empty, "not a finished run folder")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["not-a-run"]


@pytest.mark.parametrize("command", ANALYSES + ("compare",))
def test_analysis_command_refuses_an_existing_out(variant_runs, command, tmp_path, capsys):
    runs = variant_runs["out"]
    transects = write_transects(tmp_path / "transects.geojson")
    out = tmp_path / ("report.html" if command == "report" else "existing")
    if command == "report":
        out.write_text("an older report")
    else:
        out.mkdir()
        (out / "keep.txt").write_text("an older result")
    if command == "compare":
        argv = ["compare", str(runs / "baseline"), str(runs / "fenced"), "--out", str(out)]
    else:
        argv = analysis_argv(command, runs, out, transects)
    status = main(argv)
    assert_one_clean_error(capsys, status, out, "--overwrite")
    if command == "report":
        assert out.read_text() == "an older report"
    else:
        assert [p.name for p in out.iterdir()] == ["keep.txt"]
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_check_json_is_standard_json_with_null(write_scenario, capsys):
    # design requirement: NaN and Infinity are not JSON; an equilibrium that does not
    # exist (predators cannot persist: mortality above their gain at capacity) is null
    path = write_scenario({"predator.mortality": 50.0})
    assert main(["check", str(path), "--json"]) == 0

    def refuse(token):
        raise AssertionError(f"non-standard JSON token {token}")

    d = json.loads(capsys.readouterr().out, parse_constant=refuse)
    assert None in d["equilibrium"]


def test_sigterm_ends_a_command_like_ctrl_c(scenario_path, tmp_path, capsys, monkeypatch):
    # design requirement: SIGTERM gives a message and exit status 143 (128 + 15)
    import os
    import signal

    import preyscape.runfolder as rf

    def stopped(*args, **kwargs):
        os.kill(os.getpid(), signal.SIGTERM)
        return real(*args, **kwargs)

    real = rf.prepare
    monkeypatch.setattr(rf, "prepare", stopped)
    out = tmp_path / "runs" / "stopped"
    status = main(["run", str(scenario_path), "--out", str(out), "--quiet"])
    err = capsys.readouterr().err
    assert status == 143 and err.startswith("preyscape: interrupted (SIGTERM): ")
    assert "Traceback" not in err and not (tmp_path / "runs").exists()
    assert signal.getsignal(signal.SIGTERM) is signal.SIG_DFL  # restored afterwards


def test_effects_with_nothing_to_measure_says_so(variant_runs, tmp_path, capsys):
    # design requirement (issue 16): an analysis with nothing to measure says so and why;
    # it is not an error (exit status 0), and its folder holds the record with the reason
    out = tmp_path / "effects"
    status = main(["effects", str(variant_runs["out"] / "no-refuge"), "--out", str(out)])
    cap = capsys.readouterr()
    assert status == 0, cap.err
    assert "Nothing to measure: this run has no refuge" in cap.out
    assert "no target patch" in cap.out and "no transect" in cap.out
    rec = json.loads((out / "effects.json").read_text())
    assert rec["note"].startswith("Nothing to measure")
    assert sorted(p.name for p in out.iterdir()) == ["effects.json"]


# ---------------------------------------------------------------------------
# check: start totals, warnings, prey alone, species that cannot invade (issue 12)
# ---------------------------------------------------------------------------
def test_check_prints_start_totals_and_releases(scenario_path, capsys):
    assert main(["check", str(scenario_path)]) == 0
    text = capsys.readouterr().out
    # 21 cells of 0.01 km² at 10 per km² (conftest's release, counted in test_assemble)
    assert "start totals        prey 5720 animals, predator 2.1 animals" in text
    assert "released            start.releases[0]: 2.1 animals (predator) in 21 cells" in text


@pytest.mark.parametrize("overrides,needle", [
    # the slips: metres typed for kilometres
    ({"predator.diffusivity": 15_000_000.0},
     "WARNING predator.diffusivity = 1.5e+07 km²/yr: far above the usual range"),
    ({"start.releases.0.radius": 0.5},
     "WARNING start.releases[0].radius = 0.5 m: smaller than a cell (100 m)"),
])
def test_check_warns_about_unit_slips_naming_the_key(write_scenario, capsys, overrides,
                                                     needle):
    assert main(["check", str(write_scenario(overrides))]) == 0  # a warning, not an error
    text = capsys.readouterr().out
    assert needle in text
    assert "WARNINGS  " in text and "the scenario is valid and runs" in text


def test_check_json_holds_start_and_warnings(write_scenario, capsys):
    path = write_scenario({"start.releases.0.radius": 0.5})
    assert main(["check", str(path), "--json"]) == 0
    d = json.loads(capsys.readouterr().out)
    assert d["start"]["releases"][0]["cells"] == 1
    keys = [w["key"] for w in d["warnings"]]
    assert "start.releases[0].radius" in keys and "start.releases[0].density" in keys
    w = d["warnings"][keys.index("start.releases[0].radius")]
    assert w["value"] == 0.5 and w["unit"] == "m"


def test_check_of_prey_alone_prints_no_predator_numbers(write_scenario, capsys):
    path = write_scenario({"predator": DELETE, "interaction": DELETE,
                           "start.releases.0.species": "prey"})
    assert main(["check", str(path)]) == 0
    text = capsys.readouterr().out
    assert text.count("no predator in this scenario") == 1
    for absent in ("predator front", "equilibrium", "Hopf", "local period", "m = ",
                   "predator (prey at K)", "nan", "n/a"):
        assert absent not in text, absent
    assert "prey front speed    2.72 km/yr" in text
    # capacity plus 2.1 prey released
    assert "start totals        prey 5722 animals (in 715 cells with data)" in text


def test_check_says_in_words_when_a_species_cannot_invade(write_scenario, capsys):
    # predators gain e a K / (1 + a h K) = 1.667/yr at prey capacity: with m = 2 they decline
    assert main(["check", str(write_scenario({"predator.mortality": 2.0}))]) == 0
    text = capsys.readouterr().out
    assert "predator front      none: predators cannot invade or persist" in text
    assert "0 km/yr" not in text
    assert main(["check", str(write_scenario({"prey.growth": 0.0}, name="r0.toml"))]) == 0
    text = capsys.readouterr().out
    assert "prey front speed    none: prey do not grow (prey.growth = 0)" in text
    assert "critical patch      prey: none" in text and "0 km/yr" not in text


def test_run_summary_prints_totals_and_no_predator(write_scenario, tmp_path, capsys):
    path = write_scenario({"predator": DELETE, "interaction": DELETE,
                           "start.releases.0.species": "prey"})
    assert main(["run", str(path), "--out", str(tmp_path / "r")]) == 0
    text = capsys.readouterr().out
    assert "prey: 5722 animals at the start" in text and "at the end (t = 0.5 yr)" in text
    assert "no predator in this scenario" in text and "predator:" not in text


@pytest.fixture(scope="module")
def prey_alone_runs(tmp_path_factory):
    """A scenario of prey alone (refuge, target, transect, a variant), run once."""
    from conftest import BASE, RELEASE_X, RELEASE_Y, apply_overrides, to_toml
    from test_runfolder import box, geojson

    folder = tmp_path_factory.mktemp("cli_prey_alone")
    make_landscape(folder)
    geojson(folder / "refuge.geojson", box(*REFUGE_BOX))
    over = {
        "predator": DELETE, "interaction": DELETE,
        "start.prey": "uniform", "start.prey_density": 0.0,
        "start.releases.0.species": "prey", "start.releases.0.density": 1000.0,
        "prey.extinction_threshold": 0.5,
        "measures": [{"name": "fen refuge", "kind": "refuge", "geometry": "refuge.geojson",
                      "protected_fraction": 0.7}],
        "variants": [{"name": "faster", "set": {"prey.diffusivity": 1.0}}],
        "analysis": {"transects": [{"name": "east line", "points": [
            [RELEASE_X, RELEASE_Y + 30.0], [X0 + SHAPE[1] * DX - 50.0, RELEASE_Y + 30.0]]}],
            "targets": [{"name": "fen", "geometry": "refuge.geojson"}]},
    }
    path = folder / "prey.toml"
    path.write_text(to_toml(apply_overrides(BASE, over)))
    out = folder / "runs"
    assert main(["run", str(path), "--out", str(out), "--quiet"]) == 0
    return out


@pytest.mark.parametrize("command", ("hotspots", "waves", "effects", "compare"))
def test_analyses_of_prey_alone_say_so_once_and_write_no_predator_files(
        prey_alone_runs, command, tmp_path, capsys):
    base, other = prey_alone_runs / "baseline", prey_alone_runs / "faster"
    out = tmp_path / command
    argv = ([command, str(base), str(other)] if command == "compare" else [command, str(base)])
    assert main(argv + ["--out", str(out)]) == 0
    text = capsys.readouterr().out
    assert text.count("no predator in this scenario") == 1
    files = [p.name for p in out.iterdir()]
    assert files and not [f for f in files if "predator" in f]
    for f in out.glob("*.csv"):
        assert "predator" not in f.read_text()
    for f in out.glob("*.json"):
        assert "predator" not in f.read_text()


def test_report_of_prey_alone_says_so_once(prey_alone_runs, tmp_path):
    out = tmp_path / "report.html"
    assert main(["report", str(prey_alone_runs / "baseline"), str(prey_alone_runs / "faster"),
                 "--out", str(out), "--no-animation"]) == 0
    html = out.read_text(encoding="utf-8")
    assert html.count("no predator in this scenario") == 1
    for absent in ("predator arrival", "density of predator", "predators colonised",
                   "Predators from start", "predators invading", "None /yr"):
        assert absent not in html, absent
    assert "prey colonised (year)" in html  # the target table keeps its prey column
    # the extinction threshold is shown with what it removed (run.json records both)
    assert "extinction threshold 0.5 per km² (0.005 per cell)" in html
    assert "animals removed over the run" in html


# ---------------------------------------------------------------------------
# the exercises of docs/students.md
# ---------------------------------------------------------------------------
STUDENTS = Path(__file__).resolve().parents[1] / "docs" / "students.md"


def student_commands() -> list[list[str]]:
    """Every ``preyscape ...`` line of the shell blocks of docs/students.md, split."""
    import shlex

    out, inside = [], False
    for line in STUDENTS.read_text(encoding="utf-8").splitlines():
        if line.startswith("```"):
            inside = line.strip() == "```sh"
        elif inside and line.startswith("preyscape "):
            out.append(shlex.split(line)[1:])
    return out


def test_every_command_of_the_student_page_parses():
    from preyscape.cli import _parser

    cmds = student_commands()
    assert len(cmds) >= 20
    assert {c[0] for c in cmds} >= {"landscape", "starter", "check", "run", "waves", "report"}
    for argv in cmds:
        args = _parser(argv).parse_args(argv)  # argparse exits on an unknown option
        assert callable(args.handler)


def _set_years(path: Path, years: float, save_every: float) -> None:
    text = path.read_text()
    text = text.replace("years = 6.0", f"years = {years}")
    text = text.replace("save_every = 0.125", f"save_every = {save_every}")
    path.write_text(text)


def test_student_exercises_run_fast_version(tmp_path, capsys, monkeypatch):
    # The three exercises of docs/students.md on small maps and short runs: the same
    # commands and options, smaller --rows/--cols and years, one landscape in the third.
    monkeypatch.chdir(tmp_path)
    from preyscape import runfolder

    # the first two exercises read numbers, not maps (maps are tested elsewhere): skip them
    monkeypatch.setattr(runfolder, "draw_run_maps", lambda *a, **k: [])
    ok = [main(a) for a in (
        ["landscape", "make", "random", "square8.tif", "--rows", "8", "--cols", "8",
         "--classes", "1"],
        ["starter", "square8.tif", "--prey-only", "--edge", "hostile"])]
    _set_years(tmp_path / "square8.toml", 1.0, 0.25)
    capsys.readouterr()
    ok.append(main(["check", "square8.toml"]))
    text = capsys.readouterr().out
    # Skellam 1951: pi sqrt(2 D / r) = pi sqrt(2 x 0.5 / 4) = 1.571 km; a 0.4 km square is
    # far below it, so check warns that prey cannot persist
    assert "square side 1.571 km" in text and "WARNING landscape.edge = 'hostile'" in text
    ok.append(main(["run", "square8.toml"]))
    assert "at the end (t = 1 yr)" in capsys.readouterr().out
    info = json.loads((tmp_path / "runs" / "square8" / "run.json").read_text())
    tot = info["totals_animals"]["prey"]
    assert tot["end"] < 0.01 * tot["start"]
    ok += [main(a) for a in (
        ["landscape", "make", "random", "strip.tif", "--rows", "3", "--cols", "120",
         "--classes", "1"],
        ["starter", "strip.tif", "--prey-only"])]
    _set_years(tmp_path / "strip.toml", 2.0, 0.125)
    ok += [main(["run", "strip.toml"]), main(["waves", "runs/strip"])]
    assert "best-habitat bound 2.828 km/yr" in capsys.readouterr().out  # Fisher 1937
    monkeypatch.undo()  # the third exercise ends with the report, which shows the maps
    monkeypatch.chdir(tmp_path)
    ok += [main(["landscape", "make", "fractal", "clumped.tif", "--hurst", "0.9", "--rows",
                 "30", "--cols", "30", "--habitat", "0.4", "--seed", "7"]),
           main(["starter", "clumped.tif"])]
    path = tmp_path / "clumped.toml"
    text = path.read_text()
    i = text.index("predator_mortality = 1.0", text.index('name = "matrix"'))
    path.write_text(text[:i] + "predator_mortality = 4.0" + text[i + 24:])
    _set_years(path, 0.5, 0.125)
    ok += [main(["run", "clumped.toml"]), main(["report", "runs/clumped", "--no-animation"])]
    assert ok == [0] * len(ok)
    assert (tmp_path / "runs" / "clumped" / "report.html").is_file()
