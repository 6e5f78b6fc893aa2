"""Callback time under a JACK dummy server, with and without the terminal UI redrawing.

The bench starts its own JACK server (dummy backend, 128-frame periods, a server
name of its own so it disturbs no other), runs the real host (:mod:`rtvoice.host`)
on it with 32 voices x 128 modes (the host's target) and every feature on, and
plays two scenes: "ringing", the host target's own (a chord of 32 notes strummed
every two seconds, so 32 voices ring), and "swinging", the same with a pickup swung
20 times a second, as a sound designer steering it from a controller would (the
smoothing ramp then runs in nearly every block, which doubles the engine's work).
The server runs with real-time scheduling where the machine allows it (as an
audio server on stage does) and without it otherwise; the report says which.
In the target's scene an idle client (:mod:`rtvoice.bench.idle_client`, a callback that
only writes silence) is taken in turns with both: its xruns are the server's and the
machine's own, the floor the host's counts are read against.
The server's own log says what each xrun was (:class:`ServerLog`): its timer late (the
dummy driver woke after its cycle should have begun) or a named client not finished
by the end of its cycle; each run reports its share of those lines.
The engine process keeps a histogram of callback time over block period; its
median and 99th percentile and the xrun count are reported for each scene
headless and with the Textual UI drawing at its frame rate in this process.
Each condition's time is taken in :data:`SEGMENTS` runs in turns with the other's
(headless, UI, UI, headless, ...), and the runs' histograms and counts are merged:
this machine has spells of xruns minutes long, and two minutes taken one after the
other compared the spells, not the conditions.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time

import numpy as np

from rtvoice.bench.scenes import NOTES_PER_CHANNEL, feature_settings
from rtvoice.procutil import scoped_environ, stop_process

SERVER_NAME = "rtvbench"
PERIOD_FRAMES = 128
VOICES, MODES = 32, 128
RESTRIKE_S, SWING_S = 2.0, 0.05
SCENES = {"ringing": False, "swinging": True}  # scene name: is a pickup swung
SEGMENTS = 4  # each condition's time is split into this many runs, taken in turns with the other's


SCHEDULING = {"real-time": ["-R", "-P", "70"], "ordinary": ["--no-realtime"]}
#: jackd's error lines for an xrun (jack2 1.9, written whether or not it runs verbose).
TIMER_LATE = re.compile(r"JackTimedDriver::Process XRun")
NOT_FINISHED = re.compile(r"JackEngine::XRun: client = (.+?) was not finished")


def xrun_lines(text: str) -> dict:
    """What the server's log says of its xruns in ``text``: {"timer_late": n, "not_finished": {client: n}}."""
    counts: dict = {"timer_late": 0, "not_finished": {}}
    for line in text.splitlines():
        if TIMER_LATE.search(line):
            counts["timer_late"] += 1
        elif m := NOT_FINISHED.search(line):
            counts["not_finished"][m.group(1)] = counts["not_finished"].get(m.group(1), 0) + 1
    return counts


class ServerLog:
    """The server's output in a file of its own; :meth:`since` reads what it said after a :meth:`mark`."""

    def __init__(self, path: str):
        self.path = path
        self.file = open(path, "wb")  # noqa: SIM115 - the server writes to it until it stops

    def mark(self) -> int:
        return os.path.getsize(self.path)

    def since(self, mark: int) -> dict:
        with open(self.path, "rb") as f:
            f.seek(mark)
            return xrun_lines(f.read().decode("utf-8", "replace"))

    def close(self) -> None:
        self.file.close()
        with contextlib.suppress(OSError):
            os.unlink(self.path)


def _start_server(name: str, period: int, scheduling: str, log: ServerLog) -> subprocess.Popen | None:
    """A running JACK dummy server writing its output to ``log``, or None when it would not start this way."""
    proc = subprocess.Popen(["jackd", "-n", name, *SCHEDULING[scheduling], "-d", "dummy", "-r", "48000",
                             "-p", str(period)],
                            stdout=log.file, stderr=log.file, stdin=subprocess.DEVNULL)
    ok = subprocess.run(["jack_wait", "-s", name, "-w", "-t", "10"], capture_output=True, check=False,
                        timeout=20).returncode == 0
    if ok and proc.poll() is None:
        return proc
    stop_process(proc)
    return None


