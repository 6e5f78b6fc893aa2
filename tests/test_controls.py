"""Controller mapping: MIDI controller semantics, the default map, learning, presets, smoothing.

Sources: MIDI 1.0 Detailed Specification (MMA), "Control Change": 14-bit controllers pair
MSB CC 0-31 with LSB CC 32-63, value = MSB * 128 + LSB out of 16383; CC1 modulation wheel,
CC7 channel volume, CC16-19 general purpose 1-4, CC71/72/74 sound controllers 2/3/5
(harmonic content, release time, brightness; MMA RP-021) (from memory). MPE: MIDI Polyphonic
Expression 1.0, MMA/AMEI 2018: CC74 and channel pressure on member channels are per note.
"""

from __future__ import annotations

import numpy as np
import pytest
import tomli_w
from hypothesis import given
from hypothesis import strategies as st
from support.sounds import open_strings

from rtvoice.engine import sounding_places
from rtvoice.engine.controls import (
    ControlMap,
    check_entries,
    default_entries,
    scale,
)
from rtvoice.engine.events import Error
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings, SettingsError
from rtvoice.physics.pickup import aperture_weights


def _entry_for(cc: int, entries=None) -> dict:
    return next(e for e in (entries or default_entries()) if e.get("cc") == cc)


# -- MIDI controller semantics -----------------------------------------------------------------

@given(st.integers(0, 127), st.integers(0, 127))
def test_fourteen_bit_pair_value_is_msb_times_128_plus_lsb(msb, lsb):
    """MIDI 1.0: a 14-bit controller's value is MSB * 128 + LSB (LSB on CC + 32)."""
    cmap = ControlMap([{"target": "pickup.0.position", "cc": 1, "bits": 14, "low": 0.1, "high": 0.9}])
    cmap.control_change(0, 1, msb)
    (name, value), = cmap.control_change(0, 33, lsb)
    assert name == "pickup.0.position"
    assert value == pytest.approx(0.1 + 0.8 * (msb * 128 + lsb) / 16383, abs=1e-12)


def test_seven_bit_controller_on_fourteen_bit_entry_reaches_both_ends():
    cmap = ControlMap([{"target": "pickup.0.position", "cc": 1, "bits": 14, "low": 0.1, "high": 0.9}])
    assert cmap.control_change(0, 1, 0) == [("pickup.0.position", pytest.approx(0.1))]
    assert cmap.control_change(0, 1, 127) == [("pickup.0.position", pytest.approx(0.9))]


def test_lsb_before_any_msb_changes_nothing():
    cmap = ControlMap([{"target": "pickup.0.position", "cc": 1, "bits": 14}])
    assert cmap.control_change(0, 33, 100) == []
    cmap.control_change(0, 1, 64)
    assert cmap.control_change(0, 33, 0)  # now it refines the MSB


def test_msb_is_kept_per_channel():
    cmap = ControlMap([{"target": "pickup.0.position", "cc": 1, "bits": 14, "low": 0.01, "high": 0.99}])
    cmap.control_change(0, 1, 127)
    assert cmap.control_change(1, 33, 5) == []  # channel 2 has had no MSB


def test_channel_filter_uses_midi_channel_numbers_1_to_16():
    cmap = ControlMap([{"target": "output.gain_db", "cc": 20, "channel": 2}])
    assert cmap.control_change(0, 20, 64) == []
    assert cmap.control_change(1, 20, 64) != []


def test_log_curve_is_geometric_and_linear_is_arithmetic():
    log = check_entries([{"target": "electronics.resonance_hz", "cc": 74, "low": 1000.0, "high": 16000.0,
                          "curve": "log"}])[0]
    assert scale(log, 0.5) == pytest.approx(4000.0)  # geometric mean of 1 kHz and 16 kHz
    lin = check_entries([{"target": "output.gain_db", "cc": 7, "low": -40.0, "high": 0.0}])[0]
    assert scale(lin, 0.25) == pytest.approx(-30.0)


