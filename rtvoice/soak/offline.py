"""The offline soak: random MIDI rendered block by block, every block checked.

One :class:`~rtvoice.engine.renderer.Engine` renders ``audio_s`` seconds at 48 kHz as fast
as it can. Checked on every block: all samples finite and |x| <= CEILING (-1 dBFS). Sampled
through the run: memory (see :mod:`rtvoice.soak.memory`) and the held note's modes against
their closed form (see :mod:`rtvoice.soak.held`). Controllers go through the default
controller map, as in the real-time host; factory presets arrive through
``Engine.apply_settings``, keeping the voice pool; at some held-note segment boundaries the
pool itself is rebuilt (voices and modes change).
"""

from __future__ import annotations

import math
import time
from dataclasses import asdict, dataclass, field

import numpy as np

from rtvoice.engine import (
    CEILING,
    Engine,
    Settings,
    SettingsError,
    Values,
    list_presets,
    load_preset,
    pool_token,
    within_neck,
)
from rtvoice.soak.held import HeldNote
from rtvoice.soak.memory import MemorySampler
from rtvoice.soak.traffic import RandomTraffic

#: Growth limit of traced memory over the second half, kB per minute of audio. A leak of one
#: 64-byte object per block (187.5 blocks/s at 48 kHz / 256) is 720 kB/min, one per MIDI event
#: (about 40 events/s here) 150 kB/min; 100 kB/min catches both. See SOAK_NOISE in the report.
TRACED_LIMIT_KB_PER_MIN = 100.0
#: Resident memory may move by whole allocator arenas and pages; a leak that matters on stage
#: (1 MB a minute fills 1 GB in 17 hours) must still show. Checked as a slope and as the rise
#: from the middle to the end of the run.
RSS_LIMIT_KB_PER_MIN = 1000.0
#: Memory samples this soon after a pool rebuild are left out of the slope: the new pool fills
#: its per-voice-count caches (one set of array views per number of active voices) as the
#: voice count first reaches each value, a bounded rise that is not a leak.
REBUILD_SETTLE_S = 5.0
MIN_HELD_COVERAGE = 0.8  # share of the run's blocks the held-note checks must span
POOL_SHAPES = ((8, 64), (16, 96), (24, 96), (32, 128))  # (voices, string.modes) on rebuilds


@dataclass
class OfflineConfig:
    audio_s: float = 120.0
    seed: int = 1
    sample_rate_hz: int = 48000
    block_frames: int = 256
    segment_s: float = 20.0  # the held note is plucked again this often
    check_every_s: float = 0.25
    preset_every_s: float = 20.0
    rebuild_every: int = 3  # every third segment boundary rebuilds the pool
    memory_samples: int = 240
    trace_memory: bool = True


@dataclass
class OfflineResult:
    config: OfflineConfig
    blocks: int = 0
    wall_s: float = 0.0
    error: str = ""  # the engine raised: where and what (the run stops there)
    bad_blocks: int = 0  # blocks with a NaN or inf
    over_ceiling_blocks: int = 0
    peak: float = 0.0
    limiter_clipped: int = 0
    max_gain_reduction_db: float = 0.0
    stolen: int = 0
    dropped_bad: int = 0
    note_ons: int = 0
    bursts: int = 0
    preset_changes: int = 0
    rebuilds: int = 0
    cc_changes: int = 0
    traced_slope_kb_per_min: float = float("nan")
    traced_peak_kb: float = float("nan")
    rss_slope_kb_per_min: float = float("nan")
    rss_growth_kb: float = float("nan")
    rss_end_kb: float = float("nan")
    segments: int = 0
    segments_cut_short: int = 0
    held_checks: int = 0
    held_coverage: float = 0.0
    max_phase_drift_rad: float = 0.0
    max_level_drift_db: float = 0.0
    worst_drift_over_tolerance: float = 0.0
    worst_drift: dict = field(default_factory=dict)
    max_initial_rel: float = 0.0
    held_level_db_at_segment_end: float = 0.0  # lowest, dB re note-on
    memory: object = field(default=None, repr=False)  # the MemoryTrace (not in to_dict)

    @property
    def audio_s(self) -> float:
        return self.blocks * self.config.block_frames / self.config.sample_rate_hz

    def failures(self) -> list[str]:
        """What broke a soak criterion, in words; empty when the run passed."""
        out = []
        if self.error:
            out.append(f"the engine raised at {self.error}")
        if self.bad_blocks:
            out.append(f"{self.bad_blocks} blocks held NaN or inf")
        if self.over_ceiling_blocks:
            out.append(f"{self.over_ceiling_blocks} blocks exceeded the ceiling {CEILING:.6f}")
        if self.config.trace_memory and not self.traced_slope_kb_per_min < TRACED_LIMIT_KB_PER_MIN:
            out.append(f"traced memory grew {self.traced_slope_kb_per_min:.1f} kB/min "
                       f"(limit {TRACED_LIMIT_KB_PER_MIN:g})")
        if not self.rss_slope_kb_per_min < RSS_LIMIT_KB_PER_MIN:
            out.append(f"resident memory grew {self.rss_slope_kb_per_min:.1f} kB/min (limit {RSS_LIMIT_KB_PER_MIN:g})")
        minutes_half = self.audio_s / 120.0
        if not self.rss_growth_kb < RSS_LIMIT_KB_PER_MIN * max(minutes_half, 1.0):
            out.append(f"resident memory rose {self.rss_growth_kb:.0f} kB over the second half")
        if self.worst_drift_over_tolerance > 1.0:
            out.append(f"held note drifted beyond float64 rounding: {self.worst_drift}")
        if self.held_coverage < MIN_HELD_COVERAGE:
            out.append(f"held-note checks spanned only {100 * self.held_coverage:.0f}% of the run")
        return out

    def to_dict(self) -> dict:
        d = asdict(self)
        d.pop("memory", None)
        d["audio_s"] = self.audio_s
        d["failures"] = self.failures()
        return d


