"""What theory predicts for a measured front: best habitat, landscape, transect, window.

A front fitted along a transect (:func:`preyscape.analysis.waves.front_speed`)
is set against three predictions, all for pulled fronts:

- the **best-habitat bound**, the minimal speed in a landscape made of the
  best habitat only (Fisher 1937; Kolmogorov, Petrovsky & Piskunov 1937;
  Dunbar 1983, J Math Biol 17:11), recorded in ``run.json``;
- the **landscape** speed, from homogenising growth and movement over the
  whole map (Shigesada, Kawasaki & Teramoto 1986, Theor Popul Biol 30:143;
  Shigesada & Kawasaki 1997; see ``docs/method.md``), also recorded when the
  run was made (:func:`preyscape.preview.landscape_predictions`);
- the **transect** speed, from the habitat under the stretch of the transect
  the front crossed while it was fitted, taken as one period of a periodic
  landscape (:func:`preyscape.model.landscape_theory.transect_speed`). For
  predators the growth under each point uses the prey density the run had
  there just before the predators arrived (:func:`prey_ahead`), not the
  class's capacity: prey that spread across small patches, or that cycle,
  are not at capacity.

A front started from a local release approaches its speed from below, so
each landscape prediction is also given as the mean speed expected over the
fitted snapshots, with Bramson's logarithmic correction (Bramson 1983, Mem
AMS 44(285); Ebert & van Saarloos 2000, Physica D 146:1;
:func:`preyscape.model.theory.mean_front_speed`), and flagged when that
correction exceeds 10 % of the speed (far from the asymptotic regime).

Times are years since the start of the run (releases happen at the start),
lengths km, speeds km/yr, growth rates 1/yr.

Examples
--------
A front of prey measured at 1.1 km/yr over years 2–10 on a landscape whose
record predicts 1.2 km/yr with a leading edge decaying over 0.25 km:

>>> rec = {"prey": {"speed": 1.2, "decay_rate": 4.0, "status": "invasion expected",
...                 "coarse": False}}
>>> p = predict_front(rec, "prey", times=np.arange(2.0, 10.5, 0.5), best=1.5)
>>> round(p.landscape_window.mean, 3), p.far_from_asymptotic
(1.129, False)
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from preyscape.model import landscape_theory as lt
from preyscape.model.reactions import Interaction
from preyscape.model.theory import WindowSpeed, mean_front_speed, predator_growth_at_capacity

__all__ = ["FrontPrediction", "columns", "front_lines", "predict_along", "predict_front",
           "prey_ahead", "sentence", "transect_classes"]


@dataclass(frozen=True, eq=False)
class FrontPrediction:
    """Predictions for one species' front along one transect.

    Attributes
    ----------
    species : str
        ``"prey"`` or ``"predator"``.
    best : float or None
        Best-habitat minimal speed, km/yr.
    landscape : float or None
        Homogenised speed of the whole map, km/yr (0: no invasion expected).
    landscape_status : str
        ``"invasion expected"``, ``"no invasion expected"`` or ``"undefined"``.
    landscape_coarse : bool
        The map's patches are coarse for this species: the landscape value is
        only a guide.
    landscape_window : WindowSpeed or None
        The landscape speed as a mean over the fitted snapshots.
    transect : TransectSpeed or None
        Homogenised and periodic speeds from the stretch of the transect the
        front crossed.
    transect_window : WindowSpeed or None
        The transect's periodic speed as a mean over the fitted snapshots.
    window : tuple of float
        First and last fitted snapshot, years since the start (NaN if none).
    """

    species: str
    best: float | None
    landscape: float | None
    landscape_status: str
    landscape_coarse: bool
    landscape_window: WindowSpeed | None
    transect: lt.TransectSpeed | None
    transect_window: WindowSpeed | None
    window: tuple[float, float]

    @property
    def predicted(self) -> WindowSpeed | None:
        """The prediction to compare with: the transect's window mean, else the map's."""
        return self.transect_window or self.landscape_window

    @property
    def far_from_asymptotic(self) -> bool:
        """The run's fitting window is too early for the asymptotic speed (> 10 % lag)."""
        w = self.predicted
        return bool(w is not None and w.far_from_asymptotic)


def _interaction(k: Mapping) -> Interaction:
    return Interaction(str(k["form"]), float(k["attack_rate"]), float(k["handling_time"]),
                       float(k["efficiency"]), float(k["interference"]))


