"""``rtvoice play --headless`` as a subprocess under test, and its once-a-second status line.

Typical use::

    from support.headless_host import HeadlessHost

    host = HeadlessHost("rtvt1", tmp_path / "host.log", rate=48000, block=256).wait_ready()
    ...
    assert host.stop() == 0, host.log()[-2000:]
"""

from __future__ import annotations

import re
import signal
import subprocess
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from rtvoice.offline.wav import read_wav
from rtvoice.procutil import stop_process

from .jack_server import JACK_ENV, JackError, wait_for_ports

#: One status line of ``rtvoice play --headless`` (rtvoice/host/headless.py status_line).
STATUS_RE = re.compile(
    r"^voices\s+(?P<voices>\d+) \| load\s+(?P<load_median>[\d.]+)% median\s+(?P<load_p99>[\d.]+)% p99"
    r" \| xruns (?P<xruns>\d+) \| peak\s+(?P<peak_dbfs>-?[\d.]+|-inf) dBFS \| limiter\s+(?P<limiter_db>[\d.]+) dB"
    r" \| midi (?P<midi>\d+)(?: \| dropped (?P<dropped>\d+))?(?: \| late (?P<late>\d+))?"
)


@dataclass(frozen=True)
class Status:
    """One parsed status line: load as a share of the block period (0.5 = 50 %)."""

    voices: int
    load_median: float
    load_p99: float
    xruns: int
    peak_dbfs: float
    limiter_db: float
    midi: int
    dropped: int
    late: int
    """Callbacks that took longer than the block period (the host's own overruns)."""


def parse_status(line: str) -> Status | None:
    """The status line ``line`` parsed, or None when it is not one."""
    match = STATUS_RE.match(line.strip())
    if match is None:
        return None
    g = match.groupdict()
    return Status(int(g["voices"]), float(g["load_median"]) / 100, float(g["load_p99"]) / 100,
                  int(g["xruns"]), float("-inf") if g["peak_dbfs"] == "-inf" else float(g["peak_dbfs"]),
                  float(g["limiter_db"]), int(g["midi"]), int(g["dropped"] or 0), int(g["late"] or 0))


class HeadlessHost:
    """``rtvoice play --headless --midi-in virtual`` under the JACK client name ``name``.

    Its stderr goes to ``log_path``; :meth:`statuses` parses the status lines printed once a
    second. With ``record`` the host writes what it played to that WAV (``--record``), whose
    header is valid after every write, so :meth:`recorded` can read it while the host runs.
    """

    START_TIMEOUT_S = 40.0  # the host imports numpy and scipy: slow on a busy 2-core machine

    def __init__(self, name: str, log_path: Path, *, rate: int, block: int, extra: Sequence[str] = (),
                 record: Path | None = None, midi_in: str = "virtual",
                 env: dict[str, str] | None = None) -> None:
        self.name = name
        self.log_path = Path(log_path)
        self.record_path = record
        self.rate = rate
        self.block = block
        self.out_port = f"{name}:out_0"
        self.midi_port = f"{name}-midi:in"
        args = [sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", midi_in,
                "--client-name", name, "--rate", str(rate), "--block", str(block), *extra]
        if record is not None:
            args += ["--record", str(record)]
        self._log = open(self.log_path, "w")  # noqa: SIM115 - closed in stop()
        self.process = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=self._log,
                                        stderr=subprocess.STDOUT, env=env or JACK_ENV,
                                        start_new_session=True)

    def log(self) -> str:
        """Everything the host has printed so far."""
        return self.log_path.read_text(errors="replace")

    def wait_for_log(self, text: str, timeout_s: float) -> bool:
        """Wait until ``text`` is in the log; False when it was not within ``timeout_s``."""
        deadline = time.monotonic() + timeout_s
        while text not in self.log():
            if time.monotonic() > deadline or self.process.poll() is not None:
                return text in self.log()
            time.sleep(0.05)
        return True

    def wait_ready(self, midi: bool = True) -> HeadlessHost:
        """Wait until the host has started and its output port (and, with ``midi``, its MIDI
        input port) exists; stop it and raise JackError when it did not start."""
        if not self.wait_for_log("rtvoice: MIDI in:", self.START_TIMEOUT_S):
            self.stop()
            raise JackError(f"host {self.name} did not start: {self.log()[-2000:]}")
        wait_for_ports(f"^{re.escape(self.out_port)}$", timeout_s=10)
        if midi:
            wait_for_ports(f"^{re.escape(self.midi_port)}$", timeout_s=10)
        return self

    def statuses(self) -> list[Status]:
        """Every status line printed so far, oldest first."""
        return [s for s in map(parse_status, self.log().splitlines()) if s is not None]

    def next_status(self, timeout_s: float = 5.0) -> Status:
        """Wait for a status line printed after this call and return it."""
        count = len(self.statuses())
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            found = self.statuses()
            if len(found) > count:
                return found[-1]
            time.sleep(0.05)
        raise JackError(f"host {self.name} printed no status line within {timeout_s} s: {self.log()[-1000:]}")

    def recorded(self) -> np.ndarray:
        """Everything ``--record`` has written so far (float64, mono)."""
        assert self.record_path is not None
        samples, rate = read_wav(self.record_path)
        assert rate == self.rate
        return np.asarray(samples, dtype=np.float64).reshape(-1)

    def running(self) -> bool:
        return self.process.poll() is None

    def stop(self, timeout_s: float = 15.0, sig: int = signal.SIGTERM) -> int:
        """``sig`` (SIGTERM unless told), then wait (SIGKILL after ``timeout_s``); returns the
        exit status. Stopping a host that has already ended only collects its status."""
        code = stop_process(self.process, timeout_s, sig)
        self._log.close()
        return code
