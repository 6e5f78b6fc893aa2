"""Properties that must hold for any parameters and any note stream (hypothesis)."""

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from support.describe import finite_peak, nonfinite
from support.sounds import open_strings

from rtvoice.engine.output import CEILING
from rtvoice.engine.renderer import Engine
from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS
from rtvoice.engine.settings import Settings, SettingsError


def param_value(param):
    if param.kind == "float":
        return st.floats(param.low, param.high, allow_nan=False)
    if param.kind == "int":
        return st.sampled_from(param.choices) if param.choices else st.integers(int(param.low), int(param.high))
    if param.kind == "choice":
        return st.sampled_from(param.choices)
    points = st.tuples(st.floats(0.01, 0.99), st.floats(-1, 1))
    return st.lists(points, max_size=6, unique_by=lambda p: round(p[0], 6))


SMALL = {"voices": st.integers(1, 12), "string.modes": st.integers(1, 128)}


@st.composite
def any_settings(draw):
    changes = {}
    for name, param in PARAMS.items():
        if draw(st.booleans()):
            changes[name] = draw(SMALL.get(name, param_value(param)))
    for i in range(draw(st.integers(1, 3))):
        for field, param in PICKUP_FIELDS.items():
            changes[f"pickup.{i}.{field}"] = draw(param_value(param))
    while True:
        try:
            return Settings.defaults().with_values(changes)
        except SettingsError as err:
            # Combinations the cross-checks forbid (t60_high above t60_low, a sub-0.01 H coil): drop that key.
            changes.pop(err.key, None)
            if err.key == "string.t60_high":
                changes.pop("string.t60_low", None)


midi_message = st.one_of(
    st.tuples(st.sampled_from([0x90, 0x80]), st.integers(0, 127), st.integers(0, 127)),
    st.tuples(st.just(0xB0), st.sampled_from([6, 38, 64, 100, 101, 120, 121, 123, 1, 74]), st.integers(0, 127)),
    st.tuples(st.just(0xE0), st.integers(0, 127), st.integers(0, 127)),
    st.tuples(st.just(0xD0), st.integers(0, 127), st.just(0)),
)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(s=any_settings(), block=st.sampled_from([32, 64, 128, 256]),
       stream=st.lists(st.tuples(st.integers(0, 40), st.integers(0, 255), midi_message), max_size=60))
def test_every_block_is_finite_and_under_the_ceiling(s, block, stream):
    engine = Engine(s, 48000, block)
    by_block: dict[int, list] = {}
    for blk, offset, (status, d1, d2) in stream:
        by_block.setdefault(blk, []).append((offset % block, status | (d1 % 16 if status == 0xD0 else 0), d1, d2))
    for i in range(48):
        events = sorted(by_block.get(i, []))
        y = engine.render(events)
        assert np.all(np.isfinite(y)), f"block {i}: {nonfinite(y)}"
        assert np.max(np.abs(y)) <= CEILING


@settings(max_examples=25, deadline=None)
@given(gain=st.floats(-6, 12), notes=st.lists(st.integers(20, 100), min_size=1, max_size=24))
def test_loud_chords_stay_under_the_ceiling(gain, notes):
    s = Settings.defaults().with_values({"output.gain_db": gain, "voices": 24})
    engine = Engine(s, 48000, 128)
    events = [(i % 128, 0x90, n, 127) for i, n in enumerate(notes)]
    for i in range(30):
        y = engine.render(events if i == 0 else ())
        assert np.max(np.abs(y)) <= CEILING and np.all(np.isfinite(y)), f"block {i}: {finite_peak(y, CEILING)}"


def pickup_lists():
    one = st.fixed_dictionaries({f: param_value(p) for f, p in PICKUP_FIELDS.items()})
    return st.lists(st.lists(one, min_size=1, max_size=4), min_size=1, max_size=6)


@settings(max_examples=60, deadline=None)
@given(pickup_lists(), st.integers(1, 200))
def test_cached_pickup_sums_equal_the_direct_formula_through_any_sequence_of_changes(sequence, modes):
    # The engine's cached sums must equal rtvoice.physics.pickup.spatial_sums, which writes out
    # sin(k pi x) sinc(k pi w / 2) per pickup (Paiva, Pakarinen & Valimaki 2012), after any changes.
    from rtvoice.engine.pickup_sums import PickupSums
    from rtvoice.physics.pickup import spatial_sums

    sums, k = PickupSums(modes), np.arange(1, modes + 1, dtype=float)
    for pickups in sequence:
        got = sums.update(pickups)
        for a, b in zip(got, spatial_sums(k, pickups), strict=True):
            np.testing.assert_allclose(a, b, rtol=0, atol=1e-12)


def test_no_subnormal_numbers_build_up_in_a_long_note():
    # High modes die long before their voice; their amplitudes and powers must not sink into
    # IEEE 754 subnormal numbers (below 2.2e-308 in double, 1.2e-38 in single precision), which
    # x86 arithmetic handles about a hundred times slower (common practice). Checked after every
    # block, for a low note with quickly dying high modes and a high note whose modes above the
    # cut-off decay fastest of all.
    # Notes 28 and 100 lie beyond the default six-string (MIDI 40..86): they play as open strings of
    # their own; the default instrument is checked with its own lowest and highest notes.
    s = Settings.defaults().with_values({"string.t60_low": 30.0, "string.t60_high": 0.08, "string.modes": 128})
    for sound, (low, high), block in ((open_strings(s), (28, 100), 128), (open_strings(s), (28, 100), 2048),
                                      (s, (40, 86), 128), (s, (40, 86), 2048)):
        engine = Engine(sound, 48000, block)
        engine.render([(0, 0x90, low, 127), (0, 0x90, high, 127), (0, 0xB0, 64, 127)])
        pool = engine.pool
        for _ in range(int(6 * 48000 / block)):
            engine.render()
            n = pool.n_active
            for name, x, tiny in (("s", pool.s[:n], np.finfo(float).tiny),
                                  ("p_block", pool.p_block[:n], np.finfo(float).tiny),
                                  ("A", pool.A_rows[:n], np.finfo(np.float32).tiny),
                                  ("B", pool.B_t[:, :n], np.finfo(np.float32).tiny)):
                x = np.abs(x.view(x.real.dtype))
                assert not np.any((x > 0) & (x < tiny)), (low, block, name)
        assert pool.n_active >= 1  # the low note still rings
