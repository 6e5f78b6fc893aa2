"""Bad and odd Standard MIDI Files through `rtvoice render`: one clear line and exit 2, or a correct render.

Every file here is written byte by byte (most of them are malformed, which no
MIDI library would write). The structure follows Standard MIDI Files 1.0 (MIDI
Manufacturers Association, "Standard MIDI Files 1.0", 1988; sections "Chunks",
"Header Chunks", "Track Chunks", "Meta-Events"); message sizes and the 0-127 range
of data bytes follow the MIDI 1.0 Detailed Specification (MMA, 1996), "Channel
Voice Messages" and "Data Types" (a data byte has bit 7 clear).

Each case runs the real command line (``rtvoice.cli.main``) in this process, so a
traceback would fail the test as an exception; two cases also run as a separate
process to cover the installed entry point.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.io.wavfile
from support.cli import run_cli
from support.describe import finite_peak

from rtvoice.offline import midifile
from rtvoice.offline.midifile import MidiFileError, parse_midi_bytes, read_midi_events

FS = 48000
# A click-free, filter-free sound, so that the first non-zero output sample is the note-on's sample.
EXACT_ONSET = ["--set", "pickup.0.sensing=displacement", "--set", "electronics.resonance_hz=0"]


# -- building files byte by byte (SMF 1.0) --------------------------------------------------------
def vlq(n: int) -> bytes:
    """SMF 1.0 variable-length quantity: 7 bits per byte, most significant first, bit 7 = more follows."""
    assert n >= 0
    out = [n & 0x7F]
    n >>= 7
    while n:
        out.append(0x80 | (n & 0x7F))
        n >>= 7
    return bytes(reversed(out))


def header(fmt=0, tracks=1, division=96, length=6) -> bytes:
    body = fmt.to_bytes(2, "big") + tracks.to_bytes(2, "big") + division.to_bytes(2, "big")
    return b"MThd" + length.to_bytes(4, "big") + (body + bytes(max(0, length - 6)))[:max(length, 0)]


def chunk(tag: bytes, body: bytes) -> bytes:
    return tag + len(body).to_bytes(4, "big") + body


EOT = b"\x00\xff\x2f\x00"  # delta 0, end of track
NOTE_ON = b"\x00\x90\x3c\x64"  # delta 0, note-on ch 1, note 60, velocity 100
NOTE_OFF_96 = vlq(96) + b"\x80\x3c\x00"  # one quarter note later
TEMPO_120 = b"\x00\xff\x51\x03\x07\xa1\x20"  # 500,000 us per quarter


def track(*events: bytes, eot=True) -> bytes:
    return chunk(b"MTrk", b"".join(events) + (EOT if eot else b""))


def smf(*tracks: bytes, fmt=None, division=96, declared=None) -> bytes:
    fmt = (0 if len(tracks) == 1 else 1) if fmt is None else fmt
    return header(fmt, len(tracks) if declared is None else declared, division) + b"".join(tracks)


GOOD = smf(track(TEMPO_120, NOTE_ON, NOTE_OFF_96))
TWO_TRACKS = smf(track(TEMPO_120), track(NOTE_ON, NOTE_OFF_96, b"\x00\xb0\x40\x7f"))
# One quarter = 0.5 s at 120 beats per minute (SMF 1.0: the default tempo when none is given).
GOOD_EVENTS = [(0.0, 0x90, 60, 100), (0.5, 0x80, 60, 0)]

# (id, file bytes, expected): expected is a list of (time_s, status, d1, d2), or ("error", words in the message).
CASES = [
    # -- header (SMF 1.0 "Header Chunks") --
    ("empty-file", b"", ("error", "no MThd header")),
    ("only-magic", b"MThd", ("error", "cut short")),
    ("riff-not-midi", b"RIFF\x00\x00\x00\x04WAVE", ("error", "no MThd header")),
    ("track-first", track(NOTE_ON), ("error", "no MThd header")),
    ("header-length-0", header(length=0) + bytes(6) + track(NOTE_ON), ("error", "header chunk length 0")),
    ("header-length-5", header(length=5) + track(NOTE_ON), ("error", "header chunk length 5")),
    ("header-length-huge", b"MThd\xff\xff\xff\xff" + bytes(6), ("error", "runs past the end")),
    # SMF 1.0: "more parameters may be added to the MThd chunk in the future: it is important to read and honor
    # the length, even if it is longer than 6" -- a longer header is valid.
    ("header-length-10-is-valid", header(length=10) + track(TEMPO_120, NOTE_ON, NOTE_OFF_96), GOOD_EVENTS),
    ("format-3", header(fmt=3) + track(NOTE_ON), ("error", "format 3 does not exist")),
    ("format-65535", header(fmt=0xFFFF) + track(NOTE_ON), ("error", "format 65535")),
    ("format-2-refused", smf(track(NOTE_ON, NOTE_OFF_96), fmt=2), ("error", "type 2")),
    ("zero-tracks", header(tracks=0), ("error", "declares no tracks")),
    ("division-0", smf(track(NOTE_ON, NOTE_OFF_96), division=0), ("error", "division 0")),
    # SMF 1.0 "Header Chunks": SMPTE division -25 frames/s x 40 ticks/frame = millisecond ticks (the spec's example).
    ("smpte-25x40-ms-ticks", smf(track(NOTE_ON, vlq(500) + b"\x80\x3c\x00"), division=0xE728), GOOD_EVENTS),
    ("smpte-30x2", smf(track(NOTE_ON, vlq(30) + b"\x80\x3c\x00"), division=0xE202), GOOD_EVENTS),
    ("smpte-23-fps", smf(track(NOTE_ON), division=0xE928), ("error", "23 frames per second")),
    ("smpte-0-ticks-per-frame", smf(track(NOTE_ON), division=0xE700), ("error", "0 ticks per frame")),
    # -- chunks and tracks (SMF 1.0 "Chunks", "Track Chunks") --
    ("fewer-tracks-than-declared", smf(track(NOTE_ON, NOTE_OFF_96), declared=3), ("error", "declares 3 tracks")),
    ("track-length-past-eof", GOOD[:14] + b"MTrk\x00\x00\x10\x00" + GOOD[22:], ("error", "truncated")),
    ("zero-length-track-beside-notes", smf(chunk(b"MTrk", b""), track(TEMPO_120, NOTE_ON, NOTE_OFF_96)),
     GOOD_EVENTS),
    ("only-zero-length-tracks", smf(chunk(b"MTrk", b""), chunk(b"MTrk", b"")), ("error", "holds no notes")),
    ("empty-track-with-eot-only", smf(track()), ("error", "holds no notes")),
    # SMF 1.0: "programs should expect alien chunks and treat them as if they weren't there".
    ("alien-chunk-skipped", header() + chunk(b"XFIH", b"\x01\x02\x03") + track(NOTE_ON, NOTE_OFF_96), GOOD_EVENTS),
    ("trailing-garbage-ignored", GOOD + b"\xde\xad\xbe\xef", GOOD_EVENTS),
    ("missing-end-of-track", smf(track(TEMPO_120, NOTE_ON, NOTE_OFF_96, eot=False)), GOOD_EVENTS),
    ("events-after-end-of-track-ignored", smf(track(NOTE_ON, NOTE_OFF_96, EOT, b"\x00\x90\x40\x64", eot=False)),
     GOOD_EVENTS),
    ("ends-inside-delta", smf(track(NOTE_ON, b"\x81", eot=False)), ("error", "inside a variable-length number")),
    ("ends-after-delta", smf(track(NOTE_ON, b"\x00", eot=False)), ("error", "before its event")),
    ("ends-inside-note", smf(track(b"\x00\x90\x3c", eot=False)), ("error", "inside a note-on")),
    ("meta-past-track-end", smf(track(b"\x00\xff\x01\x7f" + b"abc", eot=False)), ("error", "meta event 0x01")),
    ("sysex-past-track-end", smf(track(b"\x00\xf0\x7f\x01", eot=False)), ("error", "sysex")),
    ("system-realtime-byte-in-track", smf(track(NOTE_ON, b"\x00\xf8")), ("error", "0xF8")),
    ("delta-longer-than-4-bytes", smf(track(b"\x81\x81\x81\x81\x01\x90\x3c\x64")), ("error", "longer than 4 bytes")),
    # -- tempo (SMF 1.0 "Meta-Events", FF 51 03 tttttt: microseconds per quarter note, 24 bits) --
    ("tempo-0", smf(track(b"\x00\xff\x51\x03\x00\x00\x00", NOTE_ON, NOTE_OFF_96)), ("error", "tempo of 0")),
    ("tempo-wrong-length", smf(track(b"\x00\xff\x51\x02\x07\xa1", NOTE_ON)), ("error", "needs 3")),
    # The largest tempo, 16,777,215 us per quarter, is legal: one tick at 96 per quarter = 0.174762656 s.
    ("tempo-0xFFFFFF", smf(track(b"\x00\xff\x51\x03\xff\xff\xff", NOTE_ON, b"\x01\x80\x3c\x00")),
     [(0.0, 0x90, 60, 100), (16.777215 / 96, 0x80, 60, 0)]),
    ("tempo-in-second-track-applies-to-all", smf(track(NOTE_ON, NOTE_OFF_96), track(b"\x00\xff\x51\x03\x0f\x42\x40")),
     [(0.0, 0x90, 60, 100), (1.0, 0x80, 60, 0)]),
    # -- running status (MIDI 1.0 Detailed Specification "Running Status"; SMF 1.0 "Track Chunks") --
    ("running-status-plain", smf(track(NOTE_ON, b"\x00\x3e\x64", NOTE_OFF_96)),
     [(0.0, 0x90, 60, 100), (0.0, 0x90, 62, 100), (0.5, 0x80, 60, 0)]),
    # SMF 1.0: sysex and meta events cancel running status, so a writer must send a status byte after them; a
    # data byte there can only mean the last channel status, and it is read so (see rtvoice.offline.midifile).
    ("running-status-across-meta", smf(track(NOTE_ON, b"\x00\xff\x01\x03abc", b"\x00\x3e\x64", NOTE_OFF_96)),
     [(0.0, 0x90, 60, 100), (0.0, 0x90, 62, 100), (0.5, 0x80, 60, 0)]),
    ("running-status-across-sysex", smf(track(NOTE_ON, b"\x00\xf0\x03\x7e\x7f\xf7", b"\x00\x3e\x64", NOTE_OFF_96)),
     [(0.0, 0x90, 60, 100), (0.0, 0x90, 62, 100), (0.5, 0x80, 60, 0)]),
    ("running-status-across-sysex-escape", smf(track(NOTE_ON, b"\x00\xf7\x01\xf8", b"\x00\x3e\x64", NOTE_OFF_96)),
     [(0.0, 0x90, 60, 100), (0.0, 0x90, 62, 100), (0.5, 0x80, 60, 0)]),
    ("running-status-at-track-start", smf(track(b"\x00\x3c\x64")), ("error", "no channel message before it")),
    ("running-status-after-only-meta", smf(track(TEMPO_120, b"\x00\x3c\x64")), ("error", "no channel message")),
    # Running status belongs to one track (each MTrk is an independent stream).
    ("running-status-does-not-cross-tracks", smf(track(NOTE_ON), track(b"\x00\x3e\x64")),
     ("error", "track 2: data byte 0x3E")),
    ("program-change-running-status", smf(track(b"\x00\xc0\x05", b"\x00\x07", NOTE_ON, NOTE_OFF_96)),
     [(0.0, 0xC0, 5, 0), (0.0, 0xC0, 7, 0), (0.0, 0x90, 60, 100), (0.5, 0x80, 60, 0)]),
    # -- data bytes beyond 127 (a status byte where a data byte belongs) --
    ("note-number-200", smf(track(b"\x00\x90\xc8\x64")), ("error", "data byte 0xC8 above 127")),
    ("velocity-200", smf(track(b"\x00\x90\x3c\xc8")), ("error", "data byte 0xC8 above 127")),
    ("velocity-255-in-running-status", smf(track(NOTE_ON, b"\x00\x3e\xff")), ("error", "data byte 0xFF")),
    ("controller-value-128", smf(track(b"\x00\xb0\x07\x80")), ("error", "control change")),
    # -- huge delta times --
    # Largest delta, 0x0FFFFFFF ticks, at 96 per quarter and 120 bpm is 388 hours: refused as too long.
    ("huge-delta-before-note", smf(track(b"\xff\xff\xff\x7f\x90\x3c\x64")), ("error", "longer than rtvoice renders")),
    ("huge-delta-before-end-only", smf(track(NOTE_ON, NOTE_OFF_96, b"\xff\xff\xff\x7f\xff\x2f\x00", eot=False)),
     GOOD_EVENTS),
]



def assert_one_clean_line(code, err, needle):
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1, err
    assert "Traceback" not in err and needle in err, err


@pytest.mark.parametrize(("data", "expected"), [c[1:] for c in CASES], ids=[c[0] for c in CASES])
def test_midi_file_case_through_render(tmp_path, capsys, data, expected):
    src = tmp_path / "in.mid"
    src.write_bytes(data)
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    out = out_dir / "x.wav"
    code, stdout, err = run_cli(["render", str(src), "-o", str(out), "--tail-cap", "0.1", *EXACT_ONSET], capsys)
    if isinstance(expected, tuple):
        assert_one_clean_line(code, err, expected[1])
        assert str(src) in err  # the message names the file
        assert list(out_dir.iterdir()) == []  # nothing written, no temporary left behind
        return
    assert code == 0, err
    got = read_midi_events(src)
    assert [e[1:] for e in got] == [e[1:] for e in expected]
    np.testing.assert_allclose([e[0] for e in got], [e[0] for e in expected], rtol=0, atol=1e-9)
    rate, audio = scipy.io.wavfile.read(out)
    assert rate == FS and audio.dtype == np.float32
    assert np.all(np.isfinite(audio)) and np.max(np.abs(audio)) <= 0.891251, \
        finite_peak(audio, 0.891251)  # the -1 dBFS ceiling
    onset = round(expected[0][0] * FS)
    assert int(np.flatnonzero(np.abs(audio) > 1e-7)[0]) == onset
    assert [p.name for p in out_dir.iterdir()] == ["x.wav"]


def good_two_track_file() -> bytes:
    return TWO_TRACKS


@pytest.mark.parametrize("cut", range(1, len(TWO_TRACKS)))
def test_every_truncation_of_a_two_track_file_is_refused(cut):
    # SMF 1.0: each chunk declares its length, so any proper prefix of the file lacks bytes it promised.
    with pytest.raises(MidiFileError, match="not a readable Standard MIDI File"):
        parse_midi_bytes(TWO_TRACKS[:cut], "cut.mid")


@pytest.mark.parametrize("cut", [1, 9, 14, 21, 22, 26, 30, len(TWO_TRACKS) - 1])
def test_truncated_files_through_render_are_one_line_and_write_nothing(tmp_path, capsys, cut):
    src = tmp_path / "cut.mid"
    src.write_bytes(TWO_TRACKS[:cut])
    out = tmp_path / "o.wav"
    code, _, err = run_cli(["render", str(src), "-o", str(out)], capsys)
    assert_one_clean_line(code, err, "not a readable Standard MIDI File")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["cut.mid"]


def test_the_whole_two_track_file_reads():
    events = parse_midi_bytes(TWO_TRACKS, "two.mid")
    assert [e[1:] for e in events] == [(0x90, 60, 100), (0x80, 60, 0), (0xB0, 64, 127)]
    np.testing.assert_allclose([e[0] for e in events], [0.0, 0.5, 0.5], atol=1e-12)


def many_notes_file(n_notes: int, per_tick: int) -> bytes:
    """Chords of ``per_tick`` one-tick notes, one chord per 2 ticks (480 per quarter), running status throughout."""
    body = bytearray()
    for chord in range(n_notes // per_tick):
        notes = [36 + (chord * 7 + j * 5) % 60 for j in range(per_tick)]
        body += b"\x01\x90" if chord else b"\x00\x90"
        body += bytes([notes[0], 80])
        for note in notes[1:]:
            body += bytes([0, note, 80])
        body += bytes([1, notes[0], 0])  # note-on velocity 0 = note-off (MIDI 1.0), still running status
        for note in notes[1:]:
            body += bytes([0, note, 0])
    return header(division=480) + chunk(b"MTrk", bytes(body) + EOT)


# Peak memory of a process is VmHWM in /proc/self/status (proc(5)): the high-water mark of this program's
# own address space. (ru_maxrss would not do: Linux carries it over from the forking parent, here pytest.)
HWM = "int(next(l for l in open('/proc/self/status') if l.startswith('VmHWM')).split()[1])"
RSS_PROBE = ("import sys; from rtvoice.cli import main; code = main(sys.argv[1:]); "
             f"print('maxrss_kib', {HWM}, file=sys.stderr); sys.exit(code)")


def render_in_child(*args: str) -> tuple[subprocess.CompletedProcess, float]:
    """`rtvoice render ARGS` in a fresh process: (result, its peak resident memory in MiB)."""
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    r = subprocess.run([sys.executable, "-c", RSS_PROBE, "render", *args], capture_output=True, text=True,
                       env=env, timeout=300)
    line = [x for x in r.stderr.splitlines() if x.startswith("maxrss_kib")]
    return r, (int(line[-1].split()[1]) / 1024 if line else float("nan"))


READ_PROBE = ("import sys; from rtvoice.offline.midifile import read_midi_events; "
              "events = read_midi_events(sys.argv[1]); "
              f"print(len(events), sum(1 for e in events if e[3] > 0), repr(events[-1][0]), {HWM})")


def test_100000_notes_are_read_in_bounded_memory(tmp_path):
    # 100,000 notes in 5,000 chords of 20 (2 ticks apart at 480 per quarter, 120 bpm: 10.4 s of music),
    # read in a fresh process that imports only the reader, so its peak memory is the reader's.
    src = tmp_path / "many.mid"
    src.write_bytes(many_notes_file(100_000, 20))
    r = subprocess.run([sys.executable, "-c", READ_PROBE, str(src)], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    n_events, n_on, last_s, rss_kib = r.stdout.split()
    assert (int(n_events), int(n_on)) == (200_000, 100_000)
    assert float(last_s) == pytest.approx((4999 * 2 + 1) * 0.5 / 480)  # last note-off tick at 120 bpm
    assert int(rss_kib) < 120 * 1024, f"{int(rss_kib) / 1024:.0f} MiB"  # Python alone ~15 MiB, the events ~50 MiB


LONG = bool(os.environ.get("RTVOICE_LONG"))


@pytest.mark.parametrize("n_notes", [
    5_000,
    # Every note-on costs the engine about 0.5 ms (voice start and stealing), so 100,000 take ~50 s:
    # run with RTVOICE_LONG=1; the CI variant renders 5,000 in the same density.
    pytest.param(100_000, marks=[pytest.mark.slow,
                                 pytest.mark.skipif(not LONG, reason="about 50 s; set RTVOICE_LONG=1")]),
])
def test_dense_notes_render_with_the_ceiling_held(tmp_path, n_notes):
    src = tmp_path / "many.mid"
    src.write_bytes(many_notes_file(n_notes, 20))
    events = read_midi_events(src)
    assert sum(1 for e in events if e[3] > 0) == n_notes
    out = tmp_path / "many.wav"
    r, _ = render_in_child(str(src), "-o", str(out), "--tail-cap", "0.2")
    assert r.returncode == 0, r.stderr
    rate, audio = scipy.io.wavfile.read(out)
    last_s = events[-1][0]
    assert last_s * rate < audio.size <= (last_s + 0.2) * rate + 2 * 2048
    assert np.all(np.isfinite(audio)) and np.max(np.abs(audio)) <= 0.891251, \
        finite_peak(audio, 0.891251)  # -1 dBFS ceiling


def test_render_memory_does_not_grow_with_the_length_of_the_piece(tmp_path):
    # Two notes 10 minutes apart: held in memory, that is 230 MB of float64 plus a float32 copy; streamed to
    # the file, the process stays the size of a one-second render.
    short, long_ = tmp_path / "short.mid", tmp_path / "long.mid"
    short.write_bytes(smf(track(NOTE_ON, NOTE_OFF_96)))
    long_.write_bytes(smf(track(b"\x00\xff\x51\x03\x0f\x42\x40", NOTE_ON, b"\x01\x80\x3c\x00",
                                vlq(600 * 96) + b"\x90\x3c\x64", b"\x01\x80\x3c\x00")))
    r1, rss_short = render_in_child(str(short), "-o", str(tmp_path / "s.wav"), "--tail-cap", "0.1")
    r2, rss_long = render_in_child(str(long_), "-o", str(tmp_path / "l.wav"), "--tail-cap", "0.1")
    assert r1.returncode == 0 and r2.returncode == 0, r1.stderr + r2.stderr
    rate, audio = scipy.io.wavfile.read(tmp_path / "l.wav", mmap=True)
    assert audio.size > 600 * rate
    assert rss_long - rss_short < 64, f"{rss_short:.0f} MiB for 1 s, {rss_long:.0f} MiB for 10 min"


def test_more_notes_than_the_limit_are_refused_before_rendering(tmp_path):
    # One note-on more than MAX_CHANNEL_EVENTS allows, written with running status (3 bytes per event).
    n = midifile.MAX_CHANNEL_EVENTS + 1
    body = b"\x00\x90\x3c\x40" + b"\x00\x3c\x40" * (n - 1) + EOT
    with pytest.raises(MidiFileError, match="more than 1,000,000 notes and controllers"):
        parse_midi_bytes(header() + chunk(b"MTrk", body), "dense.mid")


def test_too_many_events_of_any_kind_are_refused():
    # Empty text meta events (4 bytes each) cost parse time but add no notes: they are bounded too.
    n = midifile.MAX_EVENTS + 1
    body = b"\x00\xff\x01\x00" * n
    with pytest.raises(MidiFileError, match="more than 2,000,000 events"):
        parse_midi_bytes(header() + chunk(b"MTrk", body), "chatty.mid")


def test_a_file_over_the_size_limit_is_refused_without_reading_it(tmp_path, capsys):
    src = tmp_path / "huge.mid"
    with open(src, "wb") as fh:  # a sparse file: its size says too big before any byte is read
        fh.write(GOOD)
        fh.truncate(midifile.MAX_FILE_BYTES + 1)
    code, _, err = run_cli(["render", str(src), "-o", str(tmp_path / "o.wav")], capsys)
    assert_one_clean_line(code, err, "larger than rtvoice reads")
    assert not (tmp_path / "o.wav").exists()


@pytest.mark.parametrize("what", ["folder", "missing"])
def test_unreadable_paths_are_one_line(tmp_path, capsys, what):
    src = tmp_path / "d.mid"
    if what == "folder":
        src.mkdir()
    code, _, err = run_cli(["render", str(src), "-o", str(tmp_path / "o.wav")], capsys)
    assert_one_clean_line(code, err, "cannot read")
    assert not (tmp_path / "o.wav").exists()


def test_render_longer_than_a_wav_file_holds_is_refused_up_front(tmp_path, capsys):
    # RIFF sizes are 32-bit (Microsoft/IBM, "Multimedia Programming Interface and Data Specifications 1.0",
    # 1991): 4 GiB of float32 at 192 kHz is 1.55 hours, so 1 h held plus a 1 h tail cannot fit.
    out = tmp_path / "long.wav"
    code, _, err = run_cli(["render", "--note", "60", "--seconds", "3600", "--tail-cap", "3600", "--rate", "192000",
                            "-o", str(out)], capsys)
    assert_one_clean_line(code, err, "longer than a WAV file holds")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize(("data", "code", "needle"), [(TWO_TRACKS[:30], 2, "truncated"), (GOOD, 0, "wrote")])
def test_as_a_separate_process(tmp_path, data, code, needle):
    src = tmp_path / "f.mid"
    src.write_bytes(data)
    out = tmp_path / "f.wav"
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    r = subprocess.run([sys.executable, "-m", "rtvoice.cli", "render", str(src), "-o", str(out), "--tail-cap", "0.1"],
                       capture_output=True, text=True, env=env, timeout=120)
    assert r.returncode == code
    text = r.stderr if code else r.stdout
    assert needle in text and "Traceback" not in r.stderr
    if code:
        assert len(r.stderr.strip().splitlines()) == 1 and not out.exists()
    else:
        assert out.stat().st_size > 44 and Path(out).stat().st_mode & 0o644 == 0o644
