"""Invasion fronts written out: arrival-time and speed rasters, front table, figures.

:func:`write_waves` reads ``results.nc`` one snapshot at a time and writes
into a new output folder::

    prey_arrival.tif, predator_arrival.tif          arrival time, years (NaN: never)
    prey_front_speed.tif, predator_front_speed.tif  local front speed, km/yr
    prey_arrival.png, ..._front_speed.png           maps of the above
    fronts.csv                                      fitted speed per transect and species
    front_<transect>_<species>.png                  front position against time

Examples
--------
``run_folder`` is a finished run folder; ``out_folder`` a folder for outputs:

>>> out = write_waves(run_folder, out_folder / "waves")
>>> sorted(out.arrival), (out.folder / "fronts.csv").is_file()
(['predator', 'prey'], True)
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from preyscape.analysis.commands import Command, Option
from preyscape.analysis.output import (
    Bullets,
    Figure,
    FileRecord,
    Paragraph,
    Part,
    Table,
    Written,
    output_folder,
    write_csv,
    write_raster,
)
from preyscape.analysis.results import NO_PREDATOR
from preyscape.analysis.settings import FRONT_THRESHOLD_SHARE, AnalysisSettings, TransectLine
from preyscape.errors import InputError
from preyscape.names import slug
from preyscape.store import SPECIES

COMMAND = Command(
    name="waves",
    help="arrival times, front speeds and periodic waves",
    runs="one",
    options=(
        Option("--transects", "transects_file", "GeoJSON lines to measure fronts along "
               "(default: the scenario's analysis.transects, else one drawn from the arrival "
               "map)", type=Path, metavar="GEOJSON", setting=False),
        Option("--prey-threshold", "prey_threshold", "prey arrival density, per km²",
               metavar="DENSITY"),
        Option("--predator-threshold", "predator_threshold",
               "predator arrival density, per km²", metavar="DENSITY"),
    ),
    out_help="RUN/waves",
)

FRONTS_HEADER = [
    "transect", "species", "threshold_per_km2", "speed_km_yr", "stderr_km_yr", "r2",
    "predicted_km_yr", "ratio", "n", "wavelength_km", "period_yr", "phase_speed_km_yr",
]

ARRIVAL_CMAP = "cividis"  # sequential, perceptually uniform, readable in grey
SPEED_CMAP = "plasma"
TRANSECT_COLOUR = "#d62728"


@dataclass(frozen=True)
class SpeciesArrival:
    """How one species spread over the landscape.

    Attributes
    ----------
    threshold : float or None
        Density that marks arrival, animals/km² (None: the species is absent).
    threshold_source : str
        ``"given"`` or how the default was chosen.
    reached_fraction, present_at_start_fraction : float
        Share (0–1) of the data cells reached at all, and already at t = 0.
    median_years, latest_years : float or None
        Median and latest arrival time of the cells reached, years.
    local_speed_median : float or None
        Median local front speed, km/yr.
    """

    threshold: float | None
    threshold_source: str
    reached_fraction: float
    present_at_start_fraction: float
    median_years: float | None
    latest_years: float | None
    local_speed_median: float | None

    @property
    def settled(self) -> bool:
        """Whether the species occupied most of the landscape from the start (no front)."""
        return self.present_at_start_fraction > 0.5


@dataclass(frozen=True)
class FrontRow:
    """One fitted front: a species along a transect (speeds km/yr, lengths km, years)."""

    transect: str
    species: str
    threshold_per_km2: float
    speed_km_yr: float | None
    stderr_km_yr: float | None
    r2: float | None
    predicted_km_yr: float | None
    ratio: float | None
    n: int
    wavelength_km: float | None
    period_yr: float | None
    phase_speed_km_yr: float | None
    fit_start_yr: float | None
    fit_end_yr: float | None
    figure: str


@dataclass(frozen=True)
class WavesOutput(Written):
    """What :func:`write_waves` wrote.

    Attributes
    ----------
    arrival : dict
        Species to :class:`SpeciesArrival`.
    fronts : tuple of FrontRow
        One per transect and species (the rows of ``fronts.csv``).
    transects : tuple of TransectLine
        The transects used.
    automatic : bool
        Whether the transect was drawn automatically from the arrival map.
    names : dict
        Common names of the species.
    """

    arrival: dict[str, SpeciesArrival] = field(default_factory=dict)
    fronts: tuple[FrontRow, ...] = ()
    transects: tuple[TransectLine, ...] = ()
    automatic: bool = False
    names: dict[str, str] = field(default_factory=dict)

    def summary_lines(self) -> list[str]:
        lines = [f"waves: {self.folder}"]
        for sp, a in self.arrival.items():
            if a.settled:
                lines.append(f"  {sp}: present on most of the landscape from the start, so no "
                             "front")
        for f in self.fronts:
            if self.arrival[f.species].settled:
                continue
            lines.append(f"  {f.transect}, {f.species}: front {_fmt(f.speed_km_yr, 'km/yr')} "
                         f"(predicted minimal {_fmt(f.predicted_km_yr, 'km/yr')})")
        if "predator" not in self.arrival:
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def report_parts(self) -> list[Part]:
        return [Part("Travelling waves", tuple(_report_blocks(self)))]


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _label(out: WavesOutput, sp: str) -> str:
    n = out.names.get(sp, sp)
    return f"{sp} ({n})" if n and n != sp else sp


def _report_blocks(out: WavesOutput) -> list:
    thr = {sp: a.threshold for sp, a in out.arrival.items()}
    two = "predator" in out.arrival  # prey alone: no predator threshold or prediction
    blocks: list = [Paragraph(
        "The arrival time of a cell is the first time its density reaches the threshold "
        f"(prey {_fmt(thr.get('prey'), 'per km²')}"
        + (f", predators {_fmt(thr.get('predator'), 'per km²')})" if two else ")")
        + ". The front speed along a transect is the "
        "slope of the front's position against time. Predicted speeds are the published "
        "minimal speeds for the best habitat: Fisher–KPP 2√(rD) for prey spreading into "
        "empty habitat"
        + (", and Dunbar's 2√(D(eaK/(1+ahK) − m)) for predators invading prey at "
           "capacity" if two else "") + ". A front approaches its minimal speed from below: "
        "over a few kilometres it is slower, and poorer habitat slows it further.")]
    settled = {sp for sp, a in out.arrival.items() if a.settled}
    notes = [f"{_label(out, sp)} occupied most of the landscape from the start, so there is "
             "no front of it to follow." for sp in SPECIES if sp in settled]
    rows = []
    for f in out.fronts:
        if f.species in settled or f.n < 2:
            continue
        rows.append((f.transect, _label(out, f.species), f.speed_km_yr, f.stderr_km_yr,
                     f.predicted_km_yr, f.ratio, f.n, f.wavelength_km, f.period_yr))
        if f.ratio is not None and math.isfinite(f.ratio):
            notes.append(f"{f.transect}, {f.species}: the fitted front moved at "
                         f"{100 * f.ratio:.0f} % of the minimal speed predicted for the best "
                         "habitat. Below 100 % is expected over short distances (a front "
                         "approaches its minimal speed from below; Bramson 1983) and where "
                         "poorer habitat lies on the way; well above it would point to a too "
                         "coarse step or threshold.")
    if rows:
        blocks.append(Table(("transect", "species", "fitted speed (km/yr)",
                             "std. error (km/yr)", "predicted minimal speed (km/yr)",
                             "fitted / predicted", "snapshots",
                             "wavelength behind the front (km)", "period behind the front (yr)"),
                            tuple(rows)))
    else:
        blocks.append(Paragraph("No front could be fitted (no transect, or no front crossed "
                                "one)."))
    if notes:
        blocks.append(Bullets(tuple(notes)))
    shown_fronts = {f.figure for f in out.fronts if f.n >= 2 and f.species not in settled}
    for rec in out.files:
        if rec.role not in ("map", "figure") or rec.species in settled:
            continue
        if rec.key == "front" and rec.name not in shown_fronts:
            continue
        blocks.append(Figure(out.path(rec), rec.title, rec.title))
    return blocks


def default_out(runs: Sequence) -> Path:
    """``RUN/waves``."""
    return Path(runs[0].path) / "waves"


def write(runs: Sequence, settings: AnalysisSettings, out: Path, *, overwrite: bool = False,
          transects_file: Path | None = None) -> WavesOutput:
    """The registry's entry point: :func:`write_waves` of the one run.

    ``transects_file`` (GeoJSON lines, any CRS preyscape reads) replaces the
    settings' transects.
    """
    if transects_file is not None:
        from dataclasses import replace

        settings = replace(settings, transects=transects_from_file(transects_file,
                                                                    runs[0].grid))
    return write_waves(runs[0], out, settings=settings, overwrite=overwrite)


def transects_from_file(path: Path, grid) -> tuple[TransectLine, ...]:
    """Transects from a GeoJSON file of lines, in ``grid``'s CRS (metres).

    Raises
    ------
    InputError
        If the file holds no LineString.
    """
    from preyscape.landscape.measures import read_geometry

    out = []
    for k, shape in enumerate(read_geometry(path, grid, source=str(path))):
        g = shape.geometry
        lines = list(g.geoms) if hasattr(g, "geoms") else [g]
        for j, line in enumerate(lines):
            if line.geom_type != "LineString":
                continue
            name = str(shape.properties.get("name") or f"transect {k + 1}")
            if len(lines) > 1:
                name += f" {j + 1}"
            out.append(TransectLine(name, tuple((float(x), float(y))
                                                for x, y, *_ in line.coords)))
    if not out:
        raise InputError("no LineString in the file; transects are lines", str(path))
    return tuple(out)


def _auto_line(grid, arrivals: Mapping[str, np.ndarray]) -> TransectLine | None:
    # from where a species was first (the centroid of its earliest cells) to the
    # cell it reached last: the longest path the front took; predators first
    for sp in ("predator", "prey"):
        a = arrivals.get(sp)
        if a is None or np.count_nonzero(np.isfinite(a)) < 2:
            continue
        lo, hi = float(np.nanmin(a)), float(np.nanmax(a))
        if not hi > lo:
            continue
        rows, cols = np.nonzero(a <= lo)
        x0, y0 = float(np.mean(grid.x[cols])), float(np.mean(grid.y[rows]))
        r1, c1 = np.unravel_index(int(np.nanargmax(a)), a.shape)
        x1, y1 = float(grid.x[c1]), float(grid.y[r1])
        if math.hypot(x1 - x0, y1 - y0) < max(grid.dx, grid.dy):
            continue
        return TransectLine("auto", ((x0, y0), (x1, y1)))
    return None


def _f(v) -> float | None:
    return float(v) if v is not None and math.isfinite(v) else None


def write_waves(run, out: str | Path, *, settings: AnalysisSettings | None = None,
                predicted: Mapping[str, float] | None = None,
                overwrite: bool = False) -> WavesOutput:
    """Write arrival times, local front speeds and transect front fits of a run.

    Parameters
    ----------
    run : RunResults or path
        A finished run.
    out : str or pathlib.Path
        Output folder to create (atomically).
    settings : AnalysisSettings, optional
        Default the run's own. ``transects`` (map metres; none: one transect
        named ``auto`` from where the predators, or if they do not spread the
        prey, were first to the cell they reached last) and the arrival
        thresholds (animals/km²; unset: :data:`FRONT_THRESHOLD_SHARE` of the
        species' largest time-mean density).
    predicted : mapping, optional
        Predicted minimal front speeds per species, km/yr; default the run's
        recorded predictions (Fisher–KPP for prey, Dunbar for predators).
    overwrite : bool
        Replace an existing ``out``.

    Returns
    -------
    WavesOutput

    Raises
    ------
    InputError
        If ``out`` exists and ``overwrite`` is false, or a transect lies
        outside the landscape.
    """
    from preyscape.analysis.results import RunResults, open_run

    run = run if isinstance(run, RunResults) else open_run(run)
    settings = settings or run.settings()
    pr = run.predictions
    pred = dict(predicted) if predicted is not None else {
        "prey": pr.get("prey_front_speed"), "predator": pr.get("predator_front_speed")}
    pred = {sp: float(v) for sp, v in pred.items() if v is not None}
    with output_folder(out, overwrite) as tmp:
        arrival, arrivals, speeds, files = _arrival_maps(tmp, run, settings)
        lines, auto = settings.transects, False
        if not lines:
            line = _auto_line(run.grid, arrivals)
            lines, auto = ((line,), True) if line is not None else ((), False)
        trs = _sample(run.grid, lines, auto)
        files += _draw_maps(tmp, run, arrival, arrivals, speeds, trs)
        fronts, front_files = _fit_fronts(tmp, run, arrival, trs, pred)
        files += front_files
        write_csv(tmp / "fronts.csv", FRONTS_HEADER,
                  [[asdict(f)[k] for k in FRONTS_HEADER] for f in fronts])
        files.append(FileRecord("fronts.csv", "table", "Front speed per transect and species"))
    return WavesOutput(Path(out), tuple(files), arrival, tuple(fronts), tuple(lines), auto,
                       run.species_names)


def _arrival_maps(tmp: Path, run, settings: AnalysisSettings):
    """Arrival-time and local-speed rasters of both species, and their key numbers."""
    from preyscape.analysis import waves as W

    grid = run.grid
    arrival: dict[str, SpeciesArrival] = {}
    arrivals, speeds, files = {}, {}, []
    for sp in run.species:
        mean = run.time_mean(sp)
        top = float(np.nanmax(mean)) if np.any(np.isfinite(mean)) else 0.0
        thr = settings.front_threshold(sp, top)
        source = ("given" if settings.threshold(sp) is not None else
                  f"{FRONT_THRESHOLD_SHARE:.0%} of the largest time-mean density")
        if math.isfinite(thr):
            a = W.arrival_time_of_run(run.ds, sp, thr)
        else:  # the species is absent: it never arrives anywhere
            a = np.full(grid.shape, np.nan)
        speed = W.local_front_speed(a, grid.dx, grid.dy)
        for name, arr, what in ((f"{sp}_arrival.tif", a, "arrival time (years)"),
                                (f"{sp}_front_speed.tif", speed, "local front speed (km/yr)")):
            write_raster(tmp / name, grid, arr)
            files.append(FileRecord(name, "raster", f"{sp.capitalize()} {what}", sp))
        reached = np.isfinite(a) & grid.mask
        fin = speed[np.isfinite(speed)]
        arrival[sp] = SpeciesArrival(
            _f(thr), source, float(reached.sum() / max(grid.n_cells, 1)),
            float((reached & (a <= 0)).sum() / max(grid.n_cells, 1)),
            _f(float(np.median(a[reached]))) if reached.any() else None,
            _f(float(np.max(a[reached]))) if reached.any() else None,
            _f(float(np.median(fin))) if fin.size else None)
        arrivals[sp], speeds[sp] = a, speed
    return arrival, arrivals, speeds, files


def _sample(grid, lines: Sequence[TransectLine], auto: bool) -> list:
    from preyscape.analysis.transects import sample_transect

    trs = []
    for i, tr in enumerate(lines):
        try:
            trs.append(sample_transect(grid, [list(p) for p in tr.points], name=tr.name))
        except InputError as err:
            src = "transects (automatic)" if auto else f"transects[{i}] ({tr.name})"
            raise InputError(err.message, src) from None
    return trs


def _draw_maps(tmp: Path, run, arrival, arrivals, speeds, trs) -> list[FileRecord]:
    files = []
    for sp in arrival:
        thr = arrival[sp].threshold
        title = (f"{sp.capitalize()} arrival (density ≥ {thr:.3g} per km²)" if thr is not None
                 else f"{sp.capitalize()} arrival (absent)")
        arrival_map(run.grid, arrivals[sp], title, tmp / f"{sp}_arrival.png", trs)
        stitle = f"{sp.capitalize()} local front speed"
        speed_map(run.grid, speeds[sp], stitle, tmp / f"{sp}_front_speed.png")
        files += [FileRecord(f"{sp}_arrival.png", "map", f"{sp} arrival", sp),
                  FileRecord(f"{sp}_front_speed.png", "map",
                             f"{sp} front speed (1/|∇T| of the arrival time T; very large "
                             "values mark places the front reaches almost at once, near the "
                             "release or where fronts meet, not a fast-moving front)", sp)]
    return files


def _fit_fronts(tmp: Path, run, arrival, trs, pred) -> tuple[list[FrontRow], list[FileRecord]]:
    from preyscape.analysis import waves as W

    fronts, files = [], []
    for sp in arrival:
        thr = arrival[sp].threshold
        if not trs or thr is None:
            continue
        series = W.transect_series(run.ds, trs, species=sp, times=run.times)
        for tr, s in zip(trs, series, strict=True):
            fit = W.front_speed(s, None, None, thr, predicted_km_yr=pred.get(sp, math.nan))
            wave = W.wave_summary(s, threshold=thr)
            name = f"front_{slug(tr.name)}_{sp}.png"
            front_plot(fit, tmp / name, f"{sp.capitalize()} front along transect {tr.name!r}")
            files.append(FileRecord(name, "figure", f"front {tr.name} {sp}", sp, key="front"))
            fronts.append(FrontRow(
                tr.name, sp, thr, _f(fit.speed), _f(fit.stderr), _f(fit.r2),
                _f(fit.predicted), _f(fit.ratio), fit.n, _f(wave.wavelength), _f(wave.period),
                _f(wave.phase_speed), _f(float(fit.times[0])) if fit.n else None,
                _f(float(fit.times[-1])) if fit.n else None, name))
    return fronts, files


# --- figures -------------------------------------------------------------------------
def _draw_transects(ax, transects: Sequence) -> None:
    for tr in transects:
        pts = np.asarray(tr.line, dtype=float)
        xs, ys = pts[:, 0] / 1e3, pts[:, 1] / 1e3
        ax.plot(xs, ys, color=TRANSECT_COLOUR, lw=1.4)
        ax.plot(xs[:1], ys[:1], "o", color=TRANSECT_COLOUR, ms=4)  # start of the transect
        if tr.name:
            ax.annotate(tr.name, (xs[-1], ys[-1]), fontsize=7, color=TRANSECT_COLOUR,
                        xytext=(3, 3), textcoords="offset points")


def arrival_map(grid, arrival: np.ndarray, title: str, path: Path,
                transects: Sequence = ()) -> Path:
    """Map of arrival times (years; NaN: never reached) with sampled transects drawn."""
    from preyscape.plots import _extent_km, _shown, finish_map, map_figure

    data = _shown(grid, arrival)
    vmax = float(data.max()) if data.count() else 1.0
    fig, ax, _ = map_figure(grid, arrival, title, ARRIVAL_CMAP, vmin=0.0,
                            vmax=max(vmax, 1e-12),
                            units="arrival time (years); grey: never or no data")
    _draw_transects(ax, transects)
    left, right, bottom, top = _extent_km(grid)
    ax.set_xlim(left, right)
    ax.set_ylim(bottom, top)
    return finish_map(fig, path)


def speed_map(grid, speed: np.ndarray, title: str, path: Path) -> Path:
    """Map of the local front speed, km/yr, its colour scale ending at the 98th percentile.

    A few noisy cells (the local speed is a derivative of interpolated arrival
    times) would otherwise wash out the rest; faster cells take the top colour.
    """
    from preyscape.plots import _shown, finish_map, map_figure

    vals = _shown(grid, speed).compressed()
    vmax = float(np.percentile(vals, 98)) if vals.size else 1.0
    fig, _, _ = map_figure(grid, speed, title, SPEED_CMAP, vmin=0.0, vmax=max(vmax, 1e-12),
                           units="local front speed (km/yr)", extend="max")
    return finish_map(fig, path)


def front_plot(fit, path: Path, label: str) -> Path:
    """Front position along a transect against time, with the fit and the prediction."""
    from preyscape.plots import _new, _save

    fig = _new((6.4, 4.2))
    ax = fig.add_subplot()
    ax.plot(np.asarray(fit.all_times, float), np.asarray(fit.all_positions, float), "o",
            ms=3, color="#9a9a9a", label="front position (not fitted)")
    ax.plot(fit.times, fit.positions, "o", ms=3.5, color="#2a788e",
            label=f"fitted snapshots (n = {fit.n})")
    if fit.n >= 2 and math.isfinite(fit.speed):
        tt = np.array([fit.times[0], fit.times[-1]])
        err = f" ± {fit.stderr:.3g}" if math.isfinite(fit.stderr) else ""
        ax.plot(tt, fit.intercept + fit.speed * tt, "-", color="#2a788e", lw=1.6,
                label=f"fit: {fit.speed:.3g}{err} km/yr")
        if math.isfinite(fit.predicted):
            # the predicted speed through the centre of the fitted points
            tm, xm = float(np.mean(fit.times)), float(np.mean(fit.positions))
            ax.plot(tt, xm + fit.predicted * (tt - tm), "--", color="#b5367a", lw=1.3,
                    label=f"predicted minimal speed: {fit.predicted:.3g} km/yr "
                          f"(ratio {fit.ratio:.3f})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("front position along the transect (km)")
    ax.set_title(label, fontsize=10)
    ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return _save(fig, path)
