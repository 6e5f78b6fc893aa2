"""Readable tables of one run's figures (the JSON holds the same numbers and more)."""

from __future__ import annotations


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)]
    line = "| " + " | ".join(h.ljust(w) for h, w in zip(headers, widths, strict=True)) + " |"
    rule = "|" + "|".join("-" * (w + 2) for w in widths) + "|"
    def cell(i: int, text: str, width: int) -> str:
        return text.ljust(width) if i == 0 else text.rjust(width)  # names left, figures right

    body = ["| " + " | ".join(cell(i, c, w) for i, (c, w) in enumerate(zip(r, widths, strict=True))) + " |"
            for r in rows]
    return "\n".join([line, rule, *body])


def _server_log_text(log: dict) -> str:
    """The server's own account of its xruns over a condition's runs, in words."""
    clients = ", ".join(f"{client} {n}" for client, n in sorted(log["not_finished"].items())) or "none"
    return (f"the server's log over these runs: its timer late {log['timer_late']}; "
            f"a client not finished by the end of its cycle: {clients}")


def _pct(x: float) -> str:
    return f"{100 * x:.1f} %"


def machine_text(m: dict) -> str:
    blas = m.get("blas_build", {})
    rt = m.get("blas_runtime", {})
    return "\n".join([
        f"- CPU: {m['cpu_model']} ({m['cpus']} CPUs, cache {m.get('cpu_cache')}, {m.get('cpu_mhz')} MHz), "
        f"measured pinned to CPU {m.get('pinned_cpu')} at nice {m.get('nice_while_measuring')}; "
        f"memory {m.get('memory_gib')} GiB; {m['os']}",
        f"- load average (1, 5, 15 min) at start {m.get('load_average_at_start')}, at end "
        f"{m.get('load_average_at_end')}",
        f"- Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}; BLAS {blas.get('name')} "
        f"{blas.get('version')} (runtime: {rt or 'unknown'}); OPENBLAS_NUM_THREADS={m.get('OPENBLAS_NUM_THREADS')}",
    ])


def grid_table(points: list[dict], block: int) -> str:
    rows = []
    for p in points:
        if p["block"] != block:
            continue
        rows.append([str(p["voices"]), str(p["modes_per_voice"]), str(p["total_modes"]), str(p["active_voices"]),
                     f"{p['engine']['median_us']:.0f}", f"{p['engine']['p99_us']:.0f}",
                     _pct(p["load_median"]), _pct(p["load_p99"]),
                     f"{p['bare_product']['median_us']:.1f}", f"{p['efficiency']:.2f}",
                     f"{p.get('live_columns', 0):.0f}", f"{p.get('efficiency_live', 0):.2f}"])
    return _table(["voices", "modes", "total", "active", "median us", "p99 us", "load", "load p99",
                   "bare us", "efficiency", "live", "eff. live"], rows)


def _profile_text(r: dict) -> list[str]:
    prof = r.get("profile")
    if not prof:
        return []
    out = ["", "## Profile", ""]
    for key, label in (("target_cell", "target cell, every feature on"), ("efficiency_cell", "4096 modes, steady")):
        p = prof[key]
        stages = ", ".join(f"{k.strip('_')} {v:.0f}" for k, v in p["stages_median_us"].items())
        out.append(f"- {p['voices']} voices x {p['modes']} modes, {p['block']} frames ({label}): "
                   f"{p['render_median_us']:.0f} us per block = {stages} (medians, us)")
    rows = [[f["function"], f"{f['calls_per_block']:g}", f"{100 * f['share']:.1f} %"]
            for f in prof["target_cell_functions"]]
    out += ["", "Own time by function in the target cell (cProfile):", "",
            _table(["function", "calls per block", "share of own time"], rows)]
    return out


