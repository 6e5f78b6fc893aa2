"""``rtvoice play --headless``: the host without a UI, a status line on stderr once a second."""

from __future__ import annotations

import signal
import sys
import time

from rtvoice.host.link import EngineLink, Snapshot
from rtvoice.host.messages import Device, Error, Exited, Learned, Notice

STATUS_EVERY_S = 1.0


def status_line(s: Snapshot) -> str:
    peak = f"{s.peak_dbfs:6.1f} dBFS" if s.peak_dbfs > -120 else "  -inf dBFS"
    return (f"voices {s.voices:3d} | load {100 * s.load_median:4.1f}% median {100 * s.load_p99:5.1f}% p99"
            f" | xruns {s.xruns} | peak {peak} | limiter {s.gain_reduction_db:4.1f} dB | midi {s.midi_events}"
            + (f" | dropped {s.notes_dropped}" if s.notes_dropped else "")
            + (f" | late {s.late}" if s.late else ""))


SAFETY_LINE = ("listening safety: loud sound damages hearing. Turn your amplifier or headphones down "
               "before the first note; the output fades in and never exceeds -1 dBFS.")


def describe_start(link: EngineLink) -> list[str]:
    info = link.ready_info
    if info is None:
        return ["audio: ?"]
    lines = [f"audio: {info.audio_port}, {info.rate_hz} Hz, {info.block_frames} frames"
             f" ({1000 * info.block_frames / max(info.rate_hz, 1):.1f} ms)", info.latency.text()]
    ports = info.midi_ports
    lines.append(f"MIDI in: {', '.join(ports) if ports else 'none'}")
    if info.cpu_wakeup:
        lines.append(f"CPU wake-up: {info.cpu_wakeup}")
    lines += list(info.notes)
    return lines


def message_line(msg: Notice) -> str:
    """One line for a message from the engine, as ``kind: text``."""
    match msg:
        case Learned(target=target, cc=cc, channel=channel):
            return f"learned: CC{cc} on channel {channel} now drives {target}"
        case Error(text=text):
            return f"error: {text}"
        case Exited(text=text):
            return f"exited: {text}"
        case Device(text=text):
            return f"device: {text}"
    return f"message: {msg!r}"


def run_headless(link: EngineLink, duration_s: float | None = None, out=sys.stderr) -> int:
    """Run until Ctrl-C, SIGTERM, ``duration_s`` or the engine's death; returns the exit status."""
    stop: dict[str, str | None] = {"why": None}  # why the loop ended: a signal's name, "duration"; None: running

    def on_signal(signum, _frame):
        stop["why"] = signal.Signals(signum).name

    old = {sig: signal.signal(sig, on_signal) for sig in (signal.SIGINT, signal.SIGTERM)}
    tty = out.isatty()
    status = 0
    try:
        out.write(f"rtvoice: {SAFETY_LINE}\n")
        link.start()
        for line in describe_start(link):
            out.write(f"rtvoice: {line}\n")
        out.flush()
        started = time.monotonic()
        next_status = started + STATUS_EVERY_S
        while stop["why"] is None:
            time.sleep(0.05)
            for msg in link.poll_messages():
                out.write(("\n" if tty else "") + f"rtvoice: {message_line(msg)}\n")
            if not link.alive():
                out.write(("\n" if tty else "") + f"rtvoice: the engine stopped (exit code {link.exitcode})\n")
                status = 1
                break
            now = time.monotonic()
            if duration_s is not None and now - started >= duration_s:
                stop["why"] = "duration"
            if now >= next_status:
                next_status += STATUS_EVERY_S
                line = status_line(link.snapshot())
                out.write(f"\r{line}" if tty else f"{line}\n")
                out.flush()
    finally:
        link.close()
        for sig, handler in old.items():
            signal.signal(sig, handler)
    summary = link.summary
    if tty:
        out.write("\n")
    if summary:
        out.write(f"rtvoice: stopped ({stop['why'] or 'engine'}) after {summary['seconds']:.1f} s: "
                  f"load {100 * summary['load_median']:.1f}% median, {100 * summary['load_p99']:.1f}% p99, "
                  f"xruns {summary['xruns']}, midi events {summary['midi_events']}"
                  + (f", note-ons dropped {summary['notes_dropped']}" if summary.get("notes_dropped") else "")
                  + "\n")
        if "record" in summary:
            lost = f", {summary['record_lost']} samples lost" if summary["record_lost"] else ""
            out.write(f"rtvoice: recorded {summary['record_seconds']:.1f} s to {summary['record']}{lost}\n")
    out.flush()
    return status