def prey_ahead(prey: np.ndarray, predator: np.ndarray, threshold: float) -> np.ndarray:
    """Prey density at each point just before the predators arrived, animals/km².

    Parameters
    ----------
    prey, predator : numpy.ndarray
        Densities along a transect, animals/km², shape ``(snapshots, points)``.
    threshold : float
        Predator density that marks arrival, animals/km².

    Returns
    -------
    numpy.ndarray
        Per point: the prey density of the last snapshot in which the
        predators were still below ``threshold`` there (the first snapshot
        where they were above it from the start; the last snapshot where they
        never arrived).

    Examples
    --------
    >>> prey = np.array([[9.0, 9.0], [5.0, 8.0], [1.0, 7.0]])
    >>> pred = np.array([[0.0, 0.0], [2.0, 0.0], [3.0, 0.5]])
    >>> prey_ahead(prey, pred, 1.0).tolist()
    [9.0, 7.0]
    """
    prey = np.asarray(prey, dtype=float)
    with np.errstate(invalid="ignore"):
        arrived = np.asarray(predator, dtype=float) >= threshold
    seen = np.cumsum(arrived, axis=0) > 0  # arrived at or before each snapshot
    before = ~seen
    last = np.where(before.any(axis=0), before.shape[0] - 1 - np.argmax(before[::-1], axis=0), 0)
    return prey[last, np.arange(prey.shape[1])]


def transect_classes(record: Mapping, habitat_values: np.ndarray, species: str,
                     prey_density: np.ndarray | None = None,
                     ) -> tuple[np.ndarray, np.ndarray] | None:
    """Growth at low density (1/yr) and movement (km²/yr) of a species at given cells.

    Parameters
    ----------
    record : mapping
        The run's ``predictions["landscape"]``
        (:func:`preyscape.preview.landscape_predictions`).
    habitat_values : numpy.ndarray
        The habitat layer (class codes or suitability) at the cells.
    species : {"prey", "predator"}
        Which species.
    prey_density : numpy.ndarray, optional
        Prey at the cells, animals/km², for the predators' growth
        ``e f(N) - m`` (default: each class's capacity).

    Returns
    -------
    (growth, movement) or None
        None when the growth is not defined (predators on prey without a
        capacity) or a class is missing from the record.
    """
    k = record["constants"]
    v = np.asarray(habitat_values, dtype=float)
    if record["basis"] == "classes":
        rows = {int(c["code"]): c["multipliers"] for c in record["classes"]}
        codes = np.nan_to_num(v, nan=-1).astype(np.int64)
        if not set(np.unique(codes).tolist()) <= set(rows):
            return None
        mult = {name: np.array([rows[int(c)][name] for c in codes])
                for name in next(iter(rows.values()))}
    else:
        mult = {"prey_capacity": np.clip(np.nan_to_num(v), 0.0, None)}
    g = lt.low_density_growth(_interaction(k), float(k["growth"]), k["capacity"],
                              float(k["mortality"]), mult, np.ones(v.size))
    r = (g.prey if species == "prey" else g.predator).growth
    if species == "predator" and prey_density is not None and np.all(np.isfinite(r)):
        m = float(k["mortality"]) * np.asarray(mult.get("predator_mortality", 1.0))
        r = predator_growth_at_capacity(_interaction(k), np.asarray(prey_density, float), m)
    if not np.all(np.isfinite(r)):
        return None
    move = float(k[f"{species}_move"]) * np.asarray(mult.get(f"{species}_movement", 1.0))
    return np.asarray(r), np.broadcast_to(move, r.shape).astype(float)


def _window(c: float | None, lam: float | None, times: np.ndarray) -> WindowSpeed | None:
    if c is None or lam is None or not (c > 0 and lam > 0 and math.isfinite(lam)):
        return None
    if times.size < 2:
        return None
    return mean_front_speed(c, lam, 0.0, 0.0, times=times)


