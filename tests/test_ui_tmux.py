"""End to end: the real ``rtvoice`` in a terminal multiplexer (tmux) against the JACK server.

A MIDI note goes from this process into rtvoice's virtual JACK MIDI port (python-rtmidi on
the JACK API, wired with jack_connect); the test reads the terminal screen back with
``tmux capture-pane`` and watches the harmonic bars rise.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import time

import pytest
from support.jack_server import connect, list_ports, wait_for_ports

pytestmark = [pytest.mark.jack, pytest.mark.slow]

START_TIMEOUT_S = 40.0
COLUMNS, LINES = 100, 32


def tmux(*args: str) -> str:
    return subprocess.run(["tmux", *args], check=True, capture_output=True, text=True, timeout=10).stdout


def screen(session: str) -> str:
    return tmux("capture-pane", "-p", "-t", session)


def wait_screen(session: str, pattern: str, timeout_s: float = 15.0) -> str:
    deadline = time.monotonic() + timeout_s
    text = ""
    while time.monotonic() < deadline:
        try:
            text = screen(session)
        except subprocess.CalledProcessError:
            break  # the session ended
        if re.search(pattern, text):
            return text
        time.sleep(0.1)
    raise AssertionError(f"{pattern!r} never appeared; the screen was:\n{text}")


def bar_rows(text: str) -> list[str]:
    """The rows of the harmonic bars: from below their title to above the harmonic axis."""
    lines = text.splitlines()
    top = next(i for i, line in enumerate(lines) if "harmonics of" in line)
    axis = next(i for i in range(top + 1, len(lines)) if lines[i][:4].strip() == "k")
    return [line.ljust(COLUMNS) for line in lines[top + 1:axis]]  # capture-pane drops trailing blanks


def live_cells(rows: list[str]) -> int:
    """Cells of the live (solid) bars: the first column of each harmonic's pair."""
    return sum(1 for row in rows for c in range(5, len(row), 2) if row[c] in "▁▂▃▄▅▆▇█")


@pytest.fixture
def session_name():
    name = f"rtvui{os.getpid()}"
    yield name
    subprocess.run(["tmux", "kill-session", "-t", name], capture_output=True, timeout=10)


def test_rtvoice_in_tmux_shows_the_bars_rise_for_a_midi_note(jack_server, tmp_path, session_name):
    if shutil.which("tmux") is None:
        pytest.skip("tmux not found (Debian package tmux)")
    import rtmidi

    client = session_name
    # COLUMNS and LINES left out: set in this process (GNU readline sets them when a test run loads it),
    # they would override the pane's COLUMNS x LINES for the app (shutil.get_terminal_size reads them first).
    command = " ".join([
        "env", "-u", "COLUMNS", "-u", "LINES",
        f"RTVOICE_HOME={shlex.quote(str(tmp_path))}", "OPENBLAS_NUM_THREADS=1", "JACK_NO_START_SERVER=1",
        shlex.quote(sys.executable), "-m", "rtvoice.cli", "play", "--midi-in", "virtual",
        "--client-name", client,  # Textual draws on stderr: leave it on the terminal
    ])
    tmux("new-session", "-d", "-s", session_name, "-x", str(COLUMNS), "-y", str(LINES), command)
    sender = None
    try:
        first = wait_screen(session_name, "protect your hearing", START_TIMEOUT_S)
        assert "-1" in first and "dBFS" in first  # the listening note, on first start
        tmux("send-keys", "-t", session_name, "Enter")
        before = wait_screen(session_name, "harmonics of")
        assert "audio out:" in before and client in before  # the JACK ports in use
        assert live_cells(bar_rows(before)) == 0  # nothing rings yet

        midi_in = f"{client}-midi:in"
        wait_for_ports(f"^{re.escape(midi_in)}$", timeout_s=10)
        sender = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=f"{client}-send")
        sender.open_virtual_port("out")
        wait_for_ports(f"^{re.escape(client)}-send:out$", timeout_s=10)
        connect(f"{client}-send:out", midi_in)
        time.sleep(0.3)
        sender.send_message([0x90, 52, 110])  # E3
        ringing = wait_screen(session_name, r"ringing E3")
        rows = bar_rows(ringing)
        assert live_cells(rows) > 20  # the bars rose
        k1 = [row[5] for row in rows]  # live column of the fundamental, top to bottom
        assert k1[-1] == "█"
        assert "harmonics of E3" in ringing

        sender.send_message([0xB0, 123, 0])  # all notes off: released, the bars fall back
        sender.send_message([0x80, 52, 0])
        # Both the meters and the status line must settle: the status redraws on its own timer.
        quiet = wait_screen(session_name, r"\A(?![^\n]*ringing)[\s\S]*voices  0")
        assert "ringing" not in quiet.splitlines()[0]

        tmux("send-keys", "-t", session_name, "C-q")  # nothing unsaved: quits without asking
        deadline = time.monotonic() + 15
        while time.monotonic() < deadline:
            if subprocess.run(["tmux", "has-session", "-t", session_name], capture_output=True).returncode:
                break
            time.sleep(0.1)
        else:
            raise AssertionError(f"rtvoice did not quit:\n{screen(session_name)}")
        deadline = time.monotonic() + 10  # and the engine process went with it
        while time.monotonic() < deadline and list_ports(f"^{re.escape(client)}:"):
            time.sleep(0.1)
        assert not list_ports(f"^{re.escape(client)}:")
    finally:
        if sender is not None:
            sender.close_port()
            sender.delete()
