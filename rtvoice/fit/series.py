"""The note's harmonic series found in a spectrum: its partials' peaks, f0 and B, and what it
leaves unexplained.

Starting from a rough f0, partial k is looked for near k f0 sqrt(1 + B k^2) (Fletcher 1964), at
the largest local maximum within a quarter of the spacing, its frequency interpolated by a
parabola through the log magnitudes of the peak bin and its neighbours (Smith, *Spectral Audio
Signal Processing*, "Quadratic interpolation of spectral peaks"). f0 and B are fitted to the
partials found so far, and the search reaches twice as far each round (in a narrower window once
f0 and B are known), so a stiff string's stretch is followed before it leaves the window. The
candidate f0s (the rough one, and the strongest peaks each taken as partial 1..8) are followed
over their first twelve partials and scored by the share of the spectral peak power they
explain; the highest f0 that explains nearly as much as the best is the note (a subharmonic
explains as much, never more).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft

from rtvoice.fit.inharmonicity import InharmonicityFit, fit_inharmonicity, stiff_partials_hz

SPECTRUM_S = 1.0  # the first second after the onset: every partial still sounds in it
ZERO_PAD = 4
SEARCH_SPACINGS = 0.25  # at first a partial is looked for within a quarter of the spacing of its prediction,
NARROW_SPACINGS = 0.1  # then, with f0 and B known from the first ones, within a tenth
MAX_INHARMONICITY = 0.01  # the engine's largest B; strings lie well below (shared references: 1e-6..1e-3)
PEAK_MIN_DB = 10.0  # a peak counts when 10 dB above the median of its neighbourhood
MAX_WEIGHT_DB = 50.0  # a very strong peak weighs no more than this: its error is the model's, not noise
FIRST_ROUND_PARTIALS = 4
CANDIDATE_PEAKS = 6  # the strongest peaks, each taken as partial 1..8 of the note, give candidate f0s
CANDIDATE_DIVISORS = 8
CANDIDATE_MERGE = 0.01  # candidates within 1 % are one
QUICK_PARTIALS = 12  # a candidate is judged on its first twelve partials
CANDIDATE_SLACK = 0.03  # a higher f0 wins if it explains all but 3 % of what the best one does
EXPLAINED_SPACINGS = 0.08  # a peak this close (in spacings) to a partial of the series is explained
PEAK_FLOOR_DB = 40.0  # peaks more than 40 dB under the strongest are left out of the reckoning


@dataclass(frozen=True)
class Spectrum:
    """Power spectrum of the first second after the onset (Hann window, zero-padded)."""

    freqs_hz: np.ndarray
    power: np.ndarray

    @classmethod
    def of(cls, x: np.ndarray, sample_rate_hz: float, seconds: float = SPECTRUM_S) -> Spectrum:
        n = max(8, min(x.size, int(seconds * sample_rate_hz)))
        seg = np.zeros(n)
        seg[: min(n, x.size)] = x[:n]
        size = int(scipy.fft.next_fast_len(ZERO_PAD * n, real=True))
        power = np.abs(scipy.fft.rfft(seg * np.hanning(n), size)) ** 2
        return cls(scipy.fft.rfftfreq(size, 1.0 / sample_rate_hz), power)

    @property
    def bin_hz(self) -> float:
        return float(self.freqs_hz[1] - self.freqs_hz[0])


@dataclass(frozen=True)
class Peak:
    """A spectral peak: interpolated frequency (Hz), power at it, and height over its
    neighbourhood's median (dB)."""

    freq_hz: float
    power: float
    prominence_db: float


@dataclass(frozen=True)
class SeriesFit:
    """The harmonic series: the fit of f0 and B to its peaks, and the peaks by partial number."""

    fit: InharmonicityFit
    peaks: dict[int, Peak]


def _interpolate(spec: Spectrum, i: int) -> tuple[float, float]:
    """(frequency, power) at the top of the parabola through log power at bins i-1, i, i+1."""
    a, b, c = np.log(np.maximum(spec.power[i - 1 : i + 2], 1e-300))
    denom = a - 2.0 * b + c
    offset = 0.5 * (a - c) / denom if denom < 0 else 0.0
    offset = min(max(offset, -0.5), 0.5)
    return float(spec.freqs_hz[i] + offset * spec.bin_hz), float(math.exp(b - 0.25 * (a - c) * offset))


