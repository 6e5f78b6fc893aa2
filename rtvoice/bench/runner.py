"""One benchmark run: the plan (what to measure, how often) and the figures it yields."""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import asdict, dataclass, field

from rtvoice.bench import machine, profile, realtime
from rtvoice.bench.compare import compare_at
from rtvoice.bench.fretted import time_fretted
from rtvoice.bench.grid import block_period_us, idle_costs, run_grid
from rtvoice.bench.limits import bare_table_product
from rtvoice.bench.scenes import SAMPLE_RATE_HZ, feature_settings
from rtvoice.bench.songs import (
    demo_events,
    memory_per_voice,
    offline_speed,
    realtime_mix,
    render_default_block,
    song_length_s,
    startup_time,
)
from rtvoice.engine import Settings

TARGET_BLOCK = 128
TARGET_VOICES, TARGET_MODES, TARGET_LOAD = 64, 128, 0.20
TARGET_EFFICIENCY, EFFICIENCY_FROM_MODES = 0.6, 4096
TARGET_BASELINE_RATIO, BASELINE_AT_MODES = 3.0, 4096
TARGET_OFFLINE_X = 100.0
#: "Near zero": 127 idle slots together add under 1 % of the block period, and a
#: silent engine (output stage only) stays under 5 % of it.
IDLE_SLOTS_LOAD, SILENT_LOAD = 0.01, 0.05
#: The host's target: callback p99 at most this share of a 128-frame period (32 voices), and
#: no more xruns with the UI drawing than without it over the same stretch on the same server.
TARGET_CALLBACK_P99 = 0.35
#: A fretted note-on (its place's tables, pickup rows and level bound) leaves half the period to the rest.
TARGET_FRETTED_NOTE_ON_P99 = 0.5


@dataclass(frozen=True)
class Plan:
    name: str
    voices: list[int]
    modes: list[int]
    blocks: list[int]
    repeats: int
    baseline_points: list[tuple[int, int]]
    baseline_budget_s: float
    table_modes: list[int]
    song_runs: int
    startup_runs: int
    memory_modes: list[int]
    realtime_seconds: float
    offline_blocks: list[int]
    extra: dict = field(default_factory=dict)


FULL = Plan("full", [1, 2, 4, 8, 16, 32, 64, 128], [16, 32, 64, 128, 256], [64, 128, 256], 300,
            [(8, 64), (16, 64), (32, 128), (16, 256), (64, 128)], 3.0, [1024, 4096, 16384, 65536],
            3, 3, [96, 128, 256], 60.0, [256, 1024, 2048, 4096])
QUICK = Plan("quick", [1, 16, 64, 128], [16, 128, 256], [128], 60,
             [(32, 128)], 0.5, [4096], 1, 1, [128], 0.0, [])


