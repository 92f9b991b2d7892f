"""Invasion fronts written out: arrival-time and speed rasters, front table, figures.

:func:`write_waves` reads ``results.nc`` one snapshot at a time and writes
into a new output folder::

    prey_arrival.tif, predator_arrival.tif          arrival time, years (NaN: never)
    prey_front_speed.tif, predator_front_speed.tif  local front speed, km/yr
    prey_arrival.png, ..._front_speed.png           maps of the above
    fronts.csv                                      fitted speed per transect and species,
                                                    with the best-habitat, landscape and
                                                    transect predictions
    front_<transect>_<species>.png                  front position against time

A species with no front (absent, present almost everywhere from the start,
or never spreading beyond where it started) gets no figure, only a sentence.

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

from preyscape.analysis import front_predictions as fp
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
from preyscape.analysis.transects import auto_transect, transects_from_file
from preyscape.errors import InputError
from preyscape.names import slug

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

PREDICTION_COLUMNS = (
    "landscape_km_yr", "landscape_window_km_yr", "landscape_ratio", "transect_km_yr",
    "transect_homogenised_km_yr", "transect_window_km_yr", "transect_ratio",
    "correction_km_yr", "far_from_asymptotic", "coarse", "transect_coarse",
)
"""Columns of ``fronts.csv`` from :func:`preyscape.analysis.front_predictions.columns`."""

FRONTS_HEADER = [
    "transect", "species", "threshold_per_km2", "speed_km_yr", "stderr_km_yr", "r2",
    "predicted_km_yr", "ratio", "n", "wavelength_km", "period_yr", "phase_speed_km_yr",
    "fit_start_yr", "fit_end_yr", *PREDICTION_COLUMNS,
]

ARRIVAL_CMAP = "viridis"  # sequential, perceptually uniform, no grey tones (grey: no data)
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
    occupied_at_start_fraction : float
        Share (0–1) of the data cells at or above the presence threshold at t = 0.
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

    occupied_at_start_fraction: float = 0.0

    @property
    def settled(self) -> bool:
        """Whether the species occupied most of the landscape from the start (no front).

        Occupied: at or above the arrival threshold, or at least present (the
        presence threshold) on most data cells at t = 0.
        """
        return max(self.present_at_start_fraction, self.occupied_at_start_fraction) > 0.5

    @property
    def no_front(self) -> str | None:
        """Why there is no front of this species to follow, in words (None: there is one)."""
        if self.threshold is None:
            return "is absent from the run, so there is no front to follow"
        if self.settled:
            return "occupied most of the landscape from the start, so there is no front of it"
        if self.reached_fraction <= self.present_at_start_fraction:
            return (f"never reached {self.threshold:.3g} per km² beyond where it was at the "
                    "start, so there is no front to follow")
        return None


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
    landscape_km_yr: float | None = None
    landscape_window_km_yr: float | None = None
    landscape_ratio: float | None = None
    transect_km_yr: float | None = None
    transect_homogenised_km_yr: float | None = None
    transect_window_km_yr: float | None = None
    transect_ratio: float | None = None
    correction_km_yr: float | None = None
    far_from_asymptotic: bool = False
    coarse: bool = False
    transect_coarse: bool = False
    note: str = ""


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
            if a.no_front:
                lines.append(f"  {sp}: {a.no_front}")
        shown = [f for f in self.fronts if not self.arrival[f.species].no_front]
        for f in shown:
            lines += fp.front_lines(f)
        if not shown:
            lines.append("  nothing to measure: " + self.nothing_to_measure())
        if "predator" not in self.arrival:
            lines.append(f"  {NO_PREDATOR}")
        return lines

    def nothing_to_measure(self) -> str:
        """Why no front speed was fitted, in words."""
        if all(a.no_front for a in self.arrival.values()):
            return "no species has a front in this run (see above)."
        if not self.transects:
            return ("no transect was given (--transects or the scenario's analysis.transects) "
                    "and none could be drawn from the arrival map.")
        return ("no front crossed a transect far enough from its ends, at two or more "
                "snapshots, to fit a speed; draw a transect along the way the front moved, "
                "or save snapshots more often.")

    def report_parts(self) -> list[Part]:
        return [Part("Travelling waves", tuple(_report_blocks(self)))]


def _fmt(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _vs(measured: float | None, predicted: float | None) -> str:
    """``"4.47 (1.07)"``: a predicted speed and the ratio fitted/predicted."""
    if predicted is None:
        return "n/a"
    if not predicted > 0:
        return "no invasion expected"
    return f"{predicted:.3g} ({measured / predicted:.2f})" if measured is not None else (
        f"{predicted:.3g}")


def _label(out: WavesOutput, sp: str) -> str:
    n = out.names.get(sp, sp)
    return f"{sp} ({n})" if n and n != sp else sp


def _report_blocks(out: WavesOutput) -> list:
    thr = {sp: a.threshold for sp, a in out.arrival.items()}
    two = "predator" in out.arrival  # prey alone: no predator threshold or prediction
    blocks: list = [Paragraph(
        "The arrival time of a cell is the first time its density reaches the threshold "
        f"(prey {_fmt(thr.get('prey'), 'per km²')}"
        + (f", predators {_fmt(thr.get('predator'), 'per km²')}" if two else "")
        + "). The front speed along a transect is the "
        "slope of the front's position against time. It is set against two predictions. "
        "The best-habitat bound is the published minimal speed in a landscape made of the "
        "best habitat only: Fisher–KPP 2√(rD) for prey spreading into empty habitat"
        + (", and Dunbar's 2√(D(eaK/(1+ahK) − m)) for predators invading prey at capacity"
           if two else "") + ". The "
        "landscape prediction is the speed through the habitat the transect crosses "
        "(growth and movement of each class, homogenised or as periodic patches; "
        "Shigesada, Kawasaki & Teramoto 1986), and the map-wide value from all classes. "
        "A front from a local release approaches its speed from below, lagging by a term "
        "that grows like ln t (Bramson 1983; Ebert & van Saarloos 2000), so the landscape "
        "prediction is also given as the mean speed expected over the snapshots the fit "
        "used, and the ratio is taken to that.")]
    notes = [f"{_label(out, sp)} {a.no_front}." for sp, a in out.arrival.items() if a.no_front]
    fronts = [f for f in out.fronts if not out.arrival[f.species].no_front]
    rows, waves = [], []
    for f in fronts:
        if f.n < 2:
            notes.append(f"{f.transect}, {f.species}: the front did not cross this transect at "
                         "two or more snapshots, so no speed was fitted.")
            continue
        mean = f.transect_window_km_yr
        err = f" ± {f.stderr_km_yr:.2g}" if f.stderr_km_yr is not None else ""
        rows.append((f.transect, _label(out, f.species), f"{f.speed_km_yr:.3g}{err}",
                     _vs(f.speed_km_yr, f.predicted_km_yr),
                     _vs(f.speed_km_yr, f.transect_km_yr),
                     "n/a" if mean is None else  # too early: the lag is not known
                     "far from it" if f.far_from_asymptotic else _vs(f.speed_km_yr, mean),
                     _vs(f.speed_km_yr, f.landscape_km_yr)))
        waves.append((f.transect, _label(out, f.species), f.n, f.wavelength_km, f.period_yr))
        if f.note:
            notes.append(f.note)
    if rows:
        blocks.append(Table(("transect", "species", "fitted", "best habitat",
                             "landscape, transect", "its mean over the fit",
                             "landscape, map"), tuple(rows), caption=(
            "Front speeds in km/yr: fitted, and each prediction with fitted/predicted in "
            "brackets. \"Its mean over the fit\": the transect's prediction averaged over the "
            "fitted years, with Bramson's lag of a front from a release (\"far from it\": too "
            "early in the front's life for the lag to be known).")))
        blocks.append(Table(("transect", "species", "snapshots", "wavelength (km)",
                             "period (yr)"), tuple(waves),
                            caption="Fits and periodic waves behind the front"))
    elif not notes:
        blocks.append(Paragraph("No front speed could be fitted: " + out.nothing_to_measure()))
    if notes:
        blocks.append(Bullets(tuple(notes)))
    shown_fronts = {f.figure for f in fronts if f.n >= 2}
    for rec in out.files:
        if rec.role not in ("map", "figure"):
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
        lines, auto = settings.transects, False
        trs = _sample(run.grid, lines, auto) if lines else []  # profiles read with arrivals
        arrival, arrivals, speeds, files, series = _arrival_maps(tmp, run, settings, trs)
        if not lines:
            line = auto_transect(run.grid, arrivals)
            lines, auto = ((line,), True) if line is not None else ((), False)
            trs, series = _sample(run.grid, lines, auto), None
        files += _draw_maps(tmp, run, arrival, arrivals, speeds, trs)
        fronts, front_files = _fit_fronts(tmp, run, arrival, trs, pred, series)
        files += front_files
        write_csv(tmp / "fronts.csv", FRONTS_HEADER,
                  [[asdict(f)[k] for k in FRONTS_HEADER] for f in fronts])
        files.append(FileRecord("fronts.csv", "table", "Front speed per transect and species"))
    return WavesOutput(Path(out), tuple(files), arrival, tuple(fronts), tuple(lines), auto,
                       run.species_names)


def _arrival_maps(tmp: Path, run, settings: AnalysisSettings, trs: Sequence = ()):
    """Arrival-time and local-speed rasters of both species, their key numbers, and the
    series along the sampled transects ``trs``: one pass over each species' snapshots."""
    from preyscape.analysis import waves as W

    grid = run.grid
    arrival: dict[str, SpeciesArrival] = {}
    arrivals, speeds, files, series = {}, {}, [], {}
    for sp in run.species:
        mean = run.time_mean(sp)
        top = float(np.nanmax(mean)) if np.any(np.isfinite(mean)) else 0.0
        thr = settings.front_threshold(sp, top)
        source = ("given" if settings.threshold(sp) is not None else
                  f"{FRONT_THRESHOLD_SHARE:.0%} of the largest time-mean density")
        a, series[sp] = W.arrival_and_profiles(run.ds, sp, thr, trs)
        if a is None:  # the species is absent: it never arrives anywhere
            a = np.full(grid.shape, np.nan)
        speed = W.local_front_speed(a, grid.dx, grid.dy)
        for name, arr, what in ((f"{sp}_arrival.tif", a, "arrival time (years)"),
                                (f"{sp}_front_speed.tif", speed, "local front speed (km/yr)")):
            write_raster(tmp / name, grid, arr)
            files.append(FileRecord(name, "raster", f"{sp.capitalize()} {what}", sp))
        reached = np.isfinite(a) & grid.mask
        fin = speed[np.isfinite(speed)]
        with np.errstate(invalid="ignore"):
            occupied = float(np.sum(run.frame(sp, 0)[grid.mask] >= settings.presence))
        arrival[sp] = SpeciesArrival(
            _f(thr), source, float(reached.sum() / max(grid.n_cells, 1)),
            float((reached & (a <= 0)).sum() / max(grid.n_cells, 1)),
            _f(float(np.median(a[reached]))) if reached.any() else None,
            _f(float(np.max(a[reached]))) if reached.any() else None,
            _f(float(np.median(fin))) if fin.size else None,
            occupied / max(grid.n_cells, 1))
        arrivals[sp], speeds[sp] = a, speed
    return arrival, arrivals, speeds, files, series


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
        if arrival[sp].no_front:  # a sentence instead of an empty figure
            continue
        thr = arrival[sp].threshold
        title = f"{sp.capitalize()} arrival (density ≥ {thr:.3g} per km²)"
        arrival_map(run.grid, arrivals[sp], title, tmp / f"{sp}_arrival.png", trs)
        stitle = f"{sp.capitalize()} local front speed"
        speed_map(run.grid, speeds[sp], stitle, tmp / f"{sp}_front_speed.png")
        files += [FileRecord(f"{sp}_arrival.png", "map", f"{sp} arrival", sp),
                  FileRecord(f"{sp}_front_speed.png", "map",
                             f"{sp} front speed (1/|∇T| of the arrival time T; very large "
                             "values mark places the front reaches almost at once, near the "
                             "release or where fronts meet, not a fast-moving front)", sp)]
    return files


