"""Tests for preyscape.landscape.io: reading, checking and resampling rasters."""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.landscape.io import read_habitat, read_layer_onto, write_geotiff

UTM = "EPSG:32633"
X0, Y0 = 500_000.0, 5_000_000.0


def make_tif(
    path: Path,
    array: np.ndarray,
    transform: Affine | None = None,
    crs: str | None = UTM,
    nodata: float | None = None,
) -> Path:
    """Write ``array`` as a one-band GeoTIFF directly with rasterio."""
    if transform is None:
        transform = Affine(10.0, 0.0, X0, 0.0, -10.0, Y0)
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        width=array.shape[1],
        height=array.shape[0],
        count=1,
        dtype=array.dtype.name,
        crs=CRS.from_string(crs) if crs else None,
        transform=transform,
        nodata=nodata,
    ) as dst:
        dst.write(array, 1)
    return path


def block_mean(a: np.ndarray, k: int) -> np.ndarray:
    """Numpy block mean over k x k blocks (reference computation)."""
    ny, nx = a.shape
    return a.reshape(ny // k, k, nx // k, k).mean(axis=(1, 3))


def block_nanmean(a: np.ndarray, k: int) -> np.ndarray:
    """Numpy block mean over the data cells only (reference computation)."""
    ny, nx = a.shape
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN blocks give NaN
        return np.nanmean(a.reshape(ny // k, k, nx // k, k), axis=(1, 3))


# --- masking ---------------------------------------------------------------
def test_nodata_value_is_masked(tmp_path: Path) -> None:
    a = np.array([[0.2, 0.5, -9999.0], [1.0, -9999.0, 0.0]], dtype=np.float32)
    path = make_tif(tmp_path / "s.tif", a, nodata=-9999.0)
    grid, values = read_habitat(path, "suitability")
    expected_mask = np.array([[True, True, False], [True, False, True]])
    np.testing.assert_array_equal(grid.mask, expected_mask)
    assert values.dtype == np.float64
    assert np.isnan(values[~expected_mask]).all()
    np.testing.assert_allclose(values[expected_mask], a[expected_mask].astype(np.float64))
    assert grid.n_cells == 4


def test_nan_is_masked_without_nodata_value(tmp_path: Path) -> None:
    a = np.array([[np.nan, 0.3], [0.7, np.nan]])
    path = make_tif(tmp_path / "s.tif", a)
    grid, values = read_habitat(path, "suitability")
    np.testing.assert_array_equal(grid.mask, [[False, True], [True, False]])
    np.testing.assert_array_equal(values[grid.mask], [0.3, 0.7])


def test_classes_nodata_becomes_minus_one(tmp_path: Path) -> None:
    a = np.array([[1, 2, 255], [3, 255, 0]], dtype=np.uint8)
    path = make_tif(tmp_path / "c.tif", a, nodata=255)
    grid, values = read_habitat(path, "classes")
    assert values.dtype == np.int32
    np.testing.assert_array_equal(values, [[1, 2, -1], [3, -1, 0]])
    np.testing.assert_array_equal(grid.mask, values != -1)


def test_grid_geometry_and_crs(tmp_path: Path) -> None:
    path = make_tif(tmp_path / "s.tif", np.full((3, 4), 0.5))
    grid, _ = read_habitat(path, "suitability")
    assert grid.shape == (3, 4)
    assert (grid.x0, grid.y0, grid.dx, grid.dy) == (X0, Y0, 10.0, 10.0)
    assert CRS.from_wkt(grid.crs_wkt) == CRS.from_string(UTM)


# --- refusals --------------------------------------------------------------
def test_degree_crs_refused(tmp_path: Path) -> None:
    path = make_tif(
        tmp_path / "geo.tif",
        np.full((2, 2), 0.5),
        transform=Affine(0.01, 0.0, 15.0, 0.0, -0.01, 45.0),
        crs="EPSG:4326",
    )
    with pytest.raises(InputError) as info:
        read_habitat(path, "suitability")
    text = str(info.value)
    assert "geo.tif" in text
    assert "projected CRS" in text
    assert "UTM" in text


def test_degree_crs_refused_for_layer(tmp_path: Path) -> None:
    path = make_tif(
        tmp_path / "geo.tif",
        np.full((2, 2), 0.5),
        transform=Affine(0.01, 0.0, 15.0, 0.0, -0.01, 45.0),
        crs="EPSG:4326",
    )
    grid = Grid((2, 2), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    with pytest.raises(InputError, match="projected CRS") as info:
        read_layer_onto(path, grid)
    assert "geo.tif" in str(info.value)


def test_missing_crs_refused(tmp_path: Path) -> None:
    path = make_tif(tmp_path / "nocrs.tif", np.full((2, 2), 0.5), crs=None)
    with pytest.raises(InputError, match="no coordinate reference system") as info:
        read_habitat(path, "suitability")
    assert "nocrs.tif" in str(info.value)


def test_feet_crs_refused(tmp_path: Path) -> None:
    # NAD83 / New York Long Island (ftUS): projected, but not in metres.
    path = make_tif(
        tmp_path / "feet.tif",
        np.full((2, 2), 0.5),
        transform=Affine(30.0, 0.0, 1_000_000.0, 0.0, -30.0, 200_000.0),
        crs="EPSG:2263",
    )
    with pytest.raises(InputError, match="not metres") as info:
        read_habitat(path, "suitability")
    assert "feet.tif" in str(info.value)


def test_rotated_transform_refused(tmp_path: Path) -> None:
    rotated = Affine(10.0, 2.0, X0, 1.0, -10.0, Y0)
    path = make_tif(tmp_path / "rot.tif", np.full((2, 2), 0.5), transform=rotated)
    with pytest.raises(InputError, match="rotated") as info:
        read_habitat(path, "suitability")
    assert "rot.tif" in str(info.value)


def test_missing_file_refused(tmp_path: Path) -> None:
    path = tmp_path / "nowhere.tif"
    with pytest.raises(InputError, match="not found") as info:
        read_habitat(path, "classes")
    assert "nowhere.tif" in str(info.value)


def test_unreadable_file_refused(tmp_path: Path) -> None:
    path = tmp_path / "notes.tif"
    path.write_text("this is not a raster\n")
    with pytest.raises(InputError, match="cannot read") as info:
        read_habitat(path, "classes")
    assert info.value.source == str(path)


def test_source_overrides_name(tmp_path: Path) -> None:
    with pytest.raises(InputError) as info:
        read_habitat(tmp_path / "x.tif", "classes", source="demo.toml: landscape.habitat")
    assert info.value.source == "demo.toml: landscape.habitat"


def test_suitability_out_of_range_names_cell(tmp_path: Path) -> None:
    a = np.array([[0.1, 0.2, 0.3], [0.4, 0.5, 1.5]])
    path = make_tif(tmp_path / "s.tif", a)
    with pytest.raises(InputError) as info:
        read_habitat(path, "suitability")
    text = str(info.value)
    assert "s.tif" in text
    assert "row 1, col 2" in text
    assert "1.5" in text
    assert "[0, 1]" in text


def test_out_of_range_value_on_nodata_cell_is_fine(tmp_path: Path) -> None:
    a = np.array([[0.1, 5.0], [0.4, 0.5]])
    path = make_tif(tmp_path / "s.tif", a, nodata=5.0)
    grid, _ = read_habitat(path, "suitability")
    assert grid.n_cells == 3


def test_non_integer_classes_refused(tmp_path: Path) -> None:
    a = np.array([[1.0, 2.0], [2.5, 3.0]])
    path = make_tif(tmp_path / "c.tif", a)
    with pytest.raises(InputError, match="integer") as info:
        read_habitat(path, "classes")
    assert "row 1, col 0" in str(info.value)


def test_integer_valued_float_classes_accepted(tmp_path: Path) -> None:
    a = np.array([[1.0, 2.0], [np.nan, 3.0]], dtype=np.float32)
    grid, values = read_habitat(make_tif(tmp_path / "c.tif", a), "classes")
    np.testing.assert_array_equal(values, [[1, 2], [-1, 3]])
    assert grid.n_cells == 3


def test_all_nodata_refused(tmp_path: Path) -> None:
    path = make_tif(tmp_path / "empty.tif", np.full((2, 3), np.nan))
    with pytest.raises(InputError, match="no cells with data"):
        read_habitat(path, "suitability")


def test_bad_cell_size_refused(tmp_path: Path) -> None:
    path = make_tif(tmp_path / "s.tif", np.full((2, 2), 0.5))
    with pytest.raises(InputError, match="positive"):
        read_habitat(path, "suitability", cell_size=-10.0)
    with pytest.raises(InputError, match="larger than"):
        read_habitat(path, "suitability", cell_size=100.0)


# --- geometry --------------------------------------------------------------
def test_non_square_cells(tmp_path: Path) -> None:
    transform = Affine(30.0, 0.0, X0, 0.0, -20.0, Y0)
    path = make_tif(tmp_path / "ns.tif", np.full((3, 4), 0.5), transform=transform)
    grid, values = read_habitat(path, "suitability")
    assert grid.dx == 30.0
    assert grid.dy == 20.0
    assert values.shape == (3, 4)
    np.testing.assert_allclose(grid.x, X0 + 15.0 + 30.0 * np.arange(4))
    np.testing.assert_allclose(grid.y, Y0 - 10.0 - 20.0 * np.arange(3))
    # Independent reference: rasterio's own cell-centre coordinates.
    with rasterio.open(path) as ds:
        xs, ys = ds.xy([2, 2], [0, 3])
    np.testing.assert_allclose([grid.x[0], grid.x[3]], xs)
    np.testing.assert_allclose([grid.y[2], grid.y[2]], ys)


def test_south_up_is_flipped(tmp_path: Path) -> None:
    a = np.arange(12, dtype=np.float64).reshape(3, 4) / 20.0
    y_bottom = Y0 - 30.0
    path = make_tif(tmp_path / "su.tif", a, transform=Affine(10.0, 0.0, X0, 0.0, 10.0, y_bottom))
    grid, values = read_habitat(path, "suitability")
    np.testing.assert_array_equal(values, a[::-1])
    assert grid.y0 == Y0
    assert grid.dy == 10.0


# --- resampling ------------------------------------------------------------
def test_suitability_coarsening_equals_block_mean(tmp_path: Path) -> None:
    rng = np.random.default_rng(42)
    a = rng.random((6, 8))
    grid, values = read_habitat(make_tif(tmp_path / "s.tif", a), "suitability", cell_size=20.0)
    assert grid.shape == (3, 4)
    assert (grid.x0, grid.y0, grid.dx, grid.dy) == (X0, Y0, 20.0, 20.0)
    np.testing.assert_allclose(values, block_mean(a, 2), rtol=1e-12)
    assert grid.mask.all()


def test_suitability_coarsening_ignores_nodata(tmp_path: Path) -> None:
    rng = np.random.default_rng(7)
    a = rng.random((6, 8))
    a[0, 0] = a[0, 1] = a[1, 0] = np.nan  # block (0, 0) keeps one data cell
    a[2:4, 2:4] = np.nan  # block (1, 1) has no data at all
    a[5, 7] = -1.0  # a nodata value, not NaN
    path = make_tif(tmp_path / "s.tif", a, nodata=-1.0)
    grid, values = read_habitat(path, "suitability", cell_size=20.0)
    ref = block_nanmean(np.where(a == -1.0, np.nan, a), 2)
    np.testing.assert_allclose(values, ref, rtol=1e-12)  # NaNs compare equal
    assert values[0, 0] == pytest.approx(a[1, 1], rel=1e-12)
    assert not grid.mask[1, 1]
    assert grid.mask.sum() == 11


def test_suitability_floor_of_extent(tmp_path: Path) -> None:
    a = np.full((7, 5), 0.25)
    grid, values = read_habitat(make_tif(tmp_path / "s.tif", a), "suitability", cell_size=20.0)
    assert grid.shape == (3, 2)
    np.testing.assert_allclose(values, 0.25, rtol=1e-12)


def test_non_square_to_square_cell_size(tmp_path: Path) -> None:
    # 30 m x 20 m cells to 60 m: each target cell holds 2 x 3 source cells.
    rng = np.random.default_rng(3)
    a = rng.random((6, 4))
    transform = Affine(30.0, 0.0, X0, 0.0, -20.0, Y0)
    path = make_tif(tmp_path / "ns.tif", a, transform=transform)
    grid, values = read_habitat(path, "suitability", cell_size=60.0)
    assert grid.shape == (2, 2)
    ref = a.reshape(2, 3, 2, 2).mean(axis=(1, 3))  # numpy block mean, reference computation
    np.testing.assert_allclose(values, ref, rtol=1e-12)


def test_same_cell_size_is_a_no_op(tmp_path: Path) -> None:
    rng = np.random.default_rng(5)
    a = rng.random((3, 4))
    grid, values = read_habitat(make_tif(tmp_path / "s.tif", a), "suitability", cell_size=10.0)
    np.testing.assert_array_equal(values, a)
    assert grid.shape == (3, 4)


def test_classes_coarsening_uses_mode(tmp_path: Path) -> None:
    a = np.array(
        [
            [1, 1, 2, 3, 9, 9],
            [1, 5, 2, 2, 9, 9],
            [0, 0, 4, 0, 6, 6],
            [0, 7, 4, 4, 0, 6],
        ],
        dtype=np.int16,
    )
    a[2, 0] = a[2, 1] = a[3, 0] = -1  # block (1, 0): only the 7 has data
    path = make_tif(tmp_path / "c.tif", a, nodata=-1)
    grid, values = read_habitat(path, "classes", cell_size=20.0)
    np.testing.assert_array_equal(values, [[1, 2, 9], [7, 4, 6]])
    assert grid.mask.all()


def test_classes_coarsening_all_nodata_block(tmp_path: Path) -> None:
    a = np.array([[3, 3, 255, 255], [3, 1, 255, 255]], dtype=np.uint8)
    grid, values = read_habitat(
        make_tif(tmp_path / "c.tif", a, nodata=255), "classes", cell_size=20.0
    )
    np.testing.assert_array_equal(values, [[3, -1]])
    np.testing.assert_array_equal(grid.mask, [[True, False]])


def test_classes_refinement_replicates_cells(tmp_path: Path) -> None:
    a = np.array([[1, 2, 3], [4, 5, 6]], dtype=np.int32)
    grid, values = read_habitat(make_tif(tmp_path / "c.tif", a), "classes", cell_size=5.0)
    assert grid.shape == (4, 6)
    np.testing.assert_array_equal(values, np.repeat(np.repeat(a, 2, axis=0), 2, axis=1))


def test_suitability_refinement_replicates_cells(tmp_path: Path) -> None:
    a = np.array([[0.1, 0.2, np.nan], [0.4, 0.5, 0.6]])
    grid, values = read_habitat(make_tif(tmp_path / "s.tif", a), "suitability", cell_size=5.0)
    expected = np.repeat(np.repeat(a, 2, axis=0), 2, axis=1)
    np.testing.assert_allclose(values, expected, rtol=1e-12)
    np.testing.assert_array_equal(grid.mask, ~np.isnan(expected))


# --- layers onto a grid ----------------------------------------------------
def test_read_layer_onto_offset_and_finer_layer(tmp_path: Path) -> None:
    # Grid: 4 x 6 cells of 10 m. Layer: 6 x 8 cells of 5 m whose top-left
    # corner is 20 m east and 10 m south of the grid's. The layer holds a
    # linear function of the cell centre, so the 2 x 2 average of a grid cell
    # equals the function at that grid cell's centre.
    crs_wkt = CRS.from_string(UTM).to_wkt()
    grid = Grid((4, 6), X0, Y0, 10.0, 10.0, crs_wkt)
    lx0, ly0 = X0 + 20.0, Y0 - 10.0

    def f(x: np.ndarray, y: np.ndarray) -> np.ndarray:
        return (x - X0) + 0.01 * (Y0 - y)

    lx = lx0 + (np.arange(8) + 0.5) * 5.0
    ly = ly0 - (np.arange(6) + 0.5) * 5.0
    layer = f(lx[None, :], ly[:, None])
    path = make_tif(tmp_path / "layer.tif", layer, transform=Affine(5.0, 0.0, lx0, 0.0, -5.0, ly0))

    out = read_layer_onto(path, grid)
    assert out.shape == (4, 6)
    assert out.dtype == np.float64
    expected = np.full((4, 6), np.nan)
    expected[1:4, 2:6] = f(grid.x[None, 2:6], grid.y[1:4, None])
    np.testing.assert_allclose(out, expected, rtol=1e-9)


def test_read_layer_onto_nodata_and_nearest(tmp_path: Path) -> None:
    # Layer on 10 m cells offset by exactly one cell: nearest is a pure shift.
    crs_wkt = CRS.from_string(UTM).to_wkt()
    grid = Grid((3, 3), X0, Y0, 10.0, 10.0, crs_wkt)
    layer = np.array([[1.0, 2.0, 3.0], [4.0, -5.0, 6.0], [7.0, 8.0, 9.0]])
    path = make_tif(
        tmp_path / "l.tif",
        layer,
        transform=Affine(10.0, 0.0, X0 + 10.0, 0.0, -10.0, Y0 - 10.0),
        nodata=-5.0,
    )
    out = read_layer_onto(path, grid, resampling="nearest")
    expected = np.array([[np.nan, np.nan, np.nan], [np.nan, 1.0, 2.0], [np.nan, 4.0, np.nan]])
    np.testing.assert_array_equal(out, expected)


def test_read_layer_onto_bad_resampling(tmp_path: Path) -> None:
    grid = Grid((2, 2), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    path = make_tif(tmp_path / "l.tif", np.ones((2, 2)))
    with pytest.raises(InputError, match="average"):
        read_layer_onto(path, grid, resampling="cubic")


def test_read_layer_onto_refuses_missing_crs_and_rotation(tmp_path: Path) -> None:
    grid = Grid((2, 2), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    no_crs = make_tif(tmp_path / "a.tif", np.ones((2, 2)), crs=None)
    with pytest.raises(InputError, match="no coordinate reference system"):
        read_layer_onto(no_crs, grid)
    rot = make_tif(tmp_path / "b.tif", np.ones((2, 2)), transform=Affine(10, 1, X0, 1, -10, Y0))
    with pytest.raises(InputError, match="rotated"):
        read_layer_onto(rot, grid)
    with pytest.raises(InputError, match="not found"):
        read_layer_onto(tmp_path / "c.tif", grid)


# --- writing ---------------------------------------------------------------
def test_write_geotiff_round_trip(tmp_path: Path) -> None:
    crs_wkt = CRS.from_string(UTM).to_wkt()
    grid = Grid((3, 4), 612_345.0, 4_987_650.0, 30.0, 20.0, crs_wkt)
    a = np.linspace(0.0, 1.0, 12).reshape(3, 4)
    a[1, 2] = np.nan
    path = tmp_path / "out.tif"
    write_geotiff(path, grid, a)

    assert sorted(p.name for p in tmp_path.iterdir()) == ["out.tif"]  # no temp file left
    with rasterio.open(path) as ds:
        assert ds.crs == CRS.from_string(UTM)
        assert ds.transform == Affine(30.0, 0.0, 612_345.0, 0.0, -20.0, 4_987_650.0)
        assert np.isnan(ds.nodata)
        assert ds.dtypes[0] == "float64"

    back_grid, back = read_habitat(path, "suitability")
    assert (back_grid.x0, back_grid.y0, back_grid.dx, back_grid.dy) == (
        grid.x0,
        grid.y0,
        grid.dx,
        grid.dy,
    )
    assert CRS.from_wkt(back_grid.crs_wkt) == CRS.from_wkt(crs_wkt)
    np.testing.assert_array_equal(back, a)
    np.testing.assert_array_equal(back_grid.mask, ~np.isnan(a))


def test_write_geotiff_integer_nodata_and_overwrite(tmp_path: Path) -> None:
    grid = Grid((2, 2), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    path = tmp_path / "c.tif"
    write_geotiff(path, grid, np.zeros((2, 2), dtype=np.int32))
    write_geotiff(path, grid, np.array([[1, 2], [255, 4]]), nodata=255, dtype="uint8")
    with rasterio.open(path) as ds:
        assert ds.dtypes[0] == "uint8"
        assert ds.nodata == 255
    _, values = read_habitat(path, "classes")
    np.testing.assert_array_equal(values, [[1, 2], [-1, 4]])


def test_write_geotiff_shape_mismatch(tmp_path: Path) -> None:
    grid = Grid((2, 2), X0, Y0, 10.0, 10.0, "")
    with pytest.raises(ValueError, match="shape"):
        write_geotiff(tmp_path / "x.tif", grid, np.zeros((3, 2)))
    assert not any(tmp_path.iterdir())


def test_read_layer_onto_other_crs(tmp_path: Path) -> None:
    # A constant layer in ETRS89-LAEA (EPSG:3035) covering the whole UTM grid
    # with a margin: every grid cell must come back with the constant.
    from rasterio.warp import transform_bounds

    grid = Grid((4, 5), X0, Y0, 100.0, 100.0, CRS.from_string(UTM).to_wkt())
    left, bottom, right, top = transform_bounds(UTM, "EPSG:3035", *grid.bounds)
    margin, cell = 1000.0, 50.0
    nx = int(np.ceil((right - left + 2 * margin) / cell))
    ny = int(np.ceil((top - bottom + 2 * margin) / cell))
    transform = Affine(cell, 0.0, left - margin, 0.0, -cell, top + margin)
    path = make_tif(
        tmp_path / "laea.tif", np.full((ny, nx), 0.7), transform=transform, crs="EPSG:3035"
    )
    out = read_layer_onto(path, grid)
    np.testing.assert_allclose(out, 0.7, rtol=1e-12)


def test_write_geotiff_explains_itself_in_a_gis(tmp_path: Path) -> None:
    # Design requirement (issue 16): band description, units and tags are in the file; a
    # class raster carries GDAL category names and a raster attribute table in its PAM
    # sidecar, read back through GDAL itself (tests/gdal_pam.py), and a uint8 one a
    # colour table.
    from gdal_pam import legend

    grid = Grid((4, 5), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    cls = np.array([[0, 1, 2, 255, 0]] * 4, dtype=np.uint8)
    path = tmp_path / "cls.tif"
    write_geotiff(path, grid, cls, nodata=255, dtype="uint8", description="hotspot class",
                  units="class code", tags={"source_run": "fence"},
                  categories={0: "neither", 1: "hotspot", 2: "coldspot & <edge>"},
                  colours={0: "#f0f0f0", 1: "#b2182b", 2: "steelblue"})
    with rasterio.open(path) as ds:
        assert ds.descriptions == ("hotspot class",)
        assert ds.units == ("class code",)
        assert ds.tags()["source_run"] == "fence"
        assert ds.colormap(1)[2][:3] == (70, 130, 180)  # steelblue (CSS)
        assert {Path(f).name for f in ds.files} == {"cls.tif", "cls.tif.aux.xml"}
    names, rows = legend(path)
    assert names == ["neither", "hotspot", "coldspot & <edge>"]
    assert [(r["value"], r["class"], r["red"]) for r in rows] == [
        ("0", "neither", "240"), ("1", "hotspot", "178"), ("2", "coldspot & <edge>", "70")]
    # negative codes (int8 with -1 no data) get the attribute table only: category names
    # are indexed from 0
    neg = tmp_path / "neg.tif"
    write_geotiff(neg, grid, np.zeros((4, 5), np.int8), nodata=-1, dtype="int8",
                  categories={-1: "no data", 0: "no change"})
    assert legend(neg) == ([], [{"value": "-1", "class": "no data"},
                                {"value": "0", "class": "no change"}])
    # rewritten without categories, the old legend goes too
    write_geotiff(path, grid, cls, nodata=255, dtype="uint8")
    assert not (tmp_path / "cls.tif.aux.xml").exists() and legend(path) == ([], [])


def test_large_rasters_are_cloud_optimised(tmp_path: Path) -> None:
    # Design requirement (issue 16): over a million cells, GDAL's COG layout (tiles of
    # 512 x 512 and overviews) with the metadata kept; small rasters stay plain GeoTIFFs.
    grid = Grid((1001, 1000), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    a = np.arange(1001 * 1000, dtype=np.float32).reshape(1001, 1000)
    write_geotiff(tmp_path / "big.tif", grid, a, description="big", units="m")
    with rasterio.open(tmp_path / "big.tif") as ds:
        assert ds.tags(ns="IMAGE_STRUCTURE")["LAYOUT"] == "COG"
        assert ds.block_shapes == [(512, 512)]
        assert ds.overviews(1)  # at least one overview level
        assert ds.descriptions == ("big",) and ds.units == ("m",)
        np.testing.assert_array_equal(ds.read(1), a)
    small = Grid((10, 10), X0, Y0, 10.0, 10.0, CRS.from_string(UTM).to_wkt())
    write_geotiff(tmp_path / "small.tif", small, np.zeros((10, 10)))
    with rasterio.open(tmp_path / "small.tif") as ds:
        assert "LAYOUT" not in ds.tags(ns="IMAGE_STRUCTURE")
