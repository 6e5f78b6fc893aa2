"""The output ceiling on every rendered block, whatever the sound and the MIDI (hypothesis).

The customer's listening-safety rule: no sample may exceed -1 dBFS (0.891251 linear; dBFS
relative to digital full scale, AES17-2015 section 3.12.1) and none may be NaN or inf (which
a DAC would turn into full scale). tests/test_engine_properties.py checks every block for
random settings and up to 60 random messages over 48 blocks; this module adds what it does not
reach: floods of note-ons far beyond the voice count in one block, extreme gains (output and all
four pickups at the schema's +12 dB, same polarity, full velocity), sustain holding the flood,
live parameter and preset changes and pool rebuilds (voices, modes) between blocks, other
sample rates, and long enough runs for the limiter to release and be hit again.
"""

from __future__ import annotations

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from rtvoice.engine.output import CEILING
from rtvoice.engine.presets import list_presets, load_preset
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings, SettingsError

LOUD_PICKUP = {"position": 0.5, "width": 0.0, "sensing": "velocity", "level_db": 12.0, "polarity": 1}


#: Where the four loud pickups sit, by rule. Open strings: up to the middle of each note's string, where
#: the fundamental is loudest. The default fretted neck: up to 0.27 of the scale (175 mm), short of its
#: 22nd fret at 181.8 mm (12-TET fret rule, common practice), where a pickup may not sit.
LOUD_PLACES = {"open": (0.05, 0.1, 0.2, 0.5), "hand": (0.05, 0.1, 0.2, 0.27)}


def loudest_settings(voices: int = 32, modes: int = 96, sensing: str = "velocity", rule: str = "hand") -> Settings:
    """Everything turned up: +12 dB out, four +12 dB pickups in phase, a hard strike; ``rule`` is
    ``instrument.assign`` ("hand", the default six-string, or "open": every note an open string)."""
    s = Settings.defaults().with_values({"voices": voices, "string.modes": modes, "output.gain_db": 12.0,
                                         "excitation.kind": "strike", "excitation.width": 0.0,
                                         "electronics.resonance_hz": 0.0, "instrument.assign": rule})
    s = s.with_pickup_count(4)
    changes = {f"pickup.{i}.{k}": v for i in range(4) for k, v in {**LOUD_PICKUP, "sensing": sensing}.items()}
    changes.update({f"pickup.{i}.position": p for i, p in enumerate(LOUD_PLACES[rule])})
    return s.with_values(changes)


def assert_safe(y: np.ndarray, where: str) -> None:
    assert np.all(np.isfinite(y)), f"non-finite sample at {where}"
    peak = float(np.max(np.abs(y)))
    assert peak <= CEILING, f"peak {peak!r} above the ceiling at {where}"


def test_a_full_velocity_flood_at_the_loudest_settings_stays_under_the_ceiling():
    # 4 x the voice count of note-ons on sample 0 of one block, pedal down, every gain at its top:
    # the sum before the limiter is far above full scale, so the limiter and its clip must hold it.
    # On open strings (a pool of 32 voices for 128 notes: voices are stolen) and on the default six-string
    # (one note a string; the flood's notes below E2 (40) or above D6 (86) are not played: standard
    # tuning with 22 frets, common practice).
    for sensing, rule in (("velocity", "open"), ("displacement", "open"), ("velocity", "hand"),
                          ("displacement", "hand")):
        engine = Engine(loudest_settings(sensing=sensing, rule=rule), 48000, 256)
        flood = [(0, 0xB0, 64, 127)] + [(0, 0x90 | (n % 16), 24 + n % 80, 127) for n in range(128)]
        worst_reduction = 0.0
        for b in range(200):
            y = engine.render(flood if b in (0, 60, 61, 150) else ())
            assert_safe(y, f"block {b}, {sensing}, {rule}")
            worst_reduction = max(worst_reduction, engine.stats.gain_reduction_db)
            assert engine.stats.peak <= CEILING
        assert worst_reduction > 6.0  # the limiter did real work: the test reached the ceiling
        if rule == "open":
            assert engine.stats.stolen > 0
        else:
            assert engine.stats.unplayable > 0


