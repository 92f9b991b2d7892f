"""The time step: Strang splitting of local interaction and movement.

One step of length ``dt`` (years) is ``R(dt/2) M(dt) R(dt/2)``: half a
reaction step in every cell, the movement of both species, half a reaction
step (Strang 1968, SIAM J Numer Anal 5:506). Movement uses the
Peaceman–Rachford alternating-direction implicit scheme::

    (I - dt/2 Lx) u*      = (I + dt/2 Ly) u
    (I - dt/2 Ly) u(n+1)  = (I + dt/2 Lx) u*

which is unconditionally stable and second order also for non-commuting
``Lx, Ly`` (Peaceman & Rachford 1955, J SIAM 3:28; Hundsdorfer & Verwer 2003,
§IV.3). Its implicit factors are positive (M-matrices) and the explicit
factors are positive while ``dt/2 * dg <= 1``. For the high-frequency content
of sharp starts, the first ``damping_steps`` steps replace Peaceman–Rachford
by two backward-Euler half steps (L-stable; Rannacher 1984, Numer Math
43:309), which use the same prefactored matrices. Any remaining undershoot is
removed by a mass-conserving clip (:func:`~preyscape.solve.kernels.make_positive`).

Schemes (``scheme``):

``"adi"``
    the above: second order in time.
``"implicit-euler"``
    backward-Euler sweeps only: first order, strongly damped.
``"explicit"``
    forward-Euler movement substeps within the same splitting, for
    cross-checks (stable only for small steps; substeps are chosen for it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from preyscape.model.movement import Movement
from preyscape.model.reactions import Interaction
from preyscape.solve import kernels

SCHEMES = ("adi", "implicit-euler", "explicit")


@dataclass
class _Factors:
    ax: np.ndarray
    cx: np.ndarray
    ix: np.ndarray
    ay: np.ndarray
    cy: np.ndarray
    iy: np.ndarray


def _factor(mv: Movement, tau: float) -> _Factors:
    shape = mv.x.lo.shape
    f = _Factors(*(np.empty(shape) for _ in range(6)))
    kernels.factor_x(mv.x.lo, mv.x.up, mv.x.dg, tau, f.ax, f.cx, f.ix)
    kernels.factor_y(mv.y.lo, mv.y.up, mv.y.dg, tau, f.ay, f.cy, f.iy)
    return f


@dataclass
class StepStats:
    """Diagnostics accumulated over steps.

    Attributes
    ----------
    steps : int
        Steps taken.
    clipped : float
        Total density removed by the positivity clip, animals/km² summed over
        cells (and given back by rescaling, so mass is unchanged).
    """

    steps: int = 0
    clipped: float = 0.0


@dataclass
class Stepper:
    """Advance prey and predator densities by fixed steps.

    Parameters
    ----------
    mask : numpy.ndarray of bool
        Cells with data, shape ``(rows, cols)``.
    prey_movement, predator_movement : Movement
        Movement operators (1/yr coefficients).
    r : numpy.ndarray
        Prey growth rate per cell, 1/yr (negative in sink cells).
    inv_K : numpy.ndarray
        Inverse carrying capacity per cell, km² (0: no density limit).
    m : numpy.ndarray
        Predator mortality per cell, 1/yr.
    interaction : Interaction
        Interaction form and constants.
    dt : float
        Step length, years.
    refuge : numpy.ndarray, optional
        Fraction of prey shielded from predation per cell (0–1).
    scheme : {"adi", "implicit-euler", "explicit"}
        Movement scheme (see module docstring).
    damping_steps : int
        Steps at the start done with backward-Euler sweeps (``"adi"`` only).
    reaction_substeps : int
        RK4 substeps per half reaction step.
    """

    mask: np.ndarray
    prey_movement: Movement
    predator_movement: Movement
    r: np.ndarray
    inv_K: np.ndarray
    m: np.ndarray
    interaction: Interaction
    dt: float
    refuge: np.ndarray | None = None
    scheme: str = "adi"
    damping_steps: int = 2
    reaction_substeps: int = 1
    stats: StepStats = field(default_factory=StepStats)

    def __post_init__(self) -> None:
        if self.scheme not in SCHEMES:
            raise ValueError(f"scheme must be one of {SCHEMES}, not {self.scheme!r}")
        if not (self.dt > 0 and math.isfinite(self.dt)):
            raise ValueError("dt must be a positive number of years")
        shape = self.mask.shape
        self.mask = np.ascontiguousarray(self.mask, dtype=np.bool_)
        self.r = np.ascontiguousarray(np.broadcast_to(self.r, shape), dtype=float)
        self.inv_K = np.ascontiguousarray(np.broadcast_to(self.inv_K, shape), dtype=float)
        self.m = np.ascontiguousarray(np.broadcast_to(self.m, shape), dtype=float)
        ref = 0.0 if self.refuge is None else self.refuge
        self.refuge = np.ascontiguousarray(np.broadcast_to(ref, shape), dtype=float)
        self._work = np.empty(shape)
        self._rows = np.empty(shape[0])
        self._neg = np.empty(shape[0])
        tau = 0.5 * self.dt
        self._mv = (self.prey_movement, self.predator_movement)
        if self.scheme == "explicit":
            self._factors = None
            rate = max(mv.max_rate for mv in self._mv)
            # forward Euler is positive and stable for dt_sub * rate <= 1
            self._substeps = max(1, math.ceil(self.dt * rate / 0.9))
        else:
            self._factors = tuple(_factor(mv, tau) for mv in self._mv)
            self._substeps = 1
        # the explicit half of Peaceman-Rachford is positive while tau*dg <= 1
        self._may_undershoot = self.scheme == "adi" and any(
            tau * max(mv.max_rate_along()) > 1.0 for mv in self._mv
        )

    # ------------------------------------------------------------------
    def _react(self, N: np.ndarray, P: np.ndarray, dt: float) -> None:
        it = self.interaction
        kernels.react(
            N, P, dt, self.reaction_substeps, self.r, self.inv_K, self.m,
            it.attack_rate, it.h, it.c, it.efficiency, self.refuge, self.mask,
        )

    def _move(self, u: np.ndarray, k: int, damped: bool) -> None:
        mv = self._mv[k]
        w = self._work
        if self.scheme == "explicit":
            sub = self.dt / self._substeps
            for _ in range(self._substeps):
                kernels.explicit_step(
                    u, w, sub, mv.x.lo, mv.x.up, mv.x.dg, mv.y.lo, mv.y.up, mv.y.dg
                )
                u[...] = w
            return
        f = self._factors[k]
        tau = 0.5 * self.dt
        if damped:
            # two backward-Euler half steps, L-stable
            for _ in range(2):
                kernels.sweep_x(u, w, 0.0, mv.y.lo, mv.y.up, mv.y.dg, f.ax, f.cx, f.ix)
                kernels.sweep_y(w, u, 0.0, mv.x.lo, mv.x.up, mv.x.dg, f.ay, f.cy, f.iy)
            return
        kernels.sweep_x(u, w, tau, mv.y.lo, mv.y.up, mv.y.dg, f.ax, f.cx, f.ix)
        kernels.sweep_y(w, u, tau, mv.x.lo, mv.x.up, mv.x.dg, f.ay, f.cy, f.iy)
        if self._may_undershoot:
            self.stats.clipped += kernels.make_positive(u, self._rows, self._neg)

    def step(self, N: np.ndarray, P: np.ndarray, index: int) -> None:
        """Advance ``N`` and ``P`` (animals/km², float64, C-contiguous) by one step, in place.

        Parameters
        ----------
        N, P : numpy.ndarray
            Prey and predator densities; modified in place.
        index : int
            Number of steps taken before this one (0 for the first); decides
            whether this is a damped start step. Passing the same index on
            resume gives bitwise the same result.
        """
        half = 0.5 * self.dt
        damped = self.scheme == "implicit-euler" or (
            self.scheme == "adi" and index < self.damping_steps
        )
        self._react(N, P, half)
        self._move(N, 0, damped)
        self._move(P, 1, damped)
        self._react(N, P, half)
        self.stats.steps += 1


def auto_step(
    rates_per_year: list[float],
    period_years: float | None,
    save_every: float,
    accuracy: float = 0.05,
) -> float:
    """Step length from the reaction time scales, years.

    ``dt = accuracy / max(rate)``, at most 1/200 of the oscillation period
    when one is known, then shortened so a whole number of steps fits in
    ``save_every`` (common practice, no source: 0.05 of the fastest time scale
    keeps an RK4 reaction step well inside its accuracy range).

    Parameters
    ----------
    rates_per_year : list of float
        Characteristic per-capita rates, 1/yr (growth, mortality, maximal
        predation and predator growth).
    period_years : float or None
        Period of local oscillations, years.
    save_every : float
        Save interval, years.
    accuracy : float
        Fraction of the fastest time scale per step.
    """
    fastest = max([abs(x) for x in rates_per_year if math.isfinite(x)] + [1e-12])
    dt = accuracy / fastest
    if period_years is not None and math.isfinite(period_years) and period_years > 0:
        dt = min(dt, period_years / 200.0)
    dt = min(dt, save_every)
    n = math.ceil(save_every / dt - 1e-9)
    return save_every / n
