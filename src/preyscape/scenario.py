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
    BaseModel,
    ConfigDict,
    Field,
    StrictInt,
    ValidationError,
    field_validator,
    model_validator,
)

from preyscape.errors import InputError

# strict: a quoted number or a boolean is a mistake in a scenario file, not a number
Positive = Annotated[float, Field(gt=0, allow_inf_nan=False, strict=True)]
NonNegative = Annotated[float, Field(ge=0, allow_inf_nan=False, strict=True)]
Fraction = Annotated[float, Field(ge=0, le=1, allow_inf_nan=False, strict=True)]
Coordinate = Annotated[float, Field(allow_inf_nan=False, strict=True)]
EdgeRule = Literal["closed", "hostile"]
MovementKind = Literal["fickian", "ecological"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class HabitatClass(_Strict):
    """One row of the class table: a habitat code and its multipliers (all ≥ 0)."""

    code: StrictInt
    name: str = ""
    prey_capacity: NonNegative = 1.0
    prey_growth: NonNegative = 1.0
    prey_movement: NonNegative = 1.0
    predator_mortality: NonNegative = 1.0
    predator_movement: NonNegative = 1.0


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
    """``[prey]``: growth rate (1/yr), capacity (animals/km²) and movement."""

    growth: Positive
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
    predator_density: NonNegative = 0.0
    releases: tuple[Release, ...] = ()
    noise: Annotated[float, Field(ge=0, lt=1, strict=True)] = 0.0

    @model_validator(mode="after")
    def _prey(self) -> StartSpec:
        if self.prey == "uniform" and self.prey_density is None:
            raise ValueError("prey = 'uniform' needs prey_density (animals/km²)")
        if self.prey == "raster" and not self.prey_raster:
            raise ValueError("prey = 'raster' needs prey_raster (path to a density raster)")
        return self


class RunSpec(_Strict):
    """``[run]``: length, step and saving."""

    years: Positive
    save_every: Positive
    step: Positive | Literal["auto"] = "auto"
    seed: StrictInt = 0
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
    predator: PredatorSpec
    interaction: InteractionSpec
    start: StartSpec = StartSpec()
    run: RunSpec
    path: Path = Field(default=Path("scenario.toml"), exclude=True)

    @model_validator(mode="after")
    def _capacity(self) -> Scenario:
        logistic = self.interaction.form != "lotka-volterra"
        if self.prey.capacity is None and (logistic or self.start.prey == "capacity"):
            why = f"form '{self.interaction.form}'" if logistic else "start.prey = 'capacity'"
            raise ValueError(f"prey.capacity (animals/km² at best habitat) is needed by {why}")
        return self

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
        """Paths of the input files the scenario names (as written)."""
        out = [self.landscape.habitat]
        if self.start.prey == "raster" and self.start.prey_raster:
            out.append(self.start.prey_raster)
        return out


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
        valid = sorted(f for f in parent.model_fields if f != "path") if parent else []
        near = difflib.get_close_matches(key, valid, n=1, cutoff=0.6)
        hint = f"; did you mean '{near[0]}'?" if near else ""
        return f"{where}: unknown key '{key}'{hint} Valid keys here: {', '.join(valid)}"
    if kind == "missing":
        return f"{where}: missing required key"
    msg = err["msg"].removeprefix("Value error, ")
    if "input" in err and kind not in ("model_type", "value_error"):
        return f"{where}: {msg} (got {err['input']!r})"
    return f"{where}: {msg}"


def parse_scenario(data: dict, path: str | Path = "scenario.toml") -> Scenario:
    """Validate a scenario given as a dict (as read from TOML).

    Raises
    ------
    InputError
        Naming the file and every offending key.
    """
    path = Path(path)
    try:
        sc = Scenario.model_validate({**data, "path": path})
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
    for key, rel in (("landscape.habitat", sc.landscape.habitat),) + (
        (("start.prey_raster", sc.start.prey_raster),) if sc.start.prey == "raster" else ()
    ):
        f = sc.resolve(rel)
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
    InputError
        If the file is missing, is not valid TOML, or any key is wrong.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(f"cannot read scenario file ({exc.strerror})", source=str(path)) from None
    try:
        data = tomllib.loads(raw.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise InputError(f"not valid TOML: {exc}", source=str(path)) from None
    return parse_scenario(data, path)
