"""The one analysis-settings object, and the one place its defaults live.

A run stores the scenario's ``[analysis]`` table in ``run.json``; the command
line may override any value. :meth:`AnalysisSettings.build` combines the two
once, validates every value where it came from (naming the scenario key or
the command-line option the user typed), and fills in the defaults below.
Every analysis, the report and the command line read the result; none of
them has a default of its own.

Examples
--------
>>> s = AnalysisSettings.build({"presence": 2.0}, {"significance": 0.01})
>>> s.presence, s.significance, s.change_threshold
(2.0, 0.01, 0.1)
>>> AnalysisSettings.build(None, {"significance": 1.5}, {"significance": "--fdr"})
Traceback (most recent call last):
...
preyscape.errors.InputError: --fdr: must lie strictly between 0 and 1, not 1.5
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any

from preyscape.errors import InputError

__all__ = ["AnalysisSettings", "TransectLine", "DEFAULTS", "FRONT_THRESHOLD_SHARE",
           "COLONISED_SHARE", "GOALS", "check_goal", "parse_years"]

FRONT_THRESHOLD_SHARE = 0.1
"""Default arrival density of a front, as a share of the species' largest time-mean
density (common practice, no source)."""

COLONISED_SHARE = 0.5
"""Share of a target patch's cells that must be occupied for it to count as colonised
(common practice, no source)."""

DEFAULTS: dict[str, Any] = {
    # animals/km²: modelled densities are continuous and never reach exactly zero, so
    # very low values are read as absence (common practice, no source)
    "presence": 1.0,
    "hotspot_distance": None,   # metres; None: chosen from the grid (hotspots.default_band_m)
    "significance": 0.05,       # false discovery rate of the hotspot test
    "prey_threshold": None,     # animals/km²; None: see front_threshold / arrival_threshold
    "predator_threshold": None,
    "change_threshold": 0.10,   # relative change of the time mean that counts (10 %)
    "transects": (),
    "years": None,              # (start, end) window in years; None: the whole run
    "goal": None,               # how compare ranks alternatives (GOALS); None: as given
}
"""Default of every setting (the scenario's ``[analysis]`` keys)."""


GOALS = {
    "fewer-predators": ("predator", -1),
    "more-predators": ("predator", 1),
    "fewer-prey": ("prey", -1),
    "more-prey": ("prey", 1),
}
"""Goals ``compare`` ranks alternatives by: the species and the sign of the change of its
landscape total in the window that ranks first."""


@dataclass(frozen=True)
class TransectLine:
    """A named line in map metres, for front speeds and fluxes.

    Attributes
    ----------
    name : str
        Its name (unique within a run).
    points : tuple of (float, float)
        Two or more vertices ``(x, y)``, metres in the run's CRS.
    """

    name: str
    points: tuple[tuple[float, float], ...]


def _number(value: Any, where: str, *, low: float | None = None, high: float | None = None,
            what: str = "a number") -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"must be {what}, not {value!r}", where)
    v = float(value)
    if not math.isfinite(v):
        raise InputError(f"must be {what}, not {value!r}", where)
    if low is not None and high is not None and not low < v < high:
        raise InputError(f"must lie strictly between {low:g} and {high:g}, not {value!r}",
                         where)
    if low is not None and high is None and not v > low:
        raise InputError(f"must be {what} > {low:g}, not {value!r}", where)
    return v


