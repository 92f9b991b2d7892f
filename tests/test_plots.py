"""The map standard of preyscape.plots: what every map carries, palettes, PNG colours."""

from __future__ import annotations

import itertools

import numpy as np
from PIL import Image
from pyproj import CRS

from preyscape import plots
from preyscape.landscape.grid import Grid
from preyscape.landscape.placed import Outline
from preyscape.plots.palettes import CLASS_PALETTE, NO_DATA, habitat_colours

EPSG = 32633


def _lab(colour: str) -> np.ndarray:
    """CIE 1976 L*a*b* of an sRGB colour (IEC 61966-2-1 transfer function, D65 white)."""
    from matplotlib.colors import to_rgb

    c = np.array(to_rgb(colour))
    c = np.where(c > 0.04045, ((c + 0.055) / 1.055) ** 2.4, c / 12.92)
    m = np.array([[0.4124, 0.3576, 0.1805], [0.2126, 0.7152, 0.0722],
                  [0.0193, 0.1192, 0.9505]])
    xyz = m @ c / np.array([0.95047, 1.0, 1.08883])
    f = np.where(xyz > (6 / 29) ** 3, np.cbrt(xyz), xyz / (3 * (6 / 29) ** 2) + 4 / 29)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def test_habitat_palette_has_twenty_distinct_colours():
    # Design requirement (issue 16): at least 20 classes told apart. Distinctness as the
    # CIE 1976 colour difference ΔE*ab (textbook: CIE 15:2004); about 2.3 is just
    # noticeable, our palette keeps every pair, and the no-data grey, 15 or more apart.
    assert len(CLASS_PALETTE) >= 20 and len(set(CLASS_PALETTE)) == len(CLASS_PALETTE)
    labs = [_lab(c) for c in (*CLASS_PALETTE, NO_DATA)]
    worst = min(np.linalg.norm(a - b) for a, b in itertools.combinations(labs, 2))
    assert worst >= 15


def test_habitat_colours_follow_meaning_and_the_scenario():
    # design requirement: colours by what a class is, not by its row in the table
    cols = habitat_colours({1: "arable", 2: "wetland", 3: "open water", 4: "mixed forest",
                            5: "village", 6: "zone 6"})
    assert cols[1] == "#e3c46b"  # arable: wheat, not a blue
    assert cols[3] == "#4a86b8" and cols[2] != cols[3]  # water blue, wetland blue-green
    assert cols[4] == "#2e6b3f" and cols[5] == "#9e4b4b"
    assert len(set(cols.values())) == 6
    # the scenario's colour wins; a name's colour already taken goes to the next class
    cols = habitat_colours({1: "forest", 2: "old forest"}, {1: "#000080"})
    assert cols == {1: "#000080", 2: "#2e6b3f"}
    cols = habitat_colours({1: "forest", 2: "old forest"})
    assert cols[1] == "#2e6b3f" and cols[2] != cols[1]
    many = habitat_colours({k: f"type {k}" for k in range(30)})
    assert len(set(list(many.values())[:len(CLASS_PALETTE)])) == len(CLASS_PALETTE)


def _grid() -> Grid:
    mask = np.ones((40, 60), dtype=bool)
    mask[:5, :8] = False
    return Grid((40, 60), 455_000.0, 6_846_000.0, 25.0, 25.0,
                CRS.from_epsg(EPSG).to_wkt(), mask)


def _outlines(grid: Grid) -> list:
    refuge = np.zeros(grid.shape, dtype=bool)
    refuge[20:30, 10:20] = True
    line = np.array([[455_900.0, 6_845_900.0], [455_950.0, 6_845_050.0]])
    return [Outline("north fence", "fence", (line,), None, None),
            Outline("fen refuge", "refuge", (), refuge, None)]


def _texts(fig) -> str:
    parts = [t.get_text() for t in fig.texts]
    parts += [h.get_label() for h in fig._preyscape_map.handles]
    for ax in fig.axes:
        parts += [ax.get_title(loc=k) for k in ("left", "center")]
        parts += [t.get_text() for t in ax.texts]
        parts += [a.txt_label.get_text() for a in ax.artists if hasattr(a, "txt_label")]
    for leg in fig.legends:
        parts += [t.get_text() for t in leg.get_texts()]
    return "\n".join(parts)


