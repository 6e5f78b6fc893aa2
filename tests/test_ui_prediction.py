"""The predicted attack levels the bars show, rebuilt here from the published formulas.

- Plucked ideal string, unit height at fraction p: a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p))
  (Fletcher & Rossing, *The Physics of Musical Instruments*, 2nd ed. 1998, ch. 2); a contact of
  width w multiplies it by sinc(k pi w / 2) (the window average of the triangle; references.md).
- Pickup at x with aperture w: sin(k pi x) sinc(k pi w / 2) (Paiva, Pakarinen & Välimäki,
  JAES 60(10), 768, 2012).
- A magnetic pickup senses velocity (Horton & Moore, Am. J. Phys. 77(2), 144, 2009): a mode
  decaying as exp((-sigma + i w) t) is weighted by |-sigma + i w|, here relative to the first
  mode's w_1.
- Stiff string: f_k = k f0 sqrt(1 + B k^2) (Fletcher, JASA 36, 203, 1964).
- Loss law sigma = b1 + b3 w^2 through two T60s (Chaigne & Askenfelt, JASA 95(2), 1112, 1994).
- Coil and cable low-pass |1 / (1 + s / (Q w_r) + s^2 / w_r^2)| (second-order resonance,
  common practice; scipy.signal.freqs as the reference implementation).
- Velocity curve (v / 127)^2: common practice; the engine's output scale is its own constant.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from support.describe import failing
from support.sounds import open_strings

from rtvoice.engine.renderer import OUTPUT_SCALE
from rtvoice.engine.settings import Settings
from rtvoice.ui.prediction import FLOOR_DB, predicted_levels_db


def sinc(u):
    return np.where(u == 0, 1.0, np.sin(u) / np.where(u == 0, 1.0, u))


def reference_levels_db(s: Settings, note: int, n: int, velocity: int) -> np.ndarray:
    k = np.arange(1, n + 1, dtype=float)
    f0 = 440.0 * 2 ** ((note - 69) / 12)  # MIDI 1.0 / ISO 16 equal temperament
    p, cw = s.get("excitation.position"), s.get("excitation.width")
    a = 2 * np.sin(k * np.pi * p) / (k**2 * np.pi**2 * p * (1 - p)) * sinc(k * np.pi * cw / 2)
    f = k * f0 * np.sqrt(1 + s.get("string.inharmonicity") * k**2)
    w = 2 * np.pi * f
    t_lo, t_hi = s.get("string.t60_low"), s.get("string.t60_high")
    s_lo, s_hi = 3 * np.log(10) / t_lo, 3 * np.log(10) / t_hi
    w_lo, w_hi = 2 * np.pi * 100, 2 * np.pi * 2000
    b3 = (s_hi - s_lo) / (w_hi**2 - w_lo**2)
    sigma = s_lo - b3 * w_lo**2 + b3 * w**2
    pickup = np.zeros(n, complex)
    for pu in s.pickups:
        shape = np.sin(k * np.pi * pu["position"]) * sinc(k * np.pi * pu["width"] / 2)
        level = pu["polarity"] * 10 ** (pu["level_db"] / 20)
        sense = (-sigma + 1j * w) / w[0] if pu["sensing"] == "velocity" else 1.0
        pickup += level * shape * sense
    f_r, q = s.get("electronics.resonance_hz"), s.get("electronics.q")
    w_r = 2 * np.pi * f_r
    _, h = scipy.signal.freqs([1.0], [1 / w_r**2, 1 / (q * w_r), 1.0], worN=w)
    gain = 10 ** (s.get("output.gain_db") / 20)
    amp = (velocity / 127) ** 2 * OUTPUT_SCALE * gain * np.abs(a * pickup * h)
    amp[f >= 0.45 * 48000] = 0.0
    with np.errstate(divide="ignore"):
        return np.where(amp > 0, 20 * np.log10(np.maximum(amp, 1e-300)), FLOOR_DB)


@pytest.mark.parametrize(("changes", "note", "velocity"), [
    ({}, 40, 90),
    ({"pickup.0.position": 0.25, "pickup.0.width": 0.04, "excitation.position": 0.13}, 52, 127),
    ({"pickup.0.sensing": "displacement", "pickup.1.position": 0.33, "pickup.1.polarity": -1,
      "pickup.1.level_db": -3.0, "electronics.resonance_hz": 2500.0, "electronics.q": 4.0}, 64, 60),
    ({"string.inharmonicity": 0.002, "string.t60_high": 0.3, "output.gain_db": -20.0}, 33, 100),
])
def test_predicted_levels_follow_the_published_formulas(changes, note, velocity):
    # Open strings: the formulas take the pluck and the pickups as fractions of the note's own length
    # (a pickup at 0.33, past a fretted neck), string.inharmonicity as its B, and any note (33 lies
    # below the six-string's E2); the bars at a string and fret: tests/test_ui_instrument.py.
    s = open_strings().with_values(changes)
    ours = predicted_levels_db(s, note, 64, velocity)
    ref = reference_levels_db(s, note, 64, velocity)
    audible = ref > -150
    assert audible.sum() >= 40
    np.testing.assert_allclose(ours[audible], ref[audible], atol=1e-6)
    assert np.all(ours[~audible] < -150), \
        "where the reference is below -150 dB: " + failing(ours[~audible] < -150, ours[~audible],
                                                           np.flatnonzero(~audible) + 1, "harmonics")


def test_a_pluck_at_the_middle_predicts_no_even_harmonics():
    """sin(k pi / 2) = 0 for even k (Fletcher & Rossing 1998): a mid-string pluck has only odd ones."""
    # open strings: the middle of the note's own string (over a fretted neck)
    s = open_strings().with_values({"excitation.position": 0.5, "excitation.width": 0.0})
    levels = predicted_levels_db(s, 45, 32)
    k = np.arange(1, levels.size + 1)
    assert np.all(levels[1::2] <= FLOOR_DB) and np.all(levels[0::2] > -120), (
        f"even harmonics, want <= {FLOOR_DB} dB: {failing(levels[1::2] <= FLOOR_DB, levels[1::2], k[1::2])}; "
        f"odd ones, want > -120 dB: {failing(levels[0::2] > -120, levels[0::2], k[0::2])}")


def test_modes_at_or_above_045_of_the_sample_rate_predict_nothing():
    """The engine leaves those modes out (no aliasing); so does the prediction."""
    s = Settings.defaults()
    levels = predicted_levels_db(s, 100, 96, sample_rate_hz=48000.0)  # E7, 2637 Hz: k = 9 is 23.7 kHz
    k = np.arange(1, 97)
    f = k * 440 * 2 ** ((100 - 69) / 12) * np.sqrt(1 + 1e-4 * k**2)
    above = f >= 0.45 * 48000
    assert np.all(levels[above] <= FLOOR_DB), \
        f"at or above 0.45 fs, want <= {FLOOR_DB} dB: " + failing(levels[above] <= FLOOR_DB, levels[above], k[above])
    below = (f < 0.45 * 48000) & (k % 5 != 0)  # (k = 5: the pluck's own null at L/5)
    assert np.all(levels[below] > -150), "below 0.45 fs, want > -150 dB: " + failing(levels[below] > -150,
                                                                                     levels[below], k[below])
