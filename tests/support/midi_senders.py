"""MIDI sources for tests: external JACK MIDI clients that feed the host under test.

:class:`RtmidiSender` is python-rtmidi's JACK output (its own C++ thread sends: fast enough for a
flood); :class:`RawMidiSender` is a libjack client in a subprocess that writes any bytes as one
JACK MIDI event, and can vanish and come back like a device unplugged and plugged in again.
"""

from __future__ import annotations

import re
import select
import subprocess
import sys
from collections.abc import Sequence
from pathlib import Path

from .jack_server import JACK_ENV, JackError, wait_for_ports

#: The sender subprocess: a script of its own (stdlib only), run by path.
SENDER_SCRIPT = Path(__file__).with_name("raw_midi_sender.py")


class RawMidiSender:
    """An external JACK client ``name`` with one MIDI output ``name:out`` that sends any bytes.

    python-rtmidi refuses messages longer than three bytes that do not start with F0, so a
    sender that breaks the rules (random bytes, several messages or real-time bytes in one
    event) needs a client of its own. It runs in a subprocess (:mod:`support.raw_midi_sender`
    run as a script), a libjack client through ctypes whose process callback writes the queued
    events at the start of the next period, so a busy test process cannot delay it. Each :meth:`send` is one
    JACK MIDI event; :meth:`flush` waits until everything sent so far went out. Events JACK
    has no room for in one period's buffer (larger than ``max_event_bytes``) are skipped and
    counted in :attr:`too_big`.
    """

    def __init__(self, name: str, *, timeout_s: float = 10.0, env: dict[str, str] | None = None,
                 paused: bool = False) -> None:
        """Start the client; with ``paused`` only the process starts, and :meth:`open` then
        opens the client within milliseconds (to plug a device back at once)."""
        self.name = name
        self.port = f"{name}:out"
        self.too_big = 0
        self.max_event_bytes = 0
        self._timeout_s = timeout_s
        self.process = subprocess.Popen(
            [sys.executable, str(SENDER_SCRIPT), name],
            env=env or JACK_ENV, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
            text=True, bufsize=1,
        )
        self._sync = 0
        if self._reply(timeout_s) != "waiting":
            self.kill()
            raise JackError(f"raw MIDI sender {name} did not start")
        if not paused:
            self.open()

    def open(self) -> None:
        """Open the JACK client (and its port) of a sender started ``paused``."""
        assert self.process.stdin is not None
        self.process.stdin.write("open\n")
        self.process.stdin.flush()
        line = self._reply(self._timeout_s)
        if not line.startswith("ready"):
            self.close()
            raise JackError(f"raw MIDI sender {self.name} did not open its client: {line!r}")
        self.max_event_bytes = int(line.split()[1])

    def _reply(self, timeout_s: float) -> str:
        assert self.process.stdout is not None
        ready, _, _ = select.select([self.process.stdout], [], [], timeout_s)
        if not ready:
            raise JackError(f"raw MIDI sender {self.name} did not answer within {timeout_s} s")
        return self.process.stdout.readline().strip()

    def send(self, data: Sequence[int] | bytes) -> None:
        """Queue one JACK MIDI event holding exactly ``data`` (any bytes, at least one)."""
        if len(data) == 0:
            raise ValueError("a JACK MIDI event holds at least one byte")
        assert self.process.stdin is not None
        self.process.stdin.write(bytes(data).hex() + "\n")

    def flush(self, timeout_s: float = 10.0) -> None:
        """Wait until every event sent so far has been written to JACK."""
        assert self.process.stdin is not None
        self._sync += 1
        self.process.stdin.write(f"sync {self._sync}\n")
        self.process.stdin.flush()
        line = self._reply(timeout_s)
        if line.split()[:2] != ["done", str(self._sync)]:
            raise JackError(f"raw MIDI sender {self.name}: unexpected reply {line!r}")
        self.too_big = int(line.split()[2])

    def close(self) -> None:
        """Close the client: its port disappears from the server (an unplugged device)."""
        if self.process.poll() is None and self.process.stdin is not None and not self.process.stdin.closed:
            try:
                assert self.process.stdin is not None
                self.process.stdin.write("quit\n")
                self.process.stdin.flush()
                self.process.wait(5)
            except (OSError, subprocess.TimeoutExpired):
                self.process.kill()
                self.process.wait(5)
        self._close_pipes()

    def _close_pipes(self) -> None:
        for pipe in (self.process.stdin, self.process.stdout):
            if pipe is not None and not pipe.closed:
                try:
                    pipe.close()
                except OSError:
                    pass

    def unplug(self, timeout_s: float = 5.0) -> None:
        """Close the client and return as soon as its port is gone (the process ends after)."""
        assert self.process.stdin is not None
        self.process.stdin.write("quit\n")
        self.process.stdin.flush()
        if self._reply(timeout_s) != "closed":
            raise JackError(f"{self.port} did not close")

    def kill(self) -> None:
        """End the sender process at once (its server died: closing the client could wait)."""
        if self.process.poll() is None:
            self.process.kill()
        self.process.wait(5)
        self._close_pipes()

    def __enter__(self) -> RawMidiSender:
        return self

    def __exit__(self, *_exc: object) -> None:
        self.close()


class RtmidiSender:
    """A python-rtmidi JACK MIDI output ``name:out`` (rtmidi's own C++ client thread sends)."""

    def __init__(self, name: str) -> None:
        import rtmidi

        self.name = name
        self.port = f"{name}:out"
        self.out = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=name)
        self.out.open_virtual_port("out")
        wait_for_ports(f"^{re.escape(self.port)}$", timeout_s=10)
        self.send = self.out.send_message

    def close(self) -> None:
        if self.out is not None:
            self.out.close_port()
            self.out.delete()
            self.out = None
