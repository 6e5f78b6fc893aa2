"""Repeated timing with ``time.perf_counter_ns``: warm-up first, then medians and tails."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict, dataclass

import numpy as np


@dataclass(frozen=True)
class Timing:
    """Distribution of one call's wall time, in microseconds."""

    median_us: float
    p99_us: float
    mean_us: float
    min_us: float
    max_us: float
    count: int

    def as_dict(self) -> dict:
        return {k: (round(v, 3) if isinstance(v, float) else v) for k, v in asdict(self).items()}


def summarize(samples_ns: np.ndarray | list[int]) -> Timing:
    """Median, 99th percentile, mean, min and max of samples given in nanoseconds."""
    us = np.asarray(samples_ns, dtype=float) / 1e3
    if us.size == 0:
        raise ValueError("no timing samples")
    return Timing(float(np.median(us)), float(np.percentile(us, 99)), float(us.mean()),
                  float(us.min()), float(us.max()), int(us.size))


def time_calls(fn: Callable[[], object], repeats: int, warmup: int = 10,
               between: Callable[[int], object] | None = None) -> Timing:
    """Time ``repeats`` calls of ``fn`` after ``warmup`` untimed calls.

    ``between(i)``, when given, runs untimed before call i (for example to move a
    control so a ramp stays active); its cost is not counted.
    """
    for i in range(warmup):
        if between is not None:
            between(i)
        fn()
    samples = np.empty(repeats, dtype=np.int64)
    clock = time.perf_counter_ns
    for i in range(repeats):
        if between is not None:
            between(warmup + i)
        t0 = clock()
        fn()
        samples[i] = clock() - t0
    return summarize(samples)


def time_in_turns(calls: list[Callable[[], object]], repeats: int, warmup: int = 10, turns: int = 10,
                  between: list[Callable[[int], object] | None] | None = None) -> list[Timing]:
    """Time several calls side by side: ``turns`` rounds, each timing every call ``repeats / turns`` times in a row.

    A slow spell of a shared machine (its neighbours, its clock) then falls on every
    call alike, so their ratio holds even when absolute times drift; the runs in a
    row keep each call's own working set warm, as its real use would.
    """
    between = between or [None] * len(calls)
    per_turn = max(1, repeats // turns)
    samples: list[list[int]] = [[] for _ in calls]
    clock = time.perf_counter_ns
    count = [0] * len(calls)
    for turn in range(turns):
        for k, (fn, step) in enumerate(zip(calls, between, strict=True)):
            for j in range(warmup if turn == 0 else 0):
                if step is not None:
                    step(j)
                fn()
                count[k] += 1
            for _ in range(per_turn):
                if step is not None:
                    step(count[k])
                t0 = clock()
                fn()
                samples[k].append(clock() - t0)
                count[k] += 1
    return [summarize(s) for s in samples]


def wall_seconds(fn: Callable[[], object]) -> float:
    """Wall time of one call in seconds."""
    t0 = time.perf_counter_ns()
    fn()
    return (time.perf_counter_ns() - t0) / 1e9
