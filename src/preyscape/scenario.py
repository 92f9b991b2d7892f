"""Scenario files: TOML in, frozen and validated settings out.

Every key and its units are documented in ``docs/scenario.md``. Paths are
relative to the scenario file. Any problem is raised as
:class:`~preyscape.errors.InputError` naming the file and the key path, with
a "did you mean" for misspelt keys.
"""

from __future__ import annotations

import difflib
import hashlib
import json
import math
import tomllib
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    StrictBool,
    StrictInt,
    ValidationError,
    field_validator,
    model_validator,
)

from preyscape.errors import FileProblem, InputError

LARGEST = 1e30
"""Largest magnitude of a rate, capacity, density or length: per-cell values are 32-bit
floats (at most 3.4e38), and a value is multiplied by habitat multipliers first."""
SMALLEST = 1e-30
"""Smallest non-zero magnitude (32-bit floats lose smaller values to zero)."""


def _storable(v: float) -> float:
    if v != 0 and not SMALLEST <= abs(v) <= LARGEST:
        raise ValueError(f"{v:g} is outside the range a run can hold: use a value between "
                         f"{SMALLEST:g} and {LARGEST:g} (per-cell values are 32-bit floats)")
    return v


# strict: a quoted number or a boolean is a mistake in a scenario file, not a number
Positive = Annotated[float, Field(gt=0, allow_inf_nan=False, strict=True),
                     AfterValidator(_storable)]
NonNegative = Annotated[float, Field(ge=0, allow_inf_nan=False, strict=True),
                        AfterValidator(_storable)]