def _fit_fronts(tmp: Path, run, arrival, trs, pred,
                series: dict | None = None) -> tuple[list[FrontRow], list[FileRecord]]:
    from preyscape.analysis import waves as W

    fronts, files = [], []
    land, habitat = run.predictions.get("landscape"), run.habitat
    if series is None:  # not read with the arrival times
        series = {sp: W.transect_series(run.ds, trs, species=sp, times=run.times) if trs
                  else [] for sp in arrival}
    for sp in arrival:
        thr = arrival[sp].threshold
        if not trs or thr is None:
            continue
        for j, (tr, s) in enumerate(zip(trs, series[sp], strict=True)):
            fit = W.front_speed(s, None, None, thr, predicted_km_yr=pred.get(sp, math.nan))
            wave = W.wave_summary(s, threshold=thr)
            ahead = (fp.prey_ahead(series["prey"][j].values, s.values, thr)
                     if sp == "predator" else None)
            p = fp.predict_along(land, habitat, tr, fit, sp, _f(fit.predicted), ahead)
            name = f"front_{slug(tr.name)}_{sp}.png"
            has_fit = fit.n >= 2 and math.isfinite(fit.speed)
            if has_fit and not arrival[sp].no_front:  # no empty plots
                front_plot(fit, tmp / name, f"{sp.capitalize()} front along transect "
                           f"{tr.name!r}", landscape=p.predicted)
                files.append(FileRecord(name, "figure", f"front {tr.name} {sp}", sp,
                                        key="front"))
            cols = fp.columns(p, _f(fit.speed))
            note = fp.sentence(p, fit.speed, tr.name) if has_fit else ""
            fronts.append(FrontRow(
                tr.name, sp, thr, _f(fit.speed), _f(fit.stderr), _f(fit.r2),
                _f(fit.predicted), _f(fit.ratio), fit.n, _f(wave.wavelength), _f(wave.period),
                _f(wave.phase_speed), _f(float(fit.times[0])) if fit.n else None,
                _f(float(fit.times[-1])) if fit.n else None, name, **cols, note=note))
    return fronts, files


