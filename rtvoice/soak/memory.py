"""Memory over a long run: samples of traced and resident memory, and their growth rate.

Growth is the least-squares slope over the second half of the run (the first half lets
caches, allocator pools and the BLAS work buffers settle), in kB per minute of audio.
Samples go into arrays sized before the run, so the sampler itself does not grow. Each
sample follows a full garbage collection, which also empties the interpreter's free lists
(Python documentation, module gc: "free lists ... are cleared whenever a full collection ...
is run"): otherwise a free list's high-water mark would read as growth.
"""

from __future__ import annotations

import gc
import os
import tracemalloc
from dataclasses import dataclass

import numpy as np

PAGE_BYTES = os.sysconf("SC_PAGE_SIZE") if hasattr(os, "sysconf") else 4096


def rss_bytes(pid: int | str = "self") -> int:
    """Resident set size of process ``pid`` from /proc (Linux); -1 when unavailable."""
    try:
        with open(f"/proc/{pid}/statm") as fh:
            return int(fh.read().split()[1]) * PAGE_BYTES
    except (OSError, IndexError, ValueError):
        return -1


def slope_kb_per_min(times_s: np.ndarray, values_bytes: np.ndarray, regimes: np.ndarray | None = None) -> float:
    """Least-squares slope of the second half of the samples, in kB per minute.

    ``regimes`` labels samples taken under different fixed allocations (a voice pool of
    another size): each label gets its own intercept, so a rebuild's step is not read as a
    trend, while a leak, which climbs within a regime and from one visit of it to the next,
    still is. Samples labelled -1
    (a pool still filling its caches just after a rebuild) are left out.
    """
    n = len(times_s)
    if n < 4:
        return float("nan")
    t, v = np.asarray(times_s[n // 2:], float) / 60.0, np.asarray(values_bytes[n // 2:], float) / 1000.0
    labels = np.zeros(t.size, int) if regimes is None else np.asarray(regimes[n // 2:])
    keep = labels >= 0
    t, v, labels = t[keep], v[keep], labels[keep]
    if t.size < 3:
        return float("nan")
    columns = [t] + [(labels == r).astype(float) for r in np.unique(labels)]
    design = np.column_stack(columns)
    if np.linalg.matrix_rank(design) < design.shape[1]:
        return float("nan")  # no regime lasted two samples: no trend to see
    coef, *_ = np.linalg.lstsq(design, v, rcond=None)
    return float(coef[0])


@dataclass
class MemoryTrace:
    times_s: np.ndarray
    traced: np.ndarray  # bytes traced by tracemalloc (0 when off)
    rss: np.ndarray  # resident bytes
    regime: np.ndarray  # label of the fixed allocation in force (see slope_kb_per_min)
    count: int = 0
    peak_traced: int = 0

    @classmethod
    def sized(cls, samples: int) -> MemoryTrace:
        return cls(np.zeros(samples), np.zeros(samples), np.zeros(samples), np.zeros(samples, int))

    def add(self, time_s: float, traced: int, rss: int, regime: int = 0) -> None:
        if self.count < self.times_s.size:
            i = self.count
            self.times_s[i], self.traced[i], self.rss[i], self.regime[i] = time_s, traced, rss, regime
            self.count += 1

    def traced_slope(self) -> float:
        return slope_kb_per_min(self.times_s[:self.count], self.traced[:self.count], self.regime[:self.count])

    def rss_slope(self) -> float:
        return slope_kb_per_min(self.times_s[:self.count], self.rss[:self.count], self.regime[:self.count])

    def rss_growth_kb(self) -> float:
        """Resident memory at the end minus at the middle sample, kB."""
        if self.count < 2:
            return float("nan")
        return float((self.rss[self.count - 1] - self.rss[self.count // 2]) / 1000.0)


class MemorySampler:
    """Samples this process: tracemalloc's current traced bytes (if tracing) and the RSS."""

    def __init__(self, samples: int, trace: bool):
        self.trace = MemoryTrace.sized(samples)
        self.tracing = trace
        if trace and not tracemalloc.is_tracing():
            tracemalloc.start()
            self._started = True
        else:
            self._started = False

    def sample(self, time_s: float, regime: int = 0) -> None:
        gc.collect()
        traced = tracemalloc.get_traced_memory()[0] if self.tracing else 0
        self.trace.add(time_s, traced, rss_bytes(), regime)

    def stop(self) -> MemoryTrace:
        if self.tracing:
            self.trace.peak_traced = tracemalloc.get_traced_memory()[1]
        if self._started:
            tracemalloc.stop()
        return self.trace
