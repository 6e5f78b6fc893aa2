"""``rtvoice render`` and ``rtvoice presets``."""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

from rtvoice.engine import (
    PresetError,
    Settings,
    apply_assignments,
    list_presets,
    load_preset,
    note_name,
    parse_note,
    preset_text,
    read_preset_file,
)
from rtvoice.offline import ab_render
from rtvoice.offline.files import WAV_MAX_FRAMES, RenderError, write_blocks
from rtvoice.offline.midifile import read_midi_events
from rtvoice.offline.options import output_path, preset_arg
from rtvoice.offline.render import (
    DEFAULT_RENDER_BLOCK,
    PROGRESS_ABOVE_S,
    PlayReport,
    iter_blocks,
    longest_frames,
    note_events,
    text_progress,
)


def register(sub: argparse._SubParsersAction) -> None:
    r = sub.add_parser("render", help="render a MIDI file or one note to a WAV file")
    src = r.add_mutually_exclusive_group(required=True)
    src.add_argument("midifile", nargs="?", help="Standard MIDI File (type 0 or 1)")
    src.add_argument("--note", type=_midi_note, metavar="NOTE",
                     help="render one note instead: MIDI number 0-127 or name (E2, F#3, Bb1; 60 = C4)")
    r.add_argument("--velocity", type=_velocity, default=100, help="note-on velocity 1-127 (default 100)")
    r.add_argument("--seconds", type=_seconds, default=2.0, help="how long --note is held (default 2)")
    r.add_argument("--string", type=_string, metavar="S",
                   help="play --note on string S (1 = the highest-pitched); without it the preset's rule chooses")
    r.add_argument("--json", action="store_true",
                   help="print one JSON object (file, seconds, peak, where each note sounded) instead of text")
    r.add_argument("-o", "--output", required=True, type=output_path, help="WAV file to write (32-bit float)")
    add_sound_options(r, block=DEFAULT_RENDER_BLOCK)
    r.add_argument("--tail-cap", type=_seconds, default=30.0, help="longest ring-out after the last event, s")

    ab_render.add_options(r)
    r.set_defaults(func=run_render)

    p = sub.add_parser("presets", help="list, show or check presets")
    psub = p.add_subparsers(dest="action", metavar="ACTION", required=True, parser_class=type(p))
    psub.add_parser("list", help="list factory and user presets").set_defaults(func=run_list)
    show = psub.add_parser("show", help="print a preset as complete TOML")
    show.add_argument("name", help="preset name or path to a .toml file")
    show.set_defaults(func=run_show)
    check = psub.add_parser("check", help="validate preset files")
    check.add_argument("files", nargs="+", help=".toml files")
    check.set_defaults(func=run_check)


def add_sound_options(parser: argparse.ArgumentParser, block: int = 256) -> None:
    """--preset, --set, --rate and --block, shared by the commands that make sound."""
    parser.add_argument("--preset", type=preset_arg, help="preset name or path to a .toml file")
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE",
                        help="change one parameter by its dotted name (repeatable); positions, widths and "
                             "string.scale_length_mm also take lengths: 40mm, 4cm, 1.5in")
    parser.add_argument("--rate", type=_rate, default=48000, help="sample rate in Hz (default 48000)")
    parser.add_argument("--block", type=_block, default=block, help=f"block size in frames (default {block})")


def settings_from_args(args: argparse.Namespace) -> Settings:
    settings = load_preset(args.preset) if args.preset else Settings.defaults()
    return apply_assignments(settings, args.set)


def run_render(args: argparse.Namespace) -> int:

    settings = settings_from_args(args)
    pair = ab_render.plan_pair(args, settings)  # None unless a second sound is asked for; checks it first
    if pair and args.json:
        raise RenderError("--json prints one render's summary: it does not go with an A/B render")
    out = Path(args.output)
    channel = 0
    if args.string is not None:
        settings, channel = on_string(settings, args)
    if args.midifile:
        events = read_midi_events(args.midifile)
        if not events:
            raise RenderError("the file holds no notes or controllers", source=str(args.midifile))
    else:
        events = note_events(args.note, args.velocity, args.seconds, channel)
    if longest_frames(events, args.rate, args.block, args.tail_cap) > WAV_MAX_FRAMES:
        raise RenderError(f"the render could last longer than a WAV file holds at {args.rate} Hz "
                          f"({WAV_MAX_FRAMES / args.rate / 3600:.1f} hours); lower --tail-cap or --rate",
                          source=str(out))
    if pair:
        return ab_render.render_pair(pair, events, args)
    length_s = events[-1][0] if events else 0.0
    progress = text_progress(f"rendering {out.name}") if length_s > PROGRESS_ABOVE_S and sys.stderr.isatty() else None
    report = PlayReport()
    blocks = iter_blocks(events, settings, args.rate, args.block, args.tail_cap, progress, report)
    try:
        frames, peak = write_blocks(out, blocks, args.rate)
    except OSError as err:  # mkstemp's, before write_blocks' own guard: e.g. a name too long with the temporary suffix
        raise RenderError(f"cannot write {out}: {err.strerror or err}") from None
    peak_db = 20 * math.log10(peak) if peak > 0 else float("-inf")
    if args.json:
        print(json.dumps(_summary_object(out, frames / args.rate, peak_db, report)))
        return 0
    print(f"wrote {out} ({frames / args.rate:.2f} s, peak {peak_db:.1f} dBFS)")
    for line in _summary_lines(report):
        print(line)
    return 0


