"""Tests for the preyscape command line (preyscape.cli.main)."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from conftest import DX, NODATA_CELLS, SHAPE, X0, Y0, habitat_array, make_landscape, write_habitat
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
    import preyscape.pipeline as pipeline

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
