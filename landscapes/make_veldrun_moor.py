"""Generate the bundled demo landscape "Veldrun Moor".

Veldrun Moor is an invented nature reserve: a synthetic habitat raster for
demos and tests, not a real place and not a field survey. Running

    python landscapes/make_veldrun_moor.py

writes, next to this script,

* ``veldrun_moor_habitat.tif`` -- GeoTIFF, uint8 habitat codes, nodata 0,
  EPSG:25833, 400 x 400 cells of 25 m;
* ``veldrun_moor_habitat.png`` -- a preview map;

and prints the class area fractions. All randomness uses fixed seeds, so the
output is the same on every run.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import rasterio
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.colors import BoundaryNorm, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch
from rasterio.crs import CRS
from rasterio.transform import from_origin
from scipy import ndimage
from scipy.spatial import cKDTree

HERE = Path(__file__).resolve().parent
try:
    from preyscape.landscape import generate
except ImportError:  # running from a source checkout without installing
    sys.path.insert(0, str(HERE.parent / "src"))
    from preyscape.landscape import generate

# --- grid -------------------------------------------------------------------
NROWS, NCOLS = 400, 400
CELL = 25.0  # metres
X0, Y0 = 455000.0, 6846000.0  # top-left corner, EPSG:25833 metres
EPSG = 25833
SEED = 20240611

# --- habitat classes --------------------------------------------------------
NODATA = 0
GRASSLAND = 1
FOREST = 2
WETLAND = 3
SETTLEMENT = 4
ROAD = 5

CLASS_NAMES = {
    NODATA: "outside reserve (no data)",
    GRASSLAND: "open grassland",
    FOREST: "forest",
    WETLAND: "wetland",
    SETTLEMENT: "settlement",
    ROAD: "road",
}
CLASS_COLOURS = {  # RGB 0-255, a qualitative set picked for this map
    NODATA: (200, 200, 200),
    GRASSLAND: (214, 222, 132),
    FOREST: (46, 104, 62),
    WETLAND: (92, 164, 196),
    SETTLEMENT: (190, 74, 58),
    ROAD: (40, 36, 34),
}

TIF_PATH = HERE / "veldrun_moor_habitat.tif"
PNG_PATH = HERE / "veldrun_moor_habitat.png"


def _coords() -> tuple[np.ndarray, np.ndarray]:
    """Cell-centre coordinates in units of the half-width, in [-1, 1]."""
    r = (np.arange(NROWS) + 0.5) / NROWS * 2.0 - 1.0
    c = (np.arange(NCOLS) + 0.5) / NCOLS * 2.0 - 1.0
    return np.meshgrid(r, c, indexing="ij")  # v (south positive), u (east positive)


def reserve_outline(rng: np.random.Generator, target: float = 0.80) -> np.ndarray:
    """Irregular, smooth reserve outline covering ``target`` of the square."""
    v, u = _coords()
    theta = np.arctan2(v, u)
    # rounded-square base shape (superellipse) with a few low harmonics
    n = 3.2
    rho = (np.abs(u) ** n + np.abs(v) ** n) ** (1.0 / n)
    wobble = np.zeros_like(rho)
    for k in range(2, 7):
        amp = 0.05 / k
        wobble += amp * np.cos(k * theta + rng.uniform(0, 2 * np.pi))
    # gentle smaller-scale irregularity of the boundary
    wobble += 0.05 * (generate.gaussian_field((NROWS, NCOLS), 18, rng.integers(2**31)) - 0.5)
    shape_fn = rho / (1.0 + wobble)

    lo, hi = 0.5, 1.2
    for _ in range(60):
        s = 0.5 * (lo + hi)
        if (shape_fn <= s).mean() < target:
            lo = s
        else:
            hi = s
    mask = shape_fn <= 0.5 * (lo + hi)
    # keep a rim of no-data all round the square
    rim = 4
    mask[:rim] = mask[-rim:] = False
    mask[:, :rim] = mask[:, -rim:] = False
    # one piece, no holes
    labels, _ = ndimage.label(mask, structure=generate.FOUR_NEIGHBOURS)
    sizes = np.bincount(labels.ravel())
    sizes[0] = 0
    mask = labels == sizes.argmax()
    return ndimage.binary_fill_holes(mask)


def _curve_distance(points: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distance (cells) from every cell centre to a densely sampled curve.

    Also returns, per cell, the index of the nearest curve point.
    """
    rr, cc = np.mgrid[0:NROWS, 0:NCOLS]
    centres = np.column_stack([rr.ravel() + 0.5, cc.ravel() + 0.5])
    dist, idx = cKDTree(points).query(centres)
    return dist.reshape(NROWS, NCOLS), idx.reshape(NROWS, NCOLS)


