"""The pickup coil and its cable as a resonant second-order low-pass.

Series resistance R and inductance L of the coil, shunt capacitance C (coil plus
cable) and load resistance R_L give H(s) = 1 / (L C s^2 + (R C + L / R_L) s + 1 + R / R_L).
Its natural frequency is f_r = sqrt((1 + R / R_L) / (L C)) / (2 pi) and its
quality factor Q = w_r L C / (R C + L / R_L). rtvoice normalises the DC gain to 1
(the loading loss is a level, not a tone).
"""

from __future__ import annotations

import math

import numpy as np

MIN_Q, MAX_Q = 0.05, 100.0  # what the digital filter accepts; circuits outside are clamped
MIN_RESONANCE_HZ = 20.0


def rlc_resonance(
    inductance_h: float,
    resistance_ohm: float,
    capacitance_f: float,
    load_ohm: float = math.inf,
) -> tuple[float, float]:
    """(f_r in Hz, Q) of the coil, cable and load network."""
    if inductance_h <= 0 or capacitance_f <= 0:
        raise ValueError("inductance and capacitance must be positive")
    r_ratio = 0.0 if math.isinf(load_ohm) else resistance_ohm / load_ohm
    l_over_rl = 0.0 if math.isinf(load_ohm) else inductance_h / load_ohm
    w_r = math.sqrt((1.0 + r_ratio) / (inductance_h * capacitance_f))
    damping = resistance_ohm * capacitance_f + l_over_rl
    q = math.inf if damping == 0 else w_r * inductance_h * capacitance_f / damping
    return w_r / (2 * math.pi), q


def lowpass_response(freq_hz: np.ndarray, resonance_hz: float, q: float) -> np.ndarray:
    """Complex analog response 1 / (1 + s / (Q w_r) + s^2 / w_r^2) at ``freq_hz``."""
    s = 2j * np.pi * np.asarray(freq_hz, dtype=float)
    w_r = 2 * np.pi * resonance_hz
    return 1.0 / (1.0 + s / (q * w_r) + (s / w_r) ** 2)


def lowpass_biquad(resonance_hz: float, q: float, sample_rate_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """(b, a) of a digital low-pass whose magnitude matches the analog one up to high frequencies.

    Poles by impulse invariance (z = e^{sT}), numerator chosen to match the analog
    magnitude at DC, at the resonance region and at Nyquist: the "matched"
    second-order design of M. Vicanek, "Matched Second Order Digital Filters"
    (2016; formulas from memory, checked against the analog response in the
    tests). Q is held within [MIN_Q, MAX_Q] and f_r within [MIN_RESONANCE_HZ, 0.45 fs].
    Unlike the bilinear transform it does not squash the response towards
    Nyquist: within 0.1 dB of the analog filter up to a quarter of the rate.
    """
    f_r = min(max(float(resonance_hz), MIN_RESONANCE_HZ), 0.45 * sample_rate_hz)
    w0 = 2 * math.pi * f_r / sample_rate_hz
    q = min(max(float(q), MIN_Q), MAX_Q)
    zeta = 1.0 / (2.0 * q)
    decay = math.exp(-zeta * w0)
    if zeta <= 1.0:
        a1 = -2.0 * decay * math.cos(math.sqrt(1.0 - zeta * zeta) * w0)
    else:  # two real poles; written as a sum of decaying exponentials so nothing overflows
        root = math.sqrt(zeta * zeta - 1.0)
        a1 = -(math.exp((-zeta + root) * w0) + math.exp((-zeta - root) * w0))
    a2 = decay * decay
    big_a0, big_a1, big_a2 = (1 + a1 + a2) ** 2, (1 - a1 + a2) ** 2, -4 * a2
    phi1 = math.sin(w0 / 2) ** 2
    phi0 = 1.0 - phi1
    phi2 = 4 * phi0 * phi1
    r1 = (big_a0 * phi0 + big_a1 * phi1 + big_a2 * phi2) * q * q
    big_b1 = max((r1 - big_a0 * phi0) / phi1, 0.0)
    b0 = 0.5 * (math.sqrt(big_a0) + math.sqrt(big_b1))
    b1 = math.sqrt(big_a0) - b0
    return np.array([b0, b1, 0.0]), np.array([1.0, a1, a2])