def _factory_presets(voices: int, modes: int) -> list[Settings]:
    out = []
    for info in list_presets():
        if info.origin == "factory":
            out.append(load_preset(str(info.path)).with_values({"voices": voices, "string.modes": modes}))
    return out


def _random_live(rng: np.random.Generator, s: Settings) -> Settings:
    """A preset with its gain and first pickup moved at random (gain up to the schema's +12 dB)."""
    changes = {"output.gain_db": float(rng.choice([rng.uniform(-30.0, 0.0), 12.0, rng.uniform(0.0, 12.0)])),
               "pickup.0.position": float(rng.uniform(0.02, 0.5))}
    changes["pickup.0.position"] = within_neck(s, "pickup.0.position", changes["pickup.0.position"])
    try:
        return s.with_values(changes)
    except SettingsError:
        return s


def _moved_values(engine: Engine) -> dict[str, object]:
    """The values the engine's controller map changed since the last call (its ``values`` messages)."""
    moved: dict[str, object] = {}
    while engine.messages:
        match engine.messages.popleft():
            case Values(values=values):
                moved.update(values)
    return moved


def run_offline(config: OfflineConfig | None = None, progress=None) -> OfflineResult:
    """Render the soak; ``progress(done_fraction)`` is called about once a second of wall time."""
    cfg = config or OfflineConfig()
    fs, n_blk = cfg.sample_rate_hz, cfg.block_frames
    rng = np.random.default_rng(cfg.seed)
    blocks = max(1, math.ceil(cfg.audio_s * fs / n_blk))
    res = OfflineResult(cfg)
    voices, modes = POOL_SHAPES[1]
    # Random traffic of any key and dozens of notes at once: the open rule, where every note sounds and
    # the limiter is pushed (a six-string holds six notes).
    traffic_settings = Settings.defaults().with_values({"voices": voices, "string.modes": modes,
                                                         "instrument.assign": "open"})
    presets = _factory_presets(voices, modes)
    engine = Engine(traffic_settings, fs, n_blk)
    traffic, held = RandomTraffic(rng, fs, n_blk), HeldNote(fs, n_blk)
    seg_blocks = max(2, round(cfg.segment_s * fs / n_blk))
    check_blocks = max(1, round(cfg.check_every_s * fs / n_blk))
    mem_every = max(1, blocks // cfg.memory_samples)
    sampler = MemorySampler(cfg.memory_samples + 2, cfg.trace_memory)
    next_pluck, boundary, rebuilding_from, rebuilt_at = 0, 0, None, -1
    pool_shape = (voices, modes)
    settle_blocks = round(REBUILD_SETTLE_S * fs / n_blk)
    preset_p = n_blk / (fs * cfg.preset_every_s)
    t0 = last_report = time.perf_counter()
    for b in range(blocks):
        events = traffic.events(b, engine.voices)
        pluck = b >= next_pluck and rebuilding_from is None
        if rebuilding_from is not None and pool_token(engine) is not rebuilding_from:
            rebuilding_from, rebuilt_at, pool_shape = None, b, (voices, modes)
        if pluck:
            boundary += 1
            if boundary > 1 and boundary % cfg.rebuild_every == 0:
                others = [shape for shape in POOL_SHAPES if shape != (voices, modes)]  # a real rebuild
                voices, modes = others[int(rng.integers(0, len(others)))]
                traffic_settings = traffic_settings.with_values({"voices": voices, "string.modes": modes})
                presets = _factory_presets(voices, modes)
                held.end(engine, b - 1)  # the segment ends here, before the pool fades
                rebuilding_from = pool_token(engine)
                engine.apply_settings(traffic_settings)
                res.rebuilds += 1
                pluck = False
        if pluck:
            hold_settings = held.settings_for_pluck(traffic_settings)
            engine.apply_settings(hold_settings)
            events = sorted(held.pluck_events() + events, key=lambda e: e[0])
        try:
            y = engine.render(events)
        except Exception as err:  # noqa: BLE001 - a crash is a finding: report it with its block
            res.error = f"block {b} ({b * n_blk / fs:.2f} s): {type(err).__name__}: {err}"
            blocks = b
            break
        peak = float(np.max(np.abs(y)))
        if not np.all(np.isfinite(y)):
            res.bad_blocks += 1
        elif peak > CEILING:
            res.over_ceiling_blocks += 1
        res.peak = max(res.peak, peak) if math.isfinite(peak) else res.peak
        res.max_gain_reduction_db = max(res.max_gain_reduction_db, engine.stats.gain_reduction_db)
        changed = pluck
        if rng.random() < preset_p:
            traffic_settings = _random_live(rng, presets[int(rng.integers(0, len(presets)))])
            res.preset_changes += 1
            changed = True
        moved = _moved_values(engine)  # the engine's controller map acted on the traffic's controllers
        if moved:
            try:
                traffic_settings = traffic_settings.with_values(moved)  # kept over later preset changes
                res.cc_changes += len(moved)
            except SettingsError:
                pass  # a pair the cross-checks refuse (e.g. t60 order): the engine refused it too
            changed = True
        if changed:
            engine.apply_settings(traffic_settings)
        if pluck:
            held.start(b, hold_settings)
            next_pluck = b + seg_blocks
            held.check(engine, b)
        elif held.current is not None and (
                (b - held.current.start_block) % check_blocks == 0 or b + 1 == next_pluck or b + 1 == blocks):
            held.check(engine, b)  # (block 0 plucks, so a segment is always open here; check skips none)
        if held.current is not None and held.current.cut_short:
            next_pluck = min(next_pluck, b + 1)  # stolen (a flood steals every older voice): pluck again
        if b % mem_every == 0 or b + 1 == blocks:
            # Label: the shape of the pool in use (the same shape must take the same memory each
            # time it returns); -1 while a pool fades out or a new one fills its caches.
            settling = rebuilding_from is not None or (rebuilt_at >= 0 and b - rebuilt_at < settle_blocks)
            sampler.sample((b + 1) * n_blk / fs, -1 if settling else POOL_SHAPES.index(pool_shape))
        now = time.perf_counter()
        if progress is not None and now - last_report >= 1.0:
            last_report = now
            progress((b + 1) / blocks)
    res.wall_s = time.perf_counter() - t0
    res.blocks = blocks
    trace = sampler.stop()
    res.memory = trace
    st = engine.stats
    res.limiter_clipped, res.stolen, res.dropped_bad = st.clipped, st.stolen, st.dropped_bad
    res.note_ons, res.bursts = traffic.note_ons, traffic.bursts
    res.traced_slope_kb_per_min = trace.traced_slope() if cfg.trace_memory else float("nan")
    res.traced_peak_kb = trace.peak_traced / 1000.0 if cfg.trace_memory else float("nan")
    res.rss_slope_kb_per_min, res.rss_growth_kb = trace.rss_slope(), trace.rss_growth_kb()
    res.rss_end_kb = float(trace.rss[trace.count - 1] / 1000.0)
    _summarise_held(res, held, blocks)
    return res


def _summarise_held(res: OfflineResult, held: HeldNote, blocks: int) -> None:
    h = held.finish()
    res.segments, res.segments_cut_short = h.segments, h.cut_short
    res.held_coverage = h.checked_blocks / blocks
    res.held_checks = h.checks
    res.max_phase_drift_rad = h.max_phase_rad
    res.max_level_drift_db = 20 / math.log(10) * h.max_level
    res.worst_drift_over_tolerance, res.worst_drift = h.worst_ratio, h.worst_detail
    res.max_initial_rel = h.max_initial_rel
    res.held_level_db_at_segment_end = h.lowest_level_db