def stream_valley(rng: np.random.Generator, mask: np.ndarray) -> np.ndarray:
    """Wetland along a meandering stream, widening into a fen basin."""
    # the stream meanders from the north edge of the reserve to the south edge
    t = np.linspace(0.0, 1.0, 4000)
    rows = -10 + t * (NROWS + 20)
    cols = 225 - 40 * t + 70 * t**2
    for k, amp in ((3, 22.0), (5, 12.0), (8, 6.0), (13, 3.0)):
        cols += amp * np.sin(k * np.pi * t + rng.uniform(0, 2 * np.pi))
    points = np.column_stack([rows, cols])
    dist, idx = _curve_distance(points)
    along = t[idx]

    # half-width 1.5 to 4 cells, varying smoothly along the valley
    half_width = 2.4 + 1.2 * np.sin(6.0 * np.pi * along + 1.0)
    valley = generate.gaussian_field((NROWS, NCOLS), 4, rng.integers(2**31))
    wet = dist <= half_width + 1.5 * (valley - 0.5)

    # fen basin: a lobed hollow beside the stream in the south-centre
    k_basin = int(0.64 * t.size)
    br, bc = points[k_basin] + (6.0, -14.0)
    rr, cc = np.mgrid[0:NROWS, 0:NCOLS] + 0.5
    ang = np.deg2rad(25.0)
    a = ((rr - br) * np.cos(ang) + (cc - bc) * np.sin(ang)) / 30.0
    b = (-(rr - br) * np.sin(ang) + (cc - bc) * np.cos(ang)) / 20.0
    edge = generate.gaussian_field((NROWS, NCOLS), 6, rng.integers(2**31))
    basin = a**2 + b**2 <= 1.0 + 0.7 * (edge - 0.5)
    wet |= basin
    # a few small damp hollows in the wider valley floor
    hollows = generate.gaussian_field((NROWS, NCOLS), 5, rng.integers(2**31)) > 0.985
    wet |= hollows & (dist < 30)
    wet = ndimage.binary_opening(wet, structure=generate.FOUR_NEIGHBOURS) | (dist <= 1.0)
    return wet & mask


