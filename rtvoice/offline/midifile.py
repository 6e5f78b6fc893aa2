"""Reading Standard MIDI Files (types 0 and 1) into timed channel events."""

from __future__ import annotations

from pathlib import Path

import mido

MAX_FILE_BYTES = 64 * 1024 * 1024
MAX_SECONDS = 6 * 3600.0


class MidiFileError(ValueError):
    """A MIDI file that cannot be read, with the reason in plain words."""


def read_midi_events(path: Path | str) -> list[tuple[float, int, int, int]]:
    """(time_s, status, data1, data2) for every channel message, in time order.

    Tempo changes (meta event FF 51) are honoured by mido's merged playback
    order; system and meta messages are dropped. Type 2 files (independent
    sequences) are refused.
    """
    path = Path(path)
    try:
        size = path.stat().st_size
    except OSError as err:
        raise MidiFileError(f"{path}: cannot read ({err.strerror or err})") from None
    if size > MAX_FILE_BYTES:
        raise MidiFileError(f"{path}: {size} bytes is larger than rtvoice reads ({MAX_FILE_BYTES})")
    try:
        mid = mido.MidiFile(path, clip=False)
    except (OSError, EOFError, ValueError, KeyError, IndexError, TypeError) as err:
        raise MidiFileError(f"{path}: not a readable Standard MIDI File ({err})") from None
    if mid.type == 2:
        raise MidiFileError(f"{path}: type 2 MIDI files (independent sequences) are not supported")
    events = []
    now = 0.0
    try:
        for msg in mid:  # merged tracks with delta times in seconds at the current tempo
            now += msg.time
            if now > MAX_SECONDS:
                raise MidiFileError(f"{path}: longer than {MAX_SECONDS / 3600:g} hours")
            if msg.is_meta or not hasattr(msg, "channel"):
                continue
            raw = msg.bytes()
            events.append((now, raw[0], raw[1] if len(raw) > 1 else 0, raw[2] if len(raw) > 2 else 0))
    except (ValueError, KeyError, IndexError, TypeError, ZeroDivisionError) as err:
        raise MidiFileError(f"{path}: malformed MIDI data ({err})") from None
    return events