def test_choice_is_spread_over_the_travel():
    e = check_entries([{"target": "excitation.kind", "cc": 20}])[0]
    assert scale(e, 0.0) == "pluck" and scale(e, 0.49) == "pluck"
    assert scale(e, 0.51) == "strike" and scale(e, 1.0) == "strike"
    pol = check_entries([{"target": "pickup.0.polarity", "cc": 21}])[0]
    assert {scale(pol, 0.0), scale(pol, 1.0)} == {1, -1}


def test_channel_pressure_source():
    cmap = ControlMap([{"target": "pickup.0.level_db", "source": "pressure", "low": -20.0, "high": 0.0}])
    assert cmap.pressure(3, 0.5) == [("pickup.0.level_db", pytest.approx(-10.0))]
    assert cmap.pressure(3, 0.5, member=True) == []  # an MPE member's pressure is per note


# -- the default map ----------------------------------------------------------------------------

def test_default_map_follows_controller_conventions():
    """Common practice: mod wheel (CC1) is the main performance control, CC7 is volume,
    CC74 is brightness; their 14-bit LSBs are CC33 and CC39 (MIDI 1.0)."""
    entries = default_entries()
    assert _entry_for(1, entries)["target"] == "pickup.0.position"
    assert _entry_for(1, entries)["bits"] == 14
    assert _entry_for(7, entries)["target"] == "output.gain_db"
    assert _entry_for(7, entries)["high"] <= 0.0  # volume never adds gain: start and stay safe
    assert _entry_for(74, entries)["target"] == "electronics.resonance_hz"
    assert any(e["source"] == "note_timbre" and e["target"] == "excitation.position" for e in entries)
    for e in entries:  # every default target is a real parameter of a default sound
        Settings.defaults().get(e["target"])


def test_default_map_moves_the_pickup_with_the_mod_wheel():
    cmap = ControlMap()
    (name, low), = cmap.control_change(0, 1, 0)
    (_, high), = cmap.control_change(0, 1, 127)
    assert name == "pickup.0.position" and low < high


# -- validation ---------------------------------------------------------------------------------

@pytest.mark.parametrize(("entry", "key"), [
    ({"target": "nope", "cc": 1}, "control.0.target"),
    ({"target": "voices", "cc": 1}, "control.0.target"),
    ({"target": "excitation.shape", "cc": 1}, "control.0.target"),
    ({"target": "pickup.0.position", "cc": 64}, "control.0.cc"),  # sustain belongs to the engine
    ({"target": "pickup.0.position", "cc": 6}, "control.0.cc"),  # data entry (RPN)
    ({"target": "pickup.0.position", "cc": 121}, "control.0.cc"),  # channel mode message
    ({"target": "pickup.0.position", "cc": 40, "bits": 14}, "control.0.bits"),
    ({"target": "pickup.0.position", "cc": 2, "low": 2.0}, "control.0.low"),
    ({"target": "pickup.0.position", "cc": 1, "channel": 0}, "control.0.channel"),
    ({"target": "pickup.0.position", "cc": 1, "curve": "cubic"}, "control.0.curve"),
    ({"target": "output.gain_db", "cc": 1, "curve": "log"}, "control.0.curve"),  # log needs low, high > 0
    ({"target": "pickup.0.position", "source": "note_timbre"}, "control.0.target"),
    ({"target": "pickup.0.position", "cc": 1, "colour": "red"}, "control.0.colour"),
])
def test_bad_entries_are_refused_with_the_key_named(entry, key):
    with pytest.raises(SettingsError) as err:
        check_entries([entry], source="test.toml")
    assert err.value.key == key
    assert "test.toml" in str(err.value)


# -- learning -----------------------------------------------------------------------------------

def test_learn_maps_the_next_controller_and_replaces_older_entries():
    cmap = ControlMap()
    cmap.learn("pickup.0.width")
    assert cmap.control_change(4, 20, 127) == [("pickup.0.width", pytest.approx(0.5))]
    learned = cmap.learned
    assert learned["cc"] == 20 and learned["channel"] == 5 and learned["bits"] == 14
    assert cmap.learning is None
    # the default CC18 -> pickup.0.width entry was replaced: one controller per parameter
    assert [e["cc"] for e in cmap.entries if e["target"] == "pickup.0.width"] == [20]
    assert cmap.control_change(0, 18, 64) == []


