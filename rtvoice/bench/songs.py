"""The demo song in real time and offline, start-up time, memory per voice."""

from __future__ import annotations

import importlib
import os
import subprocess
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np

from rtvoice.bench.scenes import SAMPLE_RATE_HZ, chord_events, feature_settings
from rtvoice.bench.timing import summarize, wall_seconds
from rtvoice.engine import Engine, Settings, active_voices
from rtvoice.offline.midifile import read_midi_events
from rtvoice.offline.render import DEFAULT_RENDER_BLOCK, render_events
from rtvoice.procutil import stop_process

DEMO_SONG = Path(__file__).resolve().parents[2] / "examples" / "demo.mid"
TAIL_CAP_S = 4.0

TimedEvent = tuple[float, int, int, int]


def fallback_song() -> list[TimedEvent]:
    """A 20 s stand-in for examples/demo.mid: arpeggios, strummed chords, a pedal, a bend."""
    events: list[TimedEvent] = []
    t = 0.0
    arpeggio = [40, 47, 52, 55, 59, 64, 59, 55]
    for bar in range(4):
        events.append((t, 0xB0, 64, 127))
        for i, note in enumerate(arpeggio):
            on, key = t + i * 0.25, note + 2 * (bar == 2)
            events += [(on, 0x90, key, 70 + 12 * (i % 4)), (on + 0.24, 0x80, key, 0)]
        t += 2.0
        events.append((t - 0.01, 0xB0, 64, 0))
    for chord in [(45, 52, 57, 60, 64), (43, 50, 55, 59, 62), (41, 48, 53, 57, 60), (40, 47, 52, 56, 59)]:
        for j, note in enumerate(chord):
            events += [(t + 0.015 * j, 0x91, note, 96 - 6 * j), (t + 1.5, 0x81, note, 0)]
        t += 2.0
    events.append((t, 0x90, 64, 110))
    for step in range(1, 25):
        events.append((t + 0.02 * step, 0xE0, 0, 64 + int(16 * step / 24)))
    events.append((t + 1.5, 0xE0, 0, 64))
    events.append((t + 2.0, 0x80, 64, 0))
    return sorted(events, key=lambda e: e[0])


def demo_events() -> tuple[list[TimedEvent], str]:
    """The demo song's events and where they came from."""
    if DEMO_SONG.is_file():
        events = read_midi_events(DEMO_SONG)
        if events:
            return events, "examples/demo.mid"
    return fallback_song(), "built-in stand-in (examples/demo.mid missing)"


def song_length_s(events: list[TimedEvent]) -> float:
    return max(t for t, *_ in events) if events else 0.0


def realtime_mix(events: list[TimedEvent], settings: Settings, block: int, max_blocks: int | None = None) -> dict:
    """Time every block of the song as a host would render it (events on their samples)."""
    engine = Engine(settings, SAMPLE_RATE_HZ, block)
    fs = engine.fs
    stamps = [round(t * fs) for t, *_ in events]
    end = stamps[-1] + int(1.0 * fs) if stamps else block
    samples = []
    busiest = 0
    i = 0
    clock = time.perf_counter_ns
    for start in range(0, end, block):
        batch = []
        while i < len(events) and stamps[i] < start + block:
            _, status, d1, d2 = events[i]
            batch.append((stamps[i] - start, status, d1, d2))
            i += 1
        t0 = clock()
        engine.render(batch)
        samples.append(clock() - t0)
        busiest = max(busiest, active_voices(engine))
        if max_blocks and len(samples) >= max_blocks:
            break
    timing = summarize(samples)
    period = block / fs * 1e6
    over = int(np.count_nonzero(np.asarray(samples) / 1e3 > period))
    return {"block": block, "blocks": len(samples), "timing": timing.as_dict(),
            "load_median": round(timing.median_us / period, 4), "load_p99": round(timing.p99_us / period, 4),
            "blocks_over_period": over, "most_voices": busiest}