def run(plan: Plan, progress: Callable[[str], None] | None = None) -> dict:
    say = progress or (lambda _msg: None)
    started = time.perf_counter()
    pinned, allowed, nice = machine.pin_to_one_cpu()
    result: dict = {"plan": plan.name, "sample_rate_hz": SAMPLE_RATE_HZ, "machine": machine.describe()}
    result["machine"]["pinned_cpu"] = pinned
    result["machine"]["nice_while_measuring"] = machine.current_nice()

    say("engine grid, every feature on")
    grid = run_grid(plan.voices, plan.modes, plan.blocks, plan.repeats, ramps=True, progress=say)
    say("engine grid at 128 frames, steady (no ramp)")
    steady_voices = plan.voices
    steady = run_grid(steady_voices, plan.modes, [TARGET_BLOCK], plan.repeats, ramps=False, progress=say)
    result["grid"] = [p.as_dict() for p in grid]
    result["grid_steady"] = [p.as_dict() for p in steady]

    say("bare table product (memory bandwidth)")
    result["table_product"] = [
        {"modes": m, "block": TARGET_BLOCK, "timing": t.timing.as_dict(),
         "bandwidth_gb_s": round(t.bandwidth_gb_s, 2),
         "mode_samples_per_s": round(t.mode_samples_per_s)}
        for m in plan.table_modes for t in [bare_table_product(m, TARGET_BLOCK, max(20, plan.repeats // 5))]
    ]
    say("idle costs")
    result["idle"] = idle_costs(TARGET_BLOCK, plan.repeats)
    say("fretted six-string, a tremolo across the strings")
    result["fretted"] = time_fretted(TARGET_BLOCK, 3 * plan.repeats).as_dict()

    say("baselines")
    result["baselines"] = [compare_at(v, m, TARGET_BLOCK, plan.repeats, plan.baseline_budget_s)
                           for v, m in plan.baseline_points]

    say("demo song")
    events, source = demo_events()
    defaults = Settings.defaults()
    song = {"source": source, "events": len(events), "length_s": round(song_length_s(events), 2)}
    song["realtime_defaults"] = realtime_mix(events, defaults, TARGET_BLOCK)
    song["realtime_features_64x128"] = realtime_mix(events, feature_settings(TARGET_VOICES, TARGET_MODES),
                                                    TARGET_BLOCK)
    render_block = render_default_block()
    song["offline_defaults"] = offline_speed(events, defaults, render_block, plan.song_runs)
    song["offline_by_block"] = [offline_speed(events, defaults, b, plan.song_runs)
                                for b in plan.offline_blocks if b != render_block]
    result["song"] = song

    say("profiles")
    result["profile"] = {
        "target_cell": profile.stage_split(TARGET_VOICES, TARGET_MODES, TARGET_BLOCK, ramps=True,
                                           blocks=plan.repeats),
        "target_cell_functions": profile.hot_functions(TARGET_VOICES, TARGET_MODES, TARGET_BLOCK, ramps=True,
                                                       blocks=min(plan.repeats, 200)),
        "efficiency_cell": profile.stage_split(32, 128, TARGET_BLOCK, ramps=False, blocks=plan.repeats),
    }
    say("output limiter")
    result["limiter"] = profile.limiter_cost(TARGET_BLOCK, max(200, plan.repeats * 5))

    say("memory per voice")
    result["memory"] = [memory_per_voice(m) for m in plan.memory_modes]
    machine.unpin(allowed, nice)  # the host's engine process and the UI get the machine as they would on stage
    say("start-up time")
    result["startup"] = startup_time(plan.startup_runs)
    say("real-time callback under JACK")
    result["realtime_host"] = realtime.callback_distribution(plan.realtime_seconds)

    result["machine"]["load_average_at_end"] = machine.load_average()
    result["targets"] = evaluate_targets(result, grid, steady)
    result["elapsed_s"] = round(time.perf_counter() - started, 1)
    result["plan_detail"] = asdict(plan)
    return result


def evaluate_targets(result: dict, grid, steady) -> list[dict]:
    targets = []

    def add(name: str, value, goal: str, met: bool | None, note: str = ""):
        targets.append({"target": name, "value": value, "goal": goal,
                        "met": met, "note": note})

    cell = [p for p in grid if (p.voices, p.modes, p.block) == (TARGET_VOICES, TARGET_MODES, TARGET_BLOCK)]
    if cell:
        p = cell[0]
        add(f"{TARGET_VOICES} voices x {TARGET_MODES} modes, every feature on, {TARGET_BLOCK} frames",
            f"{100 * p.load:.1f} % median ({p.engine.median_us:.0f} us of {p.period_us:.0f}), "
            f"p99 {100 * p.load_p99:.1f} %", f"median <= {100 * TARGET_LOAD:.0f} % of the block period",
            p.load <= TARGET_LOAD)
    big = [p for p in steady if p.total_modes >= EFFICIENCY_FROM_MODES]
    if big:
        worst = min(big, key=lambda p: p.efficiency)
        worst_live = min(big, key=lambda p: p.efficiency_live)
        add(f"efficiency at >= {EFFICIENCY_FROM_MODES} modes, {TARGET_BLOCK} frames",
            f"lowest {worst.efficiency:.2f} ({worst.voices}x{worst.modes}); "
            + ", ".join(f"{p.voices}x{p.modes}: {p.efficiency:.2f}" for p in big)
            + f"; over the live modes only, lowest {worst_live.efficiency_live:.2f} "
              f"({worst_live.voices}x{worst_live.modes})",
            f">= {TARGET_EFFICIENCY} of the bare product", worst.efficiency >= TARGET_EFFICIENCY,
            "steady blocks (no ramp); bare product = the same-shape complex64 product alone; "
            "'live': the engine multiplies only the modes still heard, and the bare product over as "
            "many (see the grid tables' 'eff. live')")
    at = [b for b in result["baselines"] if b["total_modes"] == BASELINE_AT_MODES]
    if at:
        worst_ratio = min(b["faster_of_a_b_over_engine"] for b in at)
        add(f"faster than the faster of baselines (a), (b) at {BASELINE_AT_MODES} modes",
            f"{worst_ratio:.1f}x", f">= {TARGET_BASELINE_RATIO:.0f}x", worst_ratio >= TARGET_BASELINE_RATIO)
    off = result["song"]["offline_defaults"]
    add(f"offline render of the demo song (`rtvoice render` defaults: {off['block']}-frame blocks)",
        f"{off['times_real_time_cpu']:.0f}x real time by CPU time ({off['times_real_time']:.0f}x by wall time)",
        f">= {TARGET_OFFLINE_X:.0f}x", off["times_real_time_cpu"] >= TARGET_OFFLINE_X, result["song"]["source"])
    idle = result["idle"]
    period = block_period_us(TARGET_BLOCK)
    slots_load = 127 * idle["per_idle_slot_us"] / period
    add("cost of idle voices", f"127 idle slots {100 * slots_load:.2f} % of the period; "
        f"silent engine {100 * idle['silent_load']:.1f} %",
        f"idle slots < {100 * IDLE_SLOTS_LOAD:.0f} %, silent engine < {100 * SILENT_LOAD:.0f} %",
        slots_load < IDLE_SLOTS_LOAD and idle["silent_load"] < SILENT_LOAD)
    fretted = result.get("fretted")
    if fretted:
        on, every = fretted["note_on_blocks"], fretted["every_block"]
        add(f"fretted six-string, a note every {fretted['note_every_blocks']} blocks across the strings "
            f"(every feature on), {fretted['block']} frames",
            f"blocks where a note starts: median {on['median_us']:.0f} us, p99 {on['p99_us']:.0f} us "
            f"({100 * fretted['note_on_load_p99']:.1f} % of the period); every block: median "
            f"{every['median_us']:.0f} us, p99 {100 * fretted['load_p99']:.1f} %",
            f"note-on block p99 <= {100 * TARGET_FRETTED_NOTE_ON_P99:.0f} % of the period",
            fretted["note_on_load_p99"] <= TARGET_FRETTED_NOTE_ON_P99,
            "a note starting at a place (string, fret) of its own: tables, pickup rows, the level bound")
    rt = result.get("realtime_host", {})
    if rt.get("available"):
        head, ui = rt["ringing"]["without_ui"], rt["ringing"]["with_ui"]
        where = (f"{rt['voices']} voices ringing x {rt['modes']} modes, {rt['period_frames']} frames, JACK dummy "
                 f"server ({rt['server_scheduling']} scheduling)")
        swung = rt["swinging"]
        add(f"host callback p99 under JACK, {where}",
            f"headless {100 * head['load_p99']:.1f} %, with the UI {100 * ui['load_p99']:.1f} % "
            f"(a pickup swung as well, beyond the target's scene: {100 * swung['without_ui']['load_p99']:.1f} %, "
            f"{100 * swung['with_ui']['load_p99']:.1f} %); most voices {head.get('voices_max')}, "
            f"{ui.get('voices_max')}; note-ons dropped {head.get('notes_dropped')}, {ui.get('notes_dropped')}",
            f"p99 <= {100 * TARGET_CALLBACK_P99:.0f} % of the period, every note played",
            max(head["load_p99"], ui["load_p99"]) <= TARGET_CALLBACK_P99
            and not head.get("notes_dropped") and not ui.get("notes_dropped"))
        idle = rt["ringing"].get("idle_client")
        floor = f"; an idle client in turns: {idle['xruns']} in {idle['seconds']} s" if idle else ""
        add("xruns with the UI drawing vs headless, same server, the scene taken in turns",
            f"{ui['xruns']} with the UI in {ui['seconds']} s, {head['xruns']} headless in {head['seconds']} s "
            f"(more by chance alone: p = {rt['ringing']['ui_more_xruns_p']:.2f}){floor} "
            f"(a pickup swung as well: {swung['with_ui']['xruns']}, {swung['without_ui']['xruns']})",
            "no more with the UI", ui["xruns"] <= head["xruns"])
    return targets