def _transects(value: Any, where: str) -> tuple[TransectLine, ...]:
    out, seen = [], set()
    for i, tr in enumerate(value or ()):
        here = f"{where}[{i}]"
        if isinstance(tr, TransectLine):
            name, pts = tr.name, tr.points
        elif isinstance(tr, Mapping) and "name" in tr and "points" in tr:
            name, pts = str(tr["name"]).strip(), tr["points"]
        else:
            raise InputError('a transect is {name = "...", points = [[x, y], ...]} in map '
                             "metres", here)
        if not name:
            raise InputError("a transect's name must not be empty", f"{here}.name")
        if name in seen:
            raise InputError(f"transect name {name!r} is used twice; names must differ",
                             f"{here}.name")
        seen.add(name)
        try:
            pts = tuple((float(p[0]), float(p[1])) for p in pts if len(p) == 2)
        except (TypeError, ValueError):
            pts = ()
        if len(pts) < 2 or not all(math.isfinite(c) for p in pts for c in p):
            raise InputError("points must be at least two [x, y] pairs in map metres",
                             f"{here}.points")
        out.append(TransectLine(name, pts))
    return tuple(out)


def parse_years(value: Any, where: str = "years") -> tuple[float, float | None]:
    """A window of years from ``"A:B"`` (either side may be empty) or ``[A, B]``.

    Returns ``(start, end)`` in years, ``end`` None for "to the end of the run".

    Examples
    --------
    >>> parse_years("0:4"), parse_years("4:"), parse_years([2, 6.5])
    ((0.0, 4.0), (4.0, None), (2.0, 6.5))
    """
    bad = (f"must be a window of years A:B (such as 0:4, or 4: for year 4 to the end), "
           f"not {value!r}")
    if isinstance(value, str):
        parts = value.split(":")
        if len(parts) != 2:
            raise InputError(bad, where)
        try:
            a = float(parts[0]) if parts[0].strip() else 0.0
            b = float(parts[1]) if parts[1].strip() else None
        except ValueError:
            raise InputError(bad, where) from None
    elif isinstance(value, (list, tuple)) and len(value) == 2:
        a, b = value
        if any(isinstance(v, bool) or not isinstance(v, (int, float, type(None))) for v in (a, b)):
            raise InputError(bad, where)
        a = 0.0 if a is None else float(a)
        b = None if b is None else float(b)
    else:
        raise InputError(bad, where)
    if not math.isfinite(a) or a < 0 or (b is not None and (not math.isfinite(b) or b <= a)):
        raise InputError(f"the window must start at 0 or later and end after its start, not "
                         f"{value!r}", where)
    return a, b


def check_goal(goal: str | None, species: Sequence[str]) -> None:
    """Refuse a ranking goal that names a species the runs do not model.

    Parameters
    ----------
    goal : str or None
        The goal (:data:`GOALS`); None ranks nothing.
    species : sequence of str
        The species every run compared models.

    Raises
    ------
    InputError
        Naming the setting (``--goal`` or ``analysis.goal``), the goal and the
        goals that are valid for ``species``.
    """
    if goal is None or GOALS[goal][0] in species:
        return
    valid = [g for g, (sp, _) in GOALS.items() if sp in species]
    raise InputError(f"the goal {goal!r} ranks the alternatives by their predators, but the "
                     "runs compared model prey alone (no predator in these scenarios); give "
                     f"one of {', '.join(valid)}, or no goal", "--goal or analysis.goal")


def _checked(key: str, v: Any, where: str) -> Any:
    """One setting, validated (``where`` names it in the message); None stays None."""
    if key == "transects":
        return _transects(v, where)
    if v is None and DEFAULTS[key] is None:
        return None
    if key == "years":
        return parse_years(v, where)
    if key == "goal":
        if v not in GOALS:
            raise InputError(f"must be one of {', '.join(GOALS)}, not {v!r}", where)
        return str(v)
    if key == "significance":
        return _number(v, where, low=0.0, high=1.0, what="a false discovery rate")
    if key == "change_threshold":
        return _number(v, where, low=0.0, what="a fraction (0.1 = 10 %)")
    return _number(v, where, low=0.0, what="a positive number")


