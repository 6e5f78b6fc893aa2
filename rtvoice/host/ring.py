"""A ring of float32 samples written by the audio callback and read by other threads.

One writer (the callback) and any number of readers, no locks: the writer fills
the slots and only then advances ``written``, so a reader that stays within the
last ``size`` samples below ``written`` reads whole blocks.
"""

from __future__ import annotations

import numpy as np


class SampleRing:
    def __init__(self, size: int):
        self.size = int(size)
        self.buf = np.zeros(self.size, np.float32)
        self.written = 0  # samples ever written

    def push(self, x: np.ndarray) -> None:
        """Append ``x`` (callback side; copies in place, allocates nothing)."""
        n = x.shape[0]
        if n > self.size:  # only the newest ``size`` samples can be kept
            self.written += n - self.size
            x, n = x[n - self.size:], self.size
        i = self.written % self.size
        first = min(n, self.size - i)
        self.buf[i:i + first] = x[:first]
        if first < n:
            self.buf[:n - first] = x[first:]
        self.written += n

    def latest(self, out: np.ndarray) -> None:
        """Copy the newest ``len(out)`` samples into ``out`` (zeros where nothing was written yet)."""
        n = out.shape[0]
        end = self.written
        if end < n:
            out[:n - end] = 0.0
            out, n = out[n - end:], end
        self.copy(end - n, end, out)

    def copy(self, start: int, end: int, out: np.ndarray) -> None:
        i, j = start % self.size, end % self.size
        if end - start == 0:
            return
        if i < j:
            out[:] = self.buf[i:j]
        else:
            k = self.size - i
            out[:k] = self.buf[i:]
            out[k:] = self.buf[:j]

    def read_since(self, start: int, most: int | None = None) -> tuple[np.ndarray, int, int]:
        """(samples from ``start`` up to now, new start, samples lost to overrun)."""
        end = self.written
        lost = 0
        if end - start > self.size:
            lost = end - start - self.size
            start = end - self.size
        if most is not None:
            end = min(end, start + most)
        out = np.empty(end - start, np.float32)
        self.copy(start, end, out)
        return out, end, lost
