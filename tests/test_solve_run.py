"""The run loop: schedule, snapshots, and bitwise resume from a checkpoint."""

from __future__ import annotations

import numpy as np
import pytest

from preyscape.model.movement import build_movement
from preyscape.model.reactions import Interaction
from preyscape.solve.run import integrate, schedule
from preyscape.solve.stepper import Stepper


class Keep:
    def __init__(self, stop_after=None):
        self.times, self.frames, self.checkpoints = [], [], {}
        self.stop_after = stop_after

    def write(self, t, N, P):
        self.times.append(t)
        self.frames.append((N.copy(), P.copy()))

    def checkpoint(self, step, N, P):
        self.checkpoints[step] = (N.copy(), P.copy())
        if self.stop_after is not None and len(self.checkpoints) >= self.stop_after:
            raise KeyboardInterrupt  # simulated interruption


def _stepper():
    shape = (20, 24)
    rng = np.random.default_rng(0)
    mask = np.ones(shape, bool)
    D = rng.uniform(0.5, 2.0, shape)
    mv = build_movement(D, mask, 100.0, 100.0)
    mv_p = build_movement(3 * D, mask, 100.0, 100.0, "ecological")
    inter = Interaction("holling-ii", 1.0, 0.3, 0.6)
    return Stepper(mask, mv, mv_p, np.full(shape, 1.0), np.full(shape, 0.5),
                   np.full(shape, 0.3), inter, dt=0.05)


def _start():
    yy, xx = np.mgrid[0:20, 0:24]
    return 1.5 + 0.0 * xx, np.where((xx - 5) ** 2 + (yy - 5) ** 2 < 9, 0.5, 0.0)


def test_schedule_counts_steps_and_refuses_misfits():
    assert schedule(2.0, 0.5, 0.05) == (40, 10)
    with pytest.raises(ValueError):
        schedule(2.0, 0.5, 0.07)


def test_snapshots_at_the_start_and_every_interval():
    N, P = _start()
    sink = Keep()
    integrate(_stepper(), N, P, 1.0, 0.25, sink, progress=False)
    assert sink.times == [0.0, 0.25, 0.5, 0.75, 1.0]
    assert sorted(sink.checkpoints) == [5, 10, 15, 20]


def test_resume_reaches_bitwise_the_same_state():
    # design requirement: each step depends only on the state and the step index
    N, P = _start()
    full = Keep()
    integrate(_stepper(), N, P, 2.0, 0.25, full, progress=False)
    N2, P2 = _start()
    part = Keep(stop_after=3)
    with pytest.raises(KeyboardInterrupt):
        integrate(_stepper(), N2, P2, 2.0, 0.25, part, progress=False)
    step = max(part.checkpoints)
    assert step == 15
    Nr, Pr = (a.copy() for a in part.checkpoints[step])
    rest = Keep()
    integrate(_stepper(), Nr, Pr, 2.0, 0.25, rest, start_step=step, progress=False)
    assert np.array_equal(Nr, N) and np.array_equal(Pr, P)
    assert rest.times == full.times[4:]


def test_one_epoch_is_the_plain_run_bitwise():
    # design requirement: splitting the loop into epochs changes nothing by itself
    from preyscape.solve.run import integrate_epochs

    N, P = _start()
    a = Keep()
    integrate(_stepper(), N, P, 1.0, 0.25, a, progress=False)
    N2, P2 = _start()
    b = Keep()
    integrate_epochs(lambda k: _stepper(), [(0.0, 1.0)], N2, P2, 0.25, 0.05, b, progress=False)
    assert np.array_equal(N, N2) and np.array_equal(P, P2)
    assert a.times == b.times and sorted(a.checkpoints) == sorted(b.checkpoints)


def test_epochs_resume_bitwise_and_restart_damped():
    # design requirement: a resumed run with epochs matches an uninterrupted one bitwise;
    # each epoch starts with the stepper's damped steps (index counted within the epoch)
    from preyscape.solve.run import integrate_epochs

    built = []

    def make(k):
        built.append(k)
        return _stepper()

    epochs = [(0.0, 0.5), (0.5, 2.0)]
    N, P = _start()
    full = Keep()
    integrate_epochs(make, epochs, N, P, 0.25, 0.05, full, progress=False)
    assert built == [0, 1]
    N2, P2 = _start()
    part = Keep(stop_after=4)
    with pytest.raises(KeyboardInterrupt):
        integrate_epochs(make, epochs, N2, P2, 0.25, 0.05, part, progress=False)
    step = max(part.checkpoints)
    Nr, Pr = (x.copy() for x in part.checkpoints[step])
    built.clear()
    rest = Keep()
    integrate_epochs(make, epochs, Nr, Pr, 0.25, 0.05, rest, start_step=step, progress=False)
    assert built == [1]  # the finished epoch is not rebuilt
    assert np.array_equal(Nr, N) and np.array_equal(Pr, P)
    # a plain run (one epoch) differs: the second epoch restarted with damped steps
    N3, P3 = _start()
    integrate(_stepper(), N3, P3, 2.0, 0.25, Keep(), progress=False)
    assert not np.array_equal(N3, N)
    with pytest.raises(ValueError):
        integrate_epochs(make, [(0.0, 0.5), (0.75, 2.0)], *_start(), 0.25, 0.05, Keep(),
                         progress=False)


class _Blowing:
    """A stand-in stepper whose densities go bad in the second save interval."""

    def __init__(self, how):
        from preyscape.solve.stepper import StepStats

        self.dt, self.how, self.stats = 0.05, how, StepStats()

    def advance(self, N, P, index, n):
        if index >= 5:
            if self.how == "inf":
                N[0, 0] = np.inf
            elif self.how == "float32":
                P[0, 0] = 1e39  # finite, but beyond what a float32 snapshot holds
            else:  # a NaN the positivity fix met: the field is zeros, the clip total NaN
                self.stats.clipped = np.nan


@pytest.mark.parametrize("how,species", [("inf", "prey"), ("float32", "predator"),
                                         ("clip", "prey or predator")])
def test_densities_that_stop_being_finite_are_reported(how, species):
    # design requirement: a run never continues (or ends) silently on non-finite densities
    from preyscape.solve.run import NonFiniteDensities

    N, P = _start()
    sink = Keep()
    with pytest.raises(NonFiniteDensities) as err:
        integrate(_Blowing(how), N, P, 1.0, 0.25, sink, progress=False)
    assert err.value.species == species and err.value.time == 0.5
    assert sink.times == [0.0, 0.25]  # the bad snapshot was not stored
