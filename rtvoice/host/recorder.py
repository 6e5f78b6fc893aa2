"""``--record``: what the callback played goes to a WAV file from a writer thread.

The callback only copies each block into a :class:`~rtvoice.host.ring.SampleRing`;
this thread takes whatever is new every few tens of milliseconds and appends it
with :class:`~rtvoice.offline.wav.WavStreamWriter`, whose header is valid after
every write, so the file plays even after Ctrl-C or a crash.
"""

from __future__ import annotations

import threading
from pathlib import Path

from rtvoice.host.errors import HostError
from rtvoice.host.ring import SampleRing
from rtvoice.offline.wav import WavStreamWriter

WRITE_EVERY_S = 0.05


class Recorder:
    def __init__(self, path: str | Path, rate: int, ring: SampleRing):
        self.path = Path(path)
        self.ring = ring
        try:
            self.writer = WavStreamWriter(self.path, rate, 1)
        except OSError as err:
            raise HostError(f"cannot write the recording {self.path}: {err.strerror or err}") from None
        self._pos = ring.written
        self.lost = 0
        self.error: str | None = None
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, daemon=True, name="rtvoice-recorder")

    def start(self) -> None:
        self._thread.start()

    def _run(self) -> None:
        while not self._stop.wait(WRITE_EVERY_S):
            self._drain()

    def _drain(self) -> None:
        if self.error:
            return
        data, self._pos, lost = self.ring.read_since(self._pos)
        self.lost += lost
        if data.size:
            try:
                self.writer.write(data)
            except OSError as err:
                self.error = f"recording stopped: cannot write {self.path}: {err.strerror or err}"

    def stop(self) -> None:
        """Write what is left and close the file."""
        self._stop.set()
        if self._thread.is_alive():
            self._thread.join(5.0)
        self._drain()
        try:
            self.writer.close()
        except OSError as err:
            self.error = f"cannot close {self.path}: {err.strerror or err}"

    @property
    def seconds(self) -> float:
        return self.writer.frames / self.writer.rate