def test_gain_jumps_on_a_ringing_flood_stay_under_the_ceiling():
    # From -60 dB to +12 dB in one step while 32 full notes ring: the smoothing ramps the gain,
    # the limiter holds what the ramp lets through. Open strings ring all 32; the default six-string
    # rings the last note each string could play.
    for rule in ("open", "hand"):
        s = loudest_settings(rule=rule).with_values({"output.gain_db": -60.0})
        engine = Engine(s, 48000, 128)
        engine.render([(i, 0x90, 30 + i, 127) for i in range(32)])
        for b in range(300):
            if b % 50 == 0:
                engine.set_value("output.gain_db", 12.0 if (b // 50) % 2 == 0 else -60.0)
            assert_safe(engine.render(), f"block {b}, {rule}")


def _presets() -> list[Settings]:
    return [load_preset(str(p.path)) for p in list_presets() if p.origin == "factory"]


PRESETS = _presets()

live_change = st.one_of(
    st.tuples(st.just("output.gain_db"), st.floats(-60.0, 12.0)),
    st.tuples(st.sampled_from(["pickup.0.position"]), st.floats(0.005, 0.995)),
    st.tuples(st.just("pickup.0.level_db"), st.floats(-60.0, 12.0)),
    st.tuples(st.just("pickup.0.width"), st.floats(0.0, 0.5)),
    st.tuples(st.just("electronics.resonance_hz"), st.sampled_from([0.0, 200.0, 1000.0, 19000.0, 20000.0])),
    st.tuples(st.just("electronics.q"), st.floats(0.3, 30.0)),
    st.tuples(st.just("preset"), st.integers(0, len(PRESETS) - 1)),
    st.tuples(st.just("rebuild"), st.tuples(st.integers(1, 24), st.integers(1, 128))),  # voices, modes
)

message = st.one_of(
    st.tuples(st.sampled_from([0x90, 0x80]), st.integers(0, 127), st.integers(0, 127)),
    st.tuples(st.just(0xB0), st.sampled_from([64, 120, 121, 123, 1, 33, 7, 101, 100, 6]), st.integers(0, 127)),
    st.tuples(st.just(0xE0), st.integers(0, 127), st.integers(0, 127)),
)


@st.composite
def block_plan(draw, block: int, voices: int):
    """Events of one block: usually a few messages, sometimes a flood of note-ons."""
    kind = draw(st.sampled_from(["quiet", "some", "some", "flood"]))
    events = []
    if kind == "some":
        for status, d1, d2 in draw(st.lists(message, max_size=6)):
            events.append((draw(st.integers(0, block - 1)), status | draw(st.integers(0, 15)), d1, d2))
    elif kind == "flood":
        count = draw(st.integers(voices + 1, 4 * voices + 8))
        velocity = draw(st.integers(1, 127))
        start = draw(st.integers(0, 127))
        events = [(draw(st.integers(0, block - 1)), 0x90 | (i % 16), (start + 7 * i) % 128, velocity)
                  for i in range(count)]
    return sorted(events, key=lambda e: e[0])


@st.composite
def scenarios(draw):
    block = draw(st.sampled_from([32, 64, 128, 256, 512]))
    voices = draw(st.integers(1, 24))
    base = PRESETS[draw(st.integers(0, len(PRESETS) - 1))]
    gain = draw(st.one_of(st.just(12.0), st.floats(-60.0, 12.0)))
    s = base.with_values({"voices": voices, "string.modes": draw(st.integers(1, 128)), "output.gain_db": gain})
    n_blocks = draw(st.integers(20, 90))
    plan = [draw(block_plan(block, voices)) for _ in range(n_blocks)]
    changes = draw(st.lists(st.tuples(st.integers(0, n_blocks - 1), live_change), max_size=8))
    rate = draw(st.sampled_from([44100, 48000, 96000]))
    return s, rate, block, plan, dict(changes)


@settings(max_examples=20, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])
@given(scenarios())
def test_every_block_is_finite_and_under_the_ceiling_with_floods_and_live_changes(scenario):
    s, rate, block, plan, changes = scenario
    engine = Engine(s, rate, block)
    for b, events in enumerate(plan):
        assert_safe(engine.render(events), f"block {b}")
        if b in changes:
            name, value = changes[b]
            if name == "rebuild":  # a structural change: the pool fades and is rebuilt
                engine.apply_settings(engine.settings.with_values({"voices": value[0], "string.modes": value[1]}))
            elif name == "preset":
                keep = {"voices": engine.settings.get("voices"), "string.modes": engine.settings.get("string.modes")}
                engine.apply_settings(PRESETS[value].with_values(keep))
            else:
                try:
                    engine.set_value(name, value)
                except SettingsError:
                    pass  # a value the schema refuses never reaches the engine
    for b in range(40):  # the tail: releases, limiter recovery
        assert_safe(engine.render(), f"tail block {b}")
