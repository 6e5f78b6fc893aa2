"""WAV files of 32-bit IEEE float samples: whole files and a streaming writer.

The streaming writer keeps a valid header after every write, so a recording cut
short (Ctrl-C, a killed process) is still a playable file up to its last block.
"""

from __future__ import annotations

import os
import struct
import tempfile
from pathlib import Path
from typing import BinaryIO

import numpy as np

WAVE_FORMAT_IEEE_FLOAT = 3


def _header(n_frames: int, channels: int, sample_rate_hz: int) -> bytes:
    bytes_per_frame = 4 * channels
    data_bytes = n_frames * bytes_per_frame
    fmt = struct.pack("<HHIIHH", WAVE_FORMAT_IEEE_FLOAT, channels, sample_rate_hz,
                      sample_rate_hz * bytes_per_frame, bytes_per_frame, 32)
    fact = struct.pack("<I", n_frames)
    return (b"RIFF" + struct.pack("<I", 4 + (8 + len(fmt)) + (8 + len(fact)) + 8 + data_bytes) + b"WAVE"
            + b"fmt " + struct.pack("<I", len(fmt)) + fmt
            + b"fact" + struct.pack("<I", len(fact)) + fact
            + b"data" + struct.pack("<I", data_bytes))


def write_wav(path: Path | str, samples: np.ndarray, sample_rate_hz: int) -> None:
    """Write ``samples`` (frames or frames x channels) as float32 WAV, atomically.

    Nothing is left at ``path`` when writing fails.
    """
    path = Path(path)
    data = np.asarray(samples, dtype="<f4")
    channels = 1 if data.ndim == 1 else data.shape[1]
    folder = path.parent if str(path.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(_header(len(data), channels, int(sample_rate_hz)))
            fh.write(data.tobytes())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


class WavStreamWriter:
    """Append float32 frames to a WAV file, keeping the header valid after each write."""

    def __init__(self, path: Path | str, sample_rate_hz: int, channels: int = 1):
        self.path = Path(path)
        self.channels = channels
        self.rate = int(sample_rate_hz)
        self.frames = 0
        # BinaryIO, not the BufferedWriter open() gives: the host's recorder hands in a file
        # opened "r+b" to append to a take (rtvoice.host.recorder.reopen_for_append).
        self._fh: BinaryIO = open(self.path, "wb")  # noqa: SIM115 - closed by close()
        self._fh.write(_header(0, channels, self.rate))
        self._fh.flush()

    def write(self, samples: np.ndarray) -> None:
        data = np.asarray(samples, dtype="<f4")
        self._fh.write(data.tobytes())
        self.frames += len(data) if data.ndim > 1 or self.channels == 1 else len(data) // self.channels
        pos = self._fh.tell()
        self._fh.seek(0)
        self._fh.write(_header(self.frames, self.channels, self.rate))
        self._fh.seek(pos)
        self._fh.flush()

    def close(self) -> None:
        if not self._fh.closed:
            self._fh.flush()
            os.fsync(self._fh.fileno())
            self._fh.close()

    def __enter__(self) -> WavStreamWriter:
        return self

    def __exit__(self, *exc) -> None:
        self.close()


def read_wav(path: Path | str) -> tuple[np.ndarray, int]:
    """(samples as float64, sample rate in Hz) of a WAV file, via scipy."""
    import scipy.io.wavfile

    rate, data = scipy.io.wavfile.read(path)
    if data.dtype.kind in "iu":
        data = data / float(np.iinfo(data.dtype).max)
    return np.asarray(data, dtype=float), int(rate)
