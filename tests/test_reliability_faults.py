"""Faults under ``rtvoice play --headless`` on real JACK servers (dummy backend).

The server-loss test runs a JACK server of its own (``jackd -n NAME``), so no other test
loses its server; the MIDI tests use the session's server. MIDI comes from
:class:`support.midi_senders.RawMidiSender`, an external libjack client in a subprocess that can vanish
(its client closed: an unplugged device) and come back under the same name.

Sources: 12-TET f = 440 * 2^((n - 69) / 12), A4 = 440 Hz (ISO 16:1975); MIDI 1.0 Detailed
Specification for the messages; -1 dBFS ceiling (rtvoice.engine.output.CEILING, the
project's listening-safety rule). A stop "without a click" is checked as in
test_host_jack.py: the last 20 ms far below the steady level, no sample step larger than
the steady signal has (common practice for a fade).
"""

from __future__ import annotations

import os
import shutil
import signal
import subprocess
import sys
import time

import numpy as np
import pytest
from analysis import peak_frequency_hz
from support.describe import finite_peak
from support.headless_host import HeadlessHost
from support.jack_server import JACK_ENV, connect, connections, list_ports, server_answers, wait_for_ports
from support.midi_senders import RawMidiSender

from rtvoice.engine.output import CEILING
from rtvoice.offline.wav import read_wav

pytestmark = pytest.mark.jack

SOUND = ["--set", "string.inharmonicity=0", "--set", "string.t60_low=20", "--set", "string.t60_high=20"]


def equal_tempered_hz(note: int) -> float:
    return 440.0 * 2.0 ** ((note - 69) / 12)


