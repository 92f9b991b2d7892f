"""Published analytic results used by ``check`` and by the tests.

Units: rates 1/yr, densities animals/km², diffusivities km²/yr, lengths km,
speeds km/yr.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from preyscape.model.reactions import Interaction, rates

J01 = 2.404825557695773
"""First zero of the Bessel function J0 (Abramowitz & Stegun 1964, Table 9.5)."""


def equilibrium(inter: Interaction, r: float, K: float | None, m: float) -> tuple[float, float]:
    """Coexistence equilibrium ``(N*, P*)`` of the local model, animals/km².

    Returns ``(nan, nan)`` when the predator cannot persist (no positive
    equilibrium). Lotka–Volterra: ``(m/(e a), r/a)`` (Lotka 1925; Volterra
    1926). Holling type II: ``N* = m/(a(e - m h))`` (Rosenzweig & MacArthur
    1963, Am Nat 97:209).
    """
    a, h, e, c = inter.attack_rate, inter.h, inter.efficiency, inter.c
    inv_K = 1.0 / K if (inter.logistic and K) else 0.0
    if e - m * h <= 0:
        return math.nan, math.nan
    if c == 0.0:
        n = m / (a * (e - m * h))
        if inter.logistic and K is not None and n >= K:
            return math.nan, math.nan
        p = r * (1.0 - n * inv_K) * (1.0 + a * h * n) / a
        return n, p
    # Beddington–DeAngelis: the predator isocline P = (e a N/m - 1 - a h N)/c and the
    # prey isocline P = e r N (1 - N/K)/m meet where a quadratic in N vanishes.
    coeffs = [-e * r * inv_K / m, e * r / m - (e * a / m - a * h) / c, 1.0 / c]
    roots = [z.real for z in np.roots(coeffs) if abs(z.imag) < 1e-12 and z.real > 0]
    for n in sorted(roots):
        p = e * r * n * (1.0 - n * inv_K) / m
        if p > 0:
            return float(n), float(p)
    return math.nan, math.nan


def jacobian(inter: Interaction, r: float, K: float | None, m: float, N: float, P: float):
    """Jacobian of the local rates at ``(N, P)`` by central differences, 1/yr."""
    inv_K = 1.0 / K if (inter.logistic and K) else 0.0
    J = np.empty((2, 2))
    for k, (dn, dp) in enumerate(((1, 0), (0, 1))):
        eps = 1e-6 * max(1.0, abs(N) if k == 0 else abs(P))
        fp = rates(N + dn * eps, P + dp * eps, r, inv_K, m, inter)
        fm = rates(N - dn * eps, P - dp * eps, r, inv_K, m, inter)
        J[0, k] = (fp[0] - fm[0]) / (2 * eps)
        J[1, k] = (fp[1] - fm[1]) / (2 * eps)
    return J


def local_stability(inter: Interaction, r: float, K: float | None, m: float) -> dict:
    """Character of the coexistence equilibrium.

    Returns a dict with ``equilibrium``, ``eigenvalues`` (1/yr), ``stable``
    (bool) and ``period`` (years, ``2 pi / Im(lambda)`` of the linearisation,
    or None for a node). For Lotka–Volterra the period is ``2 pi / sqrt(r m)``.
    """
    n, p = equilibrium(inter, r, K, m)
    if not math.isfinite(n):
        return {"equilibrium": (n, p), "eigenvalues": None, "stable": None, "period": None}
    lam = np.linalg.eigvals(jacobian(inter, r, K, m, n, p))
    im = float(np.max(np.abs(lam.imag)))
    return {
        "equilibrium": (n, p),
        "eigenvalues": lam,
        "stable": bool(np.all(lam.real < 0)),
        "period": 2 * math.pi / im if im > 1e-12 else None,
    }


def lv_period(r: float, m: float) -> float:
    """Small-amplitude Lotka–Volterra period ``2 pi / sqrt(r m)``, years."""
    return 2 * math.pi / math.sqrt(r * m)


def lv_first_integral(N, P, r: float, a: float, e: float, m: float):
    """Conserved quantity of Lotka–Volterra ``dN = rN - aNP, dP = e a N P - m P``.

    ``V = e a N - m ln N + a P - r ln P`` (Volterra 1926).
    """
    return e * a * N - m * np.log(N) + a * P - r * np.log(P)


def hopf_capacity(inter: Interaction, m: float) -> float:
    """Carrying capacity above which Rosenzweig–MacArthur oscillates, animals/km².

    ``K_H = (e + m h) / (a h (e - m h))`` (Rosenzweig 1971, Science 171:385).
    Infinite without handling time.
    """
    a, h, e = inter.attack_rate, inter.h, inter.efficiency
    if h <= 0 or e - m * h <= 0:
        return math.inf
    return (e + m * h) / (a * h * (e - m * h))


def fisher_speed(r: float, D: float) -> float:
    """Minimal Fisher–KPP front speed ``2 sqrt(r D)``, km/yr (Fisher 1937; KPP 1937)."""
    return 2.0 * math.sqrt(max(r, 0.0) * D)


def predator_growth_at_capacity(inter: Interaction, K: float, m: float) -> float:
    """Per-capita growth rate of rare predators in prey at density ``K``, 1/yr.

    ``e a K / (1 + a h K) - m`` (Holling type II; ``h = 0`` for Lotka–Volterra;
    the Beddington–DeAngelis interference term vanishes for rare predators).
    ``K`` in animals/km², ``m`` in 1/yr.
    """
    a, h, e = inter.attack_rate, inter.h, inter.efficiency
    return e * a * K / (1.0 + a * h * K) - m


def predator_speed(inter: Interaction, K: float | None, m: float, D_P: float) -> float:
    """Minimal speed of predators invading prey at capacity, km/yr.

    ``2 sqrt(D_P (e a K / (1 + a h K) - m))`` (Dunbar 1983, J Math Biol 17:11;
    Owen & Lewis 2001, Bull Math Biol 63:655). Zero when predators cannot grow;
    NaN when prey have no capacity (``K`` None or not finite: Lotka–Volterra).
    """
    if K is None or not math.isfinite(K):
        return math.nan
    growth = predator_growth_at_capacity(inter, K, m)
    return 2.0 * math.sqrt(D_P * growth) if growth > 0 else 0.0


def critical_patch(r: float, D: float) -> dict[str, float]:
    """Smallest habitat patch with lethal surroundings that supports growth, km.

    Skellam 1951 (Biometrika 38:196); Kierstead & Slobodkin 1953 (J Mar Res
    12:141): strip width ``pi sqrt(D/r)``, square side ``pi sqrt(2 D/r)``,
    disc radius ``j01 sqrt(D/r)``.
    """
    if r <= 0:
        return {"strip_width": math.inf, "square_side": math.inf, "disc_radius": math.inf}
    return {
        "strip_width": math.pi * math.sqrt(D / r),
        "square_side": math.pi * math.sqrt(2.0 * D / r),
        "disc_radius": J01 * math.sqrt(D / r),
    }


def grid_decay_rate(D: float, h: float, L: float) -> float:
    """Slowest decay rate of the discrete 1D operator with lethal faces, 1/yr.

    ``(4 D / h^2) sin^2(pi h / (2 L))`` for ``L / h`` cells of width ``h`` (km),
    density zero on the two end faces (standard eigenvalues of the second
    difference matrix; e.g. LeVeque 2007, Finite Difference Methods, §2.10).
    """
    return 4.0 * D / h**2 * math.sin(math.pi * h / (2.0 * L)) ** 2


# ---------------------------------------------------------------------------
# finite-time front speed
# ---------------------------------------------------------------------------
FAR_FROM_ASYMPTOTIC = 0.10
"""Bramson correction, as a share of the asymptotic speed, above which a window is flagged.

