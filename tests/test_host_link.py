"""The engine link as the UI uses it: a real engine process on the silent real-time clock.

No audio server is needed here (``audio_device='none'``, no MIDI ports), so these run
everywhere; the JACK tests (test_host_jack.py) cover audio and MIDI ports.
12-TET: f = 440 * 2^((n - 69) / 12) (MIDI 1.0 note numbers, A4 = 440 Hz per ISO 16:1975);
stiff string: f_1 = f0 sqrt(1 + B) (Fletcher, JASA 36, 1964). The default instrument plays a note
at a fret n of one of its strings (standard tuning E2 A2 D3 G3 B3 E4, the string where the note lies
nearest the hand's fret; common practice), where B is the string's open B times 2^(n/6) (B ~ 1/L^2 at
one tension, with the speaking length L 2^(-n/12) of the 12-TET fret rule).
"""

from __future__ import annotations

import math
import os
import signal
import time

import numpy as np
import pytest
from analysis import peak_frequency_hz
from support.describe import failing

from rtvoice.engine import string_physics_of
from rtvoice.engine.controls import default_entries
from rtvoice.engine.output import CEILING
from rtvoice.engine.settings import Settings, SettingsError
from rtvoice.host.errors import HostError, MidiMessageError
from rtvoice.host.link import EngineLink
from rtvoice.host.messages import Exited, Learned
from rtvoice.offline.wav import read_wav


def _wait(predicate, timeout_s: float = 5.0, poll_s: float = 0.05):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(poll_s)
    return predicate()


@pytest.fixture(scope="module")
def link():
    """One engine shared by the tests that leave it as they found it."""
    lk = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    lk.start()
    time.sleep(0.6)  # the output ramps in from silence over the first half second
    yield lk
    lk.close()


def test_engine_plays_a_note_and_the_snapshot_shows_it(link):
    snap = link.snapshot()
    assert snap.engine_alive and snap.voices == 0 and snap.note == -1
    assert "silent clock" in snap.audio_port
    link.note_on(57, 113)
    snap = _wait(lambda: (s := link.snapshot()).voices and s.f0_hz > 0 and s)
    assert snap.note == 57
    assert snap.velocity == 113  # the UI predicts the attack at the voice's own velocity
    assert (snap.string, snap.fret) == (3, 2)  # A3 at fret 2 of the G string, nearest the hand at fret 3
    b = string_physics_of(link.settings, 3).inharmonicity * 2 ** (2 / 6)
    assert snap.f0_hz == pytest.approx(440 * 2 ** ((57 - 69) / 12) * math.sqrt(1 + b), rel=1e-9)
    n = Settings.defaults().get("string.modes")
    assert snap.mode_levels_db.shape == snap.mode_freqs_hz.shape == (min(n, 128),)
    assert snap.mode_freqs_hz[0] == pytest.approx(snap.f0_hz)
    assert -60 < snap.mode_levels_db.max() < 0  # dBFS-ish, below the -1 dBFS ceiling
    peak_bin = int(np.argmax(snap.spectrum_db[5:])) + 5
    harmonics = snap.mode_freqs_hz[:8]
    assert np.min(np.abs(harmonics - peak_bin * snap.spectrum_bin_hz)) < 2 * snap.spectrum_bin_hz
    assert -40 < snap.peak_dbfs <= -1.0
    assert 0 <= snap.load_median <= snap.load_p99
    assert snap.midi_events >= 1
    link.all_notes_off()
    assert _wait(lambda: link.snapshot().voices == 0, 3.0)


def test_set_value_is_validated_in_the_caller(link):
    with pytest.raises(SettingsError):
        link.set_value("pickup.0.position", 1.5)
    with pytest.raises(SettingsError):
        link.set_value("no.such.thing", 1)
    link.set_value("pickup.0.position", 0.25)  # 162 mm: within the default neck (last fret at 181.8 mm)
    assert link.settings.get("pickup.0.position") == 0.25
    link.set_value("pickup.0.position", Settings.defaults().get("pickup.0.position"))
    with pytest.raises(MidiMessageError):
        link.note_on(128)
    with pytest.raises(MidiMessageError):
        link.note_on(60, channel=16)


def test_learn_maps_the_next_controller_and_reports_it(link):
    link.learn("pickup.0.width")
    link.send_midi(0xB0 | 2, 20, 127)  # CC20 on MIDI channel 3
    learned = _wait(lambda: [m for m in link.poll_messages() if isinstance(m, Learned)])
    assert learned and learned[0].target == "pickup.0.width"
    assert learned[0].cc == 20 and learned[0].channel == 3
    entries = [e for e in link.controls() if e["target"] == "pickup.0.width"]
    assert entries == [learned[0].entry]
    assert list(learned[0].entries) == link.controls()  # the whole map came with it
    # the controller's value was applied too, and the link's copy of the sound follows it
    assert _wait(lambda: link.settings.get("pickup.0.width") == pytest.approx(0.5))
    link.load_settings(Settings.defaults())  # back to the default sound and map
    assert _wait(lambda: link.controls() == default_entries())


