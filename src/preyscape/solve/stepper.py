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
removed by a mass-conserving clip (:func:`~preyscape.solve.kernels.fix_negative`).

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
from preyscape.solve.extinction import apply_thresholds

SCHEMES = ("adi", "implicit-euler", "explicit")


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
    floored: float = 0.0  # density removed by extinction thresholds, animals/km² over cells


@dataclass
class Stepper:
    """Advance prey and predator densities by fixed steps.

    Parameters
    ----------
    mask : numpy.ndarray of bool
        Cells with data, shape ``(rows, cols)``.
    prey_movement, predator_movement : Movement
        Movement operators (face conductances, 1/yr).
    r : numpy.ndarray
        Prey growth rate per cell, 1/yr (negative in sink cells); stored as float32.
    inv_K : numpy.ndarray
        Inverse carrying capacity per cell, km² (0: no density limit); float32.
    m : numpy.ndarray
        Predator mortality per cell, 1/yr; float32.
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
        Reaction substeps per reaction step (1: plain RK4 where safe; more:
        RK4 on log densities with that many substeps).
    extinction : tuple of float, optional
        Prey and predator densities below which a cell is set to zero at the
        end of every :meth:`advance` (the run loop advances from save point to
        save point), animals/km² (0: none); see :mod:`preyscape.solve.extinction`.
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
    extinction: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        if self.scheme not in SCHEMES:
            raise ValueError(f"scheme must be one of {SCHEMES}, not {self.scheme!r}")
        if not (self.dt > 0 and math.isfinite(self.dt)):
            raise ValueError("dt must be a positive number of years")
        shape = self.mask.shape
        self.mask = np.require(self.mask, dtype=np.bool_, requirements=["C", "A", "W"])

        def full(v):
            # per-cell parameters are stored as float32 (7 significant digits, far
            # beyond any habitat parameter); all arithmetic is float64. Always a
            # writable C array (a float32 field is used as it is, not copied): the
            # kernels are compiled for exactly that type, and a read-only view (as
            # np.broadcast_to gives) would compile them a second time
            a = np.asarray(v)
            if a.shape != shape:
                a = np.broadcast_to(a, shape)
            return np.require(a, dtype=np.float32, requirements=["C", "A", "W"])

        self.r, self.inv_K, self.m = full(self.r), full(self.inv_K), full(self.m)
        if self.refuge is None or np.ndim(self.refuge) == 0:
            ref = 0.0 if self.refuge is None else float(self.refuge)
            self._refuge = np.full((1, 1), ref, dtype=np.float32)
        else:
            self._refuge = full(self.refuge)
        tau = 0.5 * self.dt
        self._mv = (self.prey_movement, self.predator_movement)
        ones = None
        ws = []
        for mv in self._mv:  # Fickian movement: unit weights, one shared array
            if mv.w is None and ones is None:
                ones = np.ones(shape, dtype=np.float32)
            ws.append(ones if mv.w is None else mv.w)
        self._w = tuple(ws)
        if self.scheme == "explicit":
            rate = max(mv.max_rate for mv in self._mv)
            # forward Euler is positive and stable for dt_sub * rate <= 1
            self._substeps = max(1, math.ceil(self.dt * rate / 0.9))
            self._work = np.empty(shape)
        else:
            # pass 1 sweeps rows of the grid; pass 2 sweeps rows of the transposed
            # grid, so both run along contiguous memory (coefficients stored twice)
            mask_t = np.ascontiguousarray(self.mask.T)
            self._rows, self._cols = [], []
            wt_cache: dict[int, np.ndarray] = {}
            for mv, w in zip(self._mv, self._w, strict=True):
                inv = np.empty(shape)
                kernels.factor_x(mv.cx, w, self.mask, tau, inv)
                self._rows.append((mv.cx, mv.cy, w, inv))
                if id(w) not in wt_cache:
                    wt_cache[id(w)] = np.ascontiguousarray(w.T)
                wt = wt_cache[id(w)]
                al, ac = np.ascontiguousarray(mv.cy.T), np.ascontiguousarray(mv.cx.T)
                invt = np.empty(shape[::-1])
                kernels.factor_x(al, wt, mask_t, tau, invt)
                self._cols.append((al, ac, wt, invt))
            self._T = (np.empty(shape[::-1]), np.empty(shape[::-1]))
        self._neg = (np.zeros(shape[1]), np.zeros(shape[1]))
        self._neg_rows = (np.zeros(shape[0]), np.zeros(shape[0]))
        self._tot = np.zeros(shape[0])
        # the explicit half of Peaceman-Rachford is positive while tau*dg <= 1
        self._may_undershoot = self.scheme == "adi" and any(
            tau * max(mv.max_rate_along()) > 1.0 for mv in self._mv
        )

    # ------------------------------------------------------------------
    def _react(self, N: np.ndarray, P: np.ndarray, dt: float) -> None:
        it = self.interaction
        kernels.react(N, P, dt, self.reaction_substeps, self.r, self.inv_K, self.m,
                      it.attack_rate, it.h, it.c, it.efficiency, self._refuge)

    def _pass1(self, N, P, dt_r: float, tau_e: float) -> None:
        """Reaction and x sweeps, result (transposed) in ``self._T``."""
        it = self.interaction
        (cxn, cyn, wn, ivn), (cxp, cyp, wp, ivp) = self._rows
        kernels.half_step(
            N, P, self._T[0], self._T[1], dt_r, self.reaction_substeps, self.r, self.inv_K,
            self.m, it.attack_rate, it.h, it.c, it.efficiency, self._refuge,
            0.5 * self.dt, tau_e,
            cxn, cyn, wn, ivn, cxp, cyp, wp, ivp,
            self._neg_rows[0], self._neg_rows[1], False,
        )

    def _pass2(self, N, P, tau_e: float, fix: bool) -> None:
        """y sweeps of ``self._T`` back into ``N, P``; positivity fix if asked."""
        it = self.interaction
        (aln, acn, wn, ivn), (alp, acp, wp, ivp) = self._cols
        kernels.half_step(
            self._T[0], self._T[1], N, P, 0.0, 1, self.r, self.inv_K, self.m,
            it.attack_rate, it.h, it.c, it.efficiency, self._refuge,
            0.5 * self.dt, tau_e,
            aln, acn, wn, ivn, alp, acp, wp, ivp,
            self._neg[0], self._neg[1], fix,
        )
        if fix:
            for u, neg in zip((N, P), self._neg, strict=True):
                self.stats.clipped += kernels.fix_negative(u, neg, self._tot)

    def _explicit_move(self, u: np.ndarray, k: int) -> None:
        mv = self._mv[k]
        w = self._work
        sub = self.dt / self._substeps
        for _ in range(self._substeps):
            kernels.explicit_step(u, w, sub, mv.cx, mv.cy, self._w[k], self.mask)
            u[...] = w

    def advance(self, N: np.ndarray, P: np.ndarray, index: int, n: int = 1) -> None:
        """Take ``n`` Strang steps from step ``index`` on, in place.

        The trailing half reaction step of one step and the leading half of
        the next are taken together (one reaction step of ``dt``), fused into
        the first sweep; the densities are synchronised (a whole number of
        Strang steps) on return. The result depends only on the state,
        ``index`` and ``n``, so a resumed run repeats an uninterrupted one
        bitwise when both advance between the same save points.

        Parameters
        ----------
        N, P : numpy.ndarray
            Prey and predator densities, animals/km², float64, C-contiguous.
        index : int
            Steps taken before (0 at the start): decides the damped start steps.
        n : int
            Number of steps.
        """
        half = 0.5 * self.dt
        if self.scheme == "explicit":
            for _ in range(n):
                self._react(N, P, half)
                self._explicit_move(N, 0)
                self._explicit_move(P, 1)
                self._react(N, P, half)
                self.stats.steps += 1
            if self.extinction is not None:  # a census: see solve/extinction.py
                self.stats.floored += apply_thresholds(N, P, self.extinction, self._tot)
            return
        for s in range(n):
            dt_r = half if s == 0 else self.dt
            k = index + s
            if self.scheme == "implicit-euler" or k < self.damping_steps:
                # two backward-Euler half steps (L-stable), the same factors
                self._pass1(N, P, dt_r, 0.0)
                self._pass2(N, P, 0.0, False)
                self._pass1(N, P, 0.0, 0.0)
                self._pass2(N, P, 0.0, False)
            else:
                self._pass1(N, P, dt_r, half)
                self._pass2(N, P, half, self._may_undershoot)
            self.stats.steps += 1
        self._react(N, P, half)
        if self.extinction is not None:  # a census: see solve/extinction.py
            self.stats.floored += apply_thresholds(N, P, self.extinction, self._tot)

    def step(self, N: np.ndarray, P: np.ndarray, index: int) -> None:
        """Advance ``N`` and ``P`` by one Strang step, in place (see :meth:`advance`)."""
        self.advance(N, P, index, 1)


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