def test_learn_refuses_unmappable_targets():
    cmap = ControlMap()
    with pytest.raises(SettingsError):
        cmap.learn("voices")


def test_learning_a_controller_takes_it_from_its_old_parameter():
    cmap = ControlMap()
    cmap.learn("electronics.q")
    cmap.control_change(0, 1, 10)  # the mod wheel, until now the pickup's
    assert [e["target"] for e in cmap.entries if e.get("cc") == 1] == ["electronics.q"]


# -- presets ------------------------------------------------------------------------------------

def test_control_map_round_trips_through_a_preset_file():
    entries = [{"target": "pickup.0.position", "cc": 1, "bits": 14, "low": 0.05, "high": 0.4},
               {"target": "excitation.width", "source": "note_pressure", "low": 0.0, "high": 0.05},
               {"target": "output.gain_db", "cc": 7, "channel": 3, "low": -30.0, "high": 0.0}]
    settings = Settings.defaults().renamed("mapped")
    from dataclasses import replace

    settings = replace(settings, controls=tuple(check_entries(entries)))
    text = tomli_w.dumps(settings.to_nested())
    assert "[[control]]" in text
    again = Settings.from_toml_text(text, source="mapped.toml")
    assert list(again.controls) == check_entries(entries)
    # kept on edits (an edit the default fretted neck allows: 0.25 of 648 mm = 162 mm, short of the
    # 22nd fret at 181.8 mm by the 12-TET fret rule, common practice)
    assert again.with_values({"pickup.0.position": 0.25}).controls == again.controls


def test_preset_without_control_tables_uses_the_default_map():
    s = Settings.from_toml_text('name = "plain"\n[string]\nmodes = 32\n')
    assert s.controls is None
    assert ControlMap(s.controls).entries == default_entries()


def test_bad_control_table_in_a_preset_names_file_and_key():
    with pytest.raises(SettingsError) as err:
        Settings.from_toml_text('[[control]]\ntarget = "pickup.0.position"\ncc = 64\n', source="bad.toml")
    assert err.value.key == "control.0.cc" and err.value.source == "bad.toml"


# -- routing into the engine --------------------------------------------------------------------

FS, BLOCK = 48000, 256


def _quiet_settings(**extra) -> Settings:
    values = {"string.modes": 24, "electronics.resonance_hz": 0.0, "string.t60_low": 20.0,
              "string.t60_high": 20.0, "string.inharmonicity": 0.0}
    values.update(extra)
    return Settings.defaults().with_values(values)


def test_mpe_per_note_timbre_sets_each_notes_pluck_position():
    """MPE: CC74 on a member channel sent before the note-on sets that note's timbre (per note).
    Here it sets where the string is plucked; a pluck at 1/n of the length leaves out every
    n-th harmonic (Fletcher & Rossing 1998, ch. 2: a_k ~ sin(k pi p))."""
    # Open strings: the nulls are at fractions of each note's own length, and a pluck at the middle
    # of the string lies over a fretted neck (a fretted voice sees distance / speaking length).
    settings = open_strings(_quiet_settings())
    engine = Engine(settings, FS, BLOCK)  # the engine's own controller map, set to one MPE entry
    engine.controls.set_entries([{"target": "excitation.position", "source": "note_timbre", "low": 0.1, "high": 0.5}])
    # lower zone with 15 members (MPE configuration message, RPN 6 on the master channel)
    mpe = [(0, 0xB0, 101, 0), (0, 0xB0, 100, 6), (0, 0xB0, 6, 15)]
    # channel 2: CC74 = 127 -> position 0.5 (even harmonics vanish); channel 3: CC74 = 0 -> 0.1
    notes = [(1, 0xB1, 74, 127), (2, 0x91, 45, 100), (3, 0xB2, 74, 0), (4, 0x92, 57, 100)]
    engine.render(mpe + notes)
    pool = engine.pool
    slot = {int(pool.note[v]): v for v in range(pool.n_active)}
    k = np.arange(1, 7)
    a45 = np.abs(pool.s[slot[45], :6])
    a57 = np.abs(pool.s[slot[57], :6])
    assert a45[1] < 1e-9 * a45[0] and a45[3] < 1e-9 * a45[0]  # pluck at 1/2: no 2nd, 4th
    expected = np.abs(np.sin(k * np.pi * 0.1) / k**2)  # triangle pluck at 0.1 (narrow contact)
    assert a57 / a57[0] == pytest.approx(expected / expected[0], rel=0.02)
    # the global excitation position is untouched
    assert engine.settings.get("excitation.position") == settings.get("excitation.position")


