"""The output's true peak, between samples, held at -1 dBTP as well as every sample at -1 dBFS.

Loudness practice for programme sets the ceiling on the true peak: EBU R128 and EBU Tech 3341
allow at most -1 dBTP, measured as ITU-R BS.1770-4 (2015) Annex 2 says (4x oversampling with the
Annex's 48-tap filter; tests/true_peak_meter.py, written from the standard, with
scipy.signal.resample_poly as a general-purpose cross-check). A limiter that only looks at samples
lets a sound through whose samples are under -1 dBFS but whose waveform between them is not
(the classic case: a sine at a quarter of the sample rate, 45 degrees off its samples, peaks
3 dB above them). The engine's renders are measured from outside, on the audio alone.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st
from support.describe import finite_peak, nonfinite
from true_peak_meter import BS1770_FIR, BS1770_PHASES, dbtp, oversampled, reference_true_peak, true_peak

from rtvoice.engine.output import CEILING, Limiter
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings

FS = 48000
CEILING_DBTP = -1.0  # EBU R128 / EBU Tech 3341: at most -1 dBTP
SIX_STRINGS = (40, 45, 50, 55, 59, 64)  # standard tuning E2 A2 D3 G3 B3 E4 (common practice)


# -- the meter itself ------------------------------------------------------------------------------

def test_the_meter_reads_the_classic_inter_sample_peak():
    # Common practice, the classic inter-sample peak: a full-scale sine at fs/4, 45 degrees off its
    # samples, has every sample at +-0.7071 (-3.01 dBFS) and a true peak of 1.0 (0 dBTP).
    n = np.arange(FS)
    x = np.sin(np.pi / 2 * n + np.pi / 4)
    assert dbtp(np.max(np.abs(x))) == pytest.approx(-3.0103, abs=1e-4)
    # The Annex's filter does not pass fs/4 at exactly unit gain: each of its four phases has its
    # own gain there (scipy.signal.freqz on the Annex's coefficients). The meter must read 0 dBTP to
    # within the largest of those gains, and far above the samples.
    gains_db = [dbtp(abs(scipy.signal.freqz(taps, worN=[np.pi / 2])[1][0])) for taps in BS1770_PHASES]
    reading_db = dbtp(true_peak(x))
    assert abs(reading_db) <= max(abs(g) for g in gains_db)
    assert reading_db > dbtp(np.max(np.abs(x))) + 2.9
    # The general-purpose resampler reads it too, to within its own filter's phases' gains at fs/4
    # (its documented default filter: scipy.signal.firwin(81, 1/4, window=("kaiser", 5.0)), times 4).
    resampler = 4 * scipy.signal.firwin(81, 0.25, window=("kaiser", 5.0))
    rp_gains_db = [dbtp(abs(scipy.signal.freqz(resampler[p::4], worN=[np.pi / 2])[1][0])) for p in range(4)]
    assert abs(dbtp(reference_true_peak(x))) <= max(abs(g) for g in rp_gains_db) + 1e-9  # float rounding


def test_the_meter_is_the_annexs_48_tap_filter_on_the_zero_stuffed_signal():
    # BS.1770-4 Annex 2 describes the meter as 4x zero insertion, then the 48-tap low-pass: the
    # polyphase bookkeeping of the meter must give exactly that signal.
    x = np.random.default_rng(5).standard_normal(500)
    stuffed = np.zeros(4 * x.size)
    stuffed[::4] = x
    direct = np.convolve(stuffed, BS1770_FIR)
    ours = oversampled(x)
    # The meter keeps the values whose 12 samples all lie in x: from 4 x 11 = 44 on, 4 per sample.
    np.testing.assert_allclose(ours, direct[44 : 44 + ours.size], rtol=0, atol=1e-12)


# -- the limiter on its own ------------------------------------------------------------------------

def _through(lim: Limiter, x: np.ndarray, block: int) -> np.ndarray:
    y = x.copy()
    for at in range(0, y.size, block):
        lim.process(y[at : at + block])
    return y


def test_a_sine_whose_samples_pass_a_sample_limiter_is_held_under_minus_1_dbtp():
    # The classic case at +1.6 dBTP: its samples (1.2 x 0.7071 = 0.849) are under the -1 dBFS sample
    # ceiling (0.891), so a limiter that looks at samples only would let it through untouched.
    n = np.arange(FS)
    x = 1.2 * np.sin(np.pi / 2 * n + np.pi / 4)
    assert np.max(np.abs(x)) < CEILING and dbtp(true_peak(x)) > 1.5
    lim = Limiter(FS, 256)
    y = _through(lim, x, 256)
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    assert dbtp(reference_true_peak(y)) <= CEILING_DBTP
    assert np.max(np.abs(y)) <= CEILING
    assert lim.gain_reduction_db > 2.5  # it did act: 20 log10(1.2) + 1 dB of it at least


@settings(max_examples=40, deadline=None)
@given(freqs=st.lists(st.floats(40.0, 20000.0), min_size=1, max_size=5),
       levels_db=st.lists(st.floats(-30.0, 18.0), min_size=2, max_size=6),
       block=st.sampled_from([16, 64, 100, 256, 1024]), seed=st.integers(0, 2**16))
def test_bursts_of_tones_never_pass_minus_1_dbtp(freqs, levels_db, block, seed):
    # Sums of tones up to 20 kHz at 48 kHz, switched between levels from -30 dB to +18 dB re full
    # scale at random sample positions, in blocks of any size: the true peak (BS.1770-4 Annex 2,
    # and the 4x general-purpose resampler) and every sample stay under the ceiling.
    rng = np.random.default_rng(seed)
    n = np.arange(FS // 4)
    tone = sum(np.sin(2 * np.pi * f * n / FS + rng.uniform(0, 2 * np.pi)) for f in freqs) / len(freqs)
    edges = np.sort(rng.integers(0, n.size, len(levels_db) - 1))
    gain = 10 ** (np.array(levels_db)[np.searchsorted(edges, n, side="right")] / 20)
    lim = Limiter(FS, block)
    y = _through(lim, tone * gain, block)
    assert np.max(np.abs(y)) <= CEILING
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    assert dbtp(reference_true_peak(y)) <= CEILING_DBTP


def test_the_same_stream_in_any_block_size_gives_the_same_output():
    # Live (the host's period) and offline (rtvoice render's block) use the same code: the output
    # does not depend on how the stream is cut, up to the release's last millionth (documented).
    rng = np.random.default_rng(11)
    n = np.arange(FS // 2)
    x = (0.3 + 3.0 * (n > 6000) * np.exp(-(n - 6000).clip(0) / 4000)) * np.sin(2 * np.pi * 3000 * n / FS)
    x += 0.05 * rng.standard_normal(n.size)
    ref = _through(Limiter(FS, 256), x, 256)
    for block in (1, 37, 64, 2048):
        np.testing.assert_allclose(_through(Limiter(FS, block), x, block), ref, rtol=0, atol=1e-6)


@pytest.mark.parametrize("rate", [44100, 48000, 96000])
def test_the_latency_is_the_documented_look_ahead_and_a_quiet_signal_is_only_delayed(rate):
    # A quiet signal comes out bit for bit, exactly latency_frames later; the engine reports the
    # same delay (1.5 ms of look-ahead, rounded to frames).
    lim = Limiter(rate, 128)
    engine = Engine(Settings.defaults(), rate, 128)
    assert lim.latency_frames == engine.stats.latency_frames == round(1.5e-3 * rate)
    x = 0.05 * np.random.default_rng(rate).standard_normal(4096)  # peaks near -14 dBFS
    y = _through(lim, x, 128)
    d = lim.latency_frames
    assert np.array_equal(y[d:], x[:-d]) and not y[:d].any()


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf, 1e300])
def test_non_finite_input_never_reaches_the_output(bad):
    # The limiter's own guard (the engine's peak scan drops the bad voice before this): a block
    # holding NaN, inf or an overflow becomes silence, and the blocks after it are unharmed.
    n = np.arange(FS // 4)
    x = 2.0 * np.sin(2 * np.pi * 440 * n / FS)
    x[5000] = bad
    lim = Limiter(FS, 256)
    y = _through(lim, x, 256)
    assert np.all(np.isfinite(y)), nonfinite(y)
    assert np.max(np.abs(y)) <= CEILING
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    block_out = 5000 // 256 * 256 + lim.latency_frames
    assert not y[block_out : block_out + 256].any()  # that block is silent
    assert np.abs(y[block_out + 1024 :]).max() > 0.5  # and the sound goes on after it


# -- the engine, offline, measured on its audio ----------------------------------------------------

def render(settings: Settings, chord: list[tuple[int, int]], seconds: float, block: int = 256,
           rate: int = FS, at: int = 0, bypass: bool = False) -> tuple[np.ndarray, float]:
    """(audio, deepest gain reduction) of a chord of (note, velocity) struck at sample ``at`` of the
    third block, rendered block by block as `rtvoice render` does.

    ``bypass`` takes the limiter out (its gain stage does nothing): what comes out is the signal
    the limiter is handed, the reference for what it must leave alone. Otherwise every block is
    checked against the -1 dBFS sample ceiling and for non-finite samples as it comes.
    """
    engine = Engine(settings, rate, block)
    if bypass:  # a stand-in on purpose: the engine has no switch to run without its limiter
        engine.limiter.apply = lambda x, peak, peak_at=0: None
    out, deepest = [], 0.0
    for b in range(int(seconds * rate / block)):
        y = engine.render([(at, 0x90, note, vel) for note, vel in chord] if b == 2 else [])
        if not bypass:
            assert np.all(np.isfinite(y)) and np.max(np.abs(y)) <= CEILING, f"block {b}: {finite_peak(y, CEILING)}"
        deepest = max(deepest, engine.stats.gain_reduction_db)
        out.append(y.copy())
    return np.concatenate(out), deepest


def loud(gain_db: float = 12.0, **values) -> Settings:
    return Settings.defaults().with_values({"output.gain_db": gain_db, **values})


def test_six_strings_at_full_velocity_and_plus_12_db_stay_under_minus_1_dbtp():
    chord = [(n, 127) for n in SIX_STRINGS]
    unlimited, _ = render(loud(), chord, 1.0, bypass=True)
    assert dbtp(true_peak(unlimited)) > 10.0  # far over: the limiter has real work
    y, deepest_db = render(loud(), chord, 1.0)
    assert deepest_db > 10.0
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    assert dbtp(reference_true_peak(y)) <= CEILING_DBTP
    assert dbtp(true_peak(y)) > CEILING_DBTP - 0.5  # held at the ceiling, not far under it


BRIGHT = {"excitation.kind": "strike", "excitation.width": 0.0, "electronics.resonance_hz": 0.0}


@settings(max_examples=20, deadline=None)
@given(chord=st.lists(st.tuples(st.integers(28, 88), st.integers(40, 127)), min_size=1, max_size=6,
                      unique_by=lambda nv: nv[0]),
       gain_db=st.floats(0.0, 12.0), bright=st.booleans(), block=st.sampled_from([64, 128, 256]),
       rate=st.sampled_from([44100, 48000, 96000]), at=st.integers(0, 63))
def test_random_chords_stay_under_minus_1_dbtp(chord, gain_db, bright, block, rate, at):
    # Any chord, any gain up to the schema's +12 dB, the brightest sound (a hard strike with the
    # coil filter bypassed, whose energy reaches up to the 0.45 fs cut-off) or the default.
    y, _ = render(loud(gain_db, **(BRIGHT if bright else {})), chord, 0.4, block, rate, at)
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    assert dbtp(reference_true_peak(y)) <= CEILING_DBTP


def test_a_voice_gone_bad_never_reaches_the_output_and_the_ceiling_holds():
    # A voice's amplitude turned NaN in the middle of a limited chord (a stand-in for a numeric
    # fault, which cannot be caused on demand): the engine's peak scan finds it, drops the voice and
    # silences that block before the limiter's delay line; the rest plays on under the ceilings.
    engine = Engine(loud(), FS, 256)
    out = []
    for b in range(120):
        if b == 40:
            engine.pool.s[0, 0] = np.nan
        y = engine.render([(0, 0x90, n, 127) for n in SIX_STRINGS] if b == 2 else [])
        assert np.all(np.isfinite(y)) and np.max(np.abs(y)) <= CEILING, f"block {b}: {finite_peak(y, CEILING)}"
        out.append(y.copy())
    assert engine.stats.dropped_bad >= 1
    y = np.concatenate(out)
    assert dbtp(true_peak(y)) <= CEILING_DBTP
    assert np.abs(y[-256:]).max() > 0.1  # the other voices play on


@pytest.mark.parametrize(("gain_db", "chord", "measured"),
                         [(-6.0, [(45, 100)], False), (-3.0, [(n, 100) for n in SIX_STRINGS], True)])
def test_a_sound_under_the_ceiling_comes_out_bit_identical_only_later(gain_db, chord, measured):
    # One note at the default -6 dB (quiet: the limiter only delays it), and six strings at -3 dB:
    # loud enough that the limiter measures between samples, not enough to need any reduction.
    # Either comes out exactly as the limiter received it, latency_frames later.
    y, deepest_db = render(loud(gain_db), chord, 1.0)
    ref, _ = render(loud(gain_db), chord, 1.0, bypass=True)
    d = Engine(loud(gain_db), FS, 256).stats.latency_frames
    assert (np.max(np.abs(ref)) > Limiter(FS, 256).quiet_level) == measured
    assert deepest_db == 0.0
    assert not y[:d].any()
    assert np.array_equal(y[d:], ref[:-d])
