"""Effects of corridors: preyscape.analysis.effects (colonisation, flux).

Hand-made fields for the bookkeeping; the real solver for the spill-over decay
length and the flux across a transect. Units: km, km², years, animals per km².
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import xarray as xr

from preyscape.analysis.effects import colonisation_time, cumulative, net_flux
from preyscape.errors import InputError
from preyscape.model.movement import apply, build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.stepper import Stepper

H_M = 100.0  # cell size, metres (0.1 km)
AREA = (H_M / 1000.0) ** 2  # km² per cell
NO_REACTION = Interaction("lotka-volterra", attack_rate=0.0)


def hand_dataset(prey: np.ndarray, times, mask=None) -> xr.Dataset:
    """A results-like dataset (time, y, x) of 100 m cells without a CRS."""
    prey = np.asarray(prey, dtype=np.float32)
    _, ny, nx = prey.shape
    mask = np.ones((ny, nx), bool) if mask is None else mask
    x = 1000.0 + (np.arange(nx) + 0.5) * H_M
    y = 5000.0 - (np.arange(ny) + 0.5) * H_M
    return xr.Dataset(
        {"prey": (("time", "y", "x"), np.where(mask, prey, np.nan)),
         "mask": (("y", "x"), mask.astype(np.uint8))},
        coords={"time": np.asarray(times, float), "y": y, "x": x},
    )


# ---------------------------------------------------------------------------
# refuges: bookkeeping on a hand-made field
# ---------------------------------------------------------------------------


def test_colonisation_time_is_interpolated_between_snapshots():
    # design requirement: the occupied share is interpolated linearly in time
    target = np.zeros((3, 3), bool)
    target[0, :2] = target[1, :2] = True  # 4 cells
    frames = []
    for n_occupied in (0, 1, 3, 4):
        f = np.zeros((3, 3))
        idx = np.argwhere(target)[:n_occupied]
        f[tuple(idx.T)] = 2.0  # exactly the threshold counts as occupied
        f[2, 2] = 50.0  # outside the patch: irrelevant
        frames.append(f)
    ds = hand_dataset(frames, [0.0, 1.0, 2.0, 4.0])
    # shares 0, 0.25, 0.75, 1: 0.5 is crossed halfway between t = 1 and t = 2
    assert colonisation_time(ds, "prey", target, threshold=2.0, share=0.5) == pytest.approx(1.5)
    assert colonisation_time(ds, "prey", target, threshold=2.0, share=1.0) == pytest.approx(4.0)
    assert colonisation_time(ds, "prey", target, threshold=2.0, share=0.875) == pytest.approx(3.0)
    assert math.isnan(colonisation_time(ds, "prey", target, threshold=2.5))
    corner = np.zeros((3, 3), bool)
    corner[2, 2] = True
    assert colonisation_time(ds, "prey", corner, threshold=1.0) == 0.0  # occupied at start
    mask = ~target
    with pytest.raises(InputError, match="no cells with data"):
        colonisation_time(hand_dataset(frames, [0, 1, 2, 4], mask=mask), "prey", target,
                          threshold=2.0)


# ---------------------------------------------------------------------------
# corridors: flux across a transect, by the real solver
# ---------------------------------------------------------------------------
SHAPE = (10, 12)
DT = 0.001  # years
STEPS = 120


def diffusion_run(kind: str, edge: str, start: np.ndarray):
    """Pure movement from ``start``: snapshots after every step, and the movement used."""
    rng = np.random.default_rng(11)
    coef = rng.uniform(0.2, 0.8, SHAPE)  # km²/yr, heterogeneous on purpose
    mask = np.ones(SHAPE, bool)
    mask[4, 7] = False  # a no-data cell inside the box
    mv = build_movement(coef, mask, H_M, H_M, kind, edge=edge)
    zeros = np.zeros(SHAPE)
    st = Stepper(mask, mv, mv, zeros, zeros, zeros, NO_REACTION, DT)
    N = np.where(mask, start, 0.0)
    P = np.zeros(SHAPE)
    frames = [N.copy()]
    for k in range(STEPS):
        st.step(N, P, k)
        frames.append(N.copy())
    times = DT * np.arange(STEPS + 1)
    return mv, frames, times


def x_faces(col: int) -> np.ndarray:
    f = np.zeros((SHAPE[0], SHAPE[1] + 1), bool)
    f[:, col] = True  # face `col` separates columns col-1 and col
    return f


def no_faces_y() -> np.ndarray:
    return np.zeros((SHAPE[0] + 1, SHAPE[1]), bool)


@pytest.mark.parametrize("kind", ["fickian", "ecological"])
def test_net_flux_across_a_vertical_line_is_the_change_east_of_it(kind):
    # design requirement (conservation): animals crossing the line are the rate of change
    # of the animals east of it, and its time integral is their change
    start = np.zeros(SHAPE)
    start[:, :4] = 50.0
    mv, frames, times = diffusion_run(kind, "closed", start)
    line = 6
    flux = net_flux(frames, times, mv.cx, mv.cy, mv.w, x_faces(line), no_faces_y(), 1.0, 0.0,
                    AREA)
    east = np.array([f[:, line:].sum() * AREA for f in frames])
    # instantaneous: the movement operator's own rate east of the line (reference numpy
    # implementation preyscape.model.movement.apply)
    for k in (0, 40, STEPS):
        rate = apply(mv, frames[k])[:, line:].sum() * AREA
        assert flux[k] == pytest.approx(rate, rel=1e-12, abs=1e-12 * abs(rate))
    # against the solver: central differences and the change over the run
    k = np.arange(10, STEPS - 1)
    central = (east[k + 1] - east[k - 1]) / (2 * DT)
    np.testing.assert_allclose(flux[k], central, rtol=2e-3)
    total = cumulative(flux, times)
    assert total[0] == 0.0
    assert total[-1] == pytest.approx(east[-1] - east[0], rel=5e-4)
    assert east[-1] > east[0] > -1e-12  # something did cross


def test_net_flux_sign_on_a_horizontal_line():
    # design requirement: +1 counts north-to-south flow as positive, -1 the reverse
    start = np.zeros(SHAPE)
    start[:3, :] = 20.0  # animals start in the north
    mv, frames, times = diffusion_run("fickian", "closed", start)
    fy = np.zeros((SHAPE[0] + 1, SHAPE[1]), bool)
    fy[5, :] = True  # between rows 4 and 5
    fx = np.zeros((SHAPE[0], SHAPE[1] + 1), bool)
    south = net_flux(frames, times, mv.cx, mv.cy, mv.w, fx, fy, 0.0, 1.0, AREA)
    north = net_flux(frames, times, mv.cx, mv.cy, mv.w, fx, fy, 0.0, -1.0, AREA)
    assert np.all(south[20:] > 0)
    np.testing.assert_array_equal(north, -south)
    gain = np.array([f[5:, :].sum() * AREA for f in frames])
    assert cumulative(south, times)[-1] == pytest.approx(gain[-1] - gain[0], rel=5e-4)


def test_net_flux_out_of_hostile_edges_is_the_loss():
    # design requirement (conservation): with hostile edges and no reaction, the animals
    # leaving through the edge faces are all the animals lost
    start = np.zeros(SHAPE)
    start[2:8, 3:6] = 30.0  # away from the edges: the loss starts smoothly
    mv, frames, times = diffusion_run("fickian", "hostile", start)
    fx = np.zeros((SHAPE[0], SHAPE[1] + 1), bool)
    fx[:, [0, -1]] = True
    fy = np.zeros((SHAPE[0] + 1, SHAPE[1]), bool)
    fy[[0, -1], :] = True
    sx = np.ones(fx.shape)
    sx[:, 0] = -1.0  # outward at the west edge is east to west
    sy = np.ones(fy.shape)
    sy[0, :] = -1.0  # outward at the north edge is south to north
    out = net_flux(frames, times, mv.cx, mv.cy, mv.w, fx, fy, sx, sy, AREA)
    assert np.all(out[1:] > 0)
    total = np.array([f.sum() * AREA for f in frames])
    assert cumulative(out, times)[-1] == pytest.approx(total[0] - total[-1], rel=5e-4)


def test_fluxes_and_colonisation_stream_the_snapshots(tmp_path):
    # Design requirement (DEVELOPERS.md, "memory O(grid) regardless of run length"): the
    # flows across transects and the colonisation of targets read one snapshot at a time,
    # so 40 snapshots hold no more memory than 10 (keeping them would add 30 grids).
    from conftest import STREAM_SHAPE, stream_peaks

    from preyscape.analysis.effects import colonisation, transect_fluxes

    grid_bytes = 8 * STREAM_SHAPE[0] * STREAM_SHAPE[1]
    mv = build_movement(np.full(STREAM_SHAPE, 2.0), np.ones(STREAM_SHAPE, bool), H_M, H_M,
                        "fickian")
    ops = [{"span": (0.0, math.inf), "predator_cx": mv.cx, "predator_cy": mv.cy,
            "predator_w": mv.w}]
    target = np.zeros(STREAM_SHAPE, bool)
    target[40:50, 100:110] = True

    def both(ds):
        x0, y0 = float(ds.x[0]), float(ds.y[0])  # the centre of cell (0, 0)
        # drawn northwards between the centres of columns 49 and 50 (79 and 80):
        # positive from west to east
        lines = [[(x0 + xl, y0 - 9550.0), (x0 + xl, y0 + 50.0)] for xl in (4960.0, 7960.0)]
        return (transect_fluxes(ds, ops, lines, "predator"),
                colonisation(ds, [("east", target)], {"predator": 10.0}, 0.5))

    peaks, results = stream_peaks(tmp_path, both)
    (times, flows), found = results[40]
    assert len(flows) == 2 and flows[0].shape == times.shape == (41,)
    # the front (x = 1 + 1.5 t km) crosses the first line at t = 2.6, the second at 4.6
    assert flows[0][10] > 0 and flows[1][18] > 0 and flows[1][10] < 0.01 * flows[0][10]
    # half of 20 per km² reaches the target's mean column (x = 10.45 km) at t = 6.3
    assert found[0].years["predator"] == pytest.approx((10.45 - 1.0) / 1.5, abs=0.1)
    assert peaks[40] < 1.5 * peaks[10]
    assert peaks[40] - peaks[10] < 3 * grid_bytes