@dataclass(frozen=True)
class AnalysisSettings:
    """Settings shared by every analysis (see :data:`DEFAULTS`).

    Attributes
    ----------
    presence : float
        Density at or above which a cell counts as occupied, animals/km².
    hotspot_distance : float or None
        Gi* neighbourhood radius, metres (None: chosen from the grid).
    significance : float
        False discovery rate of the hotspot test (0–1).
    prey_threshold, predator_threshold : float or None
        Density that marks arrival of a front, animals/km².
    change_threshold : float
        Relative change of a time mean that counts as a change (0.1 = 10 %).
    transects : tuple of TransectLine
        Lines for front speeds and fluxes, map metres.
    years : (float, float or None) or None
        Window of years ``compare`` judges change in (None: the whole run).
    goal : str or None
        How ``compare`` ranks alternatives (:data:`GOALS`); None: as given.
    """

    presence: float = DEFAULTS["presence"]
    hotspot_distance: float | None = DEFAULTS["hotspot_distance"]
    significance: float = DEFAULTS["significance"]
    prey_threshold: float | None = DEFAULTS["prey_threshold"]
    predator_threshold: float | None = DEFAULTS["predator_threshold"]
    change_threshold: float = DEFAULTS["change_threshold"]
    transects: tuple[TransectLine, ...] = DEFAULTS["transects"]
    years: tuple[float, float | None] | None = DEFAULTS["years"]
    goal: str | None = DEFAULTS["goal"]

    @classmethod
    def build(cls, stored: Mapping[str, Any] | None = None,
              overrides: Mapping[str, Any] | None = None,
              spelled: Mapping[str, str] | None = None, *,
              stored_as: str = "run.json: analysis") -> AnalysisSettings:
        """Combine stored settings and overrides, validate them, fill in defaults.

        Parameters
        ----------
        stored : mapping, optional
            The run's stored ``[analysis]`` table (``run.json``); unknown keys
            (from newer or older versions) are ignored, None values mean
            "not set".
        overrides : mapping, optional
            Values that replace stored ones (None: keep the stored value).
        spelled : mapping, optional
            How the user wrote each override (``{"significance": "--fdr"}``),
            for messages; default the setting's name.
        stored_as : str
            How stored values are named in messages (keyword only).

        Raises
        ------
        InputError
            Naming the option or key of the first invalid value.
        """
        names = {f.name for f in fields(cls)}
        values: dict[str, Any] = {}
        where: dict[str, str] = {}
        for key, v in (stored or {}).items():
            if key in names and v is not None:
                values[key], where[key] = v, f"{stored_as}.{key}"
        for key, v in (overrides or {}).items():
            if key not in names:
                raise ValueError(f"unknown analysis setting {key!r}")
            if v is not None:
                values[key], where[key] = v, (spelled or {}).get(key, key)
        out = {key: _checked(key, v, where[key]) for key, v in values.items()}
        return cls(**out)

    def __post_init__(self) -> None:
        # direct construction from Python is an edge too: the same checks, named by field
        for f in fields(self):
            object.__setattr__(self, f.name, _checked(f.name, getattr(self, f.name), f.name))

    def threshold(self, species: str) -> float | None:
        """The arrival density set for ``species`` (animals/km²), or None."""
        return {"prey": self.prey_threshold, "predator": self.predator_threshold}[species]

    def front_threshold(self, species: str, largest_mean: float) -> float:
        """Density that marks a front's arrival, animals/km².

        The set threshold, else :data:`FRONT_THRESHOLD_SHARE` of the species'
        largest time-mean density ``largest_mean`` (NaN when the species is
        absent, so it never arrives anywhere).
        """
        given = self.threshold(species)
        if given is not None:
            return given
        return FRONT_THRESHOLD_SHARE * largest_mean if largest_mean > 0 else math.nan

    def arrival_threshold(self, species: str) -> float:
        """Density that counts as arrival in a target patch: the set threshold, else presence."""
        given = self.threshold(species)
        return given if given is not None else self.presence

    def as_record(self) -> dict[str, Any]:
        """The settings as plain JSON values."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        out["transects"] = [{"name": t.name, "points": [list(p) for p in t.points]}
                            for t in self.transects]
        out["years"] = None if self.years is None else list(self.years)
        return out