def predict_front(record: Mapping | None, species: str, *, times: np.ndarray,
                  best: float | None = None, habitat_values: np.ndarray | None = None,
                  lengths_km: np.ndarray | None = None,
                  prey_density: np.ndarray | None = None) -> FrontPrediction:
    """Best-habitat, landscape and transect predictions for a fitted front.

    Parameters
    ----------
    record : mapping or None
        The run's ``predictions["landscape"]`` (None: a run made before it
        was recorded; only ``best`` is then given).
    species : {"prey", "predator"}
        Which species.
    times : numpy.ndarray
        Times of the fitted snapshots, years since the start of the run
        (the release); times <= 0 are left out.
    best : float, optional
        Best-habitat minimal speed, km/yr.
    habitat_values : numpy.ndarray, optional
        The habitat layer at the transect's sample points the front crossed,
        in order.
    lengths_km : numpy.ndarray, optional
        Length of the transect represented by each point, km.
    prey_density : numpy.ndarray, optional
        Prey ahead of the predators at those points, animals/km²
        (:func:`prey_ahead`; predators only).

    Returns
    -------
    FrontPrediction
    """
    t = np.asarray(times, dtype=float)
    t = t[t > 0]
    window = (float(t[0]), float(t[-1])) if t.size else (math.nan, math.nan)
    best = best if best is not None and math.isfinite(best) else None
    if not record or species not in record:
        return FrontPrediction(species, best, None, "undefined", False, None, None, None,
                               window)
    rec = record[species]
    c = rec.get("speed")
    land_win = _window(c, rec.get("decay_rate"), t)
    tr = tr_win = None
    if habitat_values is not None and lengths_km is not None and len(habitat_values) >= 1:
        per = transect_classes(record, habitat_values, species, prey_density)
        if per is not None:
            kind = record["constants"][f"{species}_kind"]
            tr = lt.transect_speed(lengths_km, per[0], per[1], kind)
            tr_win = _window(tr.periodic.speed, tr.periodic.decay_rate, t)
    return FrontPrediction(species, best, c, str(rec.get("status", "undefined")),
                           bool(rec.get("coarse", False)), land_win, tr, tr_win, window)


def predict_along(record: Mapping | None, habitat: np.ndarray | None, transect, fit,
                  species: str, best: float | None = None,
                  prey: np.ndarray | None = None) -> FrontPrediction:
    """:func:`predict_front` for a :class:`~preyscape.analysis.waves.FrontFit`.

    The transect prediction uses the habitat under the sample points between
    the first and last fitted front positions (the whole transect when the
    front crossed fewer than two points), each standing for one sample
    spacing of the line.

    Parameters
    ----------
    record : mapping or None
        The run's ``predictions["landscape"]``.
    habitat : numpy.ndarray or None
        The run's habitat layer (class codes or suitability), rows × cols.
    transect : SampledTransect
        The transect the front was fitted along.
    fit : FrontFit
        The fit (its ``times`` and ``positions``).
    species : {"prey", "predator"}
        Which species.
    best : float, optional
        Best-habitat minimal speed, km/yr.
    prey : numpy.ndarray, optional
        Prey ahead of the predators at every point of the transect,
        animals/km² (:func:`prey_ahead`).
    """
    vals = lengths = n_ahead = None
    if habitat is not None and transect.n:
        sel = np.ones(transect.n, bool)
        if fit.n >= 2:
            lo, hi = float(np.min(fit.positions)), float(np.max(fit.positions))
            crossed = (transect.distance_km >= lo) & (transect.distance_km <= hi)
            if crossed.sum() >= 2:
                sel = crossed
        vals = np.asarray(habitat)[transect.row[sel], transect.col[sel]]
        lengths = np.full(int(sel.sum()), transect.spacing_km)
        n_ahead = None if prey is None else np.asarray(prey)[sel]
    return predict_front(record, species, times=fit.times, best=best, habitat_values=vals,
                         lengths_km=lengths, prey_density=n_ahead)


def _f(x) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _ratio(measured: float | None, w: WindowSpeed | None) -> float | None:
    if measured is None or w is None or not w.mean > 0:
        return None
    return _f(measured / w.mean)


def columns(p: FrontPrediction, measured: float | None) -> dict:
    """The prediction columns of ``fronts.csv`` (km/yr; ratios measured/predicted)."""
    w, lw = p.transect_window, p.landscape_window
    tr = p.transect
    chosen = p.predicted
    return {
        "landscape_km_yr": _f(p.landscape) if p.landscape is not None else None,
        "landscape_window_km_yr": _f(lw.mean) if lw else None,
        "landscape_ratio": _ratio(measured, lw),
        "transect_km_yr": _f(tr.periodic.speed) if tr else None,
        "transect_homogenised_km_yr": _f(tr.homogenised.speed) if tr else None,
        "transect_window_km_yr": _f(w.mean) if w else None,
        "transect_ratio": _ratio(measured, w),
        "correction_km_yr": _f(chosen.correction) if chosen else None,
        "far_from_asymptotic": p.far_from_asymptotic,
        "coarse": p.landscape_coarse,
        "transect_coarse": bool(tr is not None and tr.homogenised.coarse),
    }


