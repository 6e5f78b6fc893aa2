"""One partial out of a take: complex demodulation, and its decay, level and frequency from it.

Each partial is heterodyned to zero frequency and low-pass filtered by a Blackman-Harris window
(4 terms, sidelobes 92 dB down: Harris, "On the use of windows for harmonic analysis with the
discrete Fourier transform", Proc. IEEE 66(1), 51, 1978) a few periods long, so that its main
lobe ends before the next partial. The filtering is done once for the whole take in the
frequency domain and read out on a coarse time grid. Because the window is finite, once it lies
wholly inside the note nothing of the onset leaks in, and a decaying partial
a e^{-sigma t} cos(2 pi f t + phi) comes out exactly as (a/2) e^{i phi} e^{(-sigma + i 2 pi d) t}
times the window's gain G = sum_n h[n] e^{(sigma - i 2 pi d) n / fs} (d its offset from the
band's centre), which :meth:`Band.gain` works out to undo it. The log envelope and the phase are
then straight lines, fitted by weighted least squares while the partial stands above the noise.
The mean of log |z| over a beat is the log of the stronger of two beating components (Jensen's
formula), so a line fit through the wobble of a second polarisation stays on the stronger one
instead of on the peaks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft
from scipy.ndimage import maximum_filter1d
from scipy.signal.windows import blackmanharris

from rtvoice.fit.beating import Beating, fit_beating

MIN_SNR_DB = 8.0  # log|s + n| is unbiased while |n| < |s|; at 8 dB that fails for 2 % of samples
MIN_POINTS = 6
ROBUST_STEPS = 5
HUBER_K = 1.345  # Huber, Robust Statistics (1981): 95 % efficiency for Gaussian residuals
ENVELOPE_REACH_S = 0.05
MAIN_LOBE_BINS = 4.0  # the 4-term Blackman-Harris window's first null, in 1 / length
KEPT_LOBES = 2.0  # the band read out spans twice the main lobe each side


@dataclass(frozen=True)
class Band:
    """A demodulated band: ``z`` on the grid ``t_s`` (s after the onset), the frequency it was
    shifted by, the filter's window (sums to 1) and the stretch where the window lies wholly
    inside the take (``start_s`` to ``stop_s``)."""

    z: np.ndarray
    t_s: np.ndarray
    shift_hz: float
    window: np.ndarray
    sample_rate_hz: float
    start_s: float
    stop_s: float

    def gain(self, sigma_per_s: float, offset_hz: float) -> complex:
        """What the filter does to a partial decaying at ``sigma_per_s``, ``offset_hz`` from the
        shift: z = G (a/2) e^{i phi} e^{(-sigma + i 2 pi d) t} inside the valid stretch."""
        half = (self.window.size - 1) // 2
        lag_s = np.arange(-half, half + 1) / self.sample_rate_hz
        return complex(np.sum(self.window * np.exp((sigma_per_s - 2j * math.pi * offset_hz) * lag_s)))

    @property
    def noise_time_s(self) -> float:
        """How long noise stays correlated through the window: 1 / (fs sum h^2) for sum h = 1."""
        return 1.0 / (self.sample_rate_hz * float(np.sum(self.window * self.window)))

    @property
    def valid(self) -> np.ndarray:
        return (self.t_s >= self.start_s) & (self.t_s <= self.stop_s)


class BandBank:
    """The spectrum of a take's samples from its onset, and bands demodulated out of it with
    windows of a given length (the longest being ``longest_s``)."""

    def __init__(self, x: np.ndarray, sample_rate_hz: float, longest_s: float):
        self.fs = float(sample_rate_hz)
        self.n = int(x.size)
        pad = int(math.ceil(longest_s * self.fs)) + 2
        self.size = int(scipy.fft.next_fast_len(self.n + pad, real=True))
        self.spectrum = scipy.fft.rfft(np.asarray(x, dtype=float), self.size)
        self.df = self.fs / self.size
        self.end_s = self.n / self.fs
        self._responses: dict[int, tuple[np.ndarray, np.ndarray]] = {}

    def _window(self, length_s: float) -> tuple[np.ndarray, np.ndarray]:
        """(window, its zero-phase frequency response at bin offsets -M/2..M/2-1) for an odd
        number of samples near ``length_s``."""
        length = max(5, int(round(length_s * self.fs)) | 1)
        cached = self._responses.get(length)
        if cached is None:
            window = blackmanharris(length, sym=True)
            window /= window.sum()
            kept = KEPT_LOBES * MAIN_LOBE_BINS * self.fs / length / self.df
            points = int(2 ** math.ceil(math.log2(max(16.0, 2.0 * kept))))
            half = (length - 1) // 2
            circular = np.zeros(self.size)
            circular[: half + 1] = window[half:]
            circular[self.size - half :] = window[:half]
            response = scipy.fft.rfft(circular).real  # zero phase: real
            offsets = np.arange(-points // 2, points // 2)
            cached = (window, response[np.abs(offsets)])
            self._responses[length] = cached
        return cached

    def band(self, freq_hz: float, window_s: float) -> Band:
        """The band centred near ``freq_hz`` through a window ``window_s`` long. A sinusoid of
        amplitude a at the centre gives |z| = a/2."""
        window, response = self._window(window_s)
        points = response.size
        centre = int(round(freq_hz / self.df))
        offsets = np.arange(-points // 2, points // 2)
        bins = centre + offsets
        inside = (bins >= 1) & (bins < self.spectrum.size)
        spread = np.zeros(points, dtype=complex)
        spread[offsets[inside] % points] = self.spectrum[bins[inside]] * response[inside]
        z = scipy.fft.ifft(spread) * (points / self.size)
        t_s = np.arange(points) * (self.size / (points * self.fs))
        half_s = (window.size - 1) / 2.0 / self.fs
        return Band(np.asarray(z), t_s, centre * self.df, window, self.fs, half_s, self.end_s - half_s)

    def noise_power(self, freq_hz: float, window_s: float) -> float:
        """Mean |z|^2 of the noise through a window ``window_s`` long at ``freq_hz`` (a stretch with no
        partial), from the median over the valid stretch (|z|^2 of noise is exponential: mean =
        median / ln 2), so a burst does not raise it."""
        band = self.band(freq_hz, window_s)
        valid = band.valid if band.valid.any() else band.t_s <= self.end_s
        return float(np.median(np.abs(band.z[valid]) ** 2) / math.log(2.0))

    def noise_gain(self, window_s: float) -> float:
        """Sum of the window's squares: white noise's power through it scales so."""
        window, _ = self._window(window_s)
        return float(np.sum(window * window))


@dataclass(frozen=True)
class BandFit:
    """A partial fitted in its band: amplitude at the onset as the band sees it (a |G|, with
    |z| = a |G| / 2; :meth:`Band.gain` gives G) and its relative sd (nepers), the decay rate and sd
    (1/s), the frequency offset from the shift and its sd (Hz), phase at the onset (rad, G's phase
    included), where the fit started and stopped (s after the onset) and on how many samples;
    the pivot (where level and slope are uncorrelated) for :meth:`amplitude_with`; the two
    components when the partial beats."""

    amplitude: float
    amplitude_sd_np: float
    sigma_per_s: float
    sigma_sd_per_s: float
    offset_hz: float
    offset_sd_hz: float
    phase_rad: float
    start_s: float
    stop_s: float
    points: int
    pivot_s: float = 0.0
    pivot_log_amp: float = 0.0
    pivot_sd_np: float = 0.0
    beating: Beating | None = None  # the two components, when the partial beats significantly

    def amplitude_with(self, sigma_per_s: float, sigma_sd_per_s: float) -> tuple[float, float]:
        """(amplitude at the onset, its sd in nepers) with the decay rate given instead of the
        fitted one: the log envelope is known best at :attr:`pivot_s`, where the fitted line's
        level and slope are uncorrelated, and is carried back from there at ``sigma_per_s``."""
        log_amp = self.pivot_log_amp + sigma_per_s * self.pivot_s
        sd = math.hypot(self.pivot_sd_np, self.pivot_s * sigma_sd_per_s)
        return 2.0 * math.exp(log_amp), sd

    @property
    def start_amplitude(self) -> float:
        """The fitted amplitude where the fit starts: what was measured, not extrapolated."""
        return self.amplitude * math.exp(-self.sigma_per_s * self.start_s)


def fit_band(t_s: np.ndarray, z: np.ndarray, noise_power: float, start_s: float, stop_s: float,
             max_offset_hz: float = math.inf, noise_time_s: float = 0.0) -> BandFit | None:
    """Decay, level and frequency of the one partial in ``z`` between ``start_s`` and ``stop_s``
    (seconds after the onset), while its fitted envelope stays ``MIN_SNR_DB`` above
    ``noise_power``; None when it never does for ``MIN_POINTS`` samples. When two components
    within ``max_offset_hz`` of the centre beat in it (:mod:`rtvoice.fit.beating`), the stronger
    one at the onset is the partial. ``noise_time_s`` is how long the noise in ``z`` stays
    correlated (the filter's length): no uncertainty is stated below what the noise allows
    (:func:`noise_limits`)."""
    power = np.abs(z) ** 2
    window = (t_s >= start_s) & (t_s <= stop_s)
    floor = max(noise_power, 1e-300) * 10.0 ** (MIN_SNR_DB / 10.0)
    # The partial's stretch is the contiguous one from the start while its envelope (the largest
    # |z|^2 nearby, so a beat's dip does not end it) stays above the floor: later stray excursions
    # over it (the end's fade, noise) are not the partial.
    step_s = float(t_s[1] - t_s[0]) if t_s.size > 1 else 1.0
    reach = max(MIN_POINTS, int(round(ENVELOPE_REACH_S / step_s)))
    envelope = maximum_filter1d(power, size=reach, mode="nearest")
    order = np.arange(t_s.size)
    dropped = np.flatnonzero(window & (envelope <= floor))
    end = int(dropped[0]) if dropped.size else int(np.flatnonzero(window)[-1]) + 1 if window.any() else 0
    head = window & (order < end)
    if np.count_nonzero(head) < MIN_POINTS:
        return None
    log_amp = 0.5 * np.log(np.maximum(power, max(noise_power, 1e-300)))
    coef, cov = _robust_line(t_s[head], log_amp[head], np.ones(np.count_nonzero(head)))
    span = head
    for _ in range(3):
        fitted_power = np.exp(np.minimum(2.0 * (coef[0] + coef[1] * t_s), 700.0))
        # The span runs while the fitted line is above the floor: beating dips inside it stay in.
        above = head & (fitted_power > floor)
        if np.count_nonzero(above) < MIN_POINTS:
            return None
        span = head & (order <= int(np.flatnonzero(above)[-1]))
        noise_var = noise_power / (2.0 * fitted_power[span])
        wobble = _wobble_variance(log_amp[span] - (coef[0] + coef[1] * t_s[span]), noise_var)
        coef, cov = _robust_line(t_s[span], log_amp[span], 1.0 / (wobble + noise_var))
    idx = np.flatnonzero(span)
    pivot = float(-cov[0, 1] / cov[1, 1]) if cov[1, 1] > 0 else float(t_s[idx[0]])
    phase = np.unwrap(np.angle(z[idx]))
    # Phase noise has variance N / (2 |z|^2) at each sample: the measured |z| weights out beat dips.
    phase_noise = noise_power / (2.0 * np.maximum(power[idx], 1e-300))
    phase_guess = np.polyfit(t_s[idx], phase, 1, w=1.0 / np.sqrt(phase_noise + 1e-12))
    phase_wobble = _wobble_variance(phase - np.polyval(phase_guess, t_s[idx]), phase_noise)
    pcoef, pcov = _robust_line(t_s[idx], phase, 1.0 / (phase_wobble + phase_noise))
    beating = fit_beating(t_s[idx], z[idx], max_offset_hz)
    limit_amp, limit_rate = noise_limits(t_s[idx], math.exp(coef[0]), -coef[1], noise_power, noise_time_s)
    if beating is not None and beating.significant:
        main = beating.dominant
        log_amp = math.log(max(abs(main.amplitude), 1e-300))
        amp_sd = max(main.amplitude_sd_np, limit_amp)
        return BandFit(
            amplitude=2.0 * abs(main.amplitude), amplitude_sd_np=amp_sd,
            sigma_per_s=main.sigma_per_s, sigma_sd_per_s=max(main.sigma_sd_per_s, limit_rate),
            offset_hz=main.offset_hz, offset_sd_hz=max(main.offset_sd_hz, limit_rate / (2.0 * math.pi)),
            phase_rad=math.atan2(main.amplitude.imag, main.amplitude.real),
            start_s=float(t_s[idx[0]]), stop_s=float(t_s[idx[-1]]), points=int(idx.size),
            pivot_s=0.0, pivot_log_amp=log_amp, pivot_sd_np=amp_sd, beating=beating,
        )
    offset = pcoef[1] / (2.0 * math.pi)
    offset_sd = max(math.sqrt(max(pcov[1, 1], 0.0)), limit_rate) / (2.0 * math.pi)
    sigma, sigma_sd = -coef[1], max(math.sqrt(max(cov[1, 1], 0.0)), limit_rate)
    if beating is not None:
        # A beat too slow or too weak to tell apart still pulls the line's frequency and decay
        # toward the second component: how far the two readings differ is counted as uncertainty.
        offset_sd = math.hypot(offset_sd, beating.dominant.offset_hz - offset)
        sigma_sd = math.hypot(sigma_sd, beating.dominant.sigma_per_s - sigma)
    pivot_sd = math.sqrt(max(cov[0, 0] + 2.0 * pivot * cov[0, 1] + pivot * pivot * cov[1, 1], 0.0))
    return BandFit(
        amplitude=2.0 * math.exp(coef[0]),
        amplitude_sd_np=max(math.sqrt(max(cov[0, 0], 0.0)), limit_amp),
        sigma_per_s=sigma,
        sigma_sd_per_s=sigma_sd,
        offset_hz=offset,
        offset_sd_hz=offset_sd,
        phase_rad=float(pcoef[0]),
        start_s=float(t_s[idx[0]]),
        stop_s=float(t_s[idx[-1]]),
        points=int(idx.size),
        pivot_s=pivot,
        pivot_log_amp=coef[0] + coef[1] * pivot,
        pivot_sd_np=pivot_sd,
    )


def noise_limits(t_s: np.ndarray, amplitude: float, sigma_per_s: float, noise_power: float,
                 noise_time_s: float) -> tuple[float, float]:
    """The least sds white noise allows for a damped component |z| = amplitude e^{-sigma t} seen at
    times ``t_s``: (sd of log amplitude at t = 0 in nepers, sd of the decay rate = sd of the angular
    frequency in 1/s), from the Fisher information of the model (e.g. Kay, *Fundamentals of
    Statistical Signal Processing: Estimation Theory*, 1993, ch. 3), the noise counted as
    independent every ``noise_time_s``. Zeros when ``noise_time_s`` is 0."""
    if noise_time_s <= 0 or t_s.size < 2 or noise_power <= 0:
        return 0.0, 0.0
    step = float(t_s[1] - t_s[0])
    power = amplitude**2 * np.exp(-2.0 * sigma_per_s * t_s)
    i0, i1, i2 = (float(np.sum(t_s**m * power)) * step for m in (0, 1, 2))
    det = i0 * i2 - i1 * i1
    if det <= 0:
        return math.inf, math.inf
    # Fisher information 2 / (v tau) * [[I0, -I1], [-I1, I2]] for (log amplitude, rate), v tau = N0.
    scale = noise_power * noise_time_s / 2.0
    return math.sqrt(scale * i2 / det), math.sqrt(scale * i0 / det)


def _wobble_variance(resid: np.ndarray, noise_var: np.ndarray) -> float:
    """What the residuals' spread holds beyond the noise (beating, a second polarisation), from
    their median (median(r^2) = (0.6745 sd)^2 for Gaussian residuals) so that a few dips do not
    set it; at least a tiny floor so weights stay finite."""
    excess = float(np.median(resid * resid)) / 0.6745**2 - float(np.median(noise_var))
    return max(excess, 1e-10)


def _robust_line(t: np.ndarray, y: np.ndarray, w: np.ndarray) -> tuple[tuple[float, float], np.ndarray]:
    """Weighted least-squares line y = c0 + c1 t with Huber weights against stray samples.

    Returns (c0, c1) and their covariance, scaled by the residuals and widened for their
    correlation (neighbouring samples on the coarse grid are not independent)."""
    robust = np.ones_like(w)
    design = np.column_stack([np.ones_like(t), t])
    coef = np.zeros(2)
    for _ in range(ROBUST_STEPS):
        sw = np.sqrt(w * robust)
        coef, *_ = np.linalg.lstsq(design * sw[:, None], y * sw, rcond=None)
        scaled = np.abs(y - design @ coef) * np.sqrt(w)
        spread = 1.4826 * float(np.median(scaled))
        if spread <= 0:
            break
        u = scaled / (HUBER_K * spread)
        robust = np.where(u <= 1.0, 1.0, 1.0 / np.maximum(u, 1e-300))
    weights = w * robust
    resid = y - design @ coef
    n = t.size
    chi2 = float(np.sum(weights * resid * resid)) / max(n - 2, 1)
    normalised = resid * np.sqrt(weights)
    if n > 3 and float(np.sum(normalised * normalised)) > 0:
        rho = float(np.sum(normalised[1:] * normalised[:-1]) / np.sum(normalised * normalised))
        rho = min(max(rho, 0.0), 0.99)
        inflation = (1.0 + rho) / (1.0 - rho)  # AR(1) effective sample size n (1 - rho) / (1 + rho)
    else:
        inflation = 1.0
    cov = np.linalg.pinv((design * weights[:, None]).T @ design) * chi2 * inflation
    return (float(coef[0]), float(coef[1])), np.asarray(cov)