def forest_cover(
    rng: np.random.Generator, mask: np.ndarray, taken: np.ndarray, fraction: float
) -> np.ndarray:
    """Forest: a north-west block with glades, a belt along the west side, copses."""
    v, u = _coords()
    field = generate.gaussian_field((NROWS, NCOLS), 16, rng.integers(2**31))
    fine = generate.gaussian_field((NROWS, NCOLS), 4, rng.integers(2**31))
    # preference for the north-west and the western belt
    nw = np.exp(-(((u + 0.45) / 0.55) ** 2 + ((v + 0.5) / 0.5) ** 2))
    inset = ndimage.distance_transform_edt(mask) / NCOLS  # distance to reserve edge
    west_side = 1.0 / (1.0 + np.exp((u + 0.1) / 0.12))
    west_belt = np.exp(-((inset / 0.07) ** 2)) * west_side
    propensity = 2.0 * nw + 1.4 * west_belt + 1.4 * field + 0.35 * fine
    propensity[taken] = -np.inf
    avail = mask & ~taken
    thresh = np.quantile(propensity[avail], 1.0 - fraction * mask.sum() / avail.sum())
    forest = (propensity >= thresh) & avail
    # small copses scattered in the grassland mosaic of the centre and south
    copse = generate.gaussian_field((NROWS, NCOLS), 5.0, rng.integers(2**31)) > 0.982
    copse &= avail & (v > -0.2)
    forest |= copse
    # a few glades (open grassland) inside the large forest block
    interior = ndimage.distance_transform_edt(forest) > 12
    glades = generate.gaussian_field((NROWS, NCOLS), 6.0, rng.integers(2**31)) > 0.975
    forest &= ~(ndimage.binary_dilation(glades & interior, iterations=3))
    # tidy: drop tiny specks and fill pinholes
    forest = ndimage.binary_opening(forest, structure=generate.FOUR_NEIGHBOURS)
    forest = ndimage.binary_closing(forest, structure=generate.FOUR_NEIGHBOURS)
    return forest & avail


def village(
    rng: np.random.Generator, mask: np.ndarray, fraction: float
) -> tuple[np.ndarray, tuple[int, int]]:
    """A compact settlement near the eastern edge of the reserve."""
    inset = ndimage.distance_transform_edt(mask)
    rr, cc = np.mgrid[0:NROWS, 0:NCOLS] + 0.5
    # centre: the eastern cell about 32 cells in from the edge, south of middle
    row0 = int(0.58 * NROWS)
    line = inset[row0]
    candidates = np.nonzero((line >= 30) & (line <= 34))[0]
    col0 = candidates.max()
    jitter = generate.gaussian_field((NROWS, NCOLS), 6, rng.integers(2**31))
    r = np.hypot((rr - row0) / 1.3, cc - col0) + 9.0 * (jitter - 0.5)
    n_cells = int(round(fraction * mask.sum()))
    order = np.argsort(np.where(mask, r, np.inf), axis=None, kind="stable")
    settle = np.zeros(mask.shape, dtype=bool)
    settle.flat[order[:n_cells]] = True
    settle = ndimage.binary_closing(settle, structure=generate.FOUR_NEIGHBOURS)
    return settle & mask, (row0, col0)


def road(mask: np.ndarray, start: tuple[int, int], rng: np.random.Generator) -> np.ndarray:
    """A 2-cell-wide road from the village west across the reserve.

    The centre line is a smooth function ``row = f(col)`` with slope below 1,
    and each column gets the two cells straddling it, so the road is
    4-connected.
    """
    row0, col0 = start
    cols = np.arange(NCOLS)
    t = (col0 - cols) / col0  # 0 at the village, 1 at the west edge
    f = row0 - 95.0 * t + 40.0 * t**2 + 10.0 * np.sin(2.5 * np.pi * t + rng.uniform(0, 0.5))
    slope = np.abs(np.diff(f))
    if slope.max() >= 1.0:
        raise RuntimeError(f"road centre line too steep for 4-connectivity: {slope.max():.2f}")
    rd = np.zeros(mask.shape, dtype=bool)
    for c in range(0, col0 + 1):
        r_top = int(np.floor(f[c]))
        rd[r_top : r_top + 2, c] = True
    rd &= mask
    # keep the part joined to the village end
    labels, _ = ndimage.label(rd, structure=generate.FOUR_NEIGHBOURS)
    keep = labels[int(np.floor(f[col0])), col0]
    return labels == keep


def build() -> np.ndarray:
    """Build the Veldrun Moor habitat raster (uint8 class codes)."""
    rng = np.random.default_rng(SEED)
    mask = reserve_outline(rng)
    wet = stream_valley(rng, mask)
    settle, centre = village(rng, mask, fraction=0.015)
    wet &= ~settle
    forest = forest_cover(rng, mask, wet | settle, fraction=0.28)
    rd = road(mask, centre, rng)

    hab = np.full((NROWS, NCOLS), NODATA, dtype=np.uint8)
    hab[mask] = GRASSLAND
    hab[forest] = FOREST
    hab[wet] = WETLAND
    hab[settle] = SETTLEMENT
    hab[rd] = ROAD
    return hab


