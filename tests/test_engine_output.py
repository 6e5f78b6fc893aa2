"""The output stage's block filter against scipy.signal.lfilter, the reference it must equal."""

import numpy as np
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from rtvoice.engine.output import BlockFilter, Limiter, dc_blocker
from rtvoice.physics.electronics import lowpass_biquad

FS = 48000.0


def coil_and_dc(f_r: float, q: float) -> tuple[np.ndarray, np.ndarray]:
    dc = dc_blocker(FS)
    b, a = lowpass_biquad(f_r, q, FS)
    return np.convolve(b, dc.b), np.convolve(a, dc.a)


@settings(max_examples=30, deadline=None)
@given(block=st.sampled_from([16, 64, 100, 128, 256]), f_r=st.floats(300, 15000), q=st.floats(0.5, 8),
       blocks=st.integers(1, 40), seed=st.integers(0, 2**16))
def test_block_filter_equals_one_lfilter_run(block, f_r, q, blocks, seed):
    # Block by block with the state carried, the filter must give what one scipy.signal.lfilter run gives.
    x = np.random.default_rng(seed).standard_normal(block * blocks)
    b, a = coil_and_dc(f_r, q)
    f = BlockFilter(b, a)
    got = x.copy()
    for at in range(0, x.size, block):
        f.process(got[at:at + block])
    expected = scipy.signal.lfilter(b, a, x)
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-9 * np.abs(expected).max())


def test_limiter_measure_reports_nan_and_inf_as_non_finite_peaks():
    lim = Limiter(FS, 64)
    for bad in (np.nan, np.inf, -np.inf):
        x = np.zeros(64)
        x[17] = bad
        peak, _ = lim.measure(x)
        assert not np.isfinite(peak)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(0.0, 8.0), min_size=2, max_size=12), st.integers(0, 2**16))
def test_limiter_holds_the_ceiling_and_reports_its_deepest_reduction(levels, seed):
    # The ceiling holds on every sample, and the reported gain reduction is the deepest the
    # block applied: measured here as output / input where the input is not tiny. The output is
    # the input delayed by the limiter's look-ahead (its documented latency_frames).
    lim = Limiter(FS, 64)
    rng = np.random.default_rng(seed)
    line = np.zeros(lim.latency_frames)  # input not yet out, oldest first
    for level in levels:
        x = level * rng.standard_normal(64)
        line = np.concatenate([line, x])
        source, line = line[:64], line[64:]  # the input this block's output comes from
        y = x.copy()
        lim.process(y)
        assert np.max(np.abs(y)) <= 0.891251 + 1e-12
        big = np.abs(source) > 1e-3
        if big.any() and lim.clipped == 0:
            deepest_db = -20 * np.log10(np.min(y[big] / source[big]))
            assert lim.gain_reduction_db >= deepest_db - 1e-6