def test_controller_moves_the_pickup_of_a_ringing_note_as_the_model_predicts():
    """Pickup weight of harmonic k at x: sin(k pi x) sinc(k pi w / 2) (Paiva, Pakarinen &
    Valimaki, JAES 60(10) 2012); with equal T60 at all frequencies all harmonics decay alike,
    so harmonic ratios before/after the move follow the weights alone. On the default fretted neck
    the note sounds at a fret n, where the pickup and its aperture (fixed in space) are fractions
    of the speaking length L 2^(-n/12): x and w grow by 2^(n/12) (12-TET fret rule, common practice)."""
    settings = _quiet_settings()
    engine = Engine(settings, FS, BLOCK)  # the default controller map: CC1/33 moves pickup 1
    entry = _entry_for(1)
    engine.render([(0, 0xB0, 1, 0), (1, 0x90, 45, 100)])
    for _ in range(40):
        engine.render()
    before = engine.mode_levels(0)[:6].copy()
    x_before = engine.settings.get("pickup.0.position")
    engine.render([(0, 0xB0, 1, 100), (0, 0xB0, 33, 0)])
    for _ in range(60):  # 0.3 s: the 15 ms smoothing has long settled
        engine.render()
    after = engine.mode_levels(0)[:6]
    x_after = engine.settings.get("pickup.0.position")
    assert x_after == pytest.approx(scale(entry, 100 * 128 / 16383))
    (place,) = sounding_places(engine)
    assert (place.note, place.string, place.fret) == (45, 6, 5)  # A2 nearest the hand at fret 3 (standard tuning)
    longer = 2 ** (place.fret / 12)  # scale length / speaking length
    k = np.arange(1, 7)
    w = settings.get("pickup.0.width") * longer
    predicted = np.abs(aperture_weights(k, x_after * longer, w) / aperture_weights(k, x_before * longer, w))
    measured = after / before
    assert measured / measured[0] == pytest.approx(predicted / predicted[0], rel=1e-3)


def _band_share_db(x: np.ndarray, lo_hz: float, hi_hz: float, start_s: float, stop_s: float) -> float:
    seg = x[int(start_s * FS):int(stop_s * FS)]
    spec = np.abs(np.fft.rfft(seg * np.hanning(seg.size))) ** 2
    f = np.fft.rfftfreq(seg.size, 1 / FS)
    band = (f >= lo_hz) & (f < hi_hz)
    return float(10 * np.log10(spec[band].sum() / spec.sum()))


