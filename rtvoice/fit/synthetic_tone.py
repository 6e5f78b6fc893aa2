"""What a recording chain adds to a synthetic take: an amplifier-like tone filter and white noise.

The tone filter is three second-order sections of the "Audio EQ Cookbook" (R. Bristow-Johnson,
common practice): a low shelf (shelf slope S = 1), a mid peak and a high roll-off (the
cookbook's low-pass, here with Q = 1/sqrt(2), a second-order Butterworth). Each is the
bilinear transform, pre-warped at its corner, of an analog prototype, so its gain at the
corner is exact: the peak's full gain, the shelf's half gain in dB, the roll-off's -3 dB.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

BUTTERWORTH_Q = 1.0 / math.sqrt(2.0)
MAX_CORNER_OF_NYQUIST = 0.9  # a corner is held below 0.9 of the Nyquist frequency at low sample rates


def _corner(freq_hz: float, sample_rate_hz: float) -> tuple[float, float]:
    """(cos w0, sin w0) of a corner held below the Nyquist frequency."""
    f = min(freq_hz, MAX_CORNER_OF_NYQUIST * 0.5 * sample_rate_hz)
    w0 = 2.0 * math.pi * f / sample_rate_hz
    return math.cos(w0), math.sin(w0)


def _section(b: tuple[float, float, float], a: tuple[float, float, float]) -> np.ndarray:
    """One row of an SOS array (b0 b1 b2 1 a1 a2), normalised by a0."""
    a0 = a[0]
    return np.array([b[0] / a0, b[1] / a0, b[2] / a0, 1.0, a[1] / a0, a[2] / a0])


def peaking_section(freq_hz: float, gain_db: float, q: float, sample_rate_hz: float) -> np.ndarray:
    """The cookbook's peaking EQ: ``gain_db`` at ``freq_hz``, 0 dB at DC and Nyquist."""
    amp = 10.0 ** (gain_db / 40.0)
    cos_w, sin_w = _corner(freq_hz, sample_rate_hz)
    alpha = sin_w / (2.0 * q)
    return _section((1.0 + alpha * amp, -2.0 * cos_w, 1.0 - alpha * amp),
                    (1.0 + alpha / amp, -2.0 * cos_w, 1.0 - alpha / amp))


def low_shelf_section(freq_hz: float, gain_db: float, sample_rate_hz: float) -> np.ndarray:
    """The cookbook's low shelf with slope S = 1: ``gain_db`` at DC, half of it at ``freq_hz``, 0 dB at Nyquist."""
    amp = 10.0 ** (gain_db / 40.0)
    cos_w, sin_w = _corner(freq_hz, sample_rate_hz)
    alpha = sin_w / 2.0 * math.sqrt(2.0)  # S = 1: sqrt((A + 1/A)(1/S - 1) + 2) = sqrt(2)
    root = 2.0 * math.sqrt(amp) * alpha
    return _section((amp * ((amp + 1) - (amp - 1) * cos_w + root), 2 * amp * ((amp - 1) - (amp + 1) * cos_w),
                     amp * ((amp + 1) - (amp - 1) * cos_w - root)),
                    ((amp + 1) + (amp - 1) * cos_w + root, -2 * ((amp - 1) + (amp + 1) * cos_w),
                     (amp + 1) + (amp - 1) * cos_w - root))


def low_pass_section(freq_hz: float, q: float, sample_rate_hz: float) -> np.ndarray:
    """The cookbook's second-order low-pass: unity at DC, a zero at Nyquist."""
    cos_w, sin_w = _corner(freq_hz, sample_rate_hz)
    alpha = sin_w / (2.0 * q)
    return _section(((1 - cos_w) / 2, 1 - cos_w, (1 - cos_w) / 2), (1 + alpha, -2 * cos_w, 1 - alpha))


@dataclass(frozen=True)
class ToneFilter:
    """An amplifier-like tone: a low shelf, a mid peak and a high roll-off (see the module's note)."""

    shelf_hz: float
    shelf_db: float
    peak_hz: float
    peak_db: float
    peak_q: float
    rolloff_hz: float

    def sos(self, sample_rate_hz: float) -> np.ndarray:
        """Second-order sections (scipy.signal's SOS layout), shelf, peak, roll-off."""
        return np.stack([low_shelf_section(self.shelf_hz, self.shelf_db, sample_rate_hz),
                         peaking_section(self.peak_hz, self.peak_db, self.peak_q, sample_rate_hz),
                         low_pass_section(self.rolloff_hz, BUTTERWORTH_Q, sample_rate_hz)])

    def apply(self, x: np.ndarray, sample_rate_hz: float) -> np.ndarray:
        """``x`` through the filter, from rest."""
        out: np.ndarray = signal.sosfilt(self.sos(sample_rate_hz), x)
        return out

    def response_db(self, freqs_hz: np.ndarray, sample_rate_hz: float) -> np.ndarray:
        """Gain in dB at ``freqs_hz``."""
        _, h = signal.sosfreqz(self.sos(sample_rate_hz), worN=np.asarray(freqs_hz, dtype=float), fs=sample_rate_hz)
        out: np.ndarray = 20.0 * np.log10(np.maximum(np.abs(h), 1e-300))
        return out

    @property
    def description(self) -> str:
        return (f"low shelf {self.shelf_db:+.1f} dB below {self.shelf_hz:.0f} Hz, peak {self.peak_db:+.1f} dB at "
                f"{self.peak_hz:.0f} Hz (Q {self.peak_q:.2f}), roll-off above {self.rolloff_hz:.0f} Hz "
                f"(second-order Butterworth)")


def draw_tone_filter(rng: np.random.Generator) -> ToneFilter:
    """A gentle random tone: shelf 80..250 Hz at +-4 dB, peak 300..3000 Hz at +-5 dB (Q 0.5..1.5),
    roll-off 7..16 kHz (log-uniform corners)."""
    return ToneFilter(
        shelf_hz=_log_uniform(rng, 80.0, 250.0), shelf_db=float(rng.uniform(-4.0, 4.0)),
        peak_hz=_log_uniform(rng, 300.0, 3000.0), peak_db=float(rng.uniform(-5.0, 5.0)),
        peak_q=float(rng.uniform(0.5, 1.5)), rolloff_hz=_log_uniform(rng, 7000.0, 16000.0))


def _log_uniform(rng: np.random.Generator, low: float, high: float) -> float:
    return float(math.exp(rng.uniform(math.log(low), math.log(high))))


def add_noise(x: np.ndarray, onset: int, snr_db: float, sample_rate_hz: float, rng: np.random.Generator,
              reference_s: float = 1.0) -> np.ndarray:
    """``x`` plus white Gaussian noise ``snr_db`` below the mean power of ``x`` over the ``reference_s``
    after sample ``onset`` (the whole rest when shorter)."""
    segment = x[onset: onset + max(1, int(round(reference_s * sample_rate_hz)))]
    power = float(np.mean(segment ** 2)) if segment.size else 0.0
    sigma = math.sqrt(power / 10.0 ** (snr_db / 10.0))
    out: np.ndarray = x + sigma * rng.standard_normal(x.size)
    return out


__all__ = ["BUTTERWORTH_Q", "ToneFilter", "add_noise", "draw_tone_filter", "low_pass_section", "low_shelf_section",
           "peaking_section"]