def write_geotiff(hab: np.ndarray, path: Path) -> None:
    """Write the habitat codes as a LZW-compressed GeoTIFF."""
    profile = {
        "driver": "GTiff",
        "width": NCOLS,
        "height": NROWS,
        "count": 1,
        "dtype": "uint8",
        "crs": CRS.from_epsg(EPSG),
        "transform": from_origin(X0, Y0, CELL, CELL),
        "nodata": NODATA,
        "compress": "lzw",
    }
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(hab, 1)
        dst.set_band_description(1, "habitat class (Veldrun Moor, invented)")
        dst.update_tags(1, **{f"CLASS_{code}": name for code, name in CLASS_NAMES.items()})
        dst.update_tags(
            NAME="Veldrun Moor (invented demo landscape)",
            NOTE="Synthetic landscape for demos and tests; not a real place or field survey.",
        )
        dst.write_colormap(1, {code: (*rgb, 255) for code, rgb in CLASS_COLOURS.items()})


def write_preview(hab: np.ndarray, path: Path) -> None:
    """Write a PNG preview map with a legend and axes in km."""
    codes = sorted(CLASS_COLOURS)
    cmap = ListedColormap([np.array(CLASS_COLOURS[c]) / 255.0 for c in codes])
    norm = BoundaryNorm(np.arange(len(codes) + 1) - 0.5, cmap.N)
    extent_km = (
        X0 / 1000.0,
        (X0 + NCOLS * CELL) / 1000.0,
        (Y0 - NROWS * CELL) / 1000.0,
        Y0 / 1000.0,
    )
    fig = Figure(figsize=(8.4, 6.4), dpi=110)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.1, 0.1, 0.58, 0.82))
    ax.imshow(hab, cmap=cmap, norm=norm, extent=extent_km, interpolation="nearest")
    ax.set_xlabel("easting (km, EPSG:25833)")
    ax.set_ylabel("northing (km, EPSG:25833)")
    ax.set_title("Veldrun Moor (invented) - habitat classes")
    ax.ticklabel_format(useOffset=False, style="plain")
    handles = [
        Patch(
            facecolor=np.array(CLASS_COLOURS[c]) / 255.0,
            edgecolor="0.3",
            label=f"{c}  {CLASS_NAMES[c]}",
        )
        for c in codes
    ]
    fig.legend(
        handles=handles,
        loc="center left",
        bbox_to_anchor=(0.7, 0.55),
        frameon=False,
        title="code  class",
    )
    fig.text(
        0.7,
        0.2,
        "25 m cells, 10 km x 10 km\nsynthetic demo landscape,\nnot a field survey",
        fontsize=8,
        color="0.3",
    )
    fig.savefig(path, metadata={"Software": None})


def main() -> None:
    hab = build()
    write_geotiff(hab, TIF_PATH)
    write_preview(hab, PNG_PATH)
    n_all = hab.size
    n_in = int((hab != NODATA).sum())
    print(f"wrote {TIF_PATH.name} and {PNG_PATH.name}")
    print(f"{'code':>4}  {'class':<26} {'cells':>7} {'of square':>10} {'of reserve':>11}")
    for code, name in CLASS_NAMES.items():
        n = int((hab == code).sum())
        share = f"{n / n_in:10.1%}" if code != NODATA else f"{'-':>10}"
        print(f"{code:>4}  {name:<26} {n:>7} {n / n_all:10.1%} {share:>11}")
    print(f"reserve covers {n_in / n_all:.1%} of the square ({n_in * CELL**2 / 1e6:.1f} km2)")


if __name__ == "__main__":
    main()
