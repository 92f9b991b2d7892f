"""Periodic travelling waves behind an invasion front: wavelength and period.

Behind a predator invasion the populations may settle into periodic
travelling waves (Sherratt, Lewis & Fowler 1995, PNAS 92:2524). Their
wavelength (km) and period (years) are read from the dominant peak of the
spatial and temporal power spectra (:func:`wavelength_along`,
:func:`period_at`, :func:`wave_summary`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from preyscape.analysis.transects import (
    SampledTransect,
    _as_series,
    front_positions,
)

__all__ = ["MIN_CYCLES", "WaveSummary", "period_at", "wave_summary", "wavelength_along"]


MIN_CYCLES = 2.0
"""Fewest cycles a record must hold for its period or wavelength to be measured."""


def _dominant_period(values: np.ndarray, coords: np.ndarray, min_points: int = 8) -> float:
    """Period (in the units of ``coords``) of the strongest oscillation.

    Linear detrend, Hann window, zero-padding to at least 16 times the
    length, and a parabola through the logarithm of the three largest
    spectral values around the peak (Gaussian interpolation; e.g. Gasior &
    Gonzalez 2004, CERN-AB-2004-023). The zero-frequency lobe is skipped: the
    search starts at :data:`MIN_CYCLES` cycles per record and after the
    spectrum's first local minimum; a maximum at the start of the search is
    no peak (NaN).
    """
    from scipy.signal import detrend

    v = np.asarray(values, dtype=float)
    c = np.asarray(coords, dtype=float)
    ok = np.isfinite(v) & np.isfinite(c)
    v, c = v[ok], c[ok]
    if v.size < min_points:
        return math.nan
    order = np.argsort(c)
    v, c = v[order], c[order]
    step = float(np.median(np.diff(c)))
    if not step > 0:
        return math.nan
    if np.max(np.abs(np.diff(c) - step)) > 1e-6 * step:
        # gaps (dropped points): resample onto an even spacing
        grid = np.arange(c[0], c[-1] + 0.5 * step, step)
        v = np.interp(grid, c, v)
    n = v.size
    v = detrend(v, type="linear") * np.hanning(n)
    if not np.any(v):
        return math.nan
    nfft = 1 << int(math.ceil(math.log2(16 * n)))
    power = np.abs(np.fft.rfft(v, nfft)) ** 2
    df = 1.0 / (nfft * step)  # frequency step of the padded spectrum
    # at least two cycles per record: with fewer, the peak merges into the
    # zero-frequency lobe of the window and its position is biased
    lo = int(math.ceil((MIN_CYCLES / (n * step)) / df))
    dec = np.flatnonzero(np.diff(power) > 0)  # first rise: end of the zero-frequency lobe
    if dec.size:
        lo = max(lo, int(dec[0]))
    if lo >= power.size - 1:
        return math.nan
    k = lo + int(np.argmax(power[lo:]))
    if k <= lo or k >= power.size - 1 or power[k] <= 0:
        return math.nan  # the largest value is at the edge of the search: no peak
    a, b, cc = np.log(np.maximum(power[k - 1: k + 2], 1e-300))
    den = a - 2 * b + cc
    delta = 0.5 * (a - cc) / den if den < 0 else 0.0
    f = (k + delta) * df
    return 1.0 / f if f > 0 else math.nan


def wavelength_along(profile: np.ndarray, distance_km: np.ndarray) -> float:
    """Wavelength of the dominant spatial oscillation along a profile, km.

    From the highest peak of the power spectrum of the linearly detrended,
    Hann-windowed, zero-padded profile, refined by parabolic interpolation
    of the log power. Unevenly spaced points (gaps on no-data cells) are
    first interpolated onto an even spacing.

    Parameters
    ----------
    profile : numpy.ndarray
        Density along a transect, animals/km².
    distance_km : numpy.ndarray
        Distance of each point along the transect, km.

    Returns
    -------
    float
        Wavelength, km; NaN with fewer than 8 points, no oscillation, or
        fewer than :data:`MIN_CYCLES` wavelengths along the profile.
    """
    return _dominant_period(profile, distance_km)


def period_at(series: np.ndarray, times: np.ndarray, t_min: float | None = None) -> float:
    """Period of the dominant oscillation of a time series, years.

    Same method as :func:`wavelength_along`, on the part of the series at or
    after ``t_min``.

    Parameters
    ----------
    series : numpy.ndarray
        Density at one place over time, animals/km².
    times : numpy.ndarray
        Times, years.
    t_min : float, optional
        End of the transient to leave out, years. Default: use everything.

    Returns
    -------
    float
        Period, years; NaN with fewer than 8 samples, no oscillation, or
        fewer than :data:`MIN_CYCLES` periods in the series.
    """
    v = np.asarray(series, dtype=float)
    t = np.asarray(times, dtype=float)
    if t_min is not None:
        keep = t >= t_min
        v, t = v[keep], t[keep]
    return _dominant_period(v, t)


@dataclass(frozen=True)
class WaveSummary:
    """Periodic travelling waves behind a front along one transect.

    Attributes
    ----------
    wavelength : float
        Median wavelength over the last profiles, km.
    period : float
        Median period over points behind the front, years.
    phase_speed : float
        ``wavelength / period``, km/yr (magnitude; the direction is not
        resolved from the spectra).
    wavelengths : tuple of float
        Wavelength from each profile used, km.
    periods : tuple of float
        Period at each point used, years.
    points_km : tuple of float
        Distances along the transect of the points whose periods were taken, km.
    t_min : float
        Start of the part of the run that was used, years.
    threshold : float
        Density that marked the front, animals/km².
    front_km : float
        Front position at the last snapshot, km.
    """

    wavelength: float
    period: float
    phase_speed: float
    wavelengths: tuple[float, ...]
    periods: tuple[float, ...]
    points_km: tuple[float, ...]
    t_min: float
    threshold: float
    front_km: float


def _nanmedian(values) -> float:
    a = np.asarray(values, dtype=float)
    a = a[np.isfinite(a)]
    return float(np.median(a)) if a.size else math.nan


def wave_summary(
    source: Any,
    *,
    species: str = "predator",
    transect: SampledTransect | None = None,
    t_min: float | None = None,
    threshold: float | None = None,
    times: Sequence[float] | None = None,
    n_profiles: int = 3,
    n_points: int = 3,
) -> WaveSummary:
    """Wavelength, period and phase speed of waves behind a front along a transect.

    *Behind the front* means the stretch of the transect from its first data
    point to the front position minus a gap (a tenth of that stretch, at least
    three point spacings), where the oscillations have formed. The
    wavelength is the median of :func:`wavelength_along` over the last
    ``n_profiles`` snapshots at or after ``t_min``; the period is the median
    of :func:`period_at` at ``n_points`` points spread over the stretch
    behind the final front, each using the snapshots at or after ``t_min``
    once the front has passed it.

    Parameters
    ----------
    source : xarray.Dataset, iterable of numpy.ndarray, or TransectSeries
        An opened ``results.nc``, density snapshots, or profiles already read.
    species : str
        The density read from a dataset.
    transect : SampledTransect or None
        Where to measure (None only with a TransectSeries).
    t_min : float, optional
        End of the transient, years. Default: half-way through the snapshots.
    threshold : float, optional
        Density marking the front, animals/km². Default: 10 % of the largest
        time-mean density along the transect (common practice, no source).
    times : sequence of float, optional
        Snapshot times, years (needed with frames).
    n_profiles, n_points : int
        How many final profiles and how many points to take.

    Returns
    -------
    WaveSummary
        NaN values where there is no front or too little of the run behind it.
    """
    s = _as_series(source, times, transect, species)
    tr, t, vals = s.transect, s.times, s.values
    if t_min is None:
        t_min = float(t[0] + 0.5 * (t[-1] - t[0])) if t.size else math.nan
    if threshold is None:
        ok = np.isfinite(vals)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(ok, vals, 0.0).sum(axis=0) / ok.sum(axis=0)
        top = float(np.max(mean[np.isfinite(mean)])) if np.any(np.isfinite(mean)) else math.nan
        threshold = 0.1 * top if top > 0 else math.nan
    pos = front_positions(s, threshold) if math.isfinite(threshold) else np.full(t.size, np.nan)
    d = tr.distance_km
    d0 = float(d[0])

    def behind(front: float) -> float:
        # end of the stretch behind the front where waves have formed, km
        return front - max(0.1 * (front - d0), 3.0 * tr.spacing_km)

    late = np.flatnonzero((t >= t_min - 1e-12) & np.isfinite(pos))
    wl = []
    for k in late[-n_profiles:] if n_profiles > 0 else []:
        sel = d <= behind(pos[k])
        wl.append(wavelength_along(vals[k, sel], d[sel]))
    front_last = float(pos[-1]) if pos.size else math.nan
    periods, points = [], []
    if math.isfinite(front_last):
        end = behind(front_last)
        if end > d0:
            for q in np.linspace(0.0, 1.0, n_points + 2)[1:-1]:
                j = int(np.argmin(np.abs(d - (d0 + q * (end - d0)))))
                with np.errstate(invalid="ignore"):
                    passed = np.flatnonzero(pos >= d[j])
                if passed.size == 0:
                    continue
                since = max(float(t_min), float(t[passed[0]]))
                periods.append(period_at(vals[:, j], t, since))
                points.append(float(d[j]))
    lam, per = _nanmedian(wl), _nanmedian(periods)
    phase = lam / per if (math.isfinite(lam) and math.isfinite(per) and per > 0) else math.nan
    return WaveSummary(
        wavelength=lam, period=per, phase_speed=phase, wavelengths=tuple(wl),
        periods=tuple(periods), points_km=tuple(points), t_min=float(t_min),
        threshold=float(threshold), front_km=front_last,
    )
