"""Engine cost per block over voices x modes x block sizes, beside the bare product."""

from __future__ import annotations

from dataclasses import dataclass

from rtvoice.bench.limits import BareProduct, factored_product
from rtvoice.bench.scenes import SAMPLE_RATE_HZ, HeldChord, chord_events, feature_settings
from rtvoice.bench.timing import Timing, time_calls, time_in_turns
from rtvoice.engine import Engine


def block_period_us(block_frames: int, sample_rate_hz: float = SAMPLE_RATE_HZ) -> float:
    return block_frames / sample_rate_hz * 1e6


@dataclass(frozen=True)
class GridPoint:
    """One (voices, modes, block) cell: the engine's block time and the bare product's."""

    voices: int
    modes: int
    block: int
    ramps: bool
    active: int  # voices actually sounding while timed
    engine: Timing
    bare: BareProduct
    live_columns: float = 0.0  # mean columns of the engine's product while timed (its modes still heard)
    bare_live: Timing | None = None  # the bare product over as many modes as the engine's last block multiplied

    @property
    def total_modes(self) -> int:
        return self.voices * self.modes

    @property
    def period_us(self) -> float:
        return block_period_us(self.block)

    @property
    def load(self) -> float:
        """Median block time as a fraction of the block period."""
        return self.engine.median_us / self.period_us

    @property
    def load_p99(self) -> float:
        return self.engine.p99_us / self.period_us

    @property
    def efficiency(self) -> float:
        """Engine throughput over bare-product throughput (same modes, same block)."""
        return self.bare.timing.median_us / self.engine.median_us

    @property
    def efficiency_live(self) -> float:
        """Efficiency over the modes the engine actually multiplied (its live columns, see
        :mod:`rtvoice.engine.live_modes`): the bare product over that many modes, timed in
        turns with the engine, over the engine's time."""
        if self.bare_live is None:
            return 0.0
        return self.bare_live.median_us / self.engine.median_us

    def as_dict(self) -> dict:
        return {
            "voices": self.voices, "modes_per_voice": self.modes, "total_modes": self.total_modes,
            "block": self.block, "ramps": self.ramps, "active_voices": self.active,
            "engine": self.engine.as_dict(), "bare_product": self.bare.timing.as_dict(),
            "load_median": round(self.load, 4), "load_p99": round(self.load_p99, 4),
            "efficiency": round(self.efficiency, 3), "live_columns": round(self.live_columns, 1),
            "bare_product_live": self.bare_live.as_dict() if self.bare_live else None,
            "efficiency_live": round(self.efficiency_live, 3),
        }


def time_cell(voices: int, modes: int, block: int, repeats: int, ramps: bool = True,
              warmup: int = 20) -> tuple[Timing, BareProduct, int, float, Timing]:
    """The engine's block, the bare product of the same shape and the bare product over the
    engine's live columns, timed in turns (see time_in_turns); the voices sounding and the mean
    columns of the engine's product over the timed blocks."""
    chord = HeldChord.start(voices, modes, block, ramps)
    product, nbytes = factored_product(voices * modes, block)
    live_product, _ = factored_product(voices * modes, block, seed=3,
                                       columns=lambda: max(1, chord.engine.live_columns))
    columns: list[int] = []

    def step(i: int) -> None:  # untimed: what the last block multiplied, and the pickup swing
        if i > warmup:
            columns.append(chord.engine.live_columns)
        chord.swing(i)

    engine_t, bare_t, live_t = time_in_turns([chord.render, product, live_product], repeats, warmup,
                                             between=[step, None, None])
    columns.append(chord.engine.live_columns)
    return (engine_t, BareProduct(voices * modes, block, bare_t, nbytes), chord.active,
            sum(columns) / len(columns), live_t)


def run_grid(voices_list, modes_list, blocks, repeats: int, ramps: bool = True,
             progress=None) -> list[GridPoint]:
    points = []
    for block in blocks:
        for modes in modes_list:
            for voices in voices_list:
                timing, bare, active, columns, live = time_cell(voices, modes, block, repeats, ramps)
                points.append(GridPoint(voices, modes, block, ramps, active, timing, bare, columns, live))
                if progress:
                    progress(f"engine {voices}x{modes} @{block}: {timing.median_us:.0f} us")
    return points


def idle_costs(block: int, repeats: int, modes: int = 128) -> dict:
    """What silence and unused polyphony cost.

    ``silent_block``: a 128-voice engine with nothing sounding (the output stage only).
    ``per_idle_slot``: (one note in a 128-voice pool - one note in a 1-voice pool) / 127.
    """
    def engine_with(voices: int, notes: int) -> Engine:
        engine = Engine(feature_settings(voices, modes), SAMPLE_RATE_HZ, block)
        engine.render(chord_events(notes))
        return engine

    silent = engine_with(128, 0)
    t_silent = time_calls(lambda: silent.render(()), repeats, 20)
    big, small = engine_with(128, 1), engine_with(1, 1)
    # One call each in turn, so a slow spell of the machine falls on both alike.
    t_big, t_small = time_in_turns([lambda: big.render(()), lambda: small.render(())], repeats, 20, turns=repeats)
    period = block_period_us(block)
    return {
        "block": block,
        "silent_block": t_silent.as_dict(),
        "silent_load": round(t_silent.median_us / period, 4),
        "one_note_in_128_voice_pool": t_big.as_dict(),
        "one_note_in_1_voice_pool": t_small.as_dict(),
        "per_idle_slot_us": round((t_big.median_us - t_small.median_us) / 127, 3),
    }