def sentence(p: FrontPrediction, measured: float | None, where: str) -> str:
    """Plain words: the measured speed against the predictions for this landscape."""
    who = "prey" if p.species == "prey" else "predators"
    parts = [f"{where}, {who}: the front moved at {measured:.3g} km/yr"]
    if p.best:
        parts[0] += (f", {100 * measured / p.best:.0f} % of the best-habitat bound "
                     f"{p.best:.3g} km/yr")
    parts[0] += "."
    w = p.predicted
    if w is not None:
        basis = ("the habitat this transect crosses" if p.transect_window is not None
                 else "the landscape as a whole")
        t0, t1 = p.window
        if w.far_from_asymptotic:
            # early in a front's life the lag itself is poorly known: compare with c*
            ratio = measured / w.asymptotic
            parts.append(
                f"For {basis} theory predicts {w.asymptotic:.3g} km/yr once the front has "
                f"formed; the measured speed is {ratio:.2f} times that. The fitted years "
                f"{t0:.3g}–{t1:.3g} after the release are far from that regime: a front from "
                f"a release should still lag by about {w.correction:.2g} km/yr there "
                f"({100 * w.fraction:.0f} % of the speed; Bramson 1983), and so early even "
                "that estimate is indicative only. Compare with caution; a longer run, or a "
                "transect over more distance, would tell more.")
        else:
            ratio = measured / w.mean
            parts.append(
                f"For {basis} theory predicts {w.asymptotic:.3g} km/yr, and {w.mean:.3g} km/yr "
                f"as the mean over the fitted years {t0:.3g}–{t1:.3g} after the release (a "
                f"front from a release lags by {w.correction:.2g} km/yr there; Bramson 1983): "
                f"the measured speed is {ratio:.2f} times that.")
        if abs(ratio - 1) <= 0.2:
            parts.append("That is within 20 % of the prediction for this landscape.")
        elif ratio < 0.8:
            parts.append("The front is slower than predicted: it may be held up by sinks the "
                         "line does not cross, by prey below capacity ahead of predators, or "
                         "by a transect that does not follow the front's direction.")
        else:
            parts.append("The front is faster than predicted: in two dimensions it can go "
                         "round sinks or reach the line from the side.")
    if p.transect is not None and not p.transect.periodic.speed > 0:
        parts.append(f"The habitat along this transect alone would not sustain a front of "
                     f"{who} (growth at low density too low there); the front reached it through "
                     "better habitat beside the line, or is a transient.")
    if p.landscape_status == "no invasion expected":
        parts.append(f"Averaged over the whole map, the growth of {who} at low density "
                     "predicts no invasion in a fine-grained mix; a front that moves anyway "
                     "travels through source patches large enough to carry it.")
    elif p.landscape_coarse:
        parts.append(f"The map's patches are coarse for {who}, so the map-wide value "
                     f"({p.landscape:.3g} km/yr) is only a guide.")
    return " ".join(parts)


def _fmt_num(x, unit: str = "", digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return f"{x:.{digits}g}{(' ' + unit) if unit else ''}"


def _ratio_text(measured: float | None, predicted: float | None) -> str:
    if measured is None or predicted is None or not predicted > 0:
        return ""
    return f" (ratio {measured / predicted:.3g})"


def front_lines(f) -> list[str]:
    """Command-line lines for one row of ``fronts.csv`` (a ``waves_output.FrontRow``)."""
    if f.n < 2 or f.speed_km_yr is None:
        return [f"  {f.transect}, {f.species}: no front crossed this transect at two or more "
                "snapshots"]
    v = f.speed_km_yr
    out = [f"  {f.transect}, {f.species}: front {_fmt_num(v, 'km/yr')}; best-habitat bound "
           f"{_fmt_num(f.predicted_km_yr, 'km/yr')}{_ratio_text(v, f.predicted_km_yr)}"]
    years = f"the fitted years {_fmt_num(f.fit_start_yr, '', 3)}–{_fmt_num(f.fit_end_yr, '', 3)}"
    for what, asym, win, coarse in (
            ("along this transect", f.transect_km_yr, f.transect_window_km_yr, False),
            ("map-wide (homogenised)", f.landscape_km_yr, f.landscape_window_km_yr, f.coarse)):
        if asym is None:
            continue
        if not asym > 0:
            out.append(f"    landscape {what}: no invasion expected (the growth at low density "
                       "there does not sustain a front)")
            continue
        line = f"    landscape {what}: {_fmt_num(asym, 'km/yr')}{_ratio_text(v, asym)}"
        if win is not None and not f.far_from_asymptotic:
            line += f", mean over {years}: {_fmt_num(win, 'km/yr')}{_ratio_text(v, win)}"
        out.append(line + ("; patches coarse: only a guide" if coarse else ""))
    if f.far_from_asymptotic:
        lag = f" (a front from a release should lag by about {f.correction_km_yr:.2g} km/yr)"
        out.append(f"    {years} are far from the asymptotic regime{lag}: compare with "
                   "caution")
    return out
