"""`rtvoice render` and `rtvoice presets` as a user runs them: real files, real processes."""

import os
import subprocess
import sys
from pathlib import Path

import mido
import numpy as np
import pytest
import scipy.io.wavfile
from analysis import peak_frequency_hz

from rtvoice.offline.midifile import MidiFileError, read_midi_events

ROOT = Path(__file__).resolve().parents[1]


def rtvoice(*args, cwd=None, env_extra=None):
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", **(env_extra or {}))
    return subprocess.run([sys.executable, "-m", "rtvoice.cli", *args], capture_output=True, text=True,
                          cwd=cwd, env=env, timeout=120)


def test_render_note_writes_a_float32_wav_at_the_right_pitch(tmp_path):
    out = tmp_path / "a.wav"
    r = rtvoice("render", "--note", "69", "--seconds", "1", "-o", str(out), "--set", "string.inharmonicity=0")
    assert r.returncode == 0, r.stderr
    rate, data = scipy.io.wavfile.read(out)
    assert rate == 48000 and data.dtype == np.float32 and data.ndim == 1
    assert data.size > 48000  # held for 1 s, then the tail
    # 12-TET, MIDI 1.0 / ISO 16: note 69 = 440 Hz.
    assert peak_frequency_hz(data[4800:43200].astype(float), rate, 440, 20) == pytest.approx(440, abs=0.1)


def test_render_demo_song_with_a_factory_preset(tmp_path):
    out = tmp_path / "demo.wav"
    r = rtvoice("render", str(ROOT / "examples" / "demo.mid"), "--preset", "harbor-baritone", "-o", str(out))
    assert r.returncode == 0, r.stderr
    rate, data = scipy.io.wavfile.read(out)
    assert 20 * rate < data.size < 60 * rate
    assert np.max(np.abs(data)) <= 0.891251  # -1 dBFS ceiling


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["render", "--note", "60", "-o", "{out}", "--set", "string.colour=3"], "unknown parameter"),
        (["render", "--note", "60", "-o", "{out}", "--set", "pickup.0.position=1.5"], "out of range"),
        (["render", "--note", "60", "-o", "{out}", "--set", "noequals"], "KEY=VALUE"),
        (["render", "--note", "60", "-o", "{out}", "--preset", "no-such-preset"], "no preset named"),
        (["render", "--note", "60", "-o", "{out}", "--preset", "../etc/passwd"], "no such preset file"),
        (["render", "{missing}", "-o", "{out}"], "cannot read"),
        (["render", "{corrupt}", "-o", "{out}"], "not a readable Standard MIDI File"),
        (["render", "--note", "300", "-o", "{out}"], "MIDI note"),
        (["render", "--note", "60", "--velocity", "0", "-o", "{out}"], "velocity"),
        (["render", "--note", "60", "--rate", "abc", "-o", "{out}"], "sample rate"),
        (["render", "--note", "60", "-o", "/no/such/folder/x.wav"], "no such folder"),
    ],
)
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, args, needle):
    out = tmp_path / "out.wav"
    corrupt = tmp_path / "corrupt.mid"
    corrupt.write_bytes(b"MThd\x00\x00\x00\x06\x00\x01\x00\x01\x01\xe0MTrk\x00\x00\x10\x00\x00\x90")
    fill = {"out": str(out), "missing": str(tmp_path / "missing.mid"), "corrupt": str(corrupt)}
    r = rtvoice(*[a.format(**fill) for a in args])
    assert r.returncode == 2
    assert needle in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1, r.stderr
    assert "Traceback" not in r.stderr
    assert not out.exists()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".out.wav")]


def test_presets_list_show_check(tmp_path):
    r = rtvoice("presets", "list")
    assert r.returncode == 0 and "hollow-middle" in r.stdout and "factory" in r.stdout
    r = rtvoice("presets", "show", "split-phase")
    assert r.returncode == 0 and "[[pickup]]" in r.stdout and "polarity = -1" in r.stdout
    files = sorted(str(p) for p in (ROOT / "presets").glob("*.toml"))
    r = rtvoice("presets", "check", *files)
    assert r.returncode == 0, r.stdout
    bad = tmp_path / "bad.toml"
    bad.write_text("[string]\nmodes = -1\n")
    r = rtvoice("presets", "check", str(bad))
    assert r.returncode == 2 and "string.modes" in r.stdout and "bad.toml" in r.stdout


def make_tempo_file(path, tempos_bpm, ticks=480):
    """Type 1 file: a tempo track with a change every 4 beats, and a note on every beat (track 2)."""
    mid = mido.MidiFile(type=1, ticks_per_beat=ticks)
    tempo = mido.MidiTrack()
    for i, bpm in enumerate(tempos_bpm):
        tempo.append(mido.MetaMessage("set_tempo", tempo=mido.bpm2tempo(bpm), time=0 if i == 0 else 4 * ticks))
    notes = mido.MidiTrack()
    for beat in range(4 * len(tempos_bpm)):
        notes.append(mido.Message("note_on", note=60, velocity=90, time=0 if beat == 0 else ticks - 10))
        notes.append(mido.Message("note_off", note=60, time=10))
    mid.tracks += [tempo, notes]
    mid.save(path)


def test_tempo_changes_are_honoured(tmp_path):
    # Standard MIDI Files 1.0: FF 51 sets microseconds per quarter note from its position on.
    path = tmp_path / "tempo.mid"
    make_tempo_file(path, [120, 60])
    onsets = [t for t, status, _, vel in read_midi_events(path) if status == 0x90 and vel > 0]
    expected = [0.5 * i for i in range(4)] + [2.0 + 1.0 * i for i in range(4)]
    np.testing.assert_allclose(onsets, expected, atol=1e-9)


def test_type_0_file_and_events_land_on_their_samples(tmp_path):
    path = tmp_path / "t0.mid"
    mid = mido.MidiFile(type=0, ticks_per_beat=96)
    track = mido.MidiTrack([mido.MetaMessage("set_tempo", tempo=250000, time=0),
                            mido.Message("note_on", note=64, velocity=100, time=96),
                            mido.Message("note_off", note=64, time=96)])
    mid.tracks.append(track)
    mid.save(path)
    out = tmp_path / "t0.wav"
    r = rtvoice("render", str(path), "-o", str(out), "--set", "pickup.0.sensing=displacement",
                "--set", "electronics.resonance_hz=0")
    assert r.returncode == 0, r.stderr
    _, data = scipy.io.wavfile.read(out)
    first = int(np.flatnonzero(np.abs(data) > 1e-6)[0])
    assert first == 12000  # one beat at 250 ms per quarter, 48 kHz


def test_type_2_and_truncated_files_are_refused(tmp_path):
    path = tmp_path / "t2.mid"
    mid = mido.MidiFile(type=2)
    mid.tracks.append(mido.MidiTrack([mido.Message("note_on", note=60, time=0)]))
    mid.save(path)
    with pytest.raises(MidiFileError, match="type 2"):
        read_midi_events(path)
    good = tmp_path / "good.mid"
    make_tempo_file(good, [100])
    cut = tmp_path / "cut.mid"
    cut.write_bytes(good.read_bytes()[:40])
    with pytest.raises(MidiFileError):
        read_midi_events(cut)
