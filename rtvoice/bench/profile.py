"""Where a block's time goes: the engine's render stages, and the busiest functions.

For a target that is missed, this is the evidence of why. The stage split wraps
the engine's per-block steps (the names it uses today; a step it no longer has is
left out), timing each call with ``time.perf_counter_ns``; the function list is
``cProfile`` over the same blocks (which slows Python code, so read its shares,
not its times).
"""

from __future__ import annotations

import cProfile
import io
import pstats
import time

import numpy as np

from rtvoice.bench.scenes import HeldChord

STAGES = ("_step_pickups", "_render_bulk", "_finish", "_retire", "_apply_bends")


def stage_split(voices: int, modes: int, block: int, ramps: bool, blocks: int = 300) -> dict:
    """Median microseconds per block of each render stage, and of the whole render."""
    chord = HeldChord.start(voices, modes, block, ramps)
    engine = chord.engine
    samples: dict[str, list[int]] = {}
    for name in STAGES:
        method = getattr(engine, name, None)
        if method is None:
            continue

        def timed(*args, _m=method, _name=name, **kwargs):
            t0 = time.perf_counter_ns()
            out = _m(*args, **kwargs)
            samples.setdefault(_name, []).append(time.perf_counter_ns() - t0)
            return out

        setattr(engine, name, timed)
    totals = []
    for i in range(blocks + 20):
        chord.swing(i)
        t0 = time.perf_counter_ns()
        engine.render(())
        if i >= 20:
            totals.append(time.perf_counter_ns() - t0)
    warm = {k: v[20:] if len(v) > 20 else v for k, v in samples.items()}
    stages = {k: round(float(np.median(v)) / 1e3, 1) for k, v in warm.items() if v}
    total = float(np.median(totals)) / 1e3
    stages["other (event loop, glue)"] = round(total - sum(stages.values()), 1)
    return {"voices": voices, "modes": modes, "block": block, "ramps": ramps,
            "render_median_us": round(total, 1), "stages_median_us": stages}


def hot_functions(voices: int, modes: int, block: int, ramps: bool, blocks: int = 300, top: int = 12) -> list[dict]:
    """The functions with the most own time over ``blocks`` renders, with their share."""
    chord = HeldChord.start(voices, modes, block, ramps)
    for i in range(20):
        chord.swing(i)
        chord.render()
    prof = cProfile.Profile()
    for i in range(blocks):
        chord.swing(i)
        prof.enable()
        chord.render()
        prof.disable()
    stats = pstats.Stats(prof, stream=io.StringIO())
    rows = []
    total = sum(v[2] for v in stats.stats.values())  # own time
    for (path, line, func), (_cc, calls, own, _cum, _callers) in sorted(
            stats.stats.items(), key=lambda kv: kv[1][2], reverse=True)[:top]:
        where = path.split("site-packages/")[-1].split("/rtvoice/")[-1]
        rows.append({"function": f"{where}:{line}({func})", "calls_per_block": round(calls / blocks, 1),
                     "share": round(own / total, 3)})
    return rows