def render_text(r: dict) -> str:
    """The figures as Markdown (what ``--write BENCHMARKS.md`` writes)."""
    out = [f"# rtvoice bench ({r['plan']} run)", "",
           f"Produced by `{r.get('command', 'rtvoice bench')}` in {r.get('elapsed_s', '?')} s; "
           f"{r['sample_rate_hz']} Hz; medians and 99th percentiles of many timed blocks after a warm-up "
           "(`time.perf_counter_ns`).", "", "## Machine", "", machine_text(r["machine"]), "", "## Targets", ""]
    out.append(_table(["target", "measured", "goal", "met"],
                      [[t["target"], t["value"], t["goal"], "yes" if t["met"] else "NO"] for t in r["targets"]]))
    blocks = sorted({p["block"] for p in r["grid"]})
    for b in blocks:
        out += ["", f"## Engine per block, every feature on, {b} frames "
                f"(period {b / r['sample_rate_hz'] * 1e6:.0f} us)", "", grid_table(r["grid"], b)]
    out += ["", "## Engine per block, steady (no ramp), 128 frames", "", grid_table(r["grid_steady"], 128)]
    out += ["", "`bare us`: the same-shape product alone (complex64, (N2 x M) times (M x N1)); "
            "`efficiency` = bare / engine, i.e. engine throughput over bare-product throughput; "
            "`live`: the mean columns of the engine's product while timed (it multiplies only the modes "
            "still heard, below -250 dBFS the rest are left out); `eff. live` = the bare product over as many "
            "modes as the engine's last block multiplied (timed in turns with it) / engine: the efficiency "
            "over the work the engine actually does."]
    out += ["", "## Bare table product: memory bandwidth", "",
            "The direct formulation, a (block x modes) complex64 table of powers times the vector of mode "
            "amplitudes, streams the whole table every block.", "",
            _table(["modes", "table MiB", "median us", "GB/s", "mode-samples/s"],
                   [[str(t["modes"]), f"{t['modes'] * 128 * 8 / 2**20:.0f}", f"{t['timing']['median_us']:.0f}",
                     f"{t['bandwidth_gb_s']:.1f}", f"{t['mode_samples_per_s']:.3g}"] for t in r["table_product"]])]
    rows = []
    for b in r["baselines"]:
        bl = b["baselines"]
        rows.append([f"{b['voices']}x{b['modes_per_voice']}", str(b["total_modes"]),
                     f"{b['engine_steady']['median_us']:.0f}", f"{b['engine_features_on']['median_us']:.0f}",
                     *(f"{bl[k]['timing']['median_us']:.0f} ({bl[k]['ratio_to_engine']:.1f}x)"
                       for k in ("a_resonators_lfilter", "b_phasor_recursion", "c_karplus_strong"))])
    out += ["", "## Baselines, same notes, 128 frames", "",
            "Median us per block (ratio to the steady engine timed in turns beside each baseline). (a) one "
            "two-pole resonator per mode through scipy.signal.lfilter; (b) the complex phasor recursion stepped "
            "sample by sample, vectorised across modes; (c) extended Karplus-Strong (Jaffe & Smith 1983), one "
            "string loop per voice. All run the engine's output filters on their samples (lfilter) and its "
            "limiter; the engine folds the same filters into its modes.", "",
            _table(["voices x modes", "total", "engine", "engine+ramps", "(a) resonators", "(b) phasors",
                    "(c) Karplus-Strong"], rows)]
    fretted = r.get("fretted")
    if fretted:
        period = fretted["period_us"]
        out += ["", "## Fretted six-string (a note every "
                f"{fretted['note_every_blocks']} blocks, {fretted['block']} frames)", ""]
        for label, key in (("blocks where a note starts", "note_on_blocks"), ("other blocks", "other_blocks"),
                           ("every block", "every_block")):
            t = fretted[key]
            out.append(f"- {label}: median {t['median_us']:.0f} us ({_pct(t['median_us'] / period)}), "
                       f"p99 {t['p99_us']:.0f} us ({_pct(t['p99_us'] / period)}), {t['count']} blocks")
        out.append(f"- voices sounding (mean, fading ones included): {fretted['active_voices_mean']:.1f}")
    idle = r["idle"]
    out += ["", "## Idle", "", f"- silent 128-voice engine: {idle['silent_block']['median_us']:.0f} us "
            f"({_pct(idle['silent_load'])} of the period); per idle slot: {idle['per_idle_slot_us']:.3f} us"]
    s = r["song"]
    out += ["", f"## Demo song ({s['source']}, {s['events']} events, {s['length_s']} s)", ""]
    mixes = (("realtime_defaults", "default settings"), ("realtime_features_64x128", "every feature, 64x128"))
    for key, label in mixes:
        m = s[key]
        out.append(f"- real-time blocks, {label}, {m['block']} frames: median {m['timing']['median_us']:.0f} us "
                   f"({_pct(m['load_median'])}), p99 {m['timing']['p99_us']:.0f} us ({_pct(m['load_p99'])}), "
                   f"max {m['timing']['max_us']:.0f} us, {m['blocks_over_period']} of {m['blocks']} blocks over "
                   f"the period, most voices {m['most_voices']}")
    for off in [s["offline_defaults"], *s.get("offline_by_block", [])]:
        out.append(f"- offline, default settings, {off['block']} frames: {off['audio_s']} s of audio in "
                   f"{off['wall_s']} s wall ({off['times_real_time']}x real time), {off['cpu_s']} s CPU "
                   f"({off['times_real_time_cpu']}x)")
    out += ["", "## Memory per voice (traced peak)", ""]
    out += [f"- {m['modes']} modes: {m['per_voice_kib']} KiB per voice" for m in r["memory"]]
    st = r["startup"]
    out += ["", "## Start-up", ""]
    out.append(f"- `{st['command']}`: {st['first_block_s']} s until its audio runs (engine import alone "
               f"{st['python_import_engine_s']} s)" if st.get("available") else f"- not measured: {st['reason']}")
    rt = r["realtime_host"]
    out += ["", "## Real-time callback under the JACK dummy server (the host, every feature on)", ""]
    if rt.get("available"):
        out.append(f"- {rt['voices']} voices x {rt['modes']} modes, {rt['period_frames']}-frame periods; the server "
                   f"ran with {rt.get('server_scheduling', 'ordinary')} scheduling; each condition in "
                   f"{rt['ringing']['without_ui'].get('segments', 1)} runs taken in turns with the other's, merged; "
                   f"the engine process: {rt['ringing']['without_ui'].get('cpu_wakeup') or 'no CPU wake-up request'}")
        scenes = (("ringing", "a chord of 32 notes strummed every 2 s (the target's scene)"),
                  ("swinging", "the same with a pickup swung 20 times a second"))
        for scene, what in scenes:
            out.append(f"- {what}:")
            for key, label in (("without_ui", "headless"), ("with_ui", "with the terminal UI drawing")):
                m = rt[scene][key]
                extra = f", {m['ui_frames_drawn']} UI frames" if "ui_frames_drawn" in m else ""
                render = (f" (the engine's render: median {_pct(m['render_median'])}, p99 {_pct(m['render_p99'])})"
                          if m.get("render_median") is not None else "")
                late = f" ({m['late']} of them callbacks of ours that overran)" if m.get("late") is not None else ""
                runs = (f", by run {', '.join(map(str, m['segment_xruns']))}" if len(m.get("segment_xruns", [])) > 1
                        else "")
                out.append(f"  - {label}: callback median {_pct(m['load_median'])}, p99 {_pct(m['load_p99'])} of "
                           f"the period{render} over {m['blocks']} blocks in {m['seconds']} s; xruns "
                           f"{m['xruns']}{runs}{late}{extra}")
                if m.get("voices_max") is not None:
                    out.append(f"    - most voices sounding {m['voices_max']}; note-ons dropped by the "
                               f"callback's note-on budget {m.get('notes_dropped', 0)}")
                if m.get("server_log"):
                    out.append(f"    - {_server_log_text(m['server_log'])}")
            if "ui_more_xruns_p" in rt[scene]:
                out.append(f"  - more xruns with the UI than headless by chance alone: one-sided p = "
                           f"{rt[scene]['ui_more_xruns_p']:.2f} (exact test of two Poisson counts)")
            idle = rt[scene].get("idle_client")
            if idle:
                out.append(f"  - an idle client (its callback writes silence), in turns with both: xruns "
                           f"{idle['xruns']} in {idle['seconds']} s, by run "
                           f"{', '.join(map(str, idle['segment_xruns']))}: the server's and the machine's own")
                if idle.get("server_log"):
                    out.append(f"    - {_server_log_text(idle['server_log'])}")
    else:
        out.append(f"- not measured: {rt['reason']}")
    out += _profile_text(r)
    out += _limiter_text(r)
    return "\n".join(out) + "\n"


def _limiter_text(r: dict) -> list[str]:
    lim = r.get("limiter")
    if not lim:
        return []
    return ["", "## Output limiter (true peak, look-ahead)", "",
            f"- {lim['block']} frames: quiet block {lim['quiet_median_us']:.1f} us (p99 {lim['quiet_p99_us']:.1f}), "
            f"near the ceiling {lim['near_ceiling_median_us']:.1f} us (p99 {lim['near_ceiling_p99_us']:.1f}), "
            f"limiting {lim['limiting_median_us']:.1f} us (p99 {lim['limiting_p99_us']:.1f}; "
            f"{lim['limiting_gain_reduction_db']:.1f} dB of reduction) per block, medians; added latency "
            f"{lim['latency_ms']:.2f} ms ({lim['latency_frames']} frames at {r['sample_rate_hz']} Hz)"]
