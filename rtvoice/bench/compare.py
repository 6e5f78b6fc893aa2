"""The baselines and the engine rendering the same held notes, timed in turn."""

from __future__ import annotations

import time
from typing import Any

from rtvoice.bench.baselines import (
    KarplusStrongBank,
    OutputChain,
    PhasorBank,
    ResonatorBank,
    partials_of,
)
from rtvoice.bench.scenes import HeldChord
from rtvoice.bench.timing import time_calls, time_in_turns

BASELINES = {
    "a_resonators_lfilter": ResonatorBank,
    "b_phasor_recursion": PhasorBank,
    "c_karplus_strong": None,  # built from the engine (tuning and damping), see below
}


def _repeats_within(fn, budget_s: float, most: int, least: int = 3) -> int:
    """How many timed calls fit in ``budget_s``, judged from one untimed call."""
    t0 = time.perf_counter()
    fn()
    one = max(time.perf_counter() - t0, 1e-6)
    return int(max(least, min(most, budget_s / one)))


def compare_at(voices: int, modes: int, block: int, repeats: int, budget_s: float) -> dict:
    """Block times of the engine (steady and with ramps) and of each baseline, same notes."""
    steady = HeldChord.start(voices, modes, block, ramps=False)
    engine_steady = time_calls(steady.render, repeats, 20)
    ramped = HeldChord.start(voices, modes, block, ramps=True)
    engine_ramped = time_calls(ramped.render, repeats, 20, between=ramped.swing)
    source = HeldChord.start(voices, modes, block, ramps=False).engine
    partials = partials_of(source)
    result: dict[str, Any] = {
        "voices": voices, "modes_per_voice": modes, "total_modes": voices * modes, "block": block,
        "engine_steady": engine_steady.as_dict(), "engine_features_on": engine_ramped.as_dict(),
        "baselines": {},
    }
    for name, kind in BASELINES.items():
        bank = KarplusStrongBank(source, partials) if kind is None else kind(partials, block)
        chain = OutputChain(source)

        def step(bank=bank, chain=chain):
            chain.process(bank.render())

        n = _repeats_within(step, budget_s, repeats)
        # The ratio is taken against the engine timed in turns with this baseline (same slow spells).
        beside, timing = time_in_turns([steady.render, step], n, warmup=min(3, n), turns=min(10, n))
        result["baselines"][name] = {
            "timing": timing.as_dict(), "engine_beside": beside.as_dict(),
            "ratio_to_engine": round(timing.median_us / beside.median_us, 2),
        }
    result["faster_of_a_b_over_engine"] = min(result["baselines"][k]["ratio_to_engine"]
                                              for k in ("a_resonators_lfilter", "b_phasor_recursion"))
    return result
