"""The output filter folded into the modes, against scipy.signal.lfilter run on the samples.

The engine never filters a block: it multiplies each mode by the filter's steady
gain H(p) and adds the filter's free response after every change
(rtvoice/engine/modal_filter.py). The reference here is the same engine with an
identity output filter, its samples then filtered by scipy.signal.lfilter with the
real engine's (b, a): the two must agree through note-ons on their samples,
re-plucks, releases, the sustain pedal, all-sound-off fades, steals, pitch bends and
retiring voices.
"""

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from rtvoice.engine.modal_filter import ModalFilter
from rtvoice.engine.renderer import OUTPUT_SCALE, Engine
from rtvoice.engine.settings import Settings
from rtvoice.physics.electronics import lowpass_biquad

FS = 48000.0
# Both sides sum their modes in single-precision block products, whose rounding error is bounded
# by gamma_n * sum|terms| with gamma_n = n u / (1 - n u), u = 2**-24 (Higham, Accuracy and Stability of
# Numerical Algorithms, 2nd ed., 2002, eq. 3.4) and depends on the BLAS kernel's order of summation:
# up to 1.4e-6 of the peak was seen with AVX-512 kernels (0.9e-6 with AVX2). A missing free response
# (the DC blocker's tail after each pluck, the coil's ring) is off by 1e-3 of the peak or more.
TOLERANCE = 4e-6  # of the peak: -108 dB


class Unfiltered(Engine):
    """The engine with the identity output filter (the output scale only): the reference's raw samples."""

    def output_filter(self):
        return np.array([OUTPUT_SCALE]), np.array([1.0])


def quiet(**values) -> Settings:
    """Gain 0 dB and levels far below the limiter's ceiling, so the output stage is linear."""
    base = {"output.gain_db": 0.0, "voices": 3, "electronics.resonance_hz": 2500.0, "electronics.q": 5.0,
            "string.t60_low": 1.5, "string.t60_high": 0.4}
    base.update(values)
    return Settings.defaults().with_values(base)


def render_both(settings: Settings, block: int, schedule: dict[int, list]) -> tuple[np.ndarray, np.ndarray]:
    """(engine output, lfilter(b, a) of the reference's raw samples) for events keyed by block index."""
    engine, ref = Engine(settings, FS, block), Unfiltered(settings, FS, block)
    blocks = max(schedule) + 1 + int(0.6 * FS / block)
    got, raw = [], []
    for i in range(blocks):
        events = sorted(schedule.get(i, []))
        got.append(engine.render(events).copy())
        raw.append(ref.render(events).copy())
    b, a = engine.output_filter()
    assert engine.limiter.clipped == 0 and ref.limiter.clipped == 0
    return np.concatenate(got), scipy.signal.lfilter(b, a, np.concatenate(raw) / OUTPUT_SCALE)


def scene(block: int) -> dict[int, list]:
    """Plucks on odd samples, a re-pluck, releases, the pedal, a steal (3 voices, 5 notes), bends, all sound off."""
    at = lambda t_s: divmod(round(t_s * FS), block)  # noqa: E731 - (block index, offset)
    events: dict[int, list] = {}

    def add(t_s, status, d1, d2):
        i, off = at(t_s)
        events.setdefault(i, []).append((off, status, d1, d2))

    add(0.0101, 0x90, 45, 90)
    add(0.0102, 0x90, 52, 70)
    add(0.0503, 0x90, 45, 100)  # re-pluck: the old vibration fades
    add(0.0807, 0xB0, 64, 127)  # pedal down
    add(0.0911, 0x80, 52, 0)  # held by the pedal
    add(0.1203, 0x90, 57, 80)
    add(0.1204, 0x90, 64, 60)  # a steal
    add(0.1700, 0xE0, 0, 90)  # bend up
    add(0.2301, 0xB0, 64, 0)  # pedal up: releases
    add(0.2900, 0xE0, 0, 64)  # bend back
    add(0.3000, 0x90, 40, 110)
    add(0.4100, 0xB0, 120, 0)  # all sound off: fades
    add(0.4500, 0x90, 47, 50)
    return events


@pytest.mark.parametrize("block", [64, 100, 256])
def test_folded_output_filter_equals_lfilter_on_the_samples(block):
    got, expected = render_both(quiet(), block, scene(block))
    peak = np.abs(expected).max()
    assert peak > 0.05
    np.testing.assert_allclose(got, expected, rtol=0, atol=TOLERANCE * peak)


@pytest.mark.parametrize("resonance_hz", [0.0, 900.0, 12000.0])
def test_folded_output_filter_holds_for_bypassed_dark_and_bright_electronics(resonance_hz):
    got, expected = render_both(quiet(**{"electronics.resonance_hz": resonance_hz, "electronics.q": 1.5}),
                                128, scene(128))
    np.testing.assert_allclose(got, expected, rtol=0, atol=TOLERANCE * np.abs(expected).max())


@settings(max_examples=12, deadline=None)
@given(block=st.sampled_from([32, 128, 200]),
       events=st.lists(st.tuples(st.integers(0, 40), st.integers(0, 255), st.sampled_from([0x90, 0x80, 0xB0, 0xE0]),
                                 st.integers(36, 80), st.integers(0, 127)), min_size=1, max_size=14))
