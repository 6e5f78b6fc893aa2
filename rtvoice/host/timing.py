"""Time stamps to sample positions: events play one block after they arrive.

The audio callback wakes once per block, a little early or late each time. A
delay-locked loop turns those wake-up times into evenly spaced block start
times (F. Adriaensen, "Using a DLL to filter time", Linux Audio Conference
2005). Every event is played one block plus a small margin after it arrived, on
its own sample: block k holds the arrivals from (start of block k-1) - margin to
(start of block k) - margin. The margin (a quarter block) covers wake-ups that
come early, before the last of those arrivals could be polled; an event polled
by a late wake-up that belongs to the next block waits there. So the delay is
the same for every event and the timing keeps its detail below one block.
"""

from __future__ import annotations

import math

RESYNC_PERIODS = 4.0  # a wake-up this far off (stall, xrun, clock switch) restarts the loop
CLOCK_LEAK_PER_S = 1e-5  # lets a port's clock offset follow a slow drift of 10 ppm
MARGIN_BLOCKS = 0.25  # wake-ups may come this much early without moving any event


class BlockClock:
    """Filtered start times of successive blocks of ``block_frames`` at ``sample_rate_hz``."""

    def __init__(self, block_frames: int, sample_rate_hz: float, bandwidth_hz: float = 0.1,
                 margin_blocks: float = MARGIN_BLOCKS):
        self.frames = int(block_frames)
        self.period_s = block_frames / float(sample_rate_hz)
        self.margin_s = margin_blocks * self.period_s
        omega = 2 * math.pi * bandwidth_hz * self.period_s
        self._b, self._c = math.sqrt(2) * omega, omega * omega
        self._t0 = self._t1 = self._e2 = 0.0
        self.previous_start = self.start = 0.0
        self.started = False
        self.resyncs = 0

    def tick(self, now_s: float) -> None:
        """Advance by one block woken at ``now_s``; sets :attr:`previous_start` and :attr:`start`."""
        if not self.started or abs(now_s - self._t1) > RESYNC_PERIODS * self.period_s:
            if self.started:
                self.resyncs += 1
            self.started = True
            self._e2 = self.period_s
            self._t0 = now_s
            self._t1 = now_s + self.period_s
            self.previous_start, self.start = now_s - self.period_s, now_s
            return
        e = now_s - self._t1
        self._t0 = self._t1
        self._t1 += self._b * e + self._e2
        self._e2 += self._c * e
        self.previous_start, self.start = self.start, self._t0

    @property
    def latency_s(self) -> float:
        """Delay from an event's arrival to its sample (besides the audio device's own latency)."""
        return self.period_s + self.margin_s

    def position(self, arrival_s: float) -> int:
        """Where an event that arrived at ``arrival_s`` plays: a sample offset in the current
        block (0..frames-1), or frames + offset in the next block. Events that are already
        late play at the start of the current block."""
        span = self.start - self.previous_start
        if span <= 0.0:
            return 0
        n = self.frames
        pos = int((arrival_s + self.margin_s - self.previous_start) / span * n)
        return 0 if pos < 0 else (2 * n - 1 if pos >= 2 * n else pos)


class PortClock:
    """Absolute arrival times of one MIDI input from the library's delta times.

    python-rtmidi gives each message the time since the previous one on that port.
    Their running sum is the arrival time on the port's own clock; its offset to
    ours is the smallest (poll time - running sum) seen, since no message is
    polled before it arrives.
    """

    def __init__(self) -> None:
        self.elapsed_s = 0.0
        self.offset_s = math.inf
        self._last_poll = 0.0

    def arrival(self, delta_s: float, polled_s: float) -> float:
        self.elapsed_s += max(delta_s, 0.0)
        estimate = polled_s - self.elapsed_s
        if self.offset_s == math.inf:
            self.offset_s = estimate
        else:
            leaked = self.offset_s + CLOCK_LEAK_PER_S * max(polled_s - self._last_poll, 0.0)
            self.offset_s = min(leaked, estimate)
        self._last_poll = polled_s
        return self.offset_s + self.elapsed_s
