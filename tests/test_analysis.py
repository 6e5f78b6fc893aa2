"""The recording measurements in ``analysis.py`` on tones of known frequency and levels,
with and without the steps an xrun leaves in a recording through an audio server.

A JACK xrun drops a period of what a client played, repeats one or leaves one silent (JACK
documentation, "xrun"; what jack_capture then records is common practice, seen on this project's
dummy server). The tones are sums of harmonics of a chosen f0 with chosen levels, so the truth is
known exactly; the period is 256 frames at 48 kHz, as in the tests that record through JACK.
"""

from __future__ import annotations

import numpy as np
import pytest
from analysis import fit_damped_modes, peak_frequency_hz, relative_levels_through_steps, steady_frequency_hz

RATE = 48_000
PERIOD = 256
LEVELS = np.array([1.0, 0.5, 0.3, 0.05, 0.2, 0.12, 0.08, 0.02])


def tone(f0_hz: float, seconds: float, sigma: float = 0.1) -> np.ndarray:
    t = np.arange(int(seconds * RATE)) / RATE
    k = np.arange(1, LEVELS.size + 1)
    phases = 0.37 * k**2  # any fixed phases
    return np.exp(-sigma * t) * (LEVELS[:, None] * np.cos(2 * np.pi * f0_hz * np.outer(k, t) + phases[:, None])).sum(0)


def with_steps(x: np.ndarray, at_s: list[float]) -> np.ndarray:
    """``x`` with a period dropped, repeated and silenced in turn at each of ``at_s``."""
    out, last = [], 0
    for j, a in enumerate(at_s):
        i = int(a * RATE)
        out.append(x[last:i])
        kind = j % 3
        if kind == 0:  # dropped
            last = i + PERIOD
        elif kind == 1:  # repeated
            out.append(x[i - PERIOD:i])
            last = i
        else:  # silent in place of one
            out.append(np.zeros(PERIOD))
            last = i + PERIOD
    out.append(x[last:])
    return np.concatenate(out)


def cents(f: float, want: float) -> float:
    return 1200 * np.log2(f / want)


@pytest.mark.parametrize("f0", [110.0, 220.0, 261.6256, 311.127, 440.0])
def test_steady_frequency_is_exact_on_a_clean_tone(f0):
    x = tone(f0, 0.5)
    assert abs(cents(steady_frequency_hz(x, RATE, f0, 15.0), f0)) < 0.005


@pytest.mark.parametrize("f0", [110.0, 220.0, 311.127, 440.0])
def test_steady_frequency_holds_through_steps_that_move_the_plain_peak(f0):
    x = with_steps(tone(f0, 0.5), [0.11, 0.23, 0.37])
    assert abs(cents(steady_frequency_hz(x, RATE, f0, 15.0), f0)) < 0.02
    # the plain FFT peak of the same window is thrown off by several cents (+7.6 at 311.127 Hz;
    # a CI run with xruns measured +7.8 there, the failure this measurement exists for)
    assert abs(cents(peak_frequency_hz(x, RATE, f0, 15.0), f0)) > 1.0


def test_steady_frequency_sees_a_wrong_pitch():
    x = with_steps(tone(220.0 * 2 ** (0.3 / 1200), 0.5), [0.2])  # 0.3 cents sharp
    assert cents(steady_frequency_hz(x, RATE, 220.0, 15.0), 220.0) == pytest.approx(0.3, abs=0.02)


def test_relative_levels_hold_through_steps():
    f0 = 110.0
    k = np.arange(1, LEVELS.size + 1)
    x = with_steps(tone(f0, 0.6), [0.15, 0.42])
    rel = relative_levels_through_steps(x, RATE, k * f0, np.full(k.size, 0.1))
    usable = LEVELS > 0.04
    assert 20 * np.log10(rel[usable] / (LEVELS / LEVELS[0])[usable]) == pytest.approx(0, abs=0.1)
    # one fit over the whole window is thrown off by dB
    plain = np.abs(fit_damped_modes(x, RATE, k * f0, np.full(k.size, 0.1)))
    assert np.max(np.abs(20 * np.log10((plain / plain[0])[usable] / (LEVELS / LEVELS[0])[usable]))) > 1.0
