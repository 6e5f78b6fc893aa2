"""The soak's table (plain text) and JSON."""

from __future__ import annotations

import json
import math

from rtvoice.engine import CEILING
from rtvoice.soak.offline import RSS_LIMIT_KB_PER_MIN, TRACED_LIMIT_KB_PER_MIN, OfflineResult
from rtvoice.soak.realtime import RealtimeResult


def _f(x, fmt: str) -> str:
    return "n/a" if x is None or (isinstance(x, float) and math.isnan(x)) else format(x, fmt)


def offline_rows(r: OfflineResult) -> list[tuple[str, str, str]]:
    db = 20 * math.log10(r.peak) if r.peak > 0 else -math.inf
    return [
        ("audio rendered", f"{r.audio_s / 60:.1f} min, {r.blocks} blocks of {r.config.block_frames}",
         f"{r.wall_s:.1f} s wall, {r.audio_s / max(r.wall_s, 1e-9):.0f}x real time"),
        ("traffic", f"{r.note_ons} note-ons, {r.bursts} bursts, {r.cc_changes} mapped CC changes",
         f"{r.preset_changes} presets, {r.rebuilds} pool rebuilds, {r.stolen} steals"),
        ("every block finite", f"{r.bad_blocks} bad blocks", "ok" if not r.bad_blocks else "FAIL"),
        ("every block <= ceiling", f"peak {r.peak:.6f} ({db:.2f} dBFS), ceiling {CEILING:.6f}",
         f"{r.over_ceiling_blocks} over; limiter {r.max_gain_reduction_db:.1f} dB max, {r.limiter_clipped} clipped"),
        ("traced memory slope", f"{_f(r.traced_slope_kb_per_min, '.2f')} kB/min (2nd half)",
         f"limit {TRACED_LIMIT_KB_PER_MIN:g}; peak {_f(r.traced_peak_kb, '.0f')} kB"),
        ("resident memory slope", f"{_f(r.rss_slope_kb_per_min, '.1f')} kB/min (2nd half)",
         f"limit {RSS_LIMIT_KB_PER_MIN:g}; rise {_f(r.rss_growth_kb, '.0f')} kB, end {_f(r.rss_end_kb, '.0f')} kB"),
        ("held note phase drift", f"{r.max_phase_drift_rad:.3g} rad max",
         f"worst {r.worst_drift_over_tolerance:.2f} x float64 bound {r.worst_drift}"),
        ("held note level drift", f"{r.max_level_drift_db:.3g} dB max",
         f"{r.segments} segments ({r.segments_cut_short} cut short), {100 * r.held_coverage:.1f}% covered, "
         f"{r.held_checks} checks"),
        ("held note at note-on", f"{r.max_initial_rel:.3g} relative to the closed form",
         f"lowest level at a check {r.held_level_db_at_segment_end:.1f} dB"),
    ]


def realtime_rows(r: RealtimeResult) -> list[tuple[str, str, str]]:
    server = ("" if r.server_xruns_soak is None else
              f"; server log {r.server_xruns_baseline} baseline / {r.server_xruns_soak} soak XRun lines")
    rows_late = []
    if r.host_late_soak is not None:
        rows_late.append(("host audio client late", f"{r.host_late_soak} soak, {r.host_late_baseline} baseline",
                          f"limit {r.host_late_limit}; all late clients: baseline {r.late_baseline}, "
                          f"soak {r.late_soak}"))
    return [
        ("real-time run", f"{r.soak_s:.0f} s MIDI after {r.baseline_s:.0f} s baseline, {r.midi_sent} messages sent, "
         f"{r.host_midi_events} handled",
         f"exit {r.exit_code}; {r.summary_line.removeprefix('rtvoice: ')}"),
        ("xruns vs baseline", f"{r.xruns_soak} soak, {r.xruns_baseline} baseline",
         f"limit {r.xrun_limit}{'' if r.host_late_soak is None else ' (not judged: see next row)'}{server}"),
        *rows_late,
        ("engine resident memory", f"{_f(r.rss_start_kb, '.0f')} -> {_f(r.rss_end_kb, '.0f')} kB",
         f"slope {_f(r.rss_slope_kb_per_min, '.1f')} kB/min (2nd half), {r.rss_samples} samples"),
        ("recording", f"{r.record_s:.1f} s, peak {_f(r.record_peak, '.6f')}",
         f"finite {r.record_finite}, ceiling {CEILING:.6f}"),
    ]


def table(offline: OfflineResult | None, realtime: RealtimeResult | None) -> str:
    rows = [("check", "figure", "detail")]
    if offline is not None:
        rows += offline_rows(offline)
    if realtime is not None:
        rows += realtime_rows(realtime)
    w0, w1 = (max(len(r[i]) for r in rows) for i in (0, 1))
    lines = [f"{a:<{w0}}  {b:<{w1}}  {c}" for a, b, c in rows]
    lines.insert(1, "-" * min(160, max(len(x) for x in lines)))
    fails = (offline.failures() if offline else []) + (realtime.failures() if realtime else [])
    lines.append("result: " + ("PASS" if not fails else "FAIL: " + "; ".join(fails)))
    return "\n".join(lines)


def to_json(offline: OfflineResult | None, realtime: RealtimeResult | None) -> str:
    data = {"offline": offline.to_dict() if offline else None,
            "realtime": realtime.to_dict() if realtime else None}
    return json.dumps(data, indent=2, default=lambda o: o if not isinstance(o, float) else repr(o))