# --- figures -------------------------------------------------------------------------
def _draw_transects(ax, transects: Sequence, extent: tuple[float, float, float, float]) -> None:
    from matplotlib import patheffects

    left, right, bottom, top = extent
    for tr in transects:
        pts = np.asarray(tr.line, dtype=float)
        xs, ys = pts[:, 0] / 1e3, pts[:, 1] / 1e3
        ax.plot(xs, ys, color=TRANSECT_COLOUR, lw=1.4)
        ax.plot(xs[:1], ys[:1], "o", color=TRANSECT_COLOUR, ms=4)  # start of the transect
        if tr.name:
            # the label beyond the end of the line, unless that runs out of the map: then
            # turned inwards, so it is never clipped at the frame or under the colour bar
            x = min(max(xs[-1], left), right)
            y = min(max(ys[-1], bottom), top)
            ahead_east = xs[-1] >= xs[-2]
            share = (x - left) / (right - left)  # 0 at the west edge, 1 at the east edge
            if (share > 0.7) if ahead_east else (share < 0.3):
                ahead_east = not ahead_east
            north = y > 0.5 * (bottom + top)
            ax.annotate(tr.name, (x, y), fontsize=7, color=TRANSECT_COLOUR,
                        xytext=(4 if ahead_east else -4, -4 if north else 4),
                        textcoords="offset points", ha="left" if ahead_east else "right",
                        va="top" if north else "bottom", annotation_clip=False,
                        path_effects=[patheffects.withStroke(linewidth=2.2,
                                                             foreground="white")])


