"""Which values each member draws: distributions, the sampling design and member seeds.

The ``[uncertainty]`` section of a scenario (:class:`~preyscape.scenario.UncertaintySpec`)
lists parameters by dotted key, each with a range and a distribution. A design
places ``members`` points in the unit hypercube and each coordinate is mapped
through the inverse distribution function of its parameter:

``"latin-hypercube"``
    :class:`scipy.stats.qmc.LatinHypercube` (McKay, Beckman & Conover 1979,
    Technometrics 21:239): every parameter's range is cut into ``members``
    equally likely slices and each slice is used once. Designs of up to
    :data:`OPTIMISED_UP_TO` members are optimised for a low centred discrepancy
    (``optimization="random-cd"``), which keeps small designs from having
    strongly correlated columns.
``"sobol"``
    The Saltelli design of SALib (``SALib.sample.sobol.sample`` without
    second-order terms; Saltelli et al. 2010, Comput. Phys. Commun.
    181:259): N·(D + 2) members for D parameters and a base sample N (a power
    of two), from which :mod:`preyscape.ensemble.sensitivity` estimates
    first-order and total Sobol' indices.

Distributions: ``"uniform"`` on [low, high]; ``"log-uniform"`` (uniform in
ln x, for rates known to an order of magnitude); ``"normal"`` with ``mean``
and ``sd`` truncated to [low, high] (:data:`scipy.stats.truncnorm`).

Member ``i`` gets the seed ``SeedSequence(seed, spawn_key=(1, i))`` (numpy's
way of deriving independent streams; the design uses ``spawn_key=(0,)``),
used as its ``run.seed`` (the seed of ``start.noise``). Member ``i`` of every
variant draws the same values and the same seed, so a variant is compared
with the baseline member by member.

Examples
--------
>>> p = [Parameter("prey.growth", "log-uniform", 1.0, 4.0),
...      Parameter("predator.mortality", "uniform", 0.5, 1.5)]
>>> d = plan_design(p, members=8, design="latin-hypercube", seed=3)
>>> d.values.shape, bool((d.values[:, 0] >= 1).all() and (d.values[:, 0] <= 4).all())
((8, 2), True)
>>> len(set(d.seeds)) == 8
True
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from preyscape.errors import InputError
from preyscape.scenario import sobol_members_problem

__all__ = ["Design", "Parameter", "REBUILDS", "member_seed", "parameters_of", "plan_design",
           "rebuild_of", "unit_design"]

OPTIMISED_UP_TO = 1000
"""Latin hypercubes of at most this many members are optimised for a low centred
discrepancy (scipy's ``optimization="random-cd"``); larger ones are plain."""

REBUILDS = ("nothing", "fields", "operators", "start")
"""What a member must rebuild from the variant's landscape when a key changes, cheapest
first (see :func:`rebuild_of`)."""


@dataclass(frozen=True)
class Parameter:
    """One uncertain parameter.

    Attributes
    ----------
    key : str
        Dotted key (``"predator.mortality"``); its unit is the key's unit.
    distribution : {"uniform", "log-uniform", "normal"}
        How values are spread over the range.
    low, high : float
        The range, in the key's unit.
    mean, sd : float or None
        Mean and standard deviation of the normal before truncation.
    """

    key: str
    distribution: str
    low: float
    high: float
    mean: float | None = None
    sd: float | None = None

    def from_unit(self, u: np.ndarray) -> np.ndarray:
        """Values for points ``u`` in [0, 1] (inverse distribution function)."""
        u = np.asarray(u, dtype=float)
        if self.distribution == "uniform":
            return self.low + u * (self.high - self.low)
        if self.distribution == "log-uniform":
            a, b = math.log(self.low), math.log(self.high)
            return np.exp(a + u * (b - a))
        from scipy.stats import truncnorm

        a, b = (self.low - self.mean) / self.sd, (self.high - self.mean) / self.sd
        x = truncnorm.ppf(u, a, b, loc=self.mean, scale=self.sd)
        return np.clip(x, self.low, self.high)


def parameters_of(spec) -> list[Parameter]:
    """The :class:`Parameter` list of a scenario's ``[uncertainty]`` section."""
    return [Parameter(p.key, p.distribution, float(p.range[0]), float(p.range[1]), p.mean,
                      p.sd) for p in spec.parameters]


def rebuild_of(key: str) -> str:
    """What a member must rebuild when ``key`` changes (one of :data:`REBUILDS`).

    ``"nothing"``: constants of the interaction (``interaction.*``): the
    landscape's fields and operators are used as built. ``"fields"``:
    ``prey.growth``, ``prey.capacity``, ``predator.mortality`` scale the
    per-cell fields (growth, capacity, mortality; recomputed from the stored
    multipliers, a few array products). ``"operators"``: movement coefficients,
    class multipliers and measure values change the face conductances too
    (fields and operators recomputed from the stored multipliers and placed
    measures; no raster or GeoJSON is read again). ``"start"``: ``start.*``
    redraws the initial densities. The time step (``run.step = "auto"``) is
    recomputed for every member, and every member's stepper is factored anew
    (it depends on the step).
    """
    section, _, rest = key.partition(".")
    if section == "interaction":
        return "nothing"
    if section == "prey" and rest in ("growth", "capacity"):
        return "fields"
    if section == "predator" and rest == "mortality":
        return "fields"
    if section == "start":
        return "start"
    return "operators"


def member_seed(seed: int, index: int) -> int:
    """Seed of member ``index`` derived from the ensemble ``seed`` (a 63-bit integer)."""
    state = np.random.SeedSequence(int(seed) % 2**128, spawn_key=(1, int(index)))
    return int(state.generate_state(1, np.uint64)[0] >> np.uint64(1))


def unit_design(members: int, n_parameters: int, design: str, seed: int) -> np.ndarray:
    """Points of the design in the unit hypercube, shape ``(members, n_parameters)``.

    Raises
    ------
    InputError
        When ``members`` does not fit a Sobol' design.
    """
    rng = np.random.default_rng(np.random.SeedSequence(int(seed) % 2**128, spawn_key=(0,)))
    if design == "latin-hypercube":
        from scipy.stats import qmc

        # random-cd: permutes within columns to lower the centred discrepancy, so small
        # designs do not come out with strongly correlated columns (which leave PRCC
        # undefined); it keeps the Latin hypercube property and grows slow past ~1000 points
        opt = "random-cd" if members <= OPTIMISED_UP_TO and n_parameters > 1 else None
        return qmc.LatinHypercube(n_parameters, rng=rng, optimization=opt).random(members)
    if design == "sobol":
        why = sobol_members_problem(members, n_parameters)
        if why:
            raise InputError(why, "members")
        import warnings

        from SALib.sample import sobol

        problem = {"num_vars": n_parameters, "names": [f"x{k}" for k in range(n_parameters)],
                   "bounds": [[0.0, 1.0]] * n_parameters}
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # SALib's notes on sample sizes: checked above
            u = sobol.sample(problem, members // (n_parameters + 2), calc_second_order=False,
                             scramble=True, seed=rng)
        return np.asarray(u, dtype=float)
    raise ValueError(f"design must be 'latin-hypercube' or 'sobol', not {design!r}")


@dataclass(frozen=True)
class Design:
    """The drawn values of every member.

    Attributes
    ----------
    parameters : tuple of Parameter
        The uncertain parameters, in column order.
    values : numpy.ndarray
        ``(members, parameters)`` values, each in its key's unit.
    seeds : tuple of int
        Each member's ``run.seed``.
    design : str
        ``"latin-hypercube"`` or ``"sobol"``.
    seed : int
        The ensemble seed.
    """

    parameters: tuple[Parameter, ...]
    values: np.ndarray
    seeds: tuple[int, ...]
    design: str
    seed: int

    @property
    def members(self) -> int:
        """Number of members."""
        return int(self.values.shape[0])

    @property
    def keys(self) -> list[str]:
        """The parameters' dotted keys."""
        return [p.key for p in self.parameters]

    def member_values(self, index: int) -> dict[str, float]:
        """``{key: value}`` of member ``index``."""
        return {p.key: float(v) for p, v in zip(self.parameters, self.values[index],
                                                strict=True)}


def plan_design(parameters: list[Parameter], *, members: int, design: str,
                seed: int) -> Design:
    """Draw every member's values and seed.

    Parameters
    ----------
    parameters : list of Parameter
        The uncertain parameters.
    members : int
        Number of members (≥ 2; for ``"sobol"`` N·(D + 2) with N a power of two).
    design : {"latin-hypercube", "sobol"}
        The sampling design.
    seed : int
        The ensemble seed.

    Returns
    -------
    Design
    """
    if members < 2:
        raise InputError(f"an ensemble needs at least 2 members, not {members}", "members")
    u = unit_design(members, len(parameters), design, seed)
    cols = [p.from_unit(u[:, k]) for k, p in enumerate(parameters)]
    values = np.column_stack(cols) if cols else np.zeros((members, 0))
    seeds = tuple(member_seed(seed, i) for i in range(members))
    return Design(tuple(parameters), values, seeds, design, int(seed))