@contextlib.contextmanager
def jack_server(name: str = SERVER_NAME, period: int = PERIOD_FRAMES, prefer_realtime: bool = True):
    """A JACK dummy server of our own for the duration of the block; yields (name, scheduling, log).

    With ``prefer_realtime`` it asks for real-time scheduling first (granted to root or
    to members of an audio group with rtprio limits) and falls back to ordinary.
    ``log`` is its :class:`ServerLog`.
    """
    fd, path = tempfile.mkstemp(prefix="rtvoice-jackd-", suffix=".log")
    os.close(fd)
    log = ServerLog(path)
    try:
        for scheduling in ("real-time", "ordinary") if prefer_realtime else ("ordinary",):
            proc = _start_server(name, period, scheduling, log)
            if proc is not None:
                break
        else:
            raise RuntimeError("the JACK dummy server did not start")
        try:
            yield name, scheduling, log
        finally:
            stop_process(proc)
    finally:
        log.close()


def _chord():
    return [(i // NOTES_PER_CHANNEL, 40 + i % NOTES_PER_CHANNEL) for i in range(VOICES)]


class _Performance:
    """What the player does: a strum of the chord every RESTRIKE_S and, when ``swing``, a pickup swing at every step.

    The caller steps it every SWING_S, sleeping between (with or without an event loop).
    """

    def __init__(self, link, swing: bool):
        self.link = link
        self.next_strike = time.monotonic()
        self.swing = 0 if swing else None

    def step(self) -> None:
        if time.monotonic() >= self.next_strike:
            for ch, note in _chord():
                self.link.note_off(note, ch)
                self.link.note_on(note, 90, ch)
            self.next_strike += RESTRIKE_S
        if self.swing is not None:
            self.swing += 1
            self.link.set_value("pickup.0.position", 0.12 if self.swing % 2 else 0.16)


def _run_once(seconds: float, with_ui: bool, swing: bool) -> dict:
    from rtvoice.host.link import EngineLink

    link = EngineLink(feature_settings(VOICES, MODES), audio_device="system", rate=48000, block=PERIOD_FRAMES,
                      midi_in="none", client_name="rtvbench-engine")
    link.start()
    try:
        if with_ui:
            from rtvoice.ui.app import RtvoiceApp

            async def drive():
                app = RtvoiceApp(link, safety_note=False)
                async with app.run_test(size=(120, 40)):
                    performance, start = _Performance(link, swing), time.monotonic()
                    while time.monotonic() - start < seconds:
                        performance.step()
                        await asyncio.sleep(SWING_S)
                    frames = app.frames

                return frames

            frames = asyncio.run(drive())
        else:
            performance, start = _Performance(link, swing), time.monotonic()
            while time.monotonic() - start < seconds:
                performance.step()
                time.sleep(SWING_S)
            frames = 0
        ready = link.ready_info
        audio = ready.audio_port if ready is not None else ""
        wakeup = ready.cpu_wakeup if ready is not None else ""
    finally:
        link.close()
    s = link.summary
    out = {"audio": audio, "cpu_wakeup": wakeup, "seconds": round(s.get("seconds", 0.0), 2), "blocks": s.get("blocks"),
           "load_median": s.get("load_median"), "load_p99": s.get("load_p99"), "xruns": s.get("xruns"),
           "late": s.get("late"), "notes_dropped": s.get("notes_dropped"), "voices_max": s.get("voices_max"),
           "render_median": s.get("render_median"), "render_p99": s.get("render_p99"),
           "load_hist": s.get("load_hist", []), "render_hist": s.get("render_hist", [])}
    if with_ui:
        out["ui_frames_drawn"] = frames
    return out


def _run_idle(seconds: float) -> dict:
    """The idle client for ``seconds`` on the current server, in a process of its own."""
    proc = subprocess.run([sys.executable, "-m", "rtvoice.bench.idle_client", str(seconds), str(PERIOD_FRAMES)],
                          capture_output=True, text=True, timeout=seconds + 30, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"idle client: {proc.stderr.strip().splitlines()[-1:] or proc.returncode}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def more_xruns_p(a: int, seconds_a: float, b: int, seconds_b: float) -> float:
    """One-sided p-value that condition A's xrun rate exceeds B's, from counts a, b over their seconds.

    Exact conditional test of two Poisson counts: given a + b, a is binomial with
    p = t_a / (t_a + t_b) when the rates are equal (Przyborowski & Wilenski, Biometrika 31, 1940;
    cited from memory).
    Xruns come in spells, so they are over-dispersed against Poisson and this reads
    significance too readily, never too rarely.
    """
    import scipy.stats

    n = a + b
    if n == 0:
        return 1.0
    return float(scipy.stats.binomtest(a, n, seconds_a / (seconds_a + seconds_b), alternative="greater").pvalue)


def hist_percentile(pairs: list, q: float) -> float:
    """The q-quantile (0..1) of a merged [bin, count] histogram of 0.1 % bins (as CallbackMeter.run_percentile)."""
    if not pairs:
        return 0.0
    bins, counts = np.array(sorted(pairs)).T
    cum = np.cumsum(counts)
    return (float(bins[np.searchsorted(cum, q * cum[-1])]) + 0.5) / 1000


def merge_runs(runs: list[dict]) -> dict:
    """One condition's figures over its segments: counts summed, percentiles from the merged histograms."""
    merged: dict = {"audio": runs[0]["audio"], "cpu_wakeup": runs[0].get("cpu_wakeup", ""), "segments": len(runs),
                    "segment_xruns": [r["xruns"] for r in runs]}
    for key in ("seconds", "blocks", "xruns", "late", "ui_frames_drawn", "notes_dropped"):
        if key in runs[0]:
            merged[key] = round(sum(r.get(key) or 0 for r in runs), 2)
    if "server_log" in runs[0]:
        merged["server_log"] = merge_server_logs([r["server_log"] for r in runs])
    if "voices_max" in runs[0]:
        merged["voices_max"] = max(r.get("voices_max") or 0 for r in runs)
    for kind in ("load", "render"):
        pairs: dict[int, int] = {}
        for r in runs:
            for b, c in r[f"{kind}_hist"]:
                pairs[b] = pairs.get(b, 0) + c
        hist = [[b, c] for b, c in pairs.items()]
        merged[f"{kind}_median"] = hist_percentile(hist, 0.5)
        merged[f"{kind}_p99"] = hist_percentile(hist, 0.99)
    return merged


def merge_server_logs(logs: list[dict]) -> dict:
    """Counts of :func:`xrun_lines` summed over runs."""
    out: dict = {"timer_late": sum(x["timer_late"] for x in logs), "not_finished": {}}
    for x in logs:
        for client, n in x["not_finished"].items():
            out["not_finished"][client] = out["not_finished"].get(client, 0) + n
    return out


def _logged(log: ServerLog, run, *args, **kwargs) -> dict:
    """``run(*args, **kwargs)``'s result with what the server's log said meanwhile under "server_log"."""
    mark = log.mark()
    result = run(*args, **kwargs)
    time.sleep(0.2)  # the server writes a late client's line after the cycle it missed
    result["server_log"] = log.since(mark)
    return result


def callback_distribution(seconds: float) -> dict:
    if seconds <= 0:
        return {"available": False, "reason": "skipped in --quick"}
    if not (shutil.which("jackd") and shutil.which("jack_wait")):
        return {"available": False, "reason": "jackd / jack_wait not installed (Debian: jackd2)"}
    result: dict = {"available": True, "voices": VOICES, "modes": MODES, "period_frames": PERIOD_FRAMES}
    try:
        with jack_server() as (name, scheduling, log), \
                scoped_environ({"JACK_DEFAULT_SERVER": name, "JACK_NO_START_SERVER": "1"}):
            result["server_scheduling"] = scheduling
            for scene, swing in SCENES.items():
                runs: dict[bool, list] = {False: [], True: []}
                idle: list[dict] = []
                part = seconds / SEGMENTS
                # The idle client (the floor) is taken once, in the target's scene.
                conditions = ("headless", "ui") if swing else ("headless", "ui", "idle")
                for i in range(SEGMENTS):  # in turns, ABBA: a slow spell of the machine falls on all alike
                    for what in conditions if i % 2 == 0 else conditions[::-1]:
                        if what == "idle":
                            idle.append(_logged(log, _run_idle, part))
                        else:
                            runs[what == "ui"].append(_logged(log, _run_once, part, with_ui=what == "ui",
                                                              swing=swing))
                head, ui = merge_runs(runs[False]), merge_runs(runs[True])
                result[scene] = {"without_ui": head, "with_ui": ui,
                                 "ui_more_xruns_p": round(more_xruns_p(ui["xruns"], ui["seconds"], head["xruns"],
                                                                       head["seconds"]), 4)}
                if idle:
                    result[scene]["idle_client"] = {
                        "seconds": round(sum(r["seconds"] for r in idle), 2),
                        "blocks": sum(r["blocks"] for r in idle), "xruns": sum(r["xruns"] for r in idle),
                        "segment_xruns": [r["xruns"] for r in idle],
                        "server_log": merge_server_logs([r["server_log"] for r in idle])}
    except Exception as err:  # noqa: BLE001 - a failing server must not stop the other benchmarks
        return {"available": False, "reason": f"{type(err).__name__}: {err}"}
    return result