def test_controller_sweep_adds_no_broadband_clicks():
    """A 7-bit CC sweep of the pickup while a note rings, rendered through the controller
    routing (swept), against the same controller steps applied as hard switches (stepped:
    renders of the note with the pickup fixed at each step, spliced at the step times).
    Between and above the partials the hard switches spray energy (clicks, zipper noise); the
    swept render must stay far below that and end on the same sound.
    The note: 110 Hz, 24 modes (up to 2.64 kHz); the band measured, 8-16 kHz, holds no partial."""
    settings = _quiet_settings()
    seconds, n_blocks = 1.5, int(1.5 * FS / BLOCK)
    steps = list(range(0, 128, 4))  # a knob turned through its travel in one second
    step_blocks = [int((0.25 + i / len(steps)) * FS / BLOCK) for i in range(len(steps))]
    entry = _entry_for(1)

    engine = Engine(settings, FS, BLOCK)  # its own controller map moves the pickup
    swept = []
    for b in range(n_blocks):
        events = [(0, 0xB0, 1, 0), (1, 0x90, 45, 100)] if b == 0 else []
        events += [(0, 0xB0, 1, v) for sb, v in zip(step_blocks, steps, strict=True) if sb == b]
        swept.append(engine.render(events).copy())
    swept = np.concatenate(swept)

    def held(cc_value: int) -> np.ndarray:
        e = Engine(settings.with_values({"pickup.0.position": scale(entry, cc_value / 127)}), FS, BLOCK)
        return np.concatenate([e.render([(1, 0x90, 45, 100)] if b == 0 else []).copy() for b in range(n_blocks)])

    stepped = held(0)
    for sb, v in zip(step_blocks, steps, strict=True):
        stepped[sb * BLOCK:] = held(v)[sb * BLOCK:]

    assert swept.size == stepped.size == n_blocks * BLOCK
    clicks_stepped = _band_share_db(stepped, 8000, 16000, 0.25, 1.25)
    clicks_swept = _band_share_db(swept, 8000, 16000, 0.25, 1.25)
    assert clicks_stepped > -80.0  # the measure does see hard switches
    assert clicks_swept < clicks_stepped - 30.0
    # both end on the same sound (the sweep arrives; smoothing only delays by milliseconds)
    tail = slice(int((seconds - 0.1) * FS), None)
    assert np.std(swept[tail]) == pytest.approx(np.std(stepped[tail]), rel=1e-3)
    # and at the partials the sweep sounds like the stepped motion (harmonics the pluck at 0.2
    # leaves out, k = 5, 10, hold only the switches' clicks and are skipped)
    pluck = settings.get("excitation.position")
    for k in range(1, 12):
        if abs(np.sin(k * np.pi * pluck)) < 0.1:
            continue
        f = 110.0 * k
        assert _band_share_db(swept, f - 30, f + 30, 0.25, 1.25) == pytest.approx(
            _band_share_db(stepped, f - 30, f + 30, 0.25, 1.25), abs=1.0)


def test_a_controller_carries_the_pickup_no_further_than_the_last_fret():
    """On a fretted neck a pickup cannot sit over the frets; the 12-TET fret rule (common practice)
    puts the last of 12 frets L 2^(-12/12) = 324 mm from the saddle of a 648 mm string. The mod
    wheel at full travel on such a neck stops the pickup 1 mm short of it, with no error; under the
    open rule the same travel reaches the map's end."""
    entry = {"target": "pickup.0.position", "cc": 1, "low": 0.03, "high": 0.9}
    for assign, frets, expected_mm in (("hand", 12, 648.0 / 2 - 1.0), ("open", 12, 0.9 * 648.0)):
        engine = Engine(_quiet_settings(**{"instrument.assign": assign, "instrument.frets": frets}), FS, BLOCK)
        engine.controls.set_entries([entry])
        engine.render([(0, 0xB0, 1, 127)])
        engine.render()
        assert engine.settings.get("pickup.0.position") * 648.0 == pytest.approx(expected_mm, abs=1e-9)
        assert not [e for e in engine.messages if isinstance(e, Error)]  # nothing was refused


def test_the_default_map_moves_the_fretting_hand_with_general_purpose_4():
    """CC19 (general purpose controller 4, MIDI 1.0) sets where the hand sits, nut to 12th fret."""
    engine = Engine(_quiet_settings(**{"instrument.assign": "hand"}), FS, BLOCK)
    engine.render([(0, 0xB0, 19, 127)])
    engine.render()
    assert engine.settings.get("hand.fret") == pytest.approx(12.0)
    for e in default_entries():
        if e["target"].endswith("position"):  # places within the default 22-fret neck (181.8 mm)
            assert e["high"] * 648.0 < 648.0 * 2 ** (-22 / 12)
