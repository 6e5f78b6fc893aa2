"""Live parameter smoothing: the pickups and the output gain glide to their new values.

A controller or a typed value moves a pickup or the gain in one step; heard as such it
would click (a pickup) or zipper (a gain swept by a controller). Both follow their target
by a one-pole step per block, ``alpha = 1 - exp(-N / (tau fs))`` with tau = SMOOTHING_S, and
the voice renderer ramps linearly across each block between the old and the new value.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

SMOOTHING_S = 0.015  # time constant of live parameter smoothing
#: A pickup's smoothed fields; its sensing and polarity jump (they cannot glide).
GLIDING_FIELDS = ("position", "width", "level_db", "slant")


def smoothing_alpha(block_frames: int, sample_rate_hz: float) -> float:
    """The one-pole step per block of ``block_frames`` at ``sample_rate_hz``."""
    return 1.0 - math.exp(-block_frames / (SMOOTHING_S * sample_rate_hz))


class PickupGlide:
    """The pickups as heard now (``now``), following the sound's pickups a step per block."""

    def __init__(self, pickups: Sequence[Mapping[str, Any]], alpha: float):
        self.now = [dict(p) for p in pickups]
        self.alpha = alpha
        self.settled = True  # now == target: a step has nothing to do

    def unsettle(self) -> None:
        """The target may have moved: look at it again at the next step."""
        self.settled = False

    def step(self, target: Sequence[Mapping[str, Any]]) -> bool:
        """Move ``now`` one step towards ``target``; True when anything moved."""
        if self.settled:
            return False
        now = self.now
        moved = False
        if len(now) != len(target) or any(
            a["sensing"] != b["sensing"] or a["polarity"] != b["polarity"] for a, b in zip(now, target, strict=False)
        ):
            self.now = [dict(p) for p in target]
            moved = True
        else:
            for a, b in zip(now, target, strict=True):
                for f in GLIDING_FIELDS:
                    diff = b[f] - a[f]
                    if diff != 0.0:
                        step = diff * self.alpha
                        a[f] = b[f] if abs(diff - step) < 1e-7 * max(1.0, abs(b[f])) else a[f] + step
                        moved = True
        if not moved:
            self.settled = True
        return moved


class GainGlide:
    """The output gain (linear), gliding to ``target`` and ramped across each block of ``block_frames``."""

    def __init__(self, gain: float, alpha: float, block_frames: int):
        self.gain = self.target = gain
        self.alpha = alpha
        self._ramp = np.arange(1, block_frames + 1) / block_frames
        self._gain_ramp = np.empty(block_frames)

    def apply(self, out: np.ndarray) -> None:
        """Scale the block ``out`` in place by the gain, ramped from the last block's value to this one's."""
        g0 = self.gain
        g1 = g0 + (self.target - g0) * self.alpha
        if abs(g1 - self.target) < 1e-6 * self.target:
            g1 = self.target
        if g0 == g1:
            if g1 != 1.0:
                out *= g1
        else:
            np.multiply(self._ramp, g1 - g0, out=self._gain_ramp)
            self._gain_ramp += g0
            out *= self._gain_ramp
        self.gain = g1
