"""The landscape and starter commands (cli/landscape.py), through preyscape.cli.main."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine
from conftest import X0, Y0, habitat_array, write_habitat

from preyscape.cli import main
from preyscape.errors import InputError
from preyscape.landscape.io import read_habitat


def one_clean_error(capsys, status: int, *needles: str) -> str:
    """Exit status 2, one message on stderr, no traceback."""
    err = capsys.readouterr().err
    assert status == 2
    assert err.count("preyscape: error:") == 1 and "Traceback" not in err
    for n in needles:
        assert n in err
    return err


def write_tif(path: Path, array: np.ndarray, crs: str | None, transform: Affine,
              nodata=None) -> Path:
    with rasterio.open(path, "w", driver="GTiff", width=array.shape[1], height=array.shape[0],
                       count=1, dtype=array.dtype.name, crs=crs, transform=transform,
                       nodata=nodata) as ds:
        ds.write(array, 1)
    return path


# --- make and metrics --------------------------------------------------------------------
def test_make_writes_raster_and_metrics_and_prints_them(tmp_path, capsys):
    out = tmp_path / "m.tif"
    assert main(["landscape", "make", "fractal", str(out), "--rows", "40", "--cols", "50",
                 "--cell-size", "20", "--seed", "3", "--hurst", "0.8", "--habitat", "0.3"]) == 0
    text = capsys.readouterr().out
    assert "habitat" in text and "patches" in text and "preyscape starter" in text
    grid, cl = read_habitat(out, "classes")
    assert (cl == 1).sum() == 600  # exactly 30 % of 2000 cells
    m = json.loads((tmp_path / "m.metrics.json").read_text())
    assert m["classes"][0]["cells"] == 600 and m["grid"]["crs"] == "EPSG:3035"
    with rasterio.open(out) as ds:
        assert "--hurst 0.8" in ds.tags()["PREYSCAPE_COMMAND"]


def test_make_with_classes_crs_and_corner(tmp_path, capsys):
    out = tmp_path / "c.tif"
    assert main(["landscape", "make", "clusters", str(out), "--rows", "20", "--cols", "30",
                 "--classes", "0.2,0.3,0.5", "--crs", "EPSG:32633", "--corner", "500000,5000000",
                 "--marked", "0.5"]) == 0
    grid, cl = read_habitat(out, "classes")
    assert [(cl == k).sum() for k in (1, 2, 3)] == [120, 180, 300]
    assert (grid.x0, grid.y0) == (500_000.0, 5_000_000.0 + 20 * 50.0)


@pytest.mark.parametrize("argv, needle", [
    (["--classes", "0.2,0.3"], "add up to 1"),
    (["--classes", "a,b"], "--classes"),
    (["--habitat", "1.5"], "--habitat"),
    (["--crs", "EPSG:4326"], "projected CRS in metres"),
    (["--corner", "1;2"], "--corner"),
])
def test_make_refuses_bad_options(tmp_path, capsys, argv, needle):
    status = main(["landscape", "make", "random", str(tmp_path / "x.tif"), "--rows", "10",
                   "--cols", "10", *argv])
    one_clean_error(capsys, status, needle)
    assert list(tmp_path.iterdir()) == []


def test_make_refuses_to_overwrite(tmp_path, capsys):
    out = tmp_path / "m.tif"
    args = ["landscape", "make", "random", str(out), "--rows", "10", "--cols", "10"]
    assert main(args) == 0
    one_clean_error(capsys, main(args), "--overwrite")
    assert main([*args, "--overwrite", "--seed", "5"]) == 0


def test_metrics_command_stores_json_beside_the_raster(tmp_path, capsys):
    src = write_habitat(tmp_path / "h.tif")
    assert main(["landscape", "metrics", str(src), "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    stored = json.loads((tmp_path / "h.metrics.json").read_text())
    assert printed == stored
    assert [c["code"] for c in stored["classes"]] == [1, 2]
    # the same numbers again: nothing to protect; other numbers: --overwrite needed
    assert main(["landscape", "metrics", str(src)]) == 0
    capsys.readouterr()
    status = main(["landscape", "metrics", str(src), "--values", "suitability"])
    one_clean_error(capsys, status)  # class codes 1-2 are not suitability values


def test_metrics_of_a_suitability_raster_with_a_threshold(tmp_path, capsys):
    assert main(["landscape", "make", "fractal", str(tmp_path / "s.tif"), "--rows", "20",
                 "--cols", "20", "--suitability"]) == 0
    assert main(["landscape", "metrics", str(tmp_path / "s.tif"), "--threshold", "0.8",
                 "--overwrite"]) == 0
    m = json.loads((tmp_path / "s.metrics.json").read_text())
    assert m["threshold"] == 0.8
    assert {c["code"]: c["cells"] for c in m["classes"]}[1] == 80  # 20 % of 400 rank cells


# --- edits ---------------------------------------------------------------------------------
def test_corridor_road_and_lake_commands(tmp_path, capsys):
    src = write_habitat(tmp_path / "h.tif")
    line = [f"{X0},{Y0 - 1250.0}", f"{X0 + 3000.0},{Y0 - 1250.0}"]  # edge to edge
    assert main(["landscape", "road", str(src), "--line", *line, "--width", "100",
                 "--out", str(tmp_path / "r.tif"), "--measure", str(tmp_path / "r.geojson"),
                 "--name", "east road"]) == 0
    text = capsys.readouterr().out
    assert "[[measures]]" in text and 'name = "east road"' in text
    assert "field survey" in text  # the caution
    grid, cl = read_habitat(tmp_path / "r.tif", "classes")
    assert np.all(cl[12][grid.mask[12]] == 3)  # the row of centres the line runs along
    m = json.loads((tmp_path / "r.metrics.json").read_text())
    spans = {c["code"]: c["spans_north_south"] for c in m["classes"]}
    assert spans == {1: False, 2: False, 3: False}  # the road cuts every class in two
    assert main(["landscape", "lake", str(tmp_path / "r.tif"), "--at",
                 f"{X0 + 1000.0},{Y0 - 600.0}", "--radius", "250",
                 "--out", str(tmp_path / "l.tif")]) == 0
    g2, _ = read_habitat(tmp_path / "l.tif", "classes")
    assert (~g2.mask).sum() > (~grid.mask).sum()
    assert main(["landscape", "corridor", str(src), "--line", *line, "--width", "100",
                 "--value", "2", "--measure", str(tmp_path / "c.geojson")]) == 0
    assert (tmp_path / "c.geojson").is_file() and not (tmp_path / "c.tif").exists()


def test_edit_errors_are_clean(tmp_path, capsys):
    src = write_habitat(tmp_path / "h.tif")
    status = main(["landscape", "corridor", str(src), "--line", "1,2", "3,4", "--width", "10",
                   "--out", str(tmp_path / "c.tif")])
    one_clean_error(capsys, status, "outside the map", "x 500000 to 503000 m")
    status = main(["landscape", "corridor", str(src), "--line", f"{X0},{Y0 - 50}",
                   f"{X0 + 900},{Y0 - 50}", "--width", "10"])
    one_clean_error(capsys, status, "--out", "--measure")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["h.tif"]


# --- reproject -------------------------------------------------------------------------------
def degree_raster(tmp_path: Path, name="geo.tif", crs="EPSG:4326") -> Path:
    """60 x 80 cells of 0.001°, class 1 with a class-2 block, 255 = no-data, near 15° E 45° N."""
    a = np.ones((60, 80), dtype=np.uint8)
    a[20:40, 30:50] = 2
    a[0, :5] = 255
    return write_tif(tmp_path / name, a, crs, Affine(0.001, 0, 15.0, 0, -0.001, 45.0), 255)


def test_degree_raster_error_names_our_reproject_command_and_the_utm_zone(tmp_path):
    # the UTM zone of 15.04° E 44.97° N, from pyproj's database (reference library)
    from pyproj.aoi import AreaOfInterest
    from pyproj.database import query_utm_crs_info

    src = degree_raster(tmp_path)
    with pytest.raises(InputError) as info:
        read_habitat(src, "classes")
    text = str(info.value)
    info_utm = query_utm_crs_info(datum_name="WGS 84",
                                  area_of_interest=AreaOfInterest(15.04, 44.97, 15.04, 44.97))
    assert f"preyscape landscape reproject {src}" in text
    assert f"--crs EPSG:{info_utm[0].code}" in text
    assert "gdal" not in text


def test_reproject_degrees_to_utm(tmp_path, capsys):
    from pyproj import Transformer

    src = degree_raster(tmp_path)
    out = tmp_path / "utm.tif"
    assert main(["landscape", "reproject", str(src), str(out), "--cell-size", "50"]) == 0
    assert "EPSG:32633" in capsys.readouterr().out
    grid, cl = read_habitat(out, "classes")
    assert grid.dx == grid.dy == 50.0 and grid.x0 % 50 == 0 and grid.y0 % 50 == 0
    assert set(np.unique(cl[grid.mask])) == {1, 2}  # nearest keeps codes, no-data stays out
    # the class-2 block: its centroid lands where pyproj puts the block's centre
    # (reference library); within one cell
    to_utm = Transformer.from_crs("EPSG:4326", "EPSG:32633", always_xy=True)
    bx, by = to_utm.transform(15.0 + 0.040, 45.0 - 0.030)
    rows, cols = np.nonzero(cl == 2)
    assert np.mean(grid.x[cols]) == pytest.approx(bx, abs=50.0)
    assert np.mean(grid.y[rows]) == pytest.approx(by, abs=50.0)
    # the block's area is kept: 20 x 20 cells of 0.001° (geodesic area via pyproj.Geod)
    from pyproj import Geod

    area, _ = Geod(ellps="WGS84").polygon_area_perimeter(
        [15.030, 15.050, 15.050, 15.030], [44.980, 44.980, 44.960, 44.960])
    assert (cl == 2).sum() * 2500.0 == pytest.approx(abs(area), rel=0.05)


def test_reproject_suitability_and_a_raster_without_crs(tmp_path, capsys):
    s = np.linspace(0.0, 1.0, 60 * 80, dtype=np.float32).reshape(60, 80)
    src = write_tif(tmp_path / "s.tif", s, None, Affine(0.001, 0, 15.0, 0, -0.001, 45.0))
    status = main(["landscape", "reproject", str(src), str(tmp_path / "o.tif")])
    one_clean_error(capsys, status, "--source-crs")
    assert main(["landscape", "reproject", str(src), str(tmp_path / "o.tif"), "--source-crs",
                 "EPSG:4326", "--crs", "EPSG:32633", "--cell-size", "200"]) == 0
    assert "average" in capsys.readouterr().out  # coarser cells: area-weighted average
    grid, v = read_habitat(tmp_path / "o.tif", "suitability")
    assert 0.0 <= np.nanmin(v) and np.nanmax(v) <= 1.0
    assert np.nanmean(v) == pytest.approx(0.5, abs=0.05)


def test_reproject_refuses_a_geographic_target_and_its_own_input(tmp_path, capsys):
    src = degree_raster(tmp_path)
    status = main(["landscape", "reproject", str(src), str(tmp_path / "o.tif"), "--crs",
                   "EPSG:4326"])
    one_clean_error(capsys, status, "not a projected CRS in metres")
    status = main(["landscape", "reproject", str(src), str(src), "--overwrite"])
    one_clean_error(capsys, status, "new file")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["geo.tif"]


# --- starter -------------------------------------------------------------------------------
def test_starter_command_lists_classes_and_writes_a_scenario(tmp_path, capsys):
    src = write_habitat(tmp_path / "h.tif")
    assert main(["starter", str(src), "--pair", "aphid-ladybird"]) == 0
    text = capsys.readouterr().out
    counts = {k: int((habitat_array() == k).sum()) for k in (1, 2)}
    for k, n in counts.items():  # one line per class: code, cells, share, name
        assert f"{n}" in text and f"class {k}" in text
    assert "preyscape check" in text and "field survey" in text
    assert main(["check", str(tmp_path / "h.toml")]) == 0


def test_starter_command_on_a_degree_raster_points_to_reproject(tmp_path, capsys):
    src = degree_raster(tmp_path)
    one_clean_error(capsys, main(["starter", str(src)]), "preyscape landscape reproject")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["geo.tif"]


def test_help_does_not_import_heavy_libraries():
    # design requirement: `preyscape --help` stays fast; the landscape commands import
    # rasterio, scipy and shapely only when they run
    code = ("import sys; from preyscape.cli import _parser; _parser(); "
            "print(sorted(m for m in ('rasterio', 'scipy', 'shapely', 'numpy') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "[]"
