"""A recorded plucked note taken apart into its partials: frequencies, levels at the onset, decay
rates; from them f0 and the inharmonicity B, and the loss law as two T60s.

The steps: the onset from the peak envelope, a rough f0 by YIN and candidates from the strongest
spectral peaks (:mod:`rtvoice.fit.pitch`); the harmonic series each candidate leads to in the
spectrum of the first second, the one that explains the peaks best kept, f0 and B fitted to its
peaks, and a take whose peaks hold a second series refused (:mod:`rtvoice.fit.series`); every
partial demodulated out of the whole take and its log envelope and phase fitted as straight lines,
or as two beating components where the string's polarisations beat (:mod:`rtvoice.fit.envelope`,
:mod:`rtvoice.fit.beating`); then f0 and B refitted to the demodulated frequencies
(:mod:`rtvoice.fit.inharmonicity`, Fletcher 1964) and the loss law to the decay rates
(:mod:`rtvoice.fit.decay`, Chaigne & Askenfelt 1994), and the levels carried back to the onset.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from rtvoice.fit.decay import LossFit, fit_loss_law
from rtvoice.fit.envelope import Band, BandBank, BandFit, fit_band
from rtvoice.fit.inharmonicity import InharmonicityFit, fit_inharmonicity
from rtvoice.fit.pitch import HIGHEST_F0_HZ, LOWEST_F0_HZ, find_onset, rough_f0_hz
from rtvoice.fit.series import Peak, SeriesFit, Spectrum, best_series, f0_candidates, spectral_peaks, unexplained_peaks
from rtvoice.fit.take import Take, TakeError, check_take

MIN_AFTER_ONSET_S = 0.25
NOTE_PROMINENCE_DB = 20.0  # a note has partials far over their neighbourhood; noise's highest peaks reach ~12 dB
NYQUIST_USE = 0.45  # partials above 0.45 fs are left out, as the engine leaves them out
PARTIAL_WINDOW_PERIODS = 5.0  # main lobe +-0.8 f0: the next partial falls in the sidelobes
NOISE_WINDOW_PERIODS = 10.0  # main lobe +-0.4 f0: read midway, the partials fall in the sidelobes
USABLE_SNR_DB = 12.0  # measured where the fit starts, not extrapolated to the onset
ON_SERIES_SPACINGS = 0.02
BEAT_SPACINGS = 0.05  # two components this close (in spacings) are one partial's polarisations
NOISE_LOOK_S = 0.2
DYNAMIC_RANGE_DB = 120.0  # about a 20-bit recording's
MAX_SIGMA_SD_SHARE = 0.5  # a decay known no better than +-50 % says nothing
SECOND_NOTE_SHARE = 0.1  # unexplained peaks holding 10 % of the peak power are a second note
STRAY_SPACINGS = 0.8  # a partial's band passes what lies within 0.8 f0 (the window's main lobe)
STRAY_SHARE = 0.01  # a stray peak 20 dB under the partial moves its level by up to 1 dB
MODEL_SD_FLOOR = 0.01  # each decay rate counts as known to 1 % at best: the model's own accuracy
FREQ_SD_FLOOR = 1e-7  # and each frequency to 0.0002 cent
OFF_SERIES_SD = 6.0  # a partial this many sd off the fitted law is not the string's (a stray, a null's leak)
MIN_FREQUENCY_PARTIALS = 4
HINT_RANGE = 2.0 ** (2.0 / 12.0)  # a hint holds the search within two semitones
MAX_INHARMONICITY = 0.02
LAW_SPREAD = 0.1  # a partial's decay rate may stray 10 % from the loss law (real strings do)


@dataclass(frozen=True)
class Partial:
    """One partial of the take: number k, frequency and sd (Hz), amplitude at the onset and sd
    (linear, the take's units; both polarisations together when they beat), decay rate and sd
    (1/s), its level over the noise in its band (dB), and whether the fits may use it (False when
    it never stands 12 dB out of the noise, lies off the series, its decay is unknown within
    +-50 %, or a stray peak shares its band). An unusable partial's level is an upper bound and its
    other values may be nan."""

    k: int
    freq_hz: float
    freq_sd_hz: float
    level: float
    level_sd: float
    decay_per_s: float
    decay_sd_per_s: float
    snr_db: float
    usable: bool


@dataclass(frozen=True)
class PartialAnalysis:
    """A take taken apart: its rate, the onset (s from the take's start), f0 (Hz, without
    stiffness), the inharmonicity and loss-law fits, the partials, the noise floor (the median
    partial band's noise as the amplitude of a sinusoid of equal power, dB re full scale) and the
    share (0..1) of the take's energy after the onset that the fitted partials explain."""

    sample_rate_hz: int
    onset_s: float
    f0_hz: float
    inharmonicity: InharmonicityFit
    loss: LossFit
    partials: tuple[Partial, ...]
    noise_floor_db: float
    explained_energy: float

    def usable(self) -> tuple[Partial, ...]:
        return tuple(p for p in self.partials if p.usable)


def analyse_take(take: Take, *, f0_hint_hz: float | None = None, max_partials: int = 40) -> PartialAnalysis:
    """The partials, f0, B and loss law of the one plucked note in ``take``.

    ``f0_hint_hz`` holds the pitch search within two semitones of it (and settles octave doubts).
    Raises :class:`TakeError` for a take :func:`check_take` refuses, one with no note, two notes at
    once, too little of the note after its onset, or fits that do not converge."""
    check_take(take)
    fs, source = take.sample_rate_hz, take.source
    onset = find_onset(take.samples, fs)
    x = take.samples[onset:]
    if x.size / fs < MIN_AFTER_ONSET_S:
        raise TakeError(f"only {x.size / fs:.2f} s of the note after its onset: too short to show its decay",
                        source=source, allowed=f"at least {MIN_AFTER_ONSET_S:g} s after the onset")
    lowest, highest = LOWEST_F0_HZ, HIGHEST_F0_HZ
    if f0_hint_hz is not None:
        lowest, highest = f0_hint_hz / HINT_RANGE, f0_hint_hz * HINT_RANGE
    rough = rough_f0_hz(x, fs, lowest, highest)
    limit_hz = NYQUIST_USE * fs
    spec = Spectrum.of(x, fs)
    peaks = spectral_peaks(spec, 0.8 * lowest, limit_hz, rough or lowest)
    candidates = f0_candidates(peaks, rough, lowest, highest)
    if f0_hint_hz is not None:
        candidates.insert(0, f0_hint_hz)
    series = best_series(spec, candidates, limit_hz, max_partials, peaks)
    if series is None or sum(p.prominence_db >= NOTE_PROMINENCE_DB for p in series.peaks.values()) < 3:
        raise TakeError("no plucked note found in the take (no harmonic series stands out of the noise)",
                        source=source)
    strays = _refuse_second_note(series.fit, peaks, max_partials, source)
    measured, noise_db = _demodulate_partials(x, fs, series, strays, limit_hz, max_partials, source)
    inharmonicity, checked = _fit_frequencies([m.partial for m in measured], source)
    measured = [replace(m, partial=p) for m, p in zip(measured, checked, strict=True)]
    loss = _fit_loss([m.partial for m in measured], source)
    partials = [_level_by_law(m, loss) for m in measured]
    explained = _explained_energy(x, fs, [c for m in measured for c in m.components(loss)])
    return PartialAnalysis(fs, onset / fs, inharmonicity.f0_hz, inharmonicity, loss, tuple(partials),
                           noise_db, explained)


def _refuse_second_note(fit: InharmonicityFit, peaks: list[Peak], max_partials: int, source: str) -> list[Peak]:
    """Raise when peaks the series does not explain hold a second note's share of the power; else
    return those stray peaks (a hum, a sympathetic string)."""
    top = fit.partial_hz(max_partials) + 0.5 * fit.f0_hz
    considered = [p for p in peaks if p.freq_hz <= top]
    total = sum(p.power for p in considered)
    stray = unexplained_peaks(considered, fit, max_partials + 1)
    share = sum(p.power for p in stray) / total if total > 0 else 0.0
    if len(stray) >= 2 and share >= SECOND_NOTE_SHARE:
        strongest = max(stray, key=lambda p: p.power)
        raise TakeError(f"two notes sound at once: besides the series on {fit.f0_hz:.1f} Hz, peaks such as "
                        f"{strongest.freq_hz:.1f} Hz hold {100 * share:.0f} % of the spectrum's peak power",
                        source=source, allowed="one note per take")
    return stray


@dataclass(frozen=True)
class _Component:
    """A damped sinusoid a e^{-sigma t} cos(2 pi f t + phi) of the model, with a e^{i phi} as one
    complex amplitude (the take's units, at the onset)."""

    amplitude: complex
    sigma_per_s: float
    freq_hz: float


@dataclass(frozen=True)
class _Measured:
    """A partial as its band fit gives it, with what the level needs once the loss law is known:
    the band and the fit in it."""

    partial: Partial
    band: Band
    fit: BandFit | None

    def component(self, sigma_per_s: float, offset_hz: float, half_amplitude: complex) -> _Component:
        """A component seen in the band as ``half_amplitude`` (c, |c| = a G / 2), the filter's gain
        G taken off."""
        gain = self.band.gain(sigma_per_s, offset_hz)
        return _Component(2.0 * half_amplitude / gain, sigma_per_s, self.band.shift_hz + offset_hz)

    def components(self, loss: LossFit) -> list[_Component]:
        """The partial's part of the model: its two polarisations when it beats, else the one
        component with its level carried back by :func:`_law_amplitude`."""
        fit = self.fit
        if fit is None or not self.partial.usable:
            return []
        if fit.beating is not None:
            return [self.component(c.sigma_per_s, c.offset_hz, c.amplitude)
                    for c in (fit.beating.dominant, fit.beating.other)]
        sigma, amplitude, _ = _law_amplitude(fit, float(loss.sigma_per_s(self.partial.freq_hz)))
        return [self.component(sigma, fit.offset_hz, 0.5 * amplitude * np.exp(1j * fit.phase_rad))]


def _law_amplitude(fit: BandFit, law_per_s: float) -> tuple[float, float, float]:
    """(decay rate, amplitude at the onset as the band sees it, its sd in nepers) carried back at a
    rate that joins the partial's own with the loss law's (inverse-variance weights, the law
    counted as good to LAW_SPREAD): a partial that dies within milliseconds has a poorly known own
    rate, and carrying its level back over the filter's half length with it would cost more than
    the law's misfit."""
    law_var = (LAW_SPREAD * law_per_s) ** 2
    own_var = max(fit.sigma_sd_per_s, 1e-12) ** 2
    sigma = (fit.sigma_per_s / own_var + law_per_s / law_var) / (1.0 / own_var + 1.0 / law_var)
    amplitude, sd_np = fit.amplitude_with(sigma, math.sqrt(1.0 / (1.0 / own_var + 1.0 / law_var)))
    return sigma, amplitude, sd_np


def _level_by_law(measured: _Measured, loss: LossFit) -> Partial:
    """The partial with its level at the onset from the model: both polarisations together when it
    beats (they start together from the pluck), else carried back by :func:`_law_amplitude`."""
    fit, p = measured.fit, measured.partial
    if fit is None or not p.usable:
        return p
    level = abs(sum(c.amplitude for c in measured.components(loss)))
    if fit.beating is not None:
        sd_np = fit.amplitude_sd_np
    else:
        _, _, sd_np = _law_amplitude(fit, float(loss.sigma_per_s(p.freq_hz)))
    return replace(p, level=level, level_sd=level * sd_np)


def _demodulate_partials(x: np.ndarray, fs: int, series: SeriesFit, strays: list[Peak], limit_hz: float,
                         max_partials: int, source: str) -> tuple[list[_Measured], float]:
    """Every partial up to ``max_partials`` whose band lies below ``limit_hz`` fitted in its band,
    and the noise floor in dB. A partial with a stray peak in its band's main lobe is unusable."""
    fit = series.fit
    partial_window_s = PARTIAL_WINDOW_PERIODS / fit.f0_hz
    noise_window_s = NOISE_WINDOW_PERIODS / fit.f0_hz
    bank = BandBank(x, fs, noise_window_s)
    ks = np.arange(1, max_partials + 2)
    centres = fit.partial_hz(ks)
    if not np.all(np.isfinite(centres) & (np.diff(centres, prepend=0.0) > 0)):
        raise TakeError("the fit of f0 and inharmonicity did not converge (partials out of order)", source=source)
    measured: list[_Measured] = []
    noise_amps: list[float] = []
    gain_ratio = bank.noise_gain(partial_window_s) / bank.noise_gain(noise_window_s)
    # Nothing is trusted further than DYNAMIC_RANGE_DB under the take's peak: a float32 render's
    # rounding gathers around its partials, where the bands between them do not see it.
    range_floor = (0.5 * float(np.max(np.abs(x))) * 10.0 ** (-DYNAMIC_RANGE_DB / 20.0)) ** 2
    for i, k in enumerate(ks[:-1]):
        centre = float(centres[i])
        if centre + 0.5 * fit.f0_hz > limit_hz:
            break
        below = 0.5 * (centre + (float(centres[i - 1]) if i > 0 else 0.0))
        above = 0.5 * (centre + float(centres[i + 1]))
        noise = gain_ratio * 0.5 * (bank.noise_power(below, noise_window_s) + bank.noise_power(above, noise_window_s))
        noise = max(noise, range_floor)
        noise_amp = 2.0 * math.sqrt(max(noise, 1e-300))
        noise_amps.append(noise_amp)
        band = bank.band(centre, partial_window_s)
        band_fit = fit_band(band.t_s, band.z, noise, band.start_s, band.stop_s, BEAT_SPACINGS * fit.f0_hz,
                            band.noise_time_s)
        item = _partial_from(int(k), centre, fit.f0_hz, band, band_fit, noise_amp)
        if item.partial.usable and _crowded(series.peaks.get(int(k)), centre, strays, fit.f0_hz):
            item = replace(item, partial=replace(item.partial, usable=False))
        measured.append(item)
    noise_db = 20.0 * math.log10(float(np.median(noise_amps))) if noise_amps else -math.inf
    return measured, noise_db


def _crowded(own: Peak | None, centre: float, strays: list[Peak], spacing: float) -> bool:
    """Whether a stray peak within ``STRAY_SPACINGS`` of a partial holds more than
    ``STRAY_SHARE`` of its power: its band would carry the stray into the partial's fit."""
    own_power = own.power if own is not None else 0.0
    return any(abs(p.freq_hz - centre) < STRAY_SPACINGS * spacing and p.power > STRAY_SHARE * own_power
               for p in strays)


def _partial_from(k: int, centre: float, spacing: float, band: Band, fit: BandFit | None,
                  noise_amp: float) -> _Measured:
    """The :class:`Partial` a band fit describes (an unusable one at the noise when there is none)."""
    if fit is None:
        # Never above the noise: the level is what the band holds at first, an upper bound.
        first = band.valid & (band.t_s <= band.start_s + NOISE_LOOK_S)
        level = 2.0 * math.sqrt(float(np.median(np.abs(band.z[first]) ** 2))) if first.any() else 0.0
        snr = 20.0 * math.log10(max(level, 1e-300) / noise_amp)
        return _Measured(Partial(k, centre, math.nan, level, math.nan, math.nan, math.nan, snr, False), band, None)
    freq = band.shift_hz + fit.offset_hz
    level = fit.amplitude / abs(band.gain(fit.sigma_per_s, fit.offset_hz))
    snr = 20.0 * math.log10(max(level, 1e-300) / noise_amp)
    measured_snr = 20.0 * math.log10(max(fit.start_amplitude, 1e-300) / noise_amp)
    # A partial where the series puts it: a noise bump caught in the band lies off it (a second
    # polarisation's beat moves the fitted frequency far less than this).
    on_series = (abs(freq - centre) <= ON_SERIES_SPACINGS * spacing
                 and fit.offset_sd_hz <= ON_SERIES_SPACINGS * spacing)
    usable = (measured_snr >= USABLE_SNR_DB and on_series
              and fit.sigma_sd_per_s <= MAX_SIGMA_SD_SHARE * abs(fit.sigma_per_s))
    partial = Partial(k, freq, fit.offset_sd_hz, level, level * fit.amplitude_sd_np, fit.sigma_per_s,
                      fit.sigma_sd_per_s, snr, bool(usable))
    return _Measured(partial, band, fit)


def _fit_frequencies(partials: list[Partial], source: str) -> tuple[InharmonicityFit, list[Partial]]:
    """f0 and B from the usable partials' frequencies (weights 1 / sd^2), and the partials with
    any that lie far off the fitted law (beyond OFF_SERIES_SD of their sd, and of the others' robust
    spread) marked unusable, one at a time, the fit repeated without each."""
    partials = list(partials)
    while True:
        good = [p for p in partials if p.usable]
        if len({p.k for p in good}) < 3:
            raise TakeError("no plucked note found in the take (fewer than three partials stand out of the noise)",
                            source=source)
        k = np.array([p.k for p in good], dtype=float)
        f = np.array([p.freq_hz for p in good])
        sd = np.hypot([p.freq_sd_hz for p in good], FREQ_SD_FLOOR * f)
        fit = fit_inharmonicity(k, f, 1.0 / sd**2)
        if not (math.isfinite(fit.f0_hz) and fit.f0_hz > 0
                and -0.1 * MAX_INHARMONICITY < fit.inharmonicity < MAX_INHARMONICITY):
            raise TakeError("the fit of f0 and inharmonicity did not converge", source=source)
        worst = int(np.argmax(np.abs(f - fit.partial_hz(k)) / sd))
        if len(good) <= MIN_FREQUENCY_PARTIALS:
            return fit, partials
        # Judged against the fit without it, so that it cannot hide by pulling the law its way.
        rest = np.arange(k.size) != worst
        without = fit_inharmonicity(k[rest], f[rest], 1.0 / sd[rest] ** 2)
        spread = 1.4826 * float(np.median(np.abs(f[rest] - without.partial_hz(k[rest])) / sd[rest]))
        if abs(f[worst] - float(without.partial_hz(int(k[worst])))) / sd[worst] <= OFF_SERIES_SD * max(spread, 1.0):
            return fit, partials
        partials = [replace(p, usable=False) if p is good[worst] else p for p in partials]


def _fit_loss(partials: list[Partial], source: str) -> LossFit:
    good = [p for p in partials if p.usable and p.decay_per_s > 0]
    if len(good) < 2:
        raise TakeError("the decay fit did not converge (fewer than two partials decay measurably)",
                        source=source)
    f = np.array([p.freq_hz for p in good])
    sigma = np.array([p.decay_per_s for p in good])
    sd = np.hypot([p.decay_sd_per_s for p in good], MODEL_SD_FLOOR * sigma)
    try:
        return fit_loss_law(f, sigma, 1.0 / sd**2)
    except ValueError as err:
        raise TakeError(f"the decay fit did not converge ({err})", source=source) from None


def _damped_phasor(pole: complex, n: int, block: int = 512) -> np.ndarray:
    """exp(pole m) for m = 0..n-1, as an outer product of a block's powers and the blocks' starts
    (one multiplication a sample instead of an exponential)."""
    inner = np.exp(pole * np.arange(block))
    outer = np.exp(pole * block * np.arange(-(-n // block)))
    return np.asarray(np.outer(outer, inner).reshape(-1)[:n])


def _explained_energy(x: np.ndarray, fs: int, components: list[_Component]) -> float:
    """1 - (energy of the take minus the fitted partials) / (energy of the take), after the onset."""
    total = float(np.dot(x, x))
    if total <= 0:
        return 0.0
    model = np.zeros_like(x)
    for c in components:
        model += np.real(c.amplitude * _damped_phasor((-c.sigma_per_s + 2j * math.pi * c.freq_hz) / fs, x.size))
    resid = x - model
    return float(min(max(1.0 - float(np.dot(resid, resid)) / total, 0.0), 1.0))
