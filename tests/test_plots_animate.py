"""The animated GIF of a run (plots/animate.py)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from matplotlib import colormaps
from PIL import Image
from rasterio.crs import CRS

from preyscape.errors import InputError
from preyscape.landscape.grid import Grid
from preyscape.plots import NO_DATA, SPECIES_CMAP
from preyscape.plots.animate import (
    MAX_SIDE,
    _frame_indices,
    _stamp_format,
    _StreamingQuantile,
    _stride,
    animate_run,
)
from preyscape.store import ResultWriter

SHAPE = (18, 22)  # rows, cols of 100 m
NAMES = {"prey": "field vole", "predator": "least weasel"}


def small_grid() -> Grid:
    mask = np.ones(SHAPE, dtype=bool)
    mask[:5, :5] = False  # a no-data block in the north-west corner
    return Grid(SHAPE, 500_000.0, 5_000_000.0, 100.0, 100.0,
                crs_wkt=CRS.from_epsg(32633).to_wkt(), mask=mask)


def write_results(path: Path, times, prey_frames, predator_frames) -> Path:
    grid = small_grid()
    w = ResultWriter(path, grid, NAMES, {"title": "animation test"})
    try:
        for t, n, p in zip(times, prey_frames, predator_frames, strict=True):
            w.write(t, np.asarray(n, dtype=float), np.asarray(p, dtype=float))
    finally:
        w.close()
    return path


def animate_file(nc: Path, path: Path, **kw) -> Path:
    """animate_run on a results file: frames read one at a time, as the report does."""
    import xarray as xr

    from preyscape.store import grid_of

    with xr.open_dataset(nc, decode_times=False) as ds:
        return animate_run(grid_of(ds), ds["time"].values,
                           lambda sp, i: ds[sp].isel(time=i).values, path, **kw)


def moving_blob(n: int) -> tuple[list[float], list[np.ndarray], list[np.ndarray]]:
    """Prey at 500 animals/km² with a predator blob drifting east, n snapshots."""
    yy, xx = np.mgrid[0:SHAPE[0], 0:SHAPE[1]]
    times, prey, pred = [], [], []
    for k in range(n):
        cx = 3 + 16 * k / max(1, n - 1)
        blob = 40.0 * np.exp(-((xx - cx) ** 2 + (yy - 9) ** 2) / 8.0)
        times.append(0.25 * k)
        pred.append(blob)
        prey.append(500.0 - 5 * blob)
    return times, prey, pred


def frames_of(path: Path) -> list[np.ndarray]:
    with Image.open(path) as im:
        out = []
        for k in range(im.n_frames):
            im.seek(k)
            out.append(np.asarray(im.convert("RGB")))
    return out


def test_one_frame_per_snapshot(tmp_path):
    # design requirement: every snapshot becomes a frame that decodes, frames change
    times, prey, pred = moving_blob(5)
    nc = write_results(tmp_path / "results.nc", times, prey, pred)
    out = animate_file(nc, tmp_path / "anim" / "run.gif", fps=5, names=NAMES, title="Test run")
    assert out == tmp_path / "anim" / "run.gif"
    assert sorted(p.name for p in out.parent.iterdir()) == ["run.gif"]  # no temp file left
    with Image.open(out) as im:
        assert im.format == "GIF" and im.n_frames == 5 and im.is_animated
        assert 400 <= im.width <= 1200 and 250 <= im.height <= 700
        assert im.info["loop"] == 0 and im.info["duration"] == 200  # ms per frame at 5 fps
    frames = frames_of(out)
    assert all(f.shape == frames[0].shape for f in frames)
    for a, b in zip(frames, frames[1:], strict=False):
        assert np.any(a != b)
    # the no-data block is drawn in the no-data grey (the palette holds it exactly)
    grey = np.array([int(NO_DATA[i:i + 2], 16) for i in (1, 3, 5)])
    assert np.all(frames[0] == grey, axis=-1).sum() > 100


def test_constant_data_frames_differ_only_by_the_time_stamp(tmp_path):
    # design requirement: each frame carries "t = ... yr"; with unchanged data only the
    # stamp changes (Pillow would merge identical frames, so n_frames shows it too)
    flat = np.full(SHAPE, 300.0)
    nc = write_results(tmp_path / "results.nc", [0.0, 0.5, 1.0], [flat] * 3, [flat / 10] * 3)
    out = animate_file(nc, tmp_path / "flat.gif")
    frames = frames_of(out)
    assert len(frames) == 3
    for a, b in zip(frames, frames[1:], strict=False):
        rows, cols = np.nonzero(np.any(a != b, axis=-1))
        assert rows.size > 0
        # the changed pixels are in the top-right corner, where the stamp is
        assert rows.max() < 0.1 * a.shape[0] and cols.min() > 0.6 * a.shape[1]


def test_one_colour_scale_for_the_whole_animation(tmp_path):
    # design requirement: one scale per species over all frames, vmin 0, vmax the
    # 99.5th percentile, so a uniform 200 shows half-way up the scale when 400 occurs later
    yy = np.zeros(SHAPE)
    prey = [yy + 200.0, yy + 400.0]
    nc = write_results(tmp_path / "results.nc", [0.0, 1.0], prey, [yy, yy])
    frames = frames_of(animate_file(nc, tmp_path / "scale.gif", species=("prey",)))
    ramp = colormaps[SPECIES_CMAP["prey"]]

    def count(frame, value):
        rgb = np.array(ramp(value)[:3]) * 255
        return int((np.abs(frame.astype(float) - rgb).max(axis=-1) <= 6).sum())

    # the map (some 5 * 10^4 pixels) shows the colour of its share of the scale; the
    # colour bar alone holds a few hundred pixels of each colour
    assert count(frames[0], 0.5) > 20_000 and count(frames[0], 1.0) < 2000
    assert count(frames[1], 1.0) > 20_000 and count(frames[1], 0.5) < 2000


def test_log_scale_shows_a_front_at_low_density(tmp_path):
    # design requirement (a front invading at low density must show): predators at 40 per
    # km² in the west, 0.04 in the middle, none in the east. On the linear scale 0.04 is
    # the bottom colour like the empty east; on the log scale from the presence
    # threshold 0.01 (matplotlib LogNorm, reference library) it sits at
    # log(4)/log(4000) = 0.167 of the scale, and the empty east takes the lowest colour,
    # not the no-data grey. "auto" picks log: the densities present span 40/0.04 = 1000.
    dens = np.zeros(SHAPE)
    dens[:, :8] = 40.0
    dens[:, 8:15] = 0.04
    nc = write_results(tmp_path / "results.nc", [0.0, 1.0], [dens, dens], [dens, dens])
    ramp = colormaps[SPECIES_CMAP["predator"]]

    def count(frame, value):
        rgb = np.array(ramp(value)[:3]) * 255
        return int((np.abs(frame.astype(float) - rgb).max(axis=-1) <= 6).sum())

    grey = np.array([int(NO_DATA[i:i + 2], 16) for i in (1, 3, 5)])
    low = np.log(4.0) / np.log(4000.0)
    lin = frames_of(animate_file(nc, tmp_path / "lin.gif", species=("predator",)))[0]
    log = frames_of(animate_file(nc, tmp_path / "log.gif", species=("predator",),
                                 scale="auto", floor=0.01))[0]
    assert count(log, low) > 8000 and count(lin, low) < 1000
    assert count(log, 0.0) > 8000  # the empty east, in the lowest colour
    # no-data grey only in the no-data block: no more than on the linear map (the empty
    # east in grey would add some 10^4 pixels)
    assert np.all(log == grey, axis=-1).sum() <= 1.05 * np.all(lin == grey, axis=-1).sum()
    # densities present spanning less than a factor 100 keep the linear scale
    flat = np.full(SHAPE, 40.0)
    flat[:, 8:] = 1.0
    nc2 = write_results(tmp_path / "flat.nc", [0.0], [flat], [flat])
    a = frames_of(animate_file(nc2, tmp_path / "a.gif", species=("predator",), scale="auto",
                               floor=0.01))[0]
    b = frames_of(animate_file(nc2, tmp_path / "b.gif", species=("predator",)))[0]
    assert np.array_equal(a, b)


def test_max_frames_thins_evenly(tmp_path):
    # design requirement: at most max_frames frames, first and last included
    times, prey, pred = moving_blob(9)
    nc = write_results(tmp_path / "results.nc", times, prey, pred)
    with Image.open(animate_file(nc, tmp_path / "few.gif", max_frames=4)) as im:
        assert im.n_frames == 4
    assert list(_frame_indices(9, 4)) == [0, 3, 5, 8]
    assert list(_frame_indices(3, 120)) == [0, 1, 2]
    for n, m in ((1000, 120), (121, 120), (7, 2)):
        idx = _frame_indices(n, m)
        assert len(idx) == m == len(set(idx)) and idx[0] == 0 and idx[-1] == n - 1


def test_helpers():
    # design requirement: maps of at most MAX_SIDE cells a side; stamps tell snapshots apart
    assert _stride(300, 10) == 1 and _stride(301, 10) == 2 and _stride(10, 1000) == 4
    assert max(-(-1000 // _stride(1000, 50)), 50) <= MAX_SIDE
    assert _stamp_format(np.array([0.0, 0.25, 3.25])).format(3.25) == "t = 3.25 yr"
    fine = _stamp_format(np.array([0.0, 0.001, 0.002]))
    assert fine.format(0.001) != fine.format(0.002)


def test_streaming_quantile_matches_numpy():
    # reference library: numpy.percentile (inverted_cdf = nearest rank); the stream
    # rounds up to the top of a bin 1/256 of the value wide
    rng = np.random.default_rng(7)
    q = _StreamingQuantile()
    parts = [rng.lognormal(3.0, 2.0, 5000) for _ in range(6)]
    parts.append(np.zeros(4000))
    parts.append(np.full(10, np.nan))  # no data: skipped
    for p in parts:
        q.add(p)
    data = np.concatenate(parts[:-1])
    for pct in (50.0, 90.0, 99.5):
        ref = np.percentile(data, pct, method="inverted_cdf")
        assert ref <= q.quantile(pct) <= ref * (1 + 1 / 128)
    assert q.quantile(100.0) == data.max()
    assert q.quantile(5.0) == 0.0  # more than 5 % zeros
    assert _StreamingQuantile().quantile(99.5) == 0.0


def test_bad_input(tmp_path):
    # the run is read by the caller (analysis.results); the animation only checks its own
    # arguments: no snapshot to draw, and a frame rate below one
    with pytest.raises(InputError, match="no snapshot"):
        animate_run(small_grid(), [], lambda sp, i: None, tmp_path / "x.gif")
    times, prey, pred = moving_blob(2)
    nc = write_results(tmp_path / "results.nc", times, prey, pred)
    with pytest.raises(ValueError):
        animate_file(nc, tmp_path / "x.gif", fps=0)
    assert not (tmp_path / "x.gif").exists()
