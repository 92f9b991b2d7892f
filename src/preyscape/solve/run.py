"""The run loop: fixed steps, snapshots to a sink, checkpoints, progress.

The loop knows nothing of file formats: it hands snapshots to a *sink* with
``write(t, N, P)`` and, optionally, ``checkpoint(step, N, P)``. A run resumed
from a checkpoint with the same stepper reaches bitwise the same state as an
uninterrupted run, because each step depends only on the state and on the
step index.

A run whose measures switch on or off part-way is a sequence of *epochs*,
each with its own stepper (:func:`integrate_epochs`); switches fall on save
points, and each epoch starts with the stepper's damped steps, because a
switched measure is a sharp change of the operator (Rannacher 1984).
"""

from __future__ import annotations

import math
import sys
from collections.abc import Callable, Sequence
from typing import Protocol

import numpy as np

from preyscape.solve.stepper import Stepper

FLOAT32_MAX = float(np.finfo(np.float32).max)
"""Largest density a snapshot can hold (snapshots are float32), animals/km²."""


class NonFiniteDensities(FloatingPointError):
    """The densities stopped being finite (or outgrew what a snapshot can store).

    Attributes
    ----------
    time : float
        The save point where it was found, years.
    species : str
        ``"prey"``, ``"predator"`` or ``"prey or predator"``.
    """

    def __init__(self, time: float, species: str) -> None:
        self.time = float(time)
        self.species = species
        super().__init__(f"{species} densities are no longer finite at t = {time:g} yr")


def _not_finite(N: np.ndarray, P: np.ndarray, stats) -> str | None:
    """Which species stopped being finite, or None.

    A NaN that the positivity fix met turns its field to zeros and its
    clipped total to NaN, so the total is checked as well.
    """
    for name, u in (("prey", N), ("predator", P)):
        top = float(u.max())
        if not (math.isfinite(top) and top <= FLOAT32_MAX):
            return name
    if stats is not None and not math.isfinite(stats.clipped):
        return "prey or predator"
    return None


class Sink(Protocol):
    """Receives snapshots from :func:`integrate`."""

    def write(self, t: float, N: np.ndarray, P: np.ndarray) -> None:
        """Store the densities (animals/km²) at time ``t`` (years)."""


def schedule(years: float, save_every: float, dt: float) -> tuple[int, int]:
    """Total steps and steps per save for a run, checking they are whole numbers.

    Parameters
    ----------
    years, save_every, dt : float
        Run length, save interval and step, years.
    """
    per_save = round(save_every / dt)
    if per_save < 1 or abs(per_save * dt - save_every) > 1e-9 * save_every:
        raise ValueError(f"save interval {save_every} yr is not a whole number of steps {dt} yr")
    n_saves = round(years / save_every)
    return n_saves * per_save, per_save


def integrate(
    stepper: Stepper,
    N: np.ndarray,
    P: np.ndarray,
    years: float,
    save_every: float,
    sink: Sink,
    start_step: int = 0,
    progress: bool | None = None,
) -> None:
    """Advance the densities to ``years``, saving every ``save_every`` years.

    Parameters
    ----------
    stepper : Stepper
        The time step (its ``dt`` divides ``save_every``).
    N, P : numpy.ndarray
        Prey and predator density, animals/km², float64; advanced in place.
    years : float
        Run length, years.
    save_every : float
        Save interval, years.
    sink : Sink
        Receives the snapshot at the start (unless resuming) and after every
        save interval; ``sink.checkpoint(step, N, P)`` is called after each
        save when the sink has it.
    start_step : int
        Steps already taken (resume from a checkpoint).
    progress : bool, optional
        Show a progress bar; default: only when standard error is a terminal.
    """
    integrate_epochs(lambda _k: stepper, [(0.0, years)], N, P, save_every, stepper.dt, sink,
                     start_step, progress)


def integrate_epochs(
    make_stepper: Callable[[int], Stepper],
    epochs: Sequence[tuple[float, float]],
    N: np.ndarray,
    P: np.ndarray,
    save_every: float,
    dt: float,
    sink: Sink,
    start_step: int = 0,
    progress: bool | None = None,
) -> None:
    """Advance through consecutive epochs, each with its own stepper.

    Parameters
    ----------
    make_stepper : callable
        ``make_stepper(k)`` returns the :class:`Stepper` of epoch ``k`` (built
        only when that epoch starts, and dropped when it ends, so one set of
        operators is in memory at a time). Its ``dt`` must equal ``dt``.
    epochs : sequence of (float, float)
        ``(t0, t1)`` in years, consecutive from 0, each a whole number of
        save intervals long.
    N, P : numpy.ndarray
        Densities, animals/km², advanced in place.
    save_every, dt : float
        Save interval and step, years.
    sink : Sink
        As for :func:`integrate`.
    start_step : int
        Steps already taken (resume from a checkpoint at a save point).
    progress : bool, optional
        Progress bar; default only on a terminal.
    """
    years = epochs[-1][1]
    n_steps, per_save = schedule(years, save_every, dt)
    if start_step % per_save:
        raise ValueError("a run resumes only from a save point")
    bounds = []
    for t0, t1 in epochs:
        s0, s1 = round(t0 / save_every) * per_save, round(t1 / save_every) * per_save
        bounds.append((s0, s1))
    if bounds[0][0] != 0 or bounds[-1][1] != n_steps or any(
        a[1] != b[0] for a, b in zip(bounds, bounds[1:], strict=False)
    ):
        raise ValueError("epochs must be consecutive from 0 to the end of the run")
    if start_step == 0:
        sink.write(0.0, N, P)
    show = sys.stderr.isatty() if progress is None else progress
    bar = None
    if show:
        from tqdm import tqdm

        bar = tqdm(total=n_steps, initial=start_step, unit="step", desc="simulating",
                   leave=False, file=sys.stderr)
    checkpoint = getattr(sink, "checkpoint", None)
    for e, (s0, s1) in enumerate(bounds):
        if s1 <= start_step:
            continue
        stepper = make_stepper(e)
        if abs(stepper.dt - dt) > 1e-12 * dt:
            raise ValueError("every epoch's stepper must use the run's step")
        for k in range(max(s0, start_step), s1, per_save):
            # the index within the epoch decides the damped start steps
            stepper.advance(N, P, k - s0, per_save)
            t = (k + per_save) // per_save * save_every
            bad = _not_finite(N, P, getattr(stepper, "stats", None))
            if bad:
                raise NonFiniteDensities(t, bad)
            sink.write(t, N, P)
            if checkpoint is not None:
                checkpoint(k + per_save, N, P)
            if bar is not None:
                bar.update(per_save)
        del stepper
    if bar is not None:
        bar.close()
