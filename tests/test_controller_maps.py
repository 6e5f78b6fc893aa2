"""Controller maps act inside the engine: a MIDI file that moves pickup 1 with CC1 renders the
pickup moving offline (``rtvoice render``) as it does live (``rtvoice play`` under JACK), and a
preset's own ``[[control]]`` tables apply offline too.

The check is physical: a pickup at 1/4 of the string leaves out the 4th harmonic, since its weight
sin(k pi x) is zero there (Paiva, Pakarinen & Valimaki, "Acoustics and Modeling of Pickups",
JAES 60(10), 2012), and away from the nulls the harmonics' levels follow the pickup's place.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import mido
import numpy as np
import pytest

from rtvoice.cli import main
from rtvoice.engine.controls import default_entries, scale
from rtvoice.engine.settings import Settings
from rtvoice.offline.wav import read_wav

FS = 48000
NOTE, F0_HZ, B = 40, 82.40689, 1e-4  # E2 (12-TET, common practice) on the default string (B = 1e-4)
MOVE_S, OFF_S = 0.5, 2.2
CC1 = next(e for e in default_entries() if e.get("cc") == 1)  # pickup 1 on CC1/33, 14 bits
QUARTER_VALUE = round((0.25 - CC1["low"]) / (CC1["high"] - CC1["low"]) * 16383)  # nearest to 1/4
QUARTER_X = scale(CC1, QUARTER_VALUE / 16383)  # where that value puts the pickup
# Harmonics away from the nulls: the pickup at 1/4 leaves out k = 4, 8, the default pluck at 1/5
# leaves out k = 5 (Fletcher & Rossing, The Physics of Musical Instruments, 1998, ch. 2).
NOT_NULL = [0, 1, 2, 5, 6]  # k = 1, 2, 3, 6, 7


def _smf(path: Path, with_move: bool, cc: tuple[int, ...] = (1, 33)) -> Path:
    """E2 held, and at MOVE_S the controller pair that moves pickup 1 to about 1/4 of the string."""
    mid = mido.MidiFile(ticks_per_beat=480)  # 120 bpm: 960 ticks a second
    track = mido.MidiTrack()
    mid.tracks.append(track)
    track.append(mido.Message("note_on", note=NOTE, velocity=110, time=0))
    events = []
    if with_move:
        msb, lsb = QUARTER_VALUE >> 7, QUARTER_VALUE & 0x7F
        values = (msb, lsb) if len(cc) == 2 else (int(cc[1]),)
        events = [mido.Message("control_change", control=c, value=v, time=0) for c, v in zip(cc, values, strict=False)]
        events[0].time = int(MOVE_S * 960)
    track.extend(events)
    held_s = OFF_S - (MOVE_S if with_move else 0.0)
    track.append(mido.Message("note_off", note=NOTE, velocity=0, time=int(held_s * 960)))
    mid.save(path)
    return path


def harmonic_levels_db(x: np.ndarray, fs: int, start_s: float, stop_s: float, n: int = 8) -> np.ndarray:
    """Levels of harmonics 1..n of E2 in a window: Hann-windowed FFT peaks near f_k = k f0 sqrt(1 + B k^2)
    (Fletcher 1964)."""
    seg = x[int(start_s * fs):int(stop_s * fs)]
    spec = np.abs(np.fft.rfft(seg * np.hanning(seg.size), 8 * seg.size))
    f = np.fft.rfftfreq(8 * seg.size, 1 / fs)
    out = []
    for k in range(1, n + 1):
        fk = k * F0_HZ * np.sqrt(1 + B * k * k)
        band = np.abs(f - fk) < 3.0
        out.append(20 * np.log10(spec[band].max() + 1e-300))
    return np.array(out)


def _render(args: list[str], out: Path) -> np.ndarray:
    assert main(["render", *args, "-o", str(out), "--tail-cap", "0"]) == 0
    samples, rate = read_wav(out)
    assert rate == FS
    return np.asarray(samples, float).reshape(-1)


def test_an_smf_that_moves_the_pickup_with_cc1_renders_the_pickup_moving_offline(tmp_path):
    swept = _render([str(_smf(tmp_path / "swept.mid", True))], tmp_path / "swept.wav")
    still = _render([str(_smf(tmp_path / "still.mid", False))], tmp_path / "still.wav")
    placed = _render([str(_smf(tmp_path / "still.mid", False)), "--set", f"pickup.0.position={QUARTER_X!r}"],
                     tmp_path / "placed.wav")
    before, after = harmonic_levels_db(swept, FS, 0.1, 0.45), harmonic_levels_db(swept, FS, 1.0, 1.9)
    reference = harmonic_levels_db(placed, FS, 1.0, 1.9)
    assert not np.array_equal(swept, still)  # the controller was not ignored
    assert before[3] > before[2] - 30  # at 0.15 of the string the 4th harmonic sounds
    assert after[3] < min(after[2], after[5]) - 40  # at 1/4 it is gone
    keep = NOT_NULL
    # After the move, the file sounds as the same note played with the pickup there from the start.
    np.testing.assert_allclose(after[keep] - after[0], reference[keep] - reference[0], atol=0.5)


def test_a_presets_own_control_table_applies_offline(tmp_path):
    # The range ends at 0.27 of the scale (175 mm), short of the default neck's 22nd fret at 181.8 mm
    # (12-TET fret rule, common practice): the pickup may sit there on the default instrument.
    preset = tmp_path / "knob.toml"
    preset.write_text('name = "knob"\n[[control]]\ntarget = "pickup.0.position"\nsource = "cc"\ncc = 20\n'
                      'bits = 7\nlow = 0.125\nhigh = 0.27\n', encoding="utf-8")
    mid = mido.MidiFile(ticks_per_beat=480)
    track = mido.MidiTrack()
    mid.tracks.append(track)
    track += [mido.Message("control_change", control=20, value=127, time=0),
              mido.Message("note_on", note=NOTE, velocity=110, time=96),  # 0.1 s later
              mido.Message("note_off", note=NOTE, velocity=0, time=960)]
    mid.save(tmp_path / "knob.mid")
    x = _render([str(tmp_path / "knob.mid"), "--preset", str(preset)], tmp_path / "knob.wav")
    ref = _render([str(tmp_path / "knob.mid"), "--preset", str(preset), "--set", "pickup.0.position=0.27"],
                  tmp_path / "ref.wav")
    got, want = harmonic_levels_db(x, FS, 0.3, 1.0), harmonic_levels_db(ref, FS, 0.3, 1.0)
    np.testing.assert_allclose(got, want, atol=0.05)  # CC20 at 127 put the pickup at 0.27
    plain = _render([str(tmp_path / "knob.mid")], tmp_path / "plain.wav")  # the default map: CC20 is free
    assert np.max(np.abs(harmonic_levels_db(plain, FS, 0.3, 1.0) - got)) > 1.0


SENDER = """
import sys, time, rtmidi
out = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=sys.argv[1])
out.open_virtual_port("out")
time.sleep(3.5)                              # the host opens a new port within a second or so
value = int(sys.argv[2])
out.send_message([0x90, 40, 110])
time.sleep(0.5)
out.send_message([0xB0, 1, value >> 7])
out.send_message([0xB0, 33, value & 0x7F])
time.sleep(1.7)
out.send_message([0x80, 40, 0])
time.sleep(0.5)
out.close_port()
"""


@pytest.mark.jack
@pytest.mark.slow
def test_the_same_controller_move_sounds_the_same_live_under_jack_and_offline(jack_server, tmp_path):
    if shutil.which("jackd") is None:
        pytest.skip("jackd not installed")
    client, sender = f"rtvcc{os.getpid()}", f"rtvccsend{os.getpid()}"
    take = tmp_path / "live.wav"
    env = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "JACK_NO_START_SERVER": "1"}
    log = tmp_path / "host.log"
    with open(log, "w") as fh:
        host = subprocess.Popen([sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", sender,
                                 "--client-name", client, "--record", str(take), "--duration", "60"],
                                stdin=subprocess.DEVNULL, stdout=fh, stderr=subprocess.STDOUT, env=env,
                                start_new_session=True)
    try:
        deadline = time.monotonic() + 40
        while "rtvoice: MIDI in:" not in log.read_text() and time.monotonic() < deadline and host.poll() is None:
            time.sleep(0.1)
        subprocess.run([sys.executable, "-c", SENDER, sender, str(QUARTER_VALUE)], env=env, timeout=60, check=True)
    finally:
        host.terminate()
        host.wait(timeout=30)
    samples, rate = read_wav(take)
    live = np.asarray(samples, float).reshape(-1)
    onset = int(np.flatnonzero(np.abs(live) > 1e-4)[0])
    live = live[onset:]
    assert "MIDI input opened" in log.read_text(), log.read_text()
    offline = _render([str(_smf(tmp_path / "swept.mid", True))], tmp_path / "offline.wav")
    live_after, offline_after = harmonic_levels_db(live, rate, 1.0, 1.9), harmonic_levels_db(offline, FS, 1.0, 1.9)
    assert live_after[3] < min(live_after[2], live_after[5]) - 40  # live, too, the pickup went to 1/4
    keep = NOT_NULL
    # Live and offline heard the same move (the live note started on a block boundary's jitter and
    # its controller some milliseconds apart; the window is long after both settled).
    np.testing.assert_allclose(live_after[keep] - live_after[0], offline_after[keep] - offline_after[0], atol=0.5)
    assert Settings.defaults().get("pickup.0.position") != pytest.approx(QUARTER_X)