SUMMARY_LINES = 24  # distinct (note, string, fret) lines a text summary shows; --json lists them all


def on_string(settings: Settings, args: argparse.Namespace) -> tuple[Settings, int]:
    """The settings and MIDI channel that play ``--note`` on ``--string``: one channel per string
    (the channel rule), checked before anything is rendered."""
    if args.note is None:
        raise RenderError("--string plays one --note on one string; a MIDI file's notes are placed by the preset's "
                          "rule (instrument.assign)")
    strings = settings.strings
    if args.string > len(strings):
        raise RenderError(f"--string {args.string}: the instrument has {len(strings)} strings (1 = the highest)")
    frets = int(settings.get("instrument.frets"))
    open_note = int(strings[args.string - 1].note)
    if not open_note <= args.note <= open_note + frets:
        raise RenderError(
            f"note {note_name(args.note)} ({args.note}) cannot be played on string {args.string}: it reaches "
            f"{note_name(open_note)} ({open_note}) open to {note_name(open_note + frets)} ({open_note + frets}) "
            f"at fret {frets}")
    return settings.with_values({"instrument.assign": "channel"}, source="--string"), args.string - 1


def _summary_lines(report: PlayReport) -> list[str]:
    lines = []
    shown = report.summary()
    for placed, count in shown[:SUMMARY_LINES]:
        times = f" x{count}" if count > 1 else ""
        where = (f"string {placed.string}, fret {placed.fret}" if placed.string
                 else "an open string of its own (instrument.assign = open)")
        lines.append(f"  {note_name(placed.note)} ({placed.note}) on {where}{times}")
    if len(shown) > SUMMARY_LINES:
        lines.append(f"  ... and {len(shown) - SUMMARY_LINES} more (--json lists them all)")
    if report.unplayable:
        lines.append(f"  {report.unplayable} note(s) left out: no string can play them")
    return lines


def _summary_object(out: Path, seconds: float, peak_db: float, report: PlayReport) -> dict[str, object]:
    return {
        "file": str(out), "seconds": round(seconds, 6),
        "peak_dbfs": None if math.isinf(peak_db) else round(peak_db, 3),
        "notes": [{"note": p.note, "name": note_name(p.note), "string": p.string or None,
                   "fret": p.fret if p.string else None, "count": count} for p, count in report.summary()],
        "unplayable": report.unplayable,
    }


def run_list(args: argparse.Namespace) -> int:
    for info in list_presets():
        try:
            desc = read_preset_file(info.path).description
        except (PresetError, ValueError) as err:
            desc = f"(invalid: {err})"
        print(f"{info.name:24s} {info.origin:8s} {desc}")
    return 0


def run_show(args: argparse.Namespace) -> int:
    sys.stdout.write(preset_text(load_preset(args.name)))
    return 0


def run_check(args: argparse.Namespace) -> int:
    bad = 0
    for name in args.files:
        try:
            read_preset_file(name)
            print(f"ok    {name}")
        except (PresetError, ValueError) as err:
            bad += 1
            print(f"error {err}")
    return 2 if bad else 0


def _ranged(kind, low, high, what):
    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
        if not (low <= value <= high):
            raise argparse.ArgumentTypeError(f"{what} must be between {low} and {high}, got {text}")
        return value

    return parse


def _midi_note(text: str) -> int:
    """An argparse type for --note: a MIDI number or a note name (rtvoice.engine.units)."""
    try:
        return parse_note(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


_velocity = _ranged(int, 1, 127, "velocity")
_string = _ranged(int, 1, 12, "string")
_seconds = _ranged(float, 0.0, 3600.0, "seconds")
_rate = _ranged(int, 8000, 192000, "sample rate")
_block = _ranged(int, 16, 4096, "block size")
