"""The host follows the audio server's rate: under a JACK server at 44.1 kHz, plain ``rtvoice`` and
``rtvoice play --headless`` play (not a silent clock) at 44100 Hz, in tune, and say so on screen.

Each test runs against a JACK dummy server of its own at 44100 Hz (every client, the host's
processes, jack_capture and the MIDI sender, is pointed at it with JACK_DEFAULT_SERVER), beside
the 48 kHz server the rest of the suite uses.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from analysis import steady_frequency_hz
from test_ui_tmux import COLUMNS, LINES, START_TIMEOUT_S, tmux, wait_screen

from rtvoice.offline.wav import read_wav
from rtvoice.procutil import stop_process

pytestmark = [pytest.mark.jack, pytest.mark.slow]

SERVER = "rtvtest-44k"
RATE_HZ = 44100
ENV = {**os.environ, "JACK_DEFAULT_SERVER": SERVER, "JACK_NO_START_SERVER": "1", "OPENBLAS_NUM_THREADS": "1"}

SENDER = """
import sys, time, rtmidi
out = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=sys.argv[1])
out.open_virtual_port("out")
time.sleep(float(sys.argv[2]))            # the host opens the port when it appears (scanned every second)
out.send_message([0x90, 64, 110])         # E4
time.sleep(1.5)
out.send_message([0x80, 64, 0])
time.sleep(0.3)
out.close_port()
"""


@pytest.fixture(scope="module")
def server_44k():
    if not (shutil.which("jackd") and shutil.which("jack_wait") and shutil.which("jack_capture")):
        pytest.skip("jackd, jack_wait or jack_capture not installed")
    proc = subprocess.Popen(["jackd", "--no-realtime", "-n", SERVER, "-d", "dummy", "-r", str(RATE_HZ), "-p", "256"],
                            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV)
    ok = subprocess.run(["jack_wait", "-s", SERVER, "-w", "-t", "10"], capture_output=True, env=ENV,
                        timeout=20, check=False).returncode == 0
    if not ok:
        stop_process(proc)
        pytest.fail("the 44.1 kHz JACK dummy server did not start")
    yield SERVER
    stop_process(proc)


def _wait_log(path: Path, text: str, timeout_s: float, proc: subprocess.Popen) -> str:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        log = path.read_text(errors="replace") if path.exists() else ""
        if text in log or proc.poll() is not None:
            return log
        time.sleep(0.1)
    return path.read_text(errors="replace")


def test_headless_host_plays_at_the_servers_rate_in_tune(server_44k, tmp_path):
    log_path, wav = tmp_path / "host.log", tmp_path / "captured.wav"
    client, sender = "rtv44", "rtv44send"
    with open(log_path, "w") as log:
        host = subprocess.Popen([sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", sender,
                                 "--client-name", client, "--duration", "30"],
                                stdin=subprocess.DEVNULL, stdout=log, stderr=subprocess.STDOUT, env=ENV,
                                start_new_session=True)
    try:
        text = _wait_log(log_path, "rtvoice: MIDI in:", START_TIMEOUT_S, host)
        assert "44100 Hz, the JACK server's rate" in text, text
        assert "silent clock" not in text, text
        assert re.search(r"audio: .*JACK.*, 44100 Hz", text), text
        assert re.search(r"MIDI to sound \d+\.\d ms", text), text  # the latency, in ms
        capture = subprocess.Popen(["jack_capture", "-d", "7", "-f", "wav", "-c", "1", "-dc", "-ns",
                                    "-p", f"{client}:out_0", str(wav)], stdin=subprocess.DEVNULL,
                                   stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=ENV)
        subprocess.run([sys.executable, "-c", SENDER, sender, "3.5"], env=ENV, timeout=30, check=True)
        capture.wait(timeout=30)
    finally:
        stop_process(host)
    samples, rate = read_wav(wav)
    x = np.asarray(samples, float).reshape(-1)
    assert rate == RATE_HZ
    assert np.max(np.abs(x)) > 1e-2, f"nothing reached the server; the host said:\n{log_path.read_text()}"
    loud = np.flatnonzero(np.abs(x) > 1e-3)
    note = x[loud[0] + 2000: loud[0] + 2000 + RATE_HZ // 2]
    # E4 = 440 * 2^((64 - 69) / 12) = 329.63 Hz (12-TET, MIDI 1.0 note numbers, common practice); the
    # default string's B = 1e-4 raises the first partial by sqrt(1 + B) (Fletcher 1964): 329.64 Hz.
    # Rendered at 48 kHz but played at 44.1 kHz it would sound at 302.8 Hz.
    f = steady_frequency_hz(note, RATE_HZ, 329.6, 20.0)
    assert f == pytest.approx(329.628 * np.sqrt(1 + 1e-4), abs=0.2)


def test_a_rate_the_server_does_not_run_at_is_refused_in_one_line(server_44k):
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", "none",
                           "--audio-device", "system", "--rate", "48000", "--client-name", "rtv44bad",
                           "--duration", "2"], capture_output=True, text=True, env=ENV, timeout=90, check=False)
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    assert "runs at 44100 Hz: leave out --rate to follow it" in proc.stderr


def test_devices_say_what_play_would_use_at_the_servers_rate(server_44k):
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "devices"], capture_output=True, text=True,
                          env=ENV, timeout=60, check=False)
    assert proc.returncode == 0, proc.stderr
    assert "JACK server: 44100 Hz" in proc.stdout
    assert re.search(r"would use: audio -> .*JACK.* at 44100 Hz, the JACK server's rate", proc.stdout), proc.stdout


def test_plain_rtvoice_in_a_terminal_plays_at_the_servers_rate_and_shows_it(server_44k, tmp_path):
    if shutil.which("tmux") is None:
        pytest.skip("tmux not found (Debian package tmux)")
    session = f"rtv44ui{os.getpid()}"
    command = " ".join(["env", f"RTVOICE_HOME={shlex.quote(str(tmp_path))}", f"JACK_DEFAULT_SERVER={SERVER}",
                        "JACK_NO_START_SERVER=1", "OPENBLAS_NUM_THREADS=1", shlex.quote(sys.executable),
                        "-m", "rtvoice.cli", "--midi-in", "virtual", "--client-name", session])
    tmux("new-session", "-d", "-s", session, "-x", str(COLUMNS), "-y", str(LINES), command)
    try:
        wait_screen(session, "protect your hearing", START_TIMEOUT_S)
        tmux("send-keys", "-t", session, "Enter")
        shown = wait_screen(session, r"44\.1 kHz")
        assert "silent clock" not in shown
        assert re.search(r"MIDI to sound \d+\.\d ms", shown), shown
    finally:
        subprocess.run(["tmux", "kill-session", "-t", session], capture_output=True, timeout=10)


def test_a_block_unlike_the_servers_period_is_said_at_start(server_44k):
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", "none",
                           "--block", "512", "--client-name", "rtv44blk", "--duration", "1.5"],
                          capture_output=True, text=True, env=ENV, timeout=90, check=False)
    assert proc.returncode == 0, proc.stderr
    assert "--block 512 differs from the JACK server's 256-frame period" in proc.stderr, proc.stderr
    assert "11.6 ms blocks on 5.8 ms periods" in proc.stderr  # 512 / 44100 and 256 / 44100 s