def offline_speed(events: list[TimedEvent], settings: Settings, block: int = 256, runs: int = 3) -> dict:
    """Times real time of ``render_events`` for the whole song (median of ``runs``).

    Both wall time and this process's CPU time are given: on a shared machine the
    CPU time is what the render itself cost (time spent waiting for the CPU while
    other processes ran is left out).
    """
    walls, cpus = [], []
    audio_s = 0.0
    render_events(events, settings, SAMPLE_RATE_HZ, block, TAIL_CAP_S)  # warm-up, not timed (common practice)
    for _ in range(runs):
        c0, w0 = time.process_time(), time.perf_counter()
        audio = render_events(events, settings, SAMPLE_RATE_HZ, block, TAIL_CAP_S)
        walls.append(time.perf_counter() - w0)
        cpus.append(time.process_time() - c0)
        audio_s = audio.size / SAMPLE_RATE_HZ
    wall, cpu = float(np.median(walls)), float(np.median(cpus))
    return {"block": block, "audio_s": round(audio_s, 3), "wall_s": round(wall, 4), "cpu_s": round(cpu, 4),
            "times_real_time": round(audio_s / wall, 1), "times_real_time_cpu": round(audio_s / cpu, 1),
            "runs": runs}


def memory_per_voice(modes: int, block: int = 128, many: int = 128) -> dict:
    """Peak traced memory of an engine holding ``many`` notes minus one holding one, per voice."""
    def peak(voices: int) -> int:
        tracemalloc.start()
        engine = Engine(feature_settings(voices, modes), SAMPLE_RATE_HZ, block)
        engine.render(chord_events(voices))
        engine.render(())
        _, top = tracemalloc.get_traced_memory()
        tracemalloc.stop()
        del engine
        return top

    one, lots = peak(1), peak(many)
    return {"modes": modes, "peak_one_voice_kib": round(one / 1024, 1),
            f"peak_{many}_voices_kib": round(lots / 1024, 1),
            "per_voice_kib": round((lots - one) / (many - 1) / 1024, 2)}


def render_default_block() -> int:
    """The block size ``rtvoice render`` uses when none is given (what an offline user gets)."""
    return DEFAULT_RENDER_BLOCK


def play_command_available() -> bool:
    """Whether the live host can be started here (its engine process module imports)."""
    try:
        importlib.import_module("rtvoice.host.engine_process")
    except Exception:  # noqa: BLE001 - a broken host must not stop the other benchmarks
        return False
    return True


def startup_time(runs: int = 3, timeout_s: float = 30.0) -> dict:
    """Seconds from launching ``rtvoice play --headless --audio-device none`` until its audio runs.

    The host prints ``rtvoice: audio: ...`` once the engine process reports that its
    audio clock has started, so the first block follows within one block period.
    ``--midi-in none``: this machine has no ALSA sequencer for MIDI inputs to open.
    The time of a bare ``import rtvoice.engine.renderer`` is given beside it.
    """
    if not play_command_available():
        return {"available": False, "reason": "rtvoice play is not registered (host not built yet)"}
    cmd = [sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--audio-device", "none",
           "--midi-in", "none", "--duration", "2"]
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, stdin=subprocess.DEVNULL,
                                text=True, env=env)
        seen = None
        tail: list[str] = []
        try:
            assert proc.stdout is not None
            for line in proc.stdout:
                tail = (tail + [line.rstrip()])[-5:]
                if line.startswith("rtvoice: audio:"):
                    seen = time.perf_counter() - t0
                    break
                if time.perf_counter() - t0 > timeout_s:
                    break
        finally:
            stop_process(proc)
        if seen is None:
            return {"available": False, "reason": "rtvoice play never reported its audio running: "
                    + " / ".join(tail)[-300:]}
        times.append(seen)
    imp = [wall_seconds(lambda: subprocess.run([sys.executable, "-c", "import rtvoice.engine.renderer"],
                                               check=True, env=env)) for _ in range(runs)]
    return {"available": True, "first_block_s": round(float(np.median(times)), 3),
            "python_import_engine_s": round(float(np.median(imp)), 3), "runs": runs,
            "command": " ".join(["rtvoice", *cmd[3:]])}