Common practice, no source. The expansion drops terms that decay like
``t^(-3/2)`` in the speed (Ebert & van Saarloos 2000, Physica D 146:1), and
they grow faster than the logarithmic term as the window moves earlier. In the
test suite a Fisher front (r = D = 1) fitted over 10–20 years (correction
5 % of ``c*``) matches the corrected mean speed to 0.5 %, over 5–15 years
(8 %) only to 4 %: beyond 10 % even the corrected value is indicative only.
"""


@dataclass(frozen=True)
class WindowSpeed:
    """Mean front speed expected over a fitting window (see :func:`mean_front_speed`).

    Attributes
    ----------
    asymptotic : float
        Speed the front approaches, km/yr.
    mean : float
        Mean speed predicted over the window, km/yr.
    correction : float
        ``asymptotic - mean``, km/yr (positive: fronts from a compact start lag).
    fraction : float
        ``correction / asymptotic`` (dimensionless).
    far_from_asymptotic : bool
        True when ``fraction`` exceeds :data:`FAR_FROM_ASYMPTOTIC`.
    """

    asymptotic: float
    mean: float
    correction: float
    fraction: float
    far_from_asymptotic: bool


def mean_front_speed(
    c_star: float,
    decay_rate: float,
    t0: float,
    t1: float,
    times: Sequence[float] | None = None,
    threshold: float = FAR_FROM_ASYMPTOTIC,
) -> WindowSpeed:
    """Mean speed of a pulled front over a finite window, with Bramson's correction.

    A front started from a compact release lies at
    ``x(t) = c* t - (3 / (2 lambda*)) ln t + const + o(1)`` (Bramson 1983,
    Mem AMS 44(285); Ebert & van Saarloos 2000, Physica D 146:1), where
    ``lambda*`` is the decay rate of the front's leading edge: ``sqrt(r/D)``
    for Fisher–KPP, so the lag is ``(3/2) sqrt(D/r) ln t``. In a periodic
    medium the coefficient is the same with the periodic ``lambda*``
    (Hamel, Nolen, Roquejoffre & Ryzhik 2016, J Eur Math Soc 18:465; from
    memory). The mean speed between ``t0`` and ``t1`` is then
    ``c* - (3 / (2 lambda*)) ln(t1/t0) / (t1 - t0)``; with ``times``, the
    slope of a least-squares line through the positions at those times is
    used instead, which is what a regression of front positions measures.

    Parameters
    ----------
    c_star : float
        Asymptotic (minimal) speed, km/yr.
    decay_rate : float
        ``lambda*``, 1/km (for Fisher–KPP ``c*/(2D) = sqrt(r/D)``).
    t0, t1 : float
        Window, years since the release (``0 < t0 < t1``).
    times : sequence of float, optional
        Times of the positions a regression was fitted to, years since the
        release; overrides ``t0`` and ``t1``.
    threshold : float
        Share of ``c*`` above which the window is flagged as far from the
        asymptotic regime.

    Returns
    -------
    WindowSpeed
    """
    if times is not None:
        t = np.asarray(times, dtype=float)
        if t.size < 2 or np.any(t <= 0):
            raise ValueError("times must hold at least two positive values (years)")
        tc = t - t.mean()
        slope_log = float(np.sum(tc * np.log(t)) / np.sum(tc * tc))
    else:
        if not 0 < t0 < t1:
            raise ValueError("the window needs 0 < t0 < t1 (years since the release)")
        slope_log = math.log(t1 / t0) / (t1 - t0)
    if not (c_star > 0 and decay_rate > 0):
        return WindowSpeed(max(c_star, 0.0), max(c_star, 0.0), 0.0, 0.0, False)
    corr = 1.5 / decay_rate * slope_log
    frac = corr / c_star
    return WindowSpeed(c_star, c_star - corr, corr, frac, bool(frac > threshold))