def test_load_settings_replaces_the_controller_map(link):
    from dataclasses import replace

    from rtvoice.engine.controls import check_entries

    mapped = replace(Settings.defaults(), controls=tuple(check_entries([{"target": "output.gain_db", "cc": 7}])))
    link.load_settings(mapped)
    assert _wait(lambda: [e["target"] for e in link.controls()] == ["output.gain_db"])
    link.load_settings(Settings.defaults())
    assert _wait(lambda: link.controls() == default_entries())


def test_recording_starts_quiet_and_runs_in_real_time_on_the_silent_clock(tmp_path):
    """Start quiet: a note struck as the engine starts is faded in over the first half second
    (the ramp bounds every sample), while the same note later starts at full level. The
    recording runs in real time and ends with the stop's fade."""
    lk = EngineLink(Settings.defaults().with_values({"output.gain_db": 0.0}), audio_device="none",
                    midi_in="none", record=str(tmp_path / "take.wav"))
    t_start_call = time.monotonic()
    lk.start()
    t_start_done = time.monotonic()
    lk.note_on(57, 127)
    time.sleep(1.2)
    lk.note_on(57, 127)  # re-pluck, now at full level
    time.sleep(0.5)
    t_close = time.monotonic()
    lk.close()
    t_closed = time.monotonic()
    seconds = lk.summary["record_seconds"]
    assert t_close - t_start_done - 0.1 <= seconds <= t_closed - t_start_call
    x, rate = read_wav(tmp_path / "take.wav")
    assert rate == 48000 and x.size == round(seconds * rate)
    assert np.max(np.abs(x)) <= CEILING + 1e-7  # the -1 dBFS ceiling
    # the ramp in
    t = np.arange(x.size) / rate
    ramp = np.minimum(t / 0.5, 1.0) * CEILING + 1e-6
    assert np.all(np.abs(x) <= ramp), \
        "over the 0.5 s ramp in, by time in s: " + failing(np.abs(x) <= ramp, np.abs(x), np.round(t, 5), "samples")
    first = int(np.flatnonzero(np.abs(x) > 1e-5)[0])
    assert first / rate < 0.4  # the first note did start within the ramp
    early = np.max(np.abs(x[first:first + rate // 50]))
    later = x[first + rate:]
    second = first + rate + int(np.argmax(np.abs(np.diff(later))))  # the re-pluck's attack
    late = np.max(np.abs(x[second:second + rate // 50]))
    assert early < 0.5 * late
    # the pitch, 12-TET with the stiffness stretch
    seg = x[first + 2400: first + 2400 + 24000]
    b = Settings.defaults().get("string.inharmonicity")
    f1 = 440 * 2 ** ((57 - 69) / 12) * math.sqrt(1 + b)
    assert peak_frequency_hz(seg, rate, f1, 20.0) == pytest.approx(f1, abs=0.05)
    # the stop fades out: it ends in silence, no cut
    assert np.max(np.abs(x[-48:])) < 0.05 * late


def test_engine_death_is_reported_and_restart_brings_it_back():
    link = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    try:
        _check_death_and_restart(link)
    finally:
        link.close()


def _check_death_and_restart(link: EngineLink) -> None:
    pid = link.ready_info.pid
    os.kill(pid, signal.SIGKILL)
    assert _wait(lambda: not link.alive(), 5.0)
    msgs = _wait(lambda: link.poll_messages(), 2.0)
    assert any(isinstance(m, Exited) for m in msgs)
    assert link.snapshot().engine_alive is False
    link.note_on(60)  # commands to a dead engine are dropped, not raised
    link.restart()
    assert link.alive() and link.ready_info.pid != pid
    link.note_on(60)
    assert _wait(lambda: link.snapshot().voices >= 1)


def test_bad_options_fail_before_any_process_starts():
    with pytest.raises(HostError, match="--mpe"):
        EngineLink(Settings.defaults(), audio_device="none", midi_in="none", mpe="sideways")


def test_start_fails_with_a_clear_message_when_the_engine_cannot_open_its_device():
    bad = EngineLink(Settings.defaults(), audio_device="no-such-output-device", midi_in="none")
    with pytest.raises(HostError, match="no-such-output-device"):
        bad.start()
    assert not bad.alive()
    assert bad.snapshot().engine_alive is False


def test_mpe_option_configures_the_lower_zone():
    mpe = EngineLink(Settings.defaults(), audio_device="none", midi_in="none", mpe="lower=7")
    mpe.start()
    try:
        # member channel 2 bends by the MPE per-note default of +-48 semitones (MPE 2018)
        mpe.send_midi(0xE1, 0, 96)  # +4096 of 8192: +24 semitones
        mpe.note_on(45, 100, channel=1)
        snap = _wait(lambda: (s := mpe.snapshot()).voices and s.f0_hz > 0 and s)
        assert (snap.string, snap.fret) == (6, 5)  # A2 at fret 5 of the low E string, nearest the hand at 3
        b = string_physics_of(Settings.defaults(), 6).inharmonicity * 2 ** (5 / 6)
        assert snap.f0_hz == pytest.approx(440 * 2 ** ((45 + 24 - 69) / 12) * math.sqrt(1 + b), rel=1e-6)
    finally:
        mpe.close()