def arrival_map(grid, arrival: np.ndarray, title: str, path: Path,
                transects: Sequence = ()) -> Path:
    """Map of arrival times (years; NaN: never reached) with sampled transects drawn."""
    from preyscape.plots import _extent_km, _shown, finish_map, map_figure

    data = _shown(grid, arrival)
    vmax = float(data.max()) if data.count() else 1.0
    fig, ax, _ = map_figure(grid, arrival, title, ARRIVAL_CMAP, vmin=0.0,
                            vmax=max(vmax, 1e-12),
                            units="arrival time (years)", undefined="never reached")
    _draw_transects(ax, transects, _extent_km(grid))
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


def front_plot(fit, path: Path, label: str, landscape=None) -> Path:
    """Front position along a transect against time, with the fit and the predictions.

    ``landscape`` (a :class:`~preyscape.model.theory.WindowSpeed`) adds the
    landscape prediction as a mean over the fitted snapshots.
    """
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
                    label=f"best-habitat bound: {fit.predicted:.3g} km/yr "
                          f"(ratio {fit.ratio:.3f})")
        if landscape is not None and landscape.asymptotic > 0:
            tm, xm = float(np.mean(fit.times)), float(np.mean(fit.positions))
            far = landscape.far_from_asymptotic  # too early to trust the lag: show c*
            c = landscape.asymptotic if far else landscape.mean
            what = ("landscape (far from asymptotic)" if far else
                    "landscape, mean over these years")
            ax.plot(tt, xm + c * (tt - tm), ":", color="#e08a00", lw=1.8,
                    label=f"{what}: {c:.3g} km/yr (ratio {fit.speed / c:.3f})")
    ax.set_xlabel("time (years)")
    ax.set_ylabel("front position along the transect (km)")
    ax.set_title(label, fontsize=10)
    ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return _save(fig, path)
