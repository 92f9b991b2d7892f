"""The extinction threshold: densities below a level set to exactly zero, at each census.

A deterministic density never reaches zero by itself: a population that
declines for decades keeps a tiny, positive density (a millionth of an animal
per km²) and can grow back from it when conditions improve, which no real
population of whole animals does. Mollison (1991, Math Biosci 107:255; from
memory) called the predator density of 10⁻¹⁸ fox behind such recoveries in a
rabies model the "atto-fox". Setting densities below a threshold to zero is
the usual remedy (common practice, no source).

When the threshold acts matters. A cell's density rises from zero
continuously as animals move in, so a floor applied after every time step
stops animals from entering empty cells, the more so the shorter the step: in
the limit nothing would ever spread. The threshold therefore acts as a
*census*: at the end of every :meth:`~preyscape.solve.stepper.Stepper.advance`,
which in a run is every save interval (``run.save_every``), so results do not
depend on the time step (``tests/test_solve_extinction.py``). Between two
censuses animals move and grow freely.

A threshold changes the model: it removes animals, and it slows invasion
fronts, whose speed is set at their low-density leading edge (Brunet &
Derrida 1997, Phys Rev E 56:2597: a cut-off slows a pulled front, less and
less as the cut-off falls). Measured on a Fisher–KPP front (r = D = 1,
census every 0.5 yr, 10–20 yr): 1.56 km/yr with a threshold of 1 % of the
capacity, 1.85 km/yr with 0.01 %, 1.89 km/yr without (2√(rD) = 2 km/yr).

The stepper calls :func:`apply_thresholds` only when a threshold is set, so
runs without one are unchanged, bit for bit.

Examples
--------
>>> import numpy as np
>>> u = np.array([[0.5, 2.0, 0.99], [1.0, 0.0, 3.0]])
>>> removed = floor_below(u, 1.0, np.zeros(2))
>>> u.tolist(), float(removed)
([[0.0, 2.0, 0.0], [1.0, 0.0, 3.0]], 1.49)
"""

from __future__ import annotations

import numpy as np

from preyscape.solve.kernels import _jit

__all__ = ["apply_thresholds", "floor_below"]

# the kernels' options and cache folder (a read-only installation caches per user); one
# serial pass: it runs once per save interval, and a parallel loop would cost a longer
# first compile than it saves


@_jit()
def _floor_rows(u, threshold, removed):
    ny, nx = u.shape
    for i in range(ny):
        s = 0.0
        for j in range(nx):
            v = u[i, j]
            if v < threshold and v != 0.0:
                s += v
                u[i, j] = 0.0
        removed[i] = s


@_jit()
def _ordered_sum(a):
    s = 0.0
    for k in range(a.shape[0]):
        s += a[k]
    return s


def floor_below(u: np.ndarray, threshold: float, work: np.ndarray) -> float:
    """Set every density below ``threshold`` to exactly zero, in place.

    Parameters
    ----------
    u : numpy.ndarray
        Densities, animals/km², float64, C-contiguous, shape ``(rows, cols)``.
    threshold : float
        Densities strictly below it become 0, animals/km²; a density equal to
        it is kept.
    work : numpy.ndarray
        A float64 work array of one value per row.

    Returns
    -------
    float
        The density removed, animals/km² summed over cells (multiply by the
        cell area in km² for animals). Sums are taken per row and added in
        order.
    """
    _floor_rows(u, float(threshold), work)
    return float(_ordered_sum(work))


def apply_thresholds(N: np.ndarray, P: np.ndarray, thresholds: tuple[float, float],
                     work: np.ndarray) -> float:
    """Apply the prey's and the predator's thresholds (0: none), animals/km².

    Returns the total density removed from both species, animals/km² summed
    over cells.
    """
    removed = 0.0
    for u, thr in zip((N, P), thresholds, strict=True):
        if thr > 0.0:
            removed += floor_below(u, thr, work)
    return removed
