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
@given(block=st.sampled_from([16, 64, 100, 128, 256]),
       filters=st.lists(st.tuples(st.floats(300, 15000), st.floats(0.5, 8)), min_size=1, max_size=4),
       hold_blocks=st.integers(1, 20), gain=st.floats(0.1, 2.0), seed=st.integers(0, 2**16))
def test_block_filter_equals_lfilter_through_coefficient_changes(block, filters, hold_blocks, gain, seed):
    # Block by block with the state carried and the coefficients switched between blocks, the
    # filter must give what one scipy.signal.lfilter run with the same switches gives.
    x = np.random.default_rng(seed).standard_normal(block * hold_blocks * len(filters) + block * 12)
    f = BlockFilter(*coil_and_dc(*filters[0]))
    got = x.copy()
    expected = np.empty_like(x)
    zi = np.zeros(3)
    at = 0
    schedule = [filters[min(i // hold_blocks, len(filters) - 1)] for i in range(x.size // block)]
    for i, coeffs in enumerate(schedule):
        b, a = coil_and_dc(*coeffs)
        if i and coeffs != schedule[i - 1]:
            f.set_coefficients(b, a)
        seg = slice(at, at + block)
        f.process(got[seg], gain)
        expected[seg], zi = scipy.signal.lfilter(b, a, x[seg], zi=zi)
        at += block
    np.testing.assert_allclose(got[:at], gain * expected[:at], rtol=0, atol=1e-9 * np.abs(expected).max())


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
    # block applied: measured here as output / input where the input is not tiny.
    lim = Limiter(FS, 64)
    rng = np.random.default_rng(seed)
    for level in levels:
        x = level * rng.standard_normal(64)
        y = x.copy()
        lim.process(y)
        assert np.max(np.abs(y)) <= 0.891251 + 1e-12
        big = np.abs(x) > 1e-3
        if big.any() and lim.clipped == 0:
            deepest_db = -20 * np.log10(np.min(y[big] / x[big]))
            assert lim.gain_reduction_db >= deepest_db - 1e-6