def find_peak(spec: Spectrum, centre_hz: float, half_width_hz: float, neighbourhood_hz: float) -> Peak | None:
    """The strongest local maximum within ``half_width_hz`` of ``centre_hz``, if it stands
    ``PEAK_MIN_DB`` over the median power within ``neighbourhood_hz`` of it; None otherwise or at
    the edge of the search."""
    lo = max(1, int(math.ceil((centre_hz - half_width_hz) / spec.bin_hz)))
    hi = min(spec.power.size - 2, int(math.floor((centre_hz + half_width_hz) / spec.bin_hz)))
    if hi - lo < 2:
        return None
    i = lo + int(np.argmax(spec.power[lo : hi + 1]))
    if i in (lo, hi) or spec.power[i] <= 0:
        return None
    n_lo = max(0, int((centre_hz - neighbourhood_hz) / spec.bin_hz))
    n_hi = min(spec.power.size, int((centre_hz + neighbourhood_hz) / spec.bin_hz) + 1)
    background = float(np.median(spec.power[n_lo:n_hi]))
    prominence = 10.0 * math.log10(spec.power[i] / max(background, 1e-300))
    if prominence < PEAK_MIN_DB:
        return None
    freq, power = _interpolate(spec, i)
    return Peak(freq, power, prominence)


def locate_series(spec: Spectrum, f0_hz: float, limit_hz: float, max_partials: int) -> SeriesFit | None:
    """The series from a rough ``f0_hz``: partials found and fitted, reaching twice as far each
    round, up to ``max_partials`` or ``limit_hz``; None when fewer than two partials are found."""
    f0, b = f0_hz, 0.0
    reach = FIRST_ROUND_PARTIALS
    fit: InharmonicityFit | None = None
    peaks: dict[int, Peak] = {}
    while True:
        peaks = {}
        for k in range(1, reach + 1):
            predicted = float(stiff_partials_hz(np.array([k]), f0, b)[0])
            if not math.isfinite(predicted) or predicted > limit_hz:
                break
            half_width = (SEARCH_SPACINGS if reach == FIRST_ROUND_PARTIALS else NARROW_SPACINGS) * f0
            peak = find_peak(spec, predicted, half_width, 0.5 * f0)
            if peak is not None:
                peaks[k] = peak
        if len(peaks) < 2:
            return None
        fit = _fit_peaks(peaks)
        if fit is None:
            return None
        # Predictions use a B a string can have: a wild one from a few stray peaks would lead the
        # search off the series.
        f0, b = fit.f0_hz, min(max(fit.inharmonicity, 0.0), MAX_INHARMONICITY)
        last_k = max(peaks)
        if reach >= max_partials or float(stiff_partials_hz(np.array([reach + 1]), f0, b)[0]) > limit_hz:
            break
        if last_k < reach // 2 and reach > FIRST_ROUND_PARTIALS:
            break  # the series has faded into the noise
        reach = min(2 * reach, max_partials)
    return SeriesFit(fit, peaks)


def _fit_peaks(peaks: dict[int, Peak]) -> InharmonicityFit | None:
    """f0 and B from the peaks, weighted by their prominence; a peak far off the fitted law (a
    neighbour's or a second note's caught in the window) is dropped once and the fit repeated."""
    k = np.array(sorted(peaks), dtype=float)
    f = np.array([peaks[int(i)].freq_hz for i in k])
    w = np.array([10.0 ** (min(peaks[int(i)].prominence_db, MAX_WEIGHT_DB) / 10.0) for i in k])
    fit = fit_inharmonicity(k, f, w)
    off = np.abs(f - fit.partial_hz(k)) > 0.05 * fit.f0_hz
    if off.any() and np.count_nonzero(~off) >= 2 and np.unique(k[~off]).size >= 2:
        for i in k[off]:
            peaks.pop(int(i))
        fit = fit_inharmonicity(k[~off], f[~off], w[~off])
    return fit if math.isfinite(fit.f0_hz) and fit.f0_hz > 0 else None