def cents_off(x: np.ndarray, rate: int, note: int) -> float:
    """Pitch error of the first note in ``x`` (0.1 .. 0.9 s after it starts), in cents."""
    loud = np.flatnonzero(np.abs(x) > 1e-3)
    assert loud.size, "no note sounded"
    i = int(loud[0])
    seg = x[i + rate // 10: i + int(0.9 * rate)]
    assert seg.size > rate // 2, "the note was cut short"
    want = equal_tempered_hz(note)
    return 1200 * np.log2(peak_frequency_hz(seg, rate, want, 20.0) / want)


def _wait(predicate, timeout_s: float, poll_s: float = 0.05) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if predicate():
            return True
        time.sleep(poll_s)
    return bool(predicate())


# -- the audio server stopped and restarted while notes play ------------------------------------

@pytest.fixture
def own_server(monkeypatch):
    """A JACK dummy server named for this test; every support helper talks to it."""
    if shutil.which("jackd") is None or shutil.which("jack_wait") is None:
        pytest.skip("jackd/jack_wait not found (Debian package jackd2)")
    name = f"rtvfault{os.getpid()}"
    monkeypatch.setitem(JACK_ENV, "JACK_DEFAULT_SERVER", name)
    env = dict(JACK_ENV)
    procs: list[subprocess.Popen] = []

    def start() -> float:
        """Start the server; returns the time it answered (time.monotonic)."""
        proc = subprocess.Popen(["jackd", "-n", name, "--no-realtime", "-d", "dummy", "-r", "48000", "-p", "256"],
                                stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                env=env)
        procs.append(proc)
        done = subprocess.run(["jack_wait", "-w", "-t", "10"], env=env, capture_output=True, timeout=20)
        assert done.returncode == 0 and server_answers(), "the test's JACK server did not start"
        return time.monotonic()

    def kill() -> None:
        for proc in procs:
            if proc.poll() is None:
                proc.kill()  # no goodbye to the clients: the server just dies
                proc.wait(10)

    server = type("OwnServer", (), {"name": name, "env": env, "start": staticmethod(start),
                                    "kill": staticmethod(kill)})
    try:
        yield server
    finally:
        for proc in procs:
            if proc.poll() is None:
                proc.terminate()
                try:
                    proc.wait(10)
                except subprocess.TimeoutExpired:
                    proc.kill()


def test_server_killed_while_notes_play_is_reported_and_the_host_comes_back(own_server, tmp_path):
    own_server.start()
    name = f"rtvkill{os.getpid()}"
    host = HeadlessHost(name, tmp_path / "host.log", rate=48000, block=256, extra=SOUND,
                                 record=tmp_path / "take.wav", env=own_server.env)
    sender = None
    try:
        host.wait_ready()
        sender = RawMidiSender(f"{name}-send", env=own_server.env)
        connect(sender.port, host.midi_port)
        time.sleep(0.6)  # the ramp in
        for note in (45, 57):  # two notes ringing (T60 20 s) when the server dies
            sender.send([0x90, note, 100])
        sender.flush()
        time.sleep(0.8)
        before = host.recorded()
        assert np.max(np.abs(before[-4800:])) > 1e-2  # they ring
        own_server.kill()
        sender.kill()
        assert host.wait_for_log("audio output lost", 10.0), host.log()[-2000:]
        lost_at = time.monotonic()
        assert _wait(lambda: time.monotonic() - lost_at > 1.5 and host.running(), 3.0)
        count = len(host.statuses())
        assert _wait(lambda: len(host.statuses()) > count, 3.0)  # the status line goes on
        assert host.running()
        ready_at = own_server.start()
        assert host.wait_for_log("audio output back", 40.0), host.log()[-2000:]
        wait_for_ports(f"^{host.out_port}$", timeout_s=10)
        wait_for_ports(f"^{host.midi_port}$", timeout_s=10)
        reconnect_s = time.monotonic() - ready_at
        print(f"reconnect: {reconnect_s:.1f} s after the server answered again")
        sender = RawMidiSender(f"{name}-send", env=own_server.env)
        connect(sender.port, host.midi_port)
        time.sleep(0.6)  # a restarted engine ramps in again
        start = host.recorded().size
        sender.send([0x90, 64, 100])
        sender.flush()
        time.sleep(1.2)
        after = host.recorded()[start:]
        assert abs(cents_off(after, 48000, 64)) < 0.2
        sender.close()
        sender = None
        assert host.stop() == 0, host.log()[-2000:]
        log = host.log()
        assert "stopped" in log and "recorded" in log
        take, rate = read_wav(tmp_path / "take.wav")
        assert rate == 48000
        assert np.all(np.isfinite(take)) and np.max(np.abs(take)) <= CEILING, finite_peak(take, CEILING)
        # Nothing lost: the take still holds the notes from before the loss, sample for sample.
        n = min(before.size, take.size)
        assert n >= before.size - 48 and np.array_equal(take[:n], before[:n].astype(np.float32))
    finally:
        if sender is not None:
            sender.kill()
        host.stop()


# -- a MIDI input unplugged and plugged back ------------------------------------------------------

def _note_sounds(host: HeadlessHost, sender: RawMidiSender, note: int) -> float:
    """Play ``note`` through ``sender``; return its pitch error in cents (asserts it sounded)."""
    start = host.recorded().size
    sender.send([0x90, note, 100])
    sender.flush()
    time.sleep(1.1)
    sender.send([0x80, note, 0])
    sender.flush()
    return cents_off(host.recorded()[start:], host.rate, note)


def test_midi_input_unplugged_and_plugged_back_is_closed_and_reopened(jack_server, tmp_path):
    """An external JACK MIDI client the host opened (``--midi-in NAME``) closes and comes back
    under the same name: first after a while (the host sees it gone), then at once, between
    two of the host's port scans (the same name, but a new port the host is not connected to:
    JACK dropped the connection with the old one)."""
    tag = f"rtvplug{os.getpid()}"
    name = f"{tag}host"
    host = HeadlessHost(name, tmp_path / "host.log", rate=jack_server.sample_rate_hz,
                                 block=jack_server.buffer_frames, extra=SOUND, record=tmp_path / "take.wav",
                                 midi_in=tag)
    opened, gone = f"MIDI input opened: {tag}:out", f"MIDI input gone: {tag}:out"
    sender = None
    try:
        host.wait_ready(midi=False)
        sender = RawMidiSender(tag)
        assert host.wait_for_log(opened, 10.0), host.log()[-2000:]
        time.sleep(0.6)
        assert abs(_note_sounds(host, sender, 57)) < 0.2
        for round_, away_s in ((2, 1.5), (3, 0.0)):
            again = RawMidiSender(tag, paused=True)  # the process only, no client yet
            sender.unplug()
            old, sender = sender, again
            if away_s:
                assert host.wait_for_log(gone, 10.0), host.log()[-2000:]
                time.sleep(away_s)
            sender.open()  # plugged back under the same name (at once: within milliseconds)
            old.close()
            assert _wait(lambda n=round_: host.log().count(opened) >= n, 10.0), host.log()[-2000:]
            assert host.log().count(gone) == round_ - 1
            peers = connections().get(f"{tag}:out", [])
            assert any(p.startswith(name) for p in peers), peers
            assert abs(_note_sounds(host, sender, 60 + round_)) < 0.2
            assert host.running()
        sender.close()
        sender = None
        assert host.stop() == 0, host.log()[-2000:]
        take, _ = read_wav(tmp_path / "take.wav")
        assert np.all(np.isfinite(take)) and np.max(np.abs(take)) <= CEILING, finite_peak(take, CEILING)
    finally:
        if sender is not None:
            sender.close()
        host.stop()


# -- the UI process killed: the engine fades out and exits ------------------------------------------

def _running(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().split(") ")[1][0] != "Z"  # a zombie has exited
    except (FileNotFoundError, IndexError):
        return False


def test_ui_killed_while_a_note_rings_the_engine_fades_out_and_exits(jack_server, tmp_path):
    """The engine exits when its UI dies, and fades out first: checked on what the engine played
    (its --record take ends with the fade, not a cut)."""
    name = f"rtvorphan{os.getpid()}"
    take = tmp_path / "take.wav"
    script = (
        "import time\n"
        "from rtvoice.engine.settings import Settings\n"
        "from rtvoice.host.link import EngineLink\n"
        "if __name__ == '__main__':\n"
        "    s = Settings.defaults().with_values({'string.t60_low': 20.0, 'string.t60_high': 20.0})\n"
        f"    link = EngineLink(s, midi_in='none', client_name='{name}', record={str(take)!r},\n"
        f"                      rate={jack_server.sample_rate_hz}, block={jack_server.buffer_frames})\n"
        "    link.start()\n"
        "    time.sleep(0.6)\n"
        "    link.note_on(57, 100)\n"
        "    time.sleep(1.0)\n"
        "    print(link.ready_info.pid, flush=True)\n"
        "    time.sleep(120)\n"
    )
    path = tmp_path / "ui_stand_in.py"
    path.write_text(script)
    ui = subprocess.Popen([sys.executable, str(path)], stdout=subprocess.PIPE, text=True,
                          env=JACK_ENV, start_new_session=True)
    engine_pid = -1
    try:
        engine_pid = int(ui.stdout.readline())
        ui.send_signal(signal.SIGKILL)  # the UI dies without a word
        ui.wait(5)
        killed_at = time.monotonic()
        assert _wait(lambda: not _running(engine_pid), 10.0), "the engine outlived its UI"
        print(f"engine gone {time.monotonic() - killed_at:.2f} s after its UI was killed")
        assert not list_ports(f"^{name}:")
    finally:
        if ui.poll() is None:
            ui.kill()
            ui.wait(5)
        ui.stdout.close()
        if engine_pid > 0 and _running(engine_pid):
            os.kill(engine_pid, signal.SIGKILL)
    x, rate = read_wav(take)
    assert np.all(np.isfinite(x)) and np.max(np.abs(x)) <= CEILING, finite_peak(x, CEILING)
    last = int(np.flatnonzero(x)[-1])
    steady = x[last - int(0.9 * rate): last - rate // 10]  # the note rings; the fade takes the last 80 ms
    assert np.sqrt(np.mean(steady**2)) > 1e-2  # the note still rang when the UI died
    end = x[last - int(0.02 * rate): last + 1]
    assert np.max(np.abs(end)) < 0.3 * np.max(np.abs(steady))  # a fade, not a cut
    fade = x[last - rate // 10: last + 1]
    assert np.max(np.abs(np.diff(fade))) <= 1.01 * np.max(np.abs(np.diff(steady)))  # no click
