"""Where a block's time goes: the engine's render stages, the busiest functions, the output limiter.

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
from rtvoice.bench.timing import time_calls
from rtvoice.engine import Limiter

#: (the engine's part, its method) timed as a stage: "" is the engine itself.
STAGES = (("glide", "step"), ("voice_renderer", "render_bulk"), ("", "_finish"), ("housekeeping", "after_block"),
          ("voice_renderer", "apply_bends"))


def stage_split(voices: int, modes: int, block: int, ramps: bool, blocks: int = 300) -> dict:
    """Median microseconds per block of each render stage, and of the whole render."""
    chord = HeldChord.start(voices, modes, block, ramps)
    engine = chord.engine
    samples: dict[str, list[int]] = {}
    for part_name, method_name in STAGES:
        part = getattr(engine, part_name) if part_name else engine
        method = getattr(part, method_name, None)
        if method is None:
            continue
        name = f"{part_name}.{method_name}" if part_name else method_name

        def timed(*args, _m=method, _name=name, **kwargs):
            t0 = time.perf_counter_ns()
            out = _m(*args, **kwargs)
            samples.setdefault(_name, []).append(time.perf_counter_ns() - t0)
            return out

        setattr(part, method_name, timed)
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
    # Stats.stats is the table pstats itself prints from; typeshed leaves it out of the stubs.
    table = pstats.Stats(prof, stream=io.StringIO()).stats  # type: ignore[attr-defined]
    rows = []
    total = sum(v[2] for v in table.values())  # own time
    for (path, line, func), (_cc, calls, own, _cum, _callers) in sorted(
            table.items(), key=lambda kv: kv[1][2], reverse=True)[:top]:
        where = path.split("site-packages/")[-1].split("/rtvoice/")[-1]
        rows.append({"function": f"{where}:{line}({func})", "calls_per_block": round(calls / blocks, 1),
                     "share": round(own / total, 3)})
    return rows


def limiter_cost(block: int, repeats: int, sample_rate_hz: int = 48000) -> dict:
    """Median microseconds per block of the output limiter alone, and the latency its look-ahead adds.

    Three streams: a six-note chord's partials quiet (peaks at -20 dBFS: the limiter only delays
    it), a 1 kHz tone near the ceiling (-3 dBFS: every block is measured between samples, nothing
    is reduced) and the chord 12 dB over the ceiling (limiting). Each is timed on a limiter of
    its own, blocks fed in turn from a stretch of the stream; the copy into the block is not timed.
    """
    frames = 64 * block
    n = np.arange(frames)
    chord = sum(np.sin(2 * np.pi * f * n / sample_rate_hz + k) / (k + 1)
                for k, f in enumerate((82.4, 110.0, 146.8, 196.0, 246.9, 329.6)))
    chord /= np.max(np.abs(chord))
    tone = np.sin(2 * np.pi * 1000.0 * n / sample_rate_hz)
    look = Limiter(sample_rate_hz, block)
    result: dict = {"block": block, "latency_frames": look.latency_frames, "latency_ms": round(1e3 * look.latency_s, 3)}
    for name, stream in (("quiet", chord * 0.1), ("near_ceiling", tone * 10 ** (-3 / 20)),
                         ("limiting", chord * 10 ** (11 / 20))):
        lim = Limiter(sample_rate_hz, block)
        x = np.empty(block)

        def feed(i: int, _s=stream, _x=x) -> None:
            at = (i % 64) * block
            _x[:] = _s[at : at + block]

        def limit(_lim: Limiter = lim, _x: np.ndarray = x) -> None:
            _lim.process(_x)

        timing = time_calls(limit, repeats, warmup=64, between=feed)
        result[f"{name}_median_us"] = round(timing.median_us, 2)
        result[f"{name}_p99_us"] = round(timing.p99_us, 2)
        result[f"{name}_gain_reduction_db"] = round(lim.gain_reduction_db, 1)
    return result