def spectral_peaks(spec: Spectrum, lowest_hz: float, highest_hz: float, spacing_hz: float) -> list[Peak]:
    """Every local maximum between the two frequencies within ``PEAK_FLOOR_DB`` of the strongest
    and ``PEAK_MIN_DB`` over the median of a neighbourhood one ``spacing_hz`` wide."""
    lo = max(1, int(lowest_hz / spec.bin_hz))
    hi = min(spec.power.size - 2, int(highest_hz / spec.bin_hz))
    if hi - lo < 3:
        return []
    p = spec.power
    idx = np.arange(lo, hi + 1)
    local = idx[(p[idx] > p[idx - 1]) & (p[idx] >= p[idx + 1])]
    if local.size == 0:
        return []
    strongest = float(p[local].max())
    local = local[p[local] >= strongest * 10.0 ** (-PEAK_FLOOR_DB / 10.0)]
    peaks = []
    for i in local:
        found = find_peak(spec, float(spec.freqs_hz[i]), 1.5 * spec.bin_hz, 0.5 * spacing_hz)
        if found is not None:
            peaks.append(found)
    return peaks


def explained_share(peaks: list[Peak], fit: InharmonicityFit, highest_k: int) -> float:
    """Share of the peaks' power lying within ``EXPLAINED_SPACINGS`` of a partial 1..highest_k."""
    if not peaks:
        return 0.0
    freqs = np.array([p.freq_hz for p in peaks])
    power = np.array([p.power for p in peaks])
    partials = fit.partial_hz(np.arange(1, highest_k + 1))
    partials = partials[np.isfinite(partials)]
    if partials.size == 0:
        return 0.0
    nearest = np.min(np.abs(freqs[:, None] - partials[None, :]), axis=1)
    near = nearest <= EXPLAINED_SPACINGS * fit.f0_hz
    return float(power[near].sum() / power.sum())


def unexplained_peaks(peaks: list[Peak], fit: InharmonicityFit, highest_k: int) -> list[Peak]:
    """The peaks no partial 1..highest_k of the series accounts for."""
    partials = fit.partial_hz(np.arange(1, highest_k + 1))
    partials = partials[np.isfinite(partials)]
    return [p for p in peaks
            if partials.size == 0 or float(np.min(np.abs(p.freq_hz - partials))) > EXPLAINED_SPACINGS * fit.f0_hz]


def f0_candidates(peaks: list[Peak], rough_hz: float | None, lowest_hz: float, highest_hz: float) -> list[float]:
    """Where the note's f0 may lie: the rough estimate, and the strongest peaks divided by 1..8
    (a peak is some partial of the note), within ``lowest_hz``..``highest_hz``, near-duplicates
    dropped."""
    found: list[float] = [] if rough_hz is None else [rough_hz]
    strongest = sorted(peaks, key=lambda p: p.power, reverse=True)[:CANDIDATE_PEAKS]
    for peak in strongest:
        for m in range(1, CANDIDATE_DIVISORS + 1):
            f = peak.freq_hz / m
            if lowest_hz <= f <= highest_hz:
                found.append(f)
    kept: list[float] = []
    for f in found:
        if all(abs(f / g - 1.0) > CANDIDATE_MERGE for g in kept):
            kept.append(f)
    return kept


def best_series(spec: Spectrum, candidates: list[float], limit_hz: float, max_partials: int,
                peaks: list[Peak]) -> SeriesFit | None:
    """The series that explains the spectrum's peaks best among those found from each candidate
    f0: each is followed over its first partials and scored by the share of the peak power up to
    its last one that it explains; the highest f0 that explains nearly as much as the best wins
    (a subharmonic explains as much as the note, never more), and is then followed as far as
    ``max_partials``."""
    scored: list[tuple[float, float]] = []
    for candidate in candidates:
        quick = locate_series(spec, candidate, limit_hz, QUICK_PARTIALS)
        if quick is None:
            continue
        reach = min(float(quick.fit.partial_hz(QUICK_PARTIALS)) + 0.5 * quick.fit.f0_hz, limit_hz)
        in_reach = [p for p in peaks if p.freq_hz <= reach]
        scored.append((explained_share(in_reach, quick.fit, QUICK_PARTIALS), quick.fit.f0_hz))
    if not scored:
        return None
    best = max(share for share, _ in scored)
    chosen = max(f0 for share, f0 in scored if share >= best - CANDIDATE_SLACK)
    return locate_series(spec, chosen, limit_hz, max_partials)


def _highest_k(fit: InharmonicityFit, limit_hz: float) -> int:
    """The highest partial number at or below ``limit_hz`` (at most 1000)."""
    k = np.arange(1, 1001)
    f = fit.partial_hz(k)
    below = np.flatnonzero(np.isfinite(f) & (f <= limit_hz))
    return int(below[-1]) + 1 if below.size else 1
