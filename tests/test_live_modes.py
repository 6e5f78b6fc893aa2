"""The block product over the live modes only (rtvoice.engine.live_modes) loses nothing measurable.

Reference: the modal sum itself, y[n] = Re(sum over every mode m of g_m s_m p_m^n) (the
sine-series solution of the string, summed mode by mode; common practice), worked out here in
double precision over all modes of all slots, including the ones the packing leaves out. The
packed product is single precision: it must match to 2e-6 of sum |g s| (the largest value the
sum can take), about 32 float32 unit roundoffs (u = 6e-8): Higham, "Accuracy and Stability of
Numerical Algorithms", 2nd ed. 2002, eq. 3.4, bounds a dot product's error by gamma_n sum |x y|;
rounding errors of random sign grow as sqrt(n) u in practice (ibid., section 3.6), and
sqrt(2 x 4096) = 90.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rtvoice.bench.scenes import chord_events, feature_settings
from rtvoice.engine import live_modes
from rtvoice.engine.live_modes import LIVE_MODE, LiveProduct, WeightSet
from rtvoice.engine.renderer import Engine

FS = 48000


def modal_sum(pool, count: int) -> np.ndarray:
    """Re(sum_m gf s p^n), n = 0..count-1, over every mode of every active slot, in double precision."""
    n = pool.n_active
    d = (pool.gf[:n] * pool.s[:n] * pool.audible[:n]).reshape(-1)  # a mode not heard has zero tables
    p = pool.p[:n].reshape(-1)
    return np.real(d @ (p[:, None] ** np.arange(count)[None, :]))


def tolerance(pool) -> float:
    n = pool.n_active
    return 2e-6 * float(np.abs(pool.gf[:n] * pool.s[:n]).sum())


def held_chord(voices: int, modes: int, block: int, seconds: float) -> Engine:
    engine = Engine(feature_settings(voices, modes), FS, block)
    engine.render(chord_events(voices))
    for _ in range(int(seconds * FS / block)):
        engine.render()
    return engine


@pytest.mark.parametrize("seconds", [0.0, 0.3, 1.5])
def test_packed_product_is_the_modal_sum_over_every_mode(seconds):
    engine = held_chord(32, 128, 128, seconds)
    pool = engine.pool
    live = LiveProduct(pool)
    live.pack(pool.n_active)
    live.form(WeightSet.NOW, pool.gf)
    live.product(False)
    want = modal_sum(pool, 128)
    np.testing.assert_allclose(live.samples[0], want, rtol=0, atol=tolerance(pool))
    # and it did leave modes out: fewer columns than modes (a second on, under half)
    assert live.columns < pool.n_active * pool.modes
    if seconds >= 1.5:
        assert live.columns < 0.5 * pool.n_active * pool.modes


def test_a_prefix_too_short_is_caught_by_the_modal_sum():
    # The check above can fail: cut each slot's prefix to half and the block is off.
    engine = held_chord(8, 64, 128, 0.2)
    pool = engine.pool
    live = LiveProduct(pool)
    k = live.live_prefixes(pool.n_active) // 2
    live.pack(pool.n_active, k)
    live.form(WeightSet.NOW, pool.gf)
    live.product(False)
    want = modal_sum(pool, 128)
    assert np.abs(live.samples[0] - want).max() > 100 * tolerance(pool)


def test_engine_output_matches_the_product_over_every_nonzero_mode(monkeypatch):
    """Strums, re-plucks, a swung pickup and bends: the engine that leaves modes out and one that
    keeps every nonzero mode (LIVE_MODE = 0) play the same to 1e-6 of the peak."""
    def play() -> np.ndarray:
        engine = Engine(feature_settings(16, 96), FS, 128)
        chord = chord_events(16)
        offs = [(0, 0x80 | (c[1] & 15), c[2], 0) for c in chord]
        out = []
        for i in range(int(3.0 * FS / 128)):
            events = []
            if i % 200 == 0:
                events = [(17, *c[1:]) for c in offs + chord]
            if i % 37 == 11:
                events.append((40, 0xE0, 0, (i * 13) % 128))
            if i % 9 == 0:
                engine.set_value("pickup.0.position", 0.1 + 0.01 * (i % 7))
            out.append(engine.render(events).copy())
        return np.concatenate(out)

    packed = play()
    monkeypatch.setattr(live_modes, "LIVE_MODE", 0.0)
    dense = play()
    assert np.abs(dense).max() > 0.05
    np.testing.assert_allclose(packed, dense, rtol=0, atol=1e-6 * np.abs(dense).max())


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(block=st.sampled_from([32, 128, 256]), modes=st.integers(1, 64),
       stream=st.lists(st.tuples(st.integers(0, 30), st.integers(0, 255),
                                 st.sampled_from([0x90, 0x80, 0xE0]), st.integers(20, 110), st.integers(0, 127)),
                       max_size=40))
def test_every_heard_mode_above_the_threshold_is_in_the_product(block, modes, stream):
    engine = Engine(feature_settings(6, modes), FS, block)
    by_block: dict[int, list] = {}
    for blk, offset, status, d1, d2 in stream:
        by_block.setdefault(blk, []).append((offset % block, status, d1, d2))
    for blk in range(32):
        engine.render(sorted(by_block.get(blk, [])))
        pool, live = engine.pool, engine.voice_renderer.live  # white box: the packing the block used
        n = pool.n_active
        if not n or not live.valid:
            continue
        heard = (np.abs(pool.s[:n]) >= LIVE_MODE) & (pool.audible[:n] > 0)
        beyond = np.arange(pool.modes)[None, :] >= live.live[:n, None]
        assert not np.any(heard & beyond), f"block {blk}: a live mode outside its slot's prefix"


def test_every_quiet_block_is_the_modal_sum_of_the_state_through_retires_and_repacks():
    """Re-plucked chords leave faded voices that retire (the pool moves voices between slots)
    while others ring on: every block without events of its own is the modal sum over every mode
    of the state it started from (a short fade and release make voices retire within the run)."""
    s = feature_settings(12, 64).with_values({"string.release": 0.05})
    engine = Engine(s, FS, 128)
    chord = chord_events(12)
    rng = np.random.default_rng(7)
    checked = retired = 0
    for i in range(int(2.5 * FS / 128)):
        events = []
        if i % 60 == 0:  # re-pluck half the chord, release a few others
            pick = rng.choice(12, 6, replace=False)
            events = [(0, 0x80 | (chord[j][1] & 15), chord[j][2], 0) for j in pick] + [chord[j] for j in pick[:3]]
        pool = engine.pool
        n = pool.n_active
        before = (pool.gf[:n] * pool.s[:n] * pool.audible[:n]).reshape(-1), pool.p[:n].reshape(-1).copy()
        tol = 2e-6 * float(np.abs(before[0]).sum())
        engine.render(events)
        retired += max(0, n - engine.pool.n_active)
        if events or not engine.voice_renderer.live.valid:  # (no pickup moves here: no ramp)
            continue
        want = np.real(before[0] @ (before[1][:, None] ** np.arange(128)[None, :]))
        np.testing.assert_allclose(engine.voice_renderer.live.samples[0], want, rtol=0, atol=tol, err_msg=f"block {i}")
        checked += 1
    assert retired >= 6 and checked > 300


def test_blocks_after_single_replucks_are_the_modal_sum_through_holes_and_ramps():
    """Re-plucks one note at a time change a slot's tables without a new packing (its columns are
    rewritten, or left as a hole with new columns after the last); a pickup moving meanwhile forms
    both weight sets over every packed column, holes included, and with three voices one stale slot
    already forms every coefficient afresh. Every block without events of its own must still be the
    modal sum (double precision, every mode) of the state it started from, for the weights before
    the block (set 0) and the ramp's target (set 1)."""
    engine = Engine(feature_settings(3, 128), FS, 128)
    chord = chord_events(3)
    engine.render(chord)
    rng = np.random.default_rng(11)
    checked = with_holes = ramped = 0
    next_pluck = 1
    for i in range(1, int(3.0 * FS / 128)):
        events = []
        if i == next_pluck:  # one note re-plucked, sooner or later than the 40-ms sweep compacts
            c = chord[int(rng.integers(3))]
            events = [(0, 0x80 | (c[1] & 15), c[2], 0), c]
            next_pluck += int(rng.integers(3, 60))
        if i % 4 == 0:
            engine.set_value("pickup.0.position", 0.1 + 0.02 * ((i // 4) % 5))
        pool = engine.pool
        n = pool.n_active
        s0 = (pool.s[:n] * pool.audible[:n]).copy()
        g0, p = pool.gf[:n].copy(), pool.p[:n].reshape(-1).copy()
        out = engine.render(events)
        live = engine.voice_renderer.live
        if events or not live.valid or engine.pool.n_active != n or not np.any(out):
            continue
        powers = p[:, None] ** np.arange(128)[None, :]
        ramp = not np.array_equal(pool.gf[:n], g0)  # the ramp's target weights, taken at the block's end
        sets = [g0] + ([pool.gf[:n]] if ramp else [])
        for k, g in enumerate(sets):
            d = (g * s0).reshape(-1)
            np.testing.assert_allclose(live.samples[k], np.real(d @ powers), rtol=0,
                                       atol=2e-6 * float(np.abs(d).sum()), err_msg=f"block {i}, set {k}")
        checked += 1
        with_holes += live.holes > 0
        ramped += len(sets) == 2
    assert checked > 200 and with_holes > 20 and ramped > 50
