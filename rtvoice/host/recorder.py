"""``--record``: what the callback played goes to a WAV file from a writer thread.

The callback only copies each block into a :class:`~rtvoice.host.ring.SampleRing`;
this thread takes whatever is new every few tens of milliseconds and appends it
with :class:`~rtvoice.offline.wav.WavStreamWriter`, whose header is valid after
every write, so the file plays even after Ctrl-C or a crash.

An engine started again by the same UI (after its audio server came back, or after it
died) appends to the take instead of starting it afresh, so nothing recorded is lost.
"""

from __future__ import annotations

import threading
from pathlib import Path

from rtvoice.host.errors import HostError
from rtvoice.host.ring import SampleRing
from rtvoice.offline.wav import WavStreamWriter, _header

WRITE_EVERY_S = 0.05


def reopen_for_append(path: Path, rate: int) -> WavStreamWriter | None:
    """A writer that goes on after the frames already in ``path``, or None when the file is
    missing or not a take of this format (mono float32 at ``rate``, as WavStreamWriter writes).

    (It fills in a WavStreamWriter's fields itself; an ``append`` mode of the writer in
    rtvoice.offline.wav would be the cleaner home for this.)"""
    expected = _header(0, 1, rate)
    try:
        fh = open(path, "r+b")  # noqa: SIM115 - handed to the writer, which closes it
    except OSError:
        return None
    try:
        head = fh.read(len(expected))
        size = fh.seek(0, 2)
        if len(head) < len(expected) or head[:4] != b"RIFF" or head[8:36] != expected[8:36] \
                or head[-8:-4] != b"data":
            fh.close()
            return None
        frames = (size - len(expected)) // 4
        fh.truncate(len(expected) + 4 * frames)  # a sample cut by a crash goes
        fh.seek(0)
        fh.write(_header(frames, 1, rate))
        fh.seek(0, 2)
        fh.flush()
    except OSError:
        fh.close()
        return None
    writer = object.__new__(WavStreamWriter)
    writer.path, writer.channels, writer.rate, writer.frames = path, 1, int(rate), frames
    writer._fh = fh  # noqa: SLF001
    return writer


class Recorder:
    def __init__(self, path: str | Path, rate: int, ring: SampleRing, append: bool = False):
        self.path = Path(path)
        self.ring = ring
        try:
            writer = reopen_for_append(self.path, rate) if append else None
            self.writer = writer or WavStreamWriter(self.path, rate, 1)
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