def test_every_map_carries_the_standard(tmp_path):
    # Design requirement (issue 16): measures with a legend, no-data distinct, scale bar,
    # north arrow, CRS named in a caption with the corner the axes count from, a title
    # with the quantity, units and run, nothing clipped.
    grid = _grid()
    values = np.linspace(0.0, 100.0, grid.ny * grid.nx).reshape(grid.shape)
    values[35:, 50:] = np.nan  # data cells without a value
    fig, ax, _ = plots.map_figure(grid, values, "Prey density", "viridis", vmin=0, vmax=100,
                                  units="animals per km²", outlines=_outlines(grid),
                                  run="fence", undefined="never reached")
    plots._place_info(fig, fig._preyscape_map)
    text = _texts(fig)
    assert "Prey density [animals per km²]" in text and "Run: fence" in text
    for item in ("fence: north fence", "refuge: fen refuge", "no habitat data",
                 "never reached"):
        assert item in text, item
    assert "WGS 84 / UTM zone 33N (EPSG:32633)" in text.replace("\n", " ")
    assert "easting 455\u2009000 m" in text and "northing 6\u2009845\u2009000 m" in text
    assert "N" in [t.get_text() for t in ax.texts]  # the north arrow
    bars = [a.txt_label.get_text() for a in ax.artists if hasattr(a, "txt_label")]
    assert bars == ["200 m"]  # the 1.5 km wide map: a quarter of it, rounded down to 1-2-5
    fig.canvas.draw()
    left, right = ax.get_xlim()
    ticks = [t.get_text() for t in ax.get_xticklabels()
             if left - 1e-9 <= t.get_position()[0] <= right + 1e-9]
    assert ticks[0] == "0"  # axes count from the south-west corner
    assert ax.get_xlabel() == "km east of the south-west corner"
    # nothing clipped: the saved picture holds every text of the figure
    path = plots._save(fig, tmp_path / "map.png")
    renderer = fig.canvas.get_renderer()
    box = fig.get_tightbbox(renderer)
    for t in fig.texts + [leg for leg in fig.legends]:
        e = t.get_window_extent(renderer)
        assert e.x0 >= box.x0 * fig.dpi - 1 and e.y0 >= box.y0 * fig.dpi - 1
    with Image.open(path) as im:
        assert im.mode == "P"  # an indexed PNG
        assert im.size[1] > 0.9 * fig.get_size_inches()[1] * fig.dpi  # legend and caption


def test_map_context_supplies_run_and_measures_and_arguments_win(tmp_path):
    grid = _grid()
    with plots.map_context(run="corridor", outlines=_outlines(grid)):
        fig, _, _ = plots.map_figure(grid, np.ones(grid.shape), "Density", "viridis")
        assert "Run: corridor" in _texts(fig) and "fence: north fence" in _texts(fig)
        fig, _, _ = plots.map_figure(grid, np.ones(grid.shape), "Density", "viridis",
                                     run="baseline", outlines=[])
        assert "Run: baseline" in _texts(fig) and "north fence" not in _texts(fig)
    fig, _, _ = plots.map_figure(grid, np.ones(grid.shape), "Density", "viridis")
    assert "Run:" not in _texts(fig)  # the context ended with its block


def test_nice_lengths():
    # 1-2-5 series (common practice in cartography, no source)
    assert [plots.nice_length(x) for x in (0.3, 1.0, 1.9, 2.5, 7.0, 12.0)] == [
        0.2, 1.0, 1.0, 2.0, 5.0, 10.0]


def test_indexed_png_keeps_colour_bars_smooth():
    # Design requirement: 256 indexed colours for small files, but a colour bar keeps its
    # ramp: viridis' colours come back within 8/255 per channel (barely visible), even in a
    # picture almost all of another colour map (a median cut of the picture alone merges
    # the rare ones and does worse).
    from matplotlib import colormaps

    ramp = (colormaps["viridis"](np.linspace(0, 1, 256))[:, :3] * 255).round().astype(np.uint8)
    other = (colormaps["magma"](np.linspace(0, 1, 400))[:, :3] * 255).round().astype(np.uint8)
    picture = np.repeat(other[None, :, :], 300, axis=0)  # a picture of other colours
    picture[:, :2] = ramp[np.arange(300) * 255 // 299][:, None, :]  # a thin colour bar
    out = np.asarray(plots._indexed(Image.fromarray(picture), [ramp / 255.0]).convert("RGB"))
    err = np.abs(out[:, :2].astype(int) - picture[:, :2].astype(int)).max()
    assert err <= 8
    plain = np.asarray(Image.fromarray(picture).quantize(
        colors=256, method=Image.Quantize.MEDIANCUT).convert("RGB"))
    assert np.abs(plain[:, :2].astype(int) - picture[:, :2].astype(int)).max() > err