Fraction = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False, strict=True)]
Coordinate = Annotated[float, Field(allow_inf_nan=False, strict=True)]
EdgeRule = Literal["closed", "hostile"]
MovementKind = Literal["fickian", "ecological"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


def css_colour(value: str) -> str:
    """``value`` if it is a CSS colour: a hex code ``#rgb``/``#rrggbb`` or a CSS colour name.

    Raises
    ------
    ValueError
        Saying what would be valid, with the nearest colour name.
    """
    import re

    v = str(value).strip()
    if re.fullmatch(r"#(?:[0-9a-fA-F]{3}){1,2}", v):
        return v
    from matplotlib.colors import CSS4_COLORS  # the 148 CSS colour names

    if v.lower() in CSS4_COLORS:
        return v.lower()
    near = difflib.get_close_matches(v.lower(), sorted(CSS4_COLORS), n=1, cutoff=0.6)
    hint = f" (did you mean '{near[0]}'?)" if near else ""
    raise ValueError(f"{value!r} is not a colour{hint}: give a CSS colour name such as "
                     "'forestgreen' or a hex code such as '#228b22'")


class HabitatClass(_Strict):
    """One row of the class table: a habitat code, its multipliers (all ≥ 0), its colour."""

    code: StrictInt
    name: str = ""
    colour: str | None = None
    prey_capacity: NonNegative = 1.0
    prey_growth: NonNegative = 1.0
    prey_movement: NonNegative = 1.0
    predator_mortality: NonNegative = 1.0
    predator_movement: NonNegative = 1.0

    @field_validator("colour")
    @classmethod
    def _colour(cls, v: str | None) -> str | None:
        return None if v is None else css_colour(v)


class LandscapeSpec(_Strict):
    """``[landscape]``: the habitat raster and what lies beyond it."""

    habitat: str
    values: Literal["classes", "suitability"]
    classes: tuple[HabitatClass, ...] = ()
    cell_size: Positive | None = None
    edge: EdgeRule = "closed"
    nodata: EdgeRule = "closed"

    @model_validator(mode="after")
    def _table(self) -> LandscapeSpec:
        if self.values == "classes" and not self.classes:
            raise ValueError(
                "values = 'classes' needs a class table: one [[landscape.classes]] "
                "entry per habitat code"
            )
        codes = [c.code for c in self.classes]
        dup = sorted({c for c in codes if codes.count(c) > 1})
        if dup:
            raise ValueError(f"habitat code {dup[0]} appears more than once in the class table")
        return self


class _Species(_Strict):
    name: str = ""
    movement: MovementKind = "fickian"
    diffusivity: NonNegative | None = None
    motility: NonNegative | None = None
    # densities below the threshold are set to zero after every step (docs/scenario.md)
    extinction_threshold: Positive | None = None  # animals per km²
    extinction_threshold_per_cell: Positive | None = None  # animals per cell

    @model_validator(mode="after")
    def _extinction(self) -> _Species:
        if self.extinction_threshold is not None and (
                self.extinction_threshold_per_cell is not None):
            raise ValueError("give one of 'extinction_threshold' (animals per km²) and "
                             "'extinction_threshold_per_cell' (animals per cell), not both")
        return self

    def extinction_per_km2(self, cell_area_km2: float) -> float | None:
        """The extinction threshold in animals/km² (None: no threshold).

        A threshold of x animals per cell is x / ``cell_area_km2`` animals per km².
        """
        if self.extinction_threshold_per_cell is not None:
            return self.extinction_threshold_per_cell / cell_area_km2
        return self.extinction_threshold

    @model_validator(mode="after")
    def _movement(self) -> _Species:
        want = "diffusivity" if self.movement == "fickian" else "motility"
        other = "motility" if want == "diffusivity" else "diffusivity"
        if getattr(self, want) is None:
            raise ValueError(
                f"movement = '{self.movement}' needs '{want}' (km²/yr)"
            )
        if getattr(self, other) is not None:
            raise ValueError(
                f"'{other}' does not apply to movement = '{self.movement}'; give '{want}' "
                f"(or set movement = '{'ecological' if other == 'motility' else 'fickian'}')"
            )
        return self

    @property
    def move_coefficient(self) -> float:
        """Diffusivity or motility at best habitat, km²/yr."""
        return float(self.diffusivity if self.movement == "fickian" else self.motility)


class PreySpec(_Species):
    """``[prey]``: growth rate (1/yr), capacity (animals/km²) and movement.

    ``growth = 0`` is allowed: prey neither grow nor decline by themselves
    (they move and are eaten).
    """

    growth: NonNegative
    capacity: Positive | None = None


class PredatorSpec(_Species):
    """``[predator]``: mortality (1/yr) and movement."""

    mortality: Positive


class InteractionSpec(_Strict):
    """``[interaction]``: the functional response and its constants."""

    form: Literal["lotka-volterra", "logistic-prey", "holling-ii", "beddington-deangelis"]
    attack_rate: Positive
    handling_time: NonNegative = 0.0
    efficiency: Positive
    interference: NonNegative = 0.0

    @model_validator(mode="after")
    def _form(self) -> InteractionSpec:
        if self.form in ("lotka-volterra", "logistic-prey") and self.handling_time:
            raise ValueError(
                f"handling_time does not apply to form '{self.form}'; "
                "use form = 'holling-ii' for a saturating response"
            )
        if self.form != "beddington-deangelis" and self.interference:
            raise ValueError(
                f"interference does not apply to form '{self.form}'; "
                "use form = 'beddington-deangelis'"
            )
        return self


class Release(_Strict):
    """One release of animals (predators by default): a disc at map coordinates (metres)."""

    x: Coordinate
    y: Coordinate
    radius: Positive
    density: Positive
    species: Literal["predator", "prey"] = "predator"


class StartSpec(_Strict):
    """``[start]``: initial densities (animals/km²)."""

    prey: Literal["capacity", "uniform", "raster"] = "capacity"
    prey_density: NonNegative | None = None
    prey_raster: str | None = None
    predator: Literal["uniform", "raster"] = "uniform"
    predator_density: NonNegative = 0.0
    predator_raster: str | None = None
    releases: tuple[Release, ...] = ()
    noise: Annotated[float, Field(ge=0, lt=1, strict=True)] = 0.0

    @model_validator(mode="after")
    def _prey(self) -> StartSpec:
        if self.prey == "uniform" and self.prey_density is None:
            raise ValueError("prey = 'uniform' needs prey_density (animals/km²)")
        if self.prey == "raster" and not self.prey_raster:
            raise ValueError("prey = 'raster' needs prey_raster (path to a density raster)")
        return self

    @model_validator(mode="after")
    def _predator(self) -> StartSpec:
        if self.predator == "raster" and not self.predator_raster:
            raise ValueError("predator = 'raster' needs predator_raster (path to a density "
                             "raster, animals/km²)")
        if self.predator == "raster" and self.predator_density:
            raise ValueError("predator_density applies to predator = 'uniform'; with "
                             "predator = 'raster' the raster gives every cell's density "
                             "(releases still add to it)")
        if self.predator_raster and self.predator != "raster":
            raise ValueError("predator_raster needs predator = 'raster' (the default, "
                             "'uniform', starts predators at predator_density)")
        return self


class RunSpec(_Strict):
    """``[run]``: length, step and saving."""

    years: Positive
    save_every: Positive
    step: Positive | Literal["auto"] = "auto"
    seed: Annotated[int, Field(ge=0, strict=True)] = 0
    scheme: Literal["adi", "implicit-euler", "explicit"] = "adi"

    @model_validator(mode="after")
    def _lengths(self) -> RunSpec:
        if self.save_every > self.years:
            raise ValueError(f"save_every ({self.save_every} yr) exceeds years ({self.years})")
        n = self.years / self.save_every
        if abs(n - round(n)) > 1e-9 * max(1.0, n):
            raise ValueError(
                f"years ({self.years}) must be a whole number of save_every "
                f"({self.save_every})"
            )
        return self

    @field_validator("step")
    @classmethod
    def _step(cls, v: Any) -> Any:
        if isinstance(v, float) and not math.isfinite(v):
            raise ValueError("step must be a finite number of years or 'auto'")
        return v


MeasureKind = Literal["corridor", "fence", "refuge"]
Name = Annotated[str, Field(min_length=1, max_length=80, pattern=r"^[A-Za-z0-9][A-Za-z0-9 _.-]*$")]
SpeciesName = Literal["prey", "predator"]

_KIND_KEYS = {
    "fence": {"permeability", "gaps"},
    "corridor": {"buffer", "prey_capacity", "prey_growth", "prey_movement",
                 "predator_mortality", "predator_movement", "suitability"},
    "refuge": {"protected_fraction", "closed_to_predators", "buffer"},
}


class Gap(_Strict):
    """An opening in a fence: centre (map metres) and width (metres)."""

    x: Coordinate
    y: Coordinate
    width: Positive


class Permeability(_Strict):
    """Per-species fence permeability, 0 (impassable) to 1 (no effect)."""

    prey: Fraction = 1.0
    predator: Fraction = 1.0


class MeasureSpec(_Strict):
    """One ``[[measures]]`` entry: a corridor, fence or refuge (see docs/measures.md)."""

    name: Name
    kind: MeasureKind
    geometry: str | None = None
    raster: str | None = None
    crs: str | None = None
    start_year: NonNegative = 0.0
    end_year: Positive | None = None
    baseline: StrictBool = True
    # fence
    permeability: Permeability | None = None
    gaps: tuple[Gap, ...] = ()
    # corridor (and buffered lines of refuges)
    buffer: NonNegative = 0.0
    prey_capacity: NonNegative | None = None
    prey_growth: NonNegative | None = None
    prey_movement: NonNegative | None = None
    predator_mortality: NonNegative | None = None
    predator_movement: NonNegative | None = None
    suitability: Fraction | None = None
    # refuge
    protected_fraction: Fraction | None = None
    closed_to_predators: StrictBool = False

    @model_validator(mode="before")
    @classmethod
    def _keys_of_kind(cls, data: Any) -> Any:
        if isinstance(data, dict) and data.get("kind") in _KIND_KEYS:
            kind = data["kind"]
            own = _KIND_KEYS[kind]
            for other, keys in _KIND_KEYS.items():
                for k in sorted(keys - own):
                    if k in data and other != kind:
                        raise ValueError(f"'{k}' does not apply to kind = '{kind}' (it belongs "
                                         f"to kind = '{other}')")
        return data

    @model_validator(mode="after")
    def _complete(self) -> MeasureSpec:
        if (self.geometry is None) == (self.raster is None):
            raise ValueError("give exactly one of 'geometry' (a GeoJSON file) and 'raster' "
                             "(a raster marking the cells)")
        if self.crs is not None and self.geometry is None:
            raise ValueError("'crs' applies to a GeoJSON 'geometry' only; a raster carries its "
                             "own CRS")
        if self.end_year is not None and self.end_year <= self.start_year:
            raise ValueError(f"end_year ({self.end_year}) must be after start_year "
                             f"({self.start_year})")
        if self.kind == "fence" and self.permeability is None:
            raise ValueError("a fence needs 'permeability', e.g. permeability = { prey = 1.0, "
                             "predator = 0.0 } for a predator-proof fence")
        if self.kind == "refuge" and self.protected_fraction is None:
            raise ValueError("a refuge needs 'protected_fraction' (0-1): the share of prey "
                             "shielded from predation on its cells")
        if self.kind == "corridor" and not self.sets():
            raise ValueError("a corridor needs at least one habitat value to set: "
                             + ", ".join(CORRIDOR_KEYS))
        return self

    def sets(self) -> dict[str, float]:
        """Habitat values a corridor sets on its cells (multipliers, or suitability)."""
        return {k: getattr(self, k) for k in CORRIDOR_KEYS if getattr(self, k) is not None}

    def active(self, t0: float, t1: float) -> bool:
        """Whether the measure acts during ``[t0, t1)`` (years since the start)."""
        end = math.inf if self.end_year is None else self.end_year
        return self.start_year <= t0 and t1 <= end


CORRIDOR_KEYS = ("prey_capacity", "prey_growth", "prey_movement", "predator_mortality",
                 "predator_movement", "suitability")

# keys a variant may not change: they decide the grid or the variant machinery itself
_FIXED_FOR_VARIANTS = ("landscape.habitat", "landscape.values", "landscape.cell_size",
                       "measures", "variants", "title")


class VariantSpec(_Strict):
    """One ``[[variants]]`` entry: measures added or removed, parameters overridden."""

    name: Name
    notes: str = ""
    add: tuple[str, ...] = ()
    remove: tuple[str, ...] = ()
    set: dict[str, Any] = Field(default_factory=dict)

    @field_validator("set", mode="before")
    @classmethod
    def _flatten(cls, v: Any) -> Any:
        # TOML reads unquoted dotted keys (predator.mortality = 1.2) as nested tables
        if not isinstance(v, dict):
            return v
        out: dict[str, Any] = {}

        def walk(prefix: str, node: dict) -> None:
            for k, x in node.items():
                key = f"{prefix}.{k}" if prefix else str(k)
                if isinstance(x, dict):
                    walk(key, x)
                else:
                    out[key] = x

        walk("", v)
        return out

    @field_validator("name")
    @classmethod
    def _not_baseline(cls, v: str) -> str:
        if v == BASELINE:
            raise ValueError("'baseline' is the name of the run without variants; choose "
                             "another name")
        return v


BASELINE = "baseline"


class Transect(_Strict):
    """A line for front speeds and fluxes: two or more points in map metres."""

    name: Name
    points: tuple[tuple[Coordinate, Coordinate], ...] = Field(min_length=2)


class Target(_Strict):
    """A patch to be colonised (polygon GeoJSON or marking raster)."""

    name: Name
    geometry: str | None = None
    raster: str | None = None
    crs: str | None = None

    @model_validator(mode="after")
    def _one(self) -> Target:
        if (self.geometry is None) == (self.raster is None):
            raise ValueError("give exactly one of 'geometry' and 'raster'")
        return self


class AnalysisSpec(_Strict):
    """``[analysis]``: settings for hotspots, fronts and effects (all optional)."""

    # None: the default of preyscape.analysis.settings.DEFAULTS (the one place they live)
    presence: Positive | None = None
    hotspot_distance: Positive | None = None
    significance: Annotated[float, Field(gt=0, lt=1, strict=True)] | None = None
    prey_threshold: Positive | None = None
    predator_threshold: Positive | None = None
    change_threshold: Annotated[float, Field(gt=0, strict=True)] | None = None
    years: tuple[NonNegative, NonNegative] | None = None   # compare's window [start, end]
    goal: Literal["fewer-predators", "more-predators", "fewer-prey", "more-prey"] | None = None
    transects: tuple[Transect, ...] = ()
    targets: tuple[Target, ...] = ()

    @field_validator("years")
    @classmethod
    def _window(cls, v):
        if v is not None and v[1] <= v[0]:
            raise ValueError(f"the window [start, end] must end after it starts, not {list(v)}")
        return v


# ---------------------------------------------------------------------------
# uncertainty: parameters drawn per ensemble member (docs/ensembles.md)
# ---------------------------------------------------------------------------
# numeric keys an ensemble may draw, by section (the rest decide the grid, the time axis or
# the analysis, which every member must share)
_UNCERTAIN_KEYS = {
    "prey": ("growth", "capacity", "diffusivity", "motility"),
    "predator": ("mortality", "diffusivity", "motility"),
    "interaction": ("attack_rate", "handling_time", "efficiency", "interference"),
    "start": ("prey_density", "predator_density", "noise"),
}
_RELEASE_KEYS = ("density", "radius", "x", "y")
_MEASURE_KEYS = ("permeability.prey", "permeability.predator", "protected_fraction",
                 *CORRIDOR_KEYS)
_CLASS_KEYS = ("prey_capacity", "prey_growth", "prey_movement", "predator_mortality",
               "predator_movement")
UNCERTAIN_KEY_FORMS = (
    "'prey.growth' (and the other numbers of [prey], [predator], [interaction], [start])",
    "'landscape.classes.<code>.prey_capacity' (a class multiplier)",
    "'measures.<name>.permeability.predator' (a measure's value)",
    "'start.releases.<index>.density'",
)


def sobol_members_problem(members: int, n_parameters: int) -> str | None:
    """Why ``members`` does not fit a Saltelli/Sobol' design of ``n_parameters``, or None.

    The design (SALib's ``sample.sobol`` without second-order terms) has
    N·(D + 2) members for a base sample of N, and N should be a power of two.
    """
    per = n_parameters + 2
    base = members // per
    if members % per == 0 and base >= 2 and base & (base - 1) == 0:
        return None
    ok = [per * 2 ** k for k in range(1, 12)]
    near = sorted(ok, key=lambda v: abs(v - members))[:2]
    return (f"a Sobol' design of {n_parameters} parameters needs members = N x "
            f"{per} with N a power of two (at least 2), such as {sorted(near)[0]} or "
            f"{sorted(near)[1]}; got {members}")


class UncertainParameter(_Strict):
    """One ``[[uncertainty.parameters]]`` entry: a key, its range and its distribution."""

    key: str = Field(min_length=1)
    range: tuple[Coordinate, Coordinate]
    distribution: Literal["uniform", "log-uniform", "normal"] = "uniform"
    mean: Coordinate | None = None
    sd: Positive | None = None

    @model_validator(mode="after")
    def _shape(self) -> UncertainParameter:
        low, high = self.range
        if not low < high:
            raise ValueError(f"range must be [low, high] with low < high, not [{low:g}, "
                             f"{high:g}]")
        if self.distribution == "log-uniform" and low <= 0:
            raise ValueError(f"a log-uniform range must be positive, not [{low:g}, {high:g}]")
        normal = self.distribution == "normal"
        if normal and (self.mean is None or self.sd is None):
            raise ValueError("distribution = 'normal' needs 'mean' and 'sd' (the normal is "
                             "truncated to the range)")
        if not normal and (self.mean is not None or self.sd is not None):
            raise ValueError("'mean' and 'sd' apply to distribution = 'normal' only")
        return self


class UncertaintySpec(_Strict):
    """``[uncertainty]``: the parameters an ensemble draws, the design and its size."""

    members: Annotated[int, Field(ge=2, le=100_000, strict=True)] = 32
    design: Literal["latin-hypercube", "sobol"] = "latin-hypercube"
    seed: StrictInt | None = None
    variants: tuple[str, ...] = ()
    agreement: Annotated[float, Field(gt=0.5, le=1, strict=True)] = 0.9
    parameters: tuple[UncertainParameter, ...] = Field(min_length=1)

    @model_validator(mode="after")
    def _parameters(self) -> UncertaintySpec:
        keys = [p.key for p in self.parameters]
        dup = sorted({k for k in keys if keys.count(k) > 1})
        if dup:
            raise ValueError(f"parameter key '{dup[0]}' appears more than once")
        if self.design == "sobol":
            why = sobol_members_problem(self.members, len(self.parameters))
            if why:
                raise ValueError(f"members: {why}")
        return self


class Scenario(_Strict):
    """A whole scenario file.

    Attributes
    ----------
    path : pathlib.Path
        The scenario file; raster paths are resolved against its folder.
    """

    title: str = ""
    notes: str = ""
    landscape: LandscapeSpec
    prey: PreySpec
    # None: prey alone (no [predator] section; [interaction] is then optional)
    predator: PredatorSpec | None = None
    interaction: InteractionSpec | None = None
    start: StartSpec = StartSpec()
    run: RunSpec
    measures: tuple[MeasureSpec, ...] = ()
    variants: tuple[VariantSpec, ...] = ()
    analysis: AnalysisSpec = AnalysisSpec()
    uncertainty: UncertaintySpec | None = None
    variant: str = BASELINE
    path: Path = Field(default=Path("scenario.toml"), exclude=True)
    raw: dict = Field(default_factory=dict, exclude=True, repr=False)

    @property
    def has_predator(self) -> bool:
        """Whether the scenario has a predator (a ``[predator]`` section)."""
        return self.predator is not None

    @property
    def species(self) -> tuple[str, ...]:
        """The species modelled: ``("prey", "predator")`` or ``("prey",)``."""
        return ("prey", "predator") if self.has_predator else ("prey",)

    @property
    def form(self) -> str:
        """The interaction form; prey alone without ``[interaction]`` grow logistically."""
        return self.interaction.form if self.interaction is not None else "logistic-prey"

    @model_validator(mode="after")
    def _capacity(self) -> Scenario:
        logistic = self.form != "lotka-volterra"
        if self.prey.capacity is None and (logistic or self.start.prey == "capacity"):
            why = (f"form '{self.form}'" if self.interaction is not None else
                   "logistic prey growth (a scenario without [interaction])") if logistic \
                else "start.prey = 'capacity'"
            raise ValueError(f"prey.capacity (animals/km² at best habitat) is needed by {why}")
        return self

    @model_validator(mode="after")
    def _one_species(self) -> Scenario:
        if self.predator is not None:
            if self.interaction is None:
                raise ValueError("interaction: missing required section: a scenario with a "
                                 "[predator] needs [interaction] (form, attack_rate, "
                                 "efficiency); leave out [predator] too to model prey alone")
            return self
        # prey alone: nothing may add or describe predators
        st = self.start
        if st.predator_density:
            raise ValueError("start.predator_density: the scenario has no [predator] section, "
                             "so there are no predators to start; remove the key or add "
                             "[predator]")
        if st.predator == "raster":
            raise ValueError("start.predator: the scenario has no [predator] section, so "
                             "there are no predators to start from a raster; add [predator]")
        for k, rel in enumerate(st.releases):
            if rel.species == "predator":
                raise ValueError(f"start.releases[{k}]: releases predators (species defaults "
                                 "to 'predator'), but the scenario has no [predator] section; "
                                 "set species = 'prey' or add [predator]")
        if self.analysis.predator_threshold is not None:
            raise ValueError("analysis.predator_threshold: the scenario has no [predator] "
                             "section; remove the key")
        if self.analysis.goal in ("fewer-predators", "more-predators"):
            raise ValueError(f"analysis.goal: '{self.analysis.goal}' ranks alternatives by "
                             "their predators, but the scenario has no [predator] section; "
                             "give 'fewer-prey' or 'more-prey', or remove the key")
        return self

    @model_validator(mode="after")
    def _measures(self) -> Scenario:
        names = [m.name for m in self.measures]
        dup = sorted({n for n in names if names.count(n) > 1})
        if dup:
            raise ValueError(f"measure name '{dup[0]}' appears more than once in [[measures]]")
        vnames = [v.name for v in self.variants]
        dup = sorted({n for n in vnames if vnames.count(n) > 1})
        if dup:
            raise ValueError(f"variant name '{dup[0]}' appears more than once in [[variants]]")
        for k, m in enumerate(self.measures):
            for key in ("start_year", "end_year"):
                t = getattr(m, key)
                if t is None:
                    continue
                if t > self.run.years:
                    raise ValueError(f"measures[{k}].{key}: {t:g} yr is after the end of the run "
                                     f"(run.years = {self.run.years:g})")
                n = t / self.run.save_every
                if abs(n - round(n)) > 1e-9 * max(1.0, n):
                    raise ValueError(
                        f"measures[{k}].{key}: {t:g} yr is not a whole number of save intervals "
                        f"(run.save_every = {self.run.save_every:g} yr); measures switch at save "
                        "points so the saved state before the switch is exact")
            if m.kind == "corridor" and "suitability" in m.sets() and (
                    self.landscape.values != "suitability"):
                raise ValueError(f"measures[{k}].suitability applies to a suitability landscape; "
                                 "with a class raster set multipliers such as prey_capacity")
            if m.kind == "corridor" and self.landscape.values == "suitability" and (
                    "prey_capacity" in m.sets()):
                raise ValueError(f"measures[{k}].prey_capacity: on a suitability landscape "
                                 "the suitability is the capacity multiplier; set "
                                 "'suitability' instead")
        for k, v in enumerate(self.variants):
            for key in ("add", "remove"):
                for name in getattr(v, key):
                    if name not in names:
                        near = difflib.get_close_matches(name, names, n=1, cutoff=0.6)
                        hint = f"; did you mean '{near[0]}'?" if near else ""
                        raise ValueError(f"variants[{k}].{key}: no measure named '{name}'{hint} "
                                         f"Measures: {', '.join(names) or 'none'}")
            for name in v.add:
                if self.measure(name).baseline:
                    raise ValueError(f"variants[{k}].add: measure '{name}' is already in the "
                                     "baseline (baseline = true); set baseline = false on it")
            for name in v.remove:
                if not self.measure(name).baseline:
                    raise ValueError(f"variants[{k}].remove: measure '{name}' is not in the "
                                     "baseline (baseline = false), so there is nothing to remove")
            for key in v.set:
                if any(key == f or key.startswith(f + ".") for f in _FIXED_FOR_VARIANTS):
                    raise ValueError(
                        f"variants[{k}].set: '{key}' cannot change in a variant (every variant "
                        "runs on the same grid with the scenario's own measures); allowed are "
                        "keys such as 'prey.growth', 'predator.mortality', 'interaction.'"
                        "attack_rate', 'run.years'")
        if self.variant != BASELINE and self.variant not in vnames:
            raise ValueError(f"variant '{self.variant}' is not defined")
        return self

    @model_validator(mode="after")
    def _uncertainty(self) -> Scenario:
        u = self.uncertainty
        if u is None:
            return self
        names = self.variant_names()
        for name in u.variants:
            if name not in names:
                near = difflib.get_close_matches(name, names, n=1, cutoff=0.5)
                hint = f"; did you mean '{near[0]}'?" if near else ""
                raise ValueError(f"uncertainty.variants: no variant named '{name}'{hint} "
                                 f"Variants: {', '.join(names)}")
        for k, p in enumerate(u.parameters):
            where = f"uncertainty.parameters[{k}]"
            why = uncertain_key_problem(p.key, self.raw or self.model_dump(mode="json"))
            if why:
                raise ValueError(f"{where}.key: {why}")
            for v in self.variants:
                if p.key in v.set:
                    raise ValueError(f"{where}.key: variant '{v.name}' sets '{p.key}', which "
                                     "is also uncertain; drop it from the variant's 'set' or "
                                     "from [[uncertainty.parameters]]")
            if self.raw:  # each end of the range must be a valid value of the key
                for value in p.range:
                    try:
                        self.with_values({p.key: value})
                    except InputError as exc:
                        raise ValueError(f"{where}.range: {value:g} is not a valid value of "
                                         f"'{p.key}': {exc.message}") from None
        return self

    def with_values(self, values: dict[str, Any]) -> Scenario:
        """This scenario (same variant) with the dotted keys of ``values`` set.

        Keys are those of ``[[uncertainty.parameters]]`` (``"prey.growth"``,
        ``"landscape.classes.2.prey_capacity"``, ``"measures.<name>.permeability.prey"``,
        ``"start.releases.0.density"``) or any other dotted key of the file
        (``"run.seed"``). The result has no ``[uncertainty]`` section and is
        validated again.

        Raises
        ------
        InputError
            For a key that names nothing or a value the key does not accept.
        """
        data = json.loads(json.dumps(self.raw)) if self.raw else self.model_dump(
            mode="json", exclude_none=True)
        data.pop("uncertainty", None)
        for key, value in values.items():
            try:
                set_dotted(data, key, value)
            except KeyError as exc:
                raise InputError(exc.args[0], str(self.path)) from None
        data["variant"] = self.variant
        return parse_scenario(data, self.path, check_files=False)

    def measure(self, name: str) -> MeasureSpec:
        """The measure called ``name``."""
        for m in self.measures:
            if m.name == name:
                return m
        raise KeyError(name)

    def variant_names(self) -> list[str]:
        """``"baseline"`` and the names of every variant, in file order."""
        return [BASELINE] + [v.name for v in self.variants]

    def active_measures(self) -> list[MeasureSpec]:
        """The measures of this scenario's variant (baseline ones, plus added, less removed)."""
        on = {m.name for m in self.measures if m.baseline}
        if self.variant != BASELINE:
            v = next(v for v in self.variants if v.name == self.variant)
            on = (on | set(v.add)) - set(v.remove)
        return [m for m in self.measures if m.name in on]

    def for_variant(self, name: str) -> Scenario:
        """The scenario of variant ``name`` (``"baseline"``: this scenario's baseline).

        Parameter overrides (``set``) are applied to the file's values and the
        result is validated again, so a bad override is reported with its key.

        Raises
        ------
        InputError
            For an unknown variant or an invalid override.
        """
        if name not in self.variant_names():
            near = difflib.get_close_matches(name, self.variant_names(), n=1, cutoff=0.5)
            hint = f"; did you mean '{near[0]}'?" if near else ""
            raise InputError(f"no variant named '{name}'{hint} Variants: "
                             f"{', '.join(self.variant_names())}", str(self.path))
        data = json.loads(json.dumps(self.raw)) if self.raw else self.model_dump(
            mode="json", exclude_none=True)
        data["variant"] = name
        if name != BASELINE:
            v = next(v for v in self.variants if v.name == name)
            k = self.variant_names().index(name) - 1
            for key, value in v.set.items():
                node = data
                parts = key.split(".")
                for part in parts[:-1]:
                    nxt = node.get(part) if isinstance(node, dict) else None
                    if not isinstance(nxt, dict):
                        raise InputError(f"variants[{k}].set: '{key}' does not name a key of the "
                                         "scenario (use dotted section.key names, e.g. "
                                         "'predator.mortality')", str(self.path))
                    node = nxt
                node[parts[-1]] = value
        try:
            return parse_scenario(data, self.path, check_files=False)
        except InputError as exc:
            raise InputError(f"in variant '{name}': {exc.message}", exc.source) from None

    def resolve(self, rel: str) -> Path:
        """A path from the scenario, resolved against the scenario's folder."""
        p = Path(rel).expanduser()
        return p if p.is_absolute() else (self.path.parent / p)

    def digest(self) -> str:
        """SHA-256 of the settings and of the bytes of every file they name."""
        h = hashlib.sha256(json.dumps(self.model_dump(mode="json"), sort_keys=True).encode())
        for rel in self.files():
            h.update(self.resolve(rel).read_bytes())
        return h.hexdigest()

    def files(self) -> list[str]:
        """Paths of the input files this run reads (as written)."""
        out = [self.landscape.habitat]
        if self.start.prey == "raster" and self.start.prey_raster:
            out.append(self.start.prey_raster)
        if self.start.predator == "raster" and self.start.predator_raster:
            out.append(self.start.predator_raster)
        for m in self.active_measures():
            out.append(m.geometry or m.raster)
        return out

    def input_files(self) -> list[tuple[str, str]]:
        """``(key path, path as written)`` of every input file the scenario names."""
        out = [("landscape.habitat", self.landscape.habitat)]
        if self.start.prey == "raster" and self.start.prey_raster:
            out.append(("start.prey_raster", self.start.prey_raster))
        if self.start.predator == "raster" and self.start.predator_raster:
            out.append(("start.predator_raster", self.start.predator_raster))
        for k, m in enumerate(self.measures):
            key = "geometry" if m.geometry else "raster"
            out.append((f"measures[{k}].{key}", m.geometry or m.raster))
        for k, t in enumerate(self.analysis.targets):
            key = "geometry" if t.geometry else "raster"
            out.append((f"analysis.targets[{k}].{key}", t.geometry or t.raster))
        return out


def _dotted_target(data: dict, key: str) -> tuple[Any, str]:
    """The container and last part of a dotted key (see :meth:`Scenario.with_values`).

    Raises ``KeyError`` with a message when a part names nothing.
    """
    if key.startswith("landscape.classes."):
        code, _, rest = key.removeprefix("landscape.classes.").partition(".")
        rows = data.get("landscape", {}).get("classes", [])
        row = next((r for r in rows if str(r.get("code")) == code), None)
        if row is None or not rest:
            codes = ", ".join(str(r.get("code")) for r in rows) or "none"
            raise KeyError(f"'{key}': no habitat class with code {code} (codes: {codes}); "
                           "write 'landscape.classes.<code>.<multiplier>'")
        return row, rest
    if key.startswith("measures."):
        rest = key.removeprefix("measures.")
        rows = data.get("measures", [])
        # names may hold dots: the longest measure name that starts the rest
        hits = sorted((m for m in rows if rest.startswith(str(m.get("name")) + ".")),
                      key=lambda m: -len(str(m.get("name"))))
        if not hits:
            names = ", ".join(repr(m.get("name")) for m in rows) or "none"
            raise KeyError(f"'{key}': no measure of that name (measures: {names}); write "
                           "'measures.<name>.<key>'")
        node, path = hits[0], rest[len(str(hits[0]["name"])) + 1:]
    else:
        node, path = data, key
    *parents, last = path.split(".")
    for part in parents:
        if isinstance(node, list) and part.isdigit() and int(part) < len(node):
            node = node[int(part)]
        elif isinstance(node, dict) and isinstance(node.get(part), (dict, list)):
            node = node[part]
        elif isinstance(node, dict) and part not in node and part in ("permeability",):
            node = node.setdefault(part, {})
        else:
            raise KeyError(f"'{key}' does not name a key of the scenario ('{part}' is not a "
                           "section or list here)")
    if not isinstance(node, dict):
        raise KeyError(f"'{key}' does not name a key of the scenario")
    return node, last


def set_dotted(data: dict, key: str, value: Any) -> None:
    """Set a dotted key in a scenario's data (as read from TOML), in place.

    ``landscape.classes.<code>.<key>`` addresses a class by its code,
    ``measures.<name>.<key>`` a measure by its name and
    ``start.releases.<index>.<key>`` a release by its position.

    Raises
    ------
    KeyError
        With a message when the key names nothing.

    Examples
    --------
    >>> d = {"prey": {"growth": 1.0}, "landscape": {"classes": [{"code": 4}]}}
    >>> set_dotted(d, "landscape.classes.4.prey_capacity", 0.5)
    >>> set_dotted(d, "prey.growth", 2.0)
    >>> d["landscape"]["classes"][0]["prey_capacity"], d["prey"]["growth"]
    (0.5, 2.0)
    """
    node, last = _dotted_target(data, key)
    node[last] = value


def uncertain_key_problem(key: str, data: dict) -> str | None:
    """Why ``key`` cannot be an uncertain parameter of the scenario ``data``, or None."""
    forms = "; ".join(UNCERTAIN_KEY_FORMS)
    section, _, rest = key.partition(".")
    if key.startswith("landscape.classes."):
        allowed = rest.rpartition(".")[2] in _CLASS_KEYS and rest.count(".") == 2
        what = "a class multiplier (" + ", ".join(_CLASS_KEYS) + ")"
    elif key.startswith("start.releases."):
        parts = rest.split(".")
        allowed = len(parts) == 3 and parts[1].isdigit() and parts[2] in _RELEASE_KEYS
        what = "a release's " + " or ".join(_RELEASE_KEYS)
    elif section == "measures":
        allowed = any(key.endswith("." + k) for k in _MEASURE_KEYS)
        what = "a measure's " + ", ".join(_MEASURE_KEYS)
    elif section in _UNCERTAIN_KEYS:
        allowed = rest in _UNCERTAIN_KEYS[section]
        what = f"one of {section}." + f", {section}.".join(_UNCERTAIN_KEYS[section])
    elif section in ("run", "landscape", "analysis", "title", "notes", "variants"):
        return (f"'{key}' cannot be uncertain: every member shares the grid, the run length "
                "and the analysis settings (each member gets its own run.seed from "
                f"uncertainty.seed). Uncertain keys are {forms}")
    else:
        return f"'{key}' is not a key an ensemble can draw; uncertain keys are {forms}"
    if not allowed:
        near = ""
        if section in _UNCERTAIN_KEYS:
            m = difflib.get_close_matches(rest, _UNCERTAIN_KEYS[section], n=1, cutoff=0.6)
            near = f"; did you mean '{section}.{m[0]}'?" if m else ""
        return f"'{key}' cannot be uncertain here{near} (it must be {what})"
    try:
        _dotted_target(json.loads(json.dumps(data)), key)
    except KeyError as exc:
        return exc.args[0]
    return None


# ---------------------------------------------------------------------------
# loading and error messages
# ---------------------------------------------------------------------------
def _loc(loc: tuple, last_is_key: bool = False) -> str:
    out = ""
    for k, part in enumerate(loc):
        key = last_is_key and k == len(loc) - 1
        if isinstance(part, int) and not key:
            out += f"[{part}]"
        elif not key and not str(part).isidentifier():
            continue  # pydantic's tags for union members, e.g. "constrained-float"
        else:
            out += ("." if out else "") + str(part)
    return out


def _model_at(loc: tuple) -> type[BaseModel] | None:
    model: Any = Scenario
    for part in loc:
        if isinstance(part, int):
            continue
        fields = getattr(model, "model_fields", None)
        if not fields or part not in fields:
            return None
        ann = fields[part].annotation
        inner = getattr(ann, "__args__", None)
        if isinstance(ann, type) and issubclass(ann, BaseModel):
            model = ann
        elif inner and isinstance(inner[0], type) and issubclass(inner[0], BaseModel):
            model = inner[0]
        else:
            return None
    return model


def _message(err: dict) -> str:
    loc = tuple(err["loc"])
    kind = err["type"]
    where = _loc(loc, last_is_key=kind == "extra_forbidden") or "(top level)"
    if kind == "extra_forbidden":
        key = str(loc[-1])
        parent = _model_at(loc[:-1])
        hidden = ("path", "raw", "variant")
        valid = sorted(f for f in parent.model_fields if f not in hidden) if parent else []
        near = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        return f"{where}: unknown key '{key}'{hint} Valid keys here: {', '.join(valid)}"
    if kind == "missing":
        return f"{where}: missing required key"
    msg = err["msg"].removeprefix("Value error, ")
    if "input" in err and kind not in ("model_type", "value_error"):
        return f"{where}: {msg} (got {err['input']!r})"
    return f"{where}: {msg}"


def parse_scenario(
    data: dict, path: str | Path = "scenario.toml", check_files: bool = True
) -> Scenario:
    """Validate a scenario given as a dict (as read from TOML).

    Raises
    ------
    InputError
        Naming the file and every offending key.
    """
    path = Path(path)
    if "variant" in data and check_files:
        raise InputError("(top level): unknown key 'variant'; name variants in [[variants]] "
                         "tables", source=str(path))
    try:
        raw = json.loads(json.dumps({k: v for k, v in data.items() if k != "variant"},
                                    default=str))
        sc = Scenario.model_validate({**data, "path": path, "raw": raw})
    except ValidationError as exc:
        lines: list[str] = []
        for e in exc.errors():
            line = _message(e)
            where = line.split(": ", 1)[0]
            same = [k for k, prev in enumerate(lines) if prev.split(": ", 1)[0] == where]
            if same:  # one key failing every member of a union: one line
                lines[same[0]] += " or " + line.split(": ", 1)[1]
            else:
                lines.append(line)
        raise InputError("\n  ".join(lines), source=str(path)) from None
    if not check_files:
        return sc
    for key, rel in sc.input_files():
        f = sc.resolve(rel)
        if f.is_dir():
            raise InputError(f"{key}: '{rel}' is a folder ({f}); give the path of a file",
                             source=str(path))
        if not f.is_file():
            raise InputError(
                f"{key}: file '{rel}' not found (looked for {f}); paths are relative to "
                "the scenario file",
                source=str(path),
            )
    return sc


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario TOML file.

    Parameters
    ----------
    path : str or pathlib.Path
        The scenario file.

    Raises
    ------
    FileProblem
        If the file is missing or cannot be read.
    InputError
        If it is not valid TOML, or any key is wrong.

    Examples
    --------
    ``scenario_path`` is a scenario file (such as ``landscapes/veldrun_moor.toml``):

    >>> sc = load_scenario(scenario_path)
    >>> sc.variant_names()
    ['baseline', 'fenced', 'no-refuge']
    >>> sc.for_variant("fenced").variant
    'fenced'
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise FileProblem(f"cannot read scenario file ({exc.strerror})", source=str(path)) from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid TOML: {exc}", source=str(path)) from None
    return parse_scenario(data, path)
