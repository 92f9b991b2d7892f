"""Local predator–prey interaction forms.

Per cell, prey N and predator P (animals per km²)::

    dN/dt = g(N) - f(N, P) P (1 - rho)
    dP/dt = e f(N, P) P (1 - rho) - m P

with refuge fraction ``rho`` (share of prey shielded from predation). The forms
keep their published names:

================  =====================  ==============================
form              prey growth g(N)       functional response f(N, P)
================  =====================  ==============================
lotka-volterra    r N                    a N
logistic-prey     r N (1 - N/K)          a N
holling-ii        r N (1 - N/K)          a N / (1 + a h N)
beddington-deangelis r N (1 - N/K)       a N / (1 + a h N + c P)
================  =====================  ==============================

Lotka 1925, Elements of Physical Biology; Volterra 1926, Nature 118:558;
Holling 1959, Can Entomol 91:385; Rosenzweig & MacArthur 1963, Am Nat 97:209;
Beddington 1975, J Anim Ecol 44:331; DeAngelis et al. 1975, Ecology 56:881.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FORMS: dict[str, int] = {
    "lotka-volterra": 0,
    "logistic-prey": 1,
    "holling-ii": 2,
    "beddington-deangelis": 3,
}
"""Interaction form names and the integer codes the compiled kernels use."""


@dataclass(frozen=True)
class Interaction:
    """Parameters of the local interaction that do not vary by cell.

    Parameters
    ----------
    form : str
        One of :data:`FORMS`.
    attack_rate : float
        a, area searched per predator per year, km² / (predator · yr).
    handling_time : float
        h, time to handle one prey, years (Holling type II and
        Beddington–DeAngelis; ignored otherwise).
    efficiency : float
        e, predators produced per prey eaten (dimensionless).
    interference : float
        c, predator interference, km² per predator (Beddington–DeAngelis
        only).
    """

    form: str
    attack_rate: float
    handling_time: float = 0.0
    efficiency: float = 1.0
    interference: float = 0.0

    def __post_init__(self) -> None:
        if self.form not in FORMS:
            raise ValueError(f"unknown interaction form {self.form!r}; valid: {sorted(FORMS)}")

    @property
    def code(self) -> int:
        """Integer code of the form for the compiled kernels."""
        return FORMS[self.form]

    @property
    def h(self) -> float:
        """Handling time as used by the form, years (0 where it has none)."""
        return self.handling_time if self.code >= 2 else 0.0

    @property
    def c(self) -> float:
        """Interference as used by the form, km² (0 where it has none)."""
        return self.interference if self.code == 3 else 0.0

    @property
    def logistic(self) -> bool:
        """Whether prey growth is limited by a carrying capacity."""
        return self.code >= 1


def rates(
    N: np.ndarray,
    P: np.ndarray,
    r: np.ndarray | float,
    inv_K: np.ndarray | float,
    m: np.ndarray | float,
    inter: Interaction,
    refuge: np.ndarray | float = 0.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Right-hand side of the local interaction (reference implementation).

    Parameters
    ----------
    N, P : array_like
        Prey and predator density, animals/km².
    r : array_like
        Prey growth rate, 1/yr.
    inv_K : array_like
        Inverse carrying capacity, km² per prey (0 for unlimited growth).
    m : array_like
        Predator mortality, 1/yr.
    inter : Interaction
        The interaction form and its constants.
    refuge : array_like
        Fraction of prey shielded from predation (0–1).

    Returns
    -------
    dN, dP : numpy.ndarray
        Rates of change, animals/(km² · yr).
    """
    N = np.asarray(N, dtype=float)
    P = np.asarray(P, dtype=float)
    a, h, c, e = inter.attack_rate, inter.h, inter.c, inter.efficiency
    growth = r * N * (1.0 - N * inv_K) if inter.logistic else r * N
    f = a * N / (1.0 + a * h * N + c * P)
    eaten = f * P * (1.0 - np.asarray(refuge))
    return growth - eaten, e * eaten - m * P
