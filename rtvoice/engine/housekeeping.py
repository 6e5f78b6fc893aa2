"""Housekeeping after a block: silent voices retire, tiny modes are swept to zero.

Every RETIRE_CHECK_S each voice's level bound (the sum of |g s| over its modes) is
worked out; a voice below RETIRE_LEVEL at the output leaves the pool, and the output
filter carries on its last input freely. About every TINY_CHECK_S the mode amplitudes
that fell below the pool's SILENT_MODE are zeroed, so they never sink into subnormal
numbers (which would slow every block down), and the block product's coefficients,
advanced in single precision meanwhile, are worked out afresh.
"""

from __future__ import annotations

import math

import numpy as np

from rtvoice.engine.output import OUTPUT_SCALE
from rtvoice.engine.voice_renderer import VoiceRenderer

RETIRE_LEVEL = 1e-5  # -100 dBFS: a voice whose bound falls below this is silent
RETIRE_CHECK_S = 0.01  # silent voices are looked for this often (the bound costs a pass over all modes)
#: Tiny mode amplitudes are zeroed about this often (at a retire check): from SILENT_MODE (1e-30) to
#: single precision's subnormal floor (1.2e-38) is 18.4 nepers, 53 ms even at the fade's rate.
TINY_CHECK_S = 0.04


class Housekeeping:
    """When to look for silent voices and tiny modes, for blocks of ``block_frames`` at ``sample_rate_hz``."""

    def __init__(self, block_frames: int, sample_rate_hz: float):
        self.retire_every = max(1, round(RETIRE_CHECK_S * sample_rate_hz / block_frames))  # blocks
        self.tiny_every = max(1, math.floor(TINY_CHECK_S * sample_rate_hz / (block_frames * self.retire_every)))
        self.dropped_bad = 0  # voices retired for a NaN or infinite level

    def after_block(self, voices: VoiceRenderer, block_index: int, gain: float, emptying: bool) -> None:
        """Retire the voices of ``voices`` heard below RETIRE_LEVEL at output ``gain`` (linear); sweep
        tiny modes when it is time. ``emptying``: the pool waits to be rebuilt, so both run every
        block until its voices are gone. ``block_index`` counts the blocks rendered, this one included."""
        pool = voices.pool
        if not pool.n_active or (block_index % self.retire_every != 0 and not emptying):
            return
        # One pass over every slot now and then, not a share of them in every block: each
        # numpy call costs its overhead whatever its size (measured under JACK: the share
        # cost nearly what the whole pass did, in every block).
        checks = block_index // self.retire_every
        if checks % self.tiny_every == 0 or emptying:
            pool.clear_tiny_modes()
            voices.marks.all_stale = True  # and the coefficients, advanced in single precision, are resynced
            voices.swept = True  # and the modes that died leave the product
        pool.level[: pool.n_active] = pool.bound()
        bound = pool.level[: pool.n_active] * (OUTPUT_SCALE * max(gain, 1.0))
        dead = np.flatnonzero(~(bound >= RETIRE_LEVEL))  # catches NaN too
        heard = dead[np.isfinite(bound[dead])]
        if heard.size:  # their input to the output filter stops: its state carries on freely
            voices.filter.jump(voices.steady_states(heard).sum(axis=0))
        for v in dead[::-1]:
            if not np.isfinite(bound[v]):
                self.dropped_bad += 1
            voices.free_slot(int(v))