def test_folded_output_filter_equals_lfilter_for_random_events(block, events):
    schedule: dict[int, list] = {}
    for i, off, status, d1, d2 in events:
        if status == 0xB0:
            d1 = (64, 120, 123)[d1 % 3]
        schedule.setdefault(i, []).append((off % block, status, d1, d2 if status != 0x90 else max(d2, 1) // 2))
    got, expected = render_both(quiet(), block, schedule)
    scale = max(np.abs(expected).max(), 1e-3)
    np.testing.assert_allclose(got, expected, rtol=0, atol=TOLERANCE * scale)


def test_steady_gain_is_the_filters_response_at_p():
    # H(p) read off scipy.signal.lfilter itself: a long exponential input c p^n leaves the output
    # H(p) c p^n once the start has died away, for damped and undamped p alike.
    b, a = lowpass_biquad(3000.0, 4.0, FS)
    b, a = np.convolve(b, [1.0, -1.0]), np.convolve(a, [1.0, -0.99])  # a pole whose start dies in time
    filt = ModalFilter(b, a, 64)
    n = np.arange(6000)
    for f_hz, sigma in ((110.0, 0.0), (1234.0, 3.0), (2950.0, 40.0), (9000.0, 0.0)):
        p = np.exp((-sigma + 2j * np.pi * f_hz) / FS)
        u = p**n
        y = scipy.signal.lfilter(b, a, u)
        assert filt.gain(np.array([p]))[0] == pytest.approx(y[-1] / u[-1], rel=1e-9)


def test_new_coefficients_carry_the_free_response_on_without_a_step():
    b, a = lowpass_biquad(2000.0, 3.0, FS)
    old = ModalFilter(np.convolve(b, [1.0, -1.0]), np.convolve(a, [1.0, -0.999]), 64)
    old.jump(np.array([0.3, -0.2, 0.1]))
    tail_old = np.zeros(64)
    ModalFilter.render_free(_copy(old), tail_old)
    b, a = lowpass_biquad(2200.0, 3.0, FS)
    new = ModalFilter(np.convolve(b, [1.0, -1.0]), np.convolve(a, [1.0, -0.999]), 64)
    new.take_free_response(old)
    tail_new = np.zeros(64)
    new.render_free(tail_new)
    np.testing.assert_allclose(tail_new[:3], tail_old[:3], rtol=1e-9, atol=1e-12)


def _copy(f: ModalFilter) -> ModalFilter:
    g = ModalFilter(f.b, f.a, f.block)
    g.jump(f.x.copy())
    return g


def test_an_electronics_change_while_a_note_rings_does_not_click():
    # A click is a spike in the second difference; a change of tone is not. Against the signal's own
    # second difference in the blocks before and after (common practice, no source).
    settings_ = Settings.defaults().with_values({"electronics.resonance_hz": 6000.0, "electronics.q": 6.0})
    engine = Engine(settings_, FS, 128)
    fresh = Engine(settings_.with_values({"electronics.resonance_hz": 0.0}), FS, 128)  # bypassed from the start
    out, out_fresh = [], []
    for i in range(400):
        events = [(10, 0x90, 40, 110)] if i == 2 else []
        out.append(engine.render(events).copy())
        out_fresh.append(fresh.render(events).copy())
        if i == 100:
            engine.set_value("electronics.resonance_hz", 1000.0)
        if i == 130:
            engine.set_value("electronics.resonance_hz", 0.0)
    # Once the changes' free responses have died away the note sounds as if the last setting had
    # always been there (the steady response is the filter's).
    late = slice(300 * 128, None)
    got, want = np.concatenate(out)[late], np.concatenate(out_fresh)[late]
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-5 * np.abs(want).max())
    d2 = np.abs(np.diff(np.concatenate(out), 2))
    for change in (101, 131):
        around = d2[(change - 6) * 128:(change + 8) * 128]
        at = d2[change * 128 - 4: change * 128 + 16].max()
        before, after = d2[(change - 6) * 128:(change - 1) * 128].max(), d2[(change + 2) * 128:(change + 8) * 128].max()
        assert at <= 1.2 * max(before, after), (change, at, before, after, around.max())


@settings(max_examples=30, deadline=None)
@given(count=st.integers(1, 12), block=st.sampled_from([1, 7, 64, 128]), seed=st.integers(0, 2**16))
def test_many_jumps_at_once_sum_as_one_at_a_time(count, block, seed):
    # kicks() (one convolution per state component) against kick() called per jump: the same sum.
    rng = np.random.default_rng(seed)
    b, a = lowpass_biquad(float(rng.uniform(500, 9000)), float(rng.uniform(0.6, 8)), FS)
    b, a = np.convolve(b, [1.0, -1.0]), np.convolve(a, [1.0, -0.9995])
    one, many = ModalFilter(b, a, block), ModalFilter(b, a, block)
    dx, at = rng.standard_normal((count, 3)), rng.integers(0, block, count)
    out_one, out_many = np.zeros(block), np.zeros(block)
    for i in range(count):
        one.kick(dx[i], int(at[i]), out_one)
    many.kicks(dx, at, out_many)
    np.testing.assert_allclose(out_many, out_one, rtol=1e-9, atol=1e-12)
    next_one, next_many = np.zeros(block), np.zeros(block)
    one.render_free(next_one)
    many.render_free(next_many)
    np.testing.assert_allclose(next_many, next_one, rtol=1e-9, atol=1e-12)
