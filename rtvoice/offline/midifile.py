"""Reading Standard MIDI Files (formats 0 and 1) into timed channel events.

The reader walks the SMF 1.0 byte layout itself (chunks, variable-length delta
times, channel/sysex/meta events) rather than through mido, so that every
malformed file is refused with one plain reason naming the track and byte
offset, memory and time stay bounded by fixed limits, and running status follows
one written rule:

* A data byte where an event should start repeats the last *channel* status of
  the track (running status). SMF 1.0 says sysex and meta events cancel running
  status, i.e. a writer must not rely on it after them; a conforming file
  therefore never has a data byte there. Some writers do, and the only meaning
  such a byte can have is the last channel status, so it is read that way (a
  conforming file reads the same either way). A data byte with no channel
  message before it in the track is refused.
* The end-of-track meta event (FF 2F 00) ends a track; a track chunk without
  one ends at its declared length (the length is unambiguous, so nothing is
  guessed). A chunk that runs past the end of the file is refused as truncated.
"""

from __future__ import annotations

from pathlib import Path

from rtvoice.errors import UserError

MAX_FILE_BYTES = 16 * 1024 * 1024
MAX_EVENTS = 2_000_000  # events of every kind in all tracks: bounds parse time and memory
MAX_CHANNEL_EVENTS = 1_000_000  # about 500,000 notes
MAX_SECONDS = 6 * 3600.0
#: Data bytes after each channel status nibble (MIDI 1.0 Detailed Specification, table of channel messages).
DATA_BYTES = {0x8: 2, 0x9: 2, 0xA: 2, 0xB: 2, 0xC: 1, 0xD: 1, 0xE: 2}
MESSAGE_NAMES = {0x8: "note-off", 0x9: "note-on", 0xA: "poly pressure", 0xB: "control change",
                 0xC: "program change", 0xD: "channel pressure", 0xE: "pitch bend"}
#: SMF 1.0 SMPTE division: the high byte is -24, -25, -29 (30 drop-frame, 29.97 fps) or -30.
SMPTE_FRAMES_PER_S = {24: 24.0, 25: 25.0, 29: 30000 / 1001, 30: 30.0}
META_TEMPO, META_END_OF_TRACK = 0x51, 0x2F

TimedEvent = tuple[float, int, int, int]


class MidiFileError(UserError, ValueError):
    """A MIDI file that cannot be read, with the reason in plain words (``source``: the file)."""


class _Bad(Exception):
    """A parse failure before the file name is attached."""


def read_midi_events(path: Path | str) -> list[TimedEvent]:
    """(time_s, status, data1, data2) for every channel message, in time order.

    Tempo changes (meta event FF 51) from any track apply to all tracks from their
    tick on; sysex and other meta events are dropped. Format 2 files (independent
    sequences) are refused. Raises MidiFileError, and nothing else, for bad files.
    """
    path = Path(path)
    try:
        size = path.stat().st_size
        if size > MAX_FILE_BYTES:
            raise MidiFileError(f"{size} bytes is larger than rtvoice reads ({MAX_FILE_BYTES})", source=str(path))
        data = path.read_bytes()
    except OSError as err:
        raise MidiFileError(f"cannot read ({err.strerror or err})", source=str(path)) from None
    return parse_midi_bytes(data, str(path))


def parse_midi_bytes(data: bytes, source: str = "MIDI data") -> list[TimedEvent]:
    """The events of a whole Standard MIDI File held in ``data``; see :func:`read_midi_events`."""
    if len(data) > MAX_FILE_BYTES:
        raise MidiFileError(f"{len(data)} bytes is larger than rtvoice reads ({MAX_FILE_BYTES})", source=source)
    try:
        return _parse(bytes(data), source)
    except _Bad as err:
        raise MidiFileError(f"not a readable Standard MIDI File: {err}", source=source) from None


def _parse(data: bytes, source: str) -> list[TimedEvent]:
    if len(data) < 14 or data[:4] != b"MThd":
        raise _Bad("no MThd header chunk at the start" if data[:4] != b"MThd" else "the header chunk is cut short")
    length = int.from_bytes(data[4:8], "big")
    if length < 6:
        raise _Bad(f"header chunk length {length}, SMF 1.0 needs at least 6")
    if 8 + length > len(data):
        raise _Bad(f"header chunk length {length} runs past the end of the file (truncated)")
    fmt = int.from_bytes(data[8:10], "big")
    n_tracks = int.from_bytes(data[10:12], "big")
    division = int.from_bytes(data[12:14], "big")
    if fmt == 2:
        raise MidiFileError("type 2 MIDI files (independent sequences) are not supported", source=source)
    if fmt > 2:
        raise _Bad(f"format {fmt} does not exist (SMF 1.0 has formats 0, 1 and 2)")
    if n_tracks == 0:
        raise _Bad("the header declares no tracks")
    seconds_per_tick = _smpte_seconds_per_tick(division)
    if seconds_per_tick is None and division == 0:
        raise _Bad("division 0 ticks per quarter note")

    tracks: list[list[tuple[int, int, int, int]]] = []
    tempos: list[tuple[int, int]] = []  # (tick, microseconds per quarter), in track order
    budget = [MAX_EVENTS, MAX_CHANNEL_EVENTS]
    pos = 8 + length
    while len(tracks) < n_tracks:
        if pos + 8 > len(data):
            found = len(tracks)
            raise _Bad(f"truncated: the header declares {n_tracks} tracks, the file holds {found}")
        chunk, size = data[pos:pos + 4], int.from_bytes(data[pos + 4:pos + 8], "big")
        start, end = pos + 8, pos + 8 + size
        if end > len(data):
            what = f"track {len(tracks) + 1}" if chunk == b"MTrk" else f"chunk {chunk!r}"
            raise _Bad(f"truncated: {what} at byte {pos} declares {size} bytes, {len(data) - start} follow")
        if chunk == b"MTrk":  # SMF 1.0: chunks of other types are skipped
            tracks.append(_read_track(data, start, end, len(tracks) + 1, tempos, budget))
        pos = end
    return _timed(tracks, tempos, division, seconds_per_tick, source)


def _smpte_seconds_per_tick(division: int) -> float | None:
    """Seconds per tick for an SMPTE division (top bit set), None for ticks per quarter note."""
    if not division & 0x8000:
        return None
    frames_code = 256 - (division >> 8)  # the high byte is a negative two's-complement frame rate
    ticks_per_frame = division & 0xFF
    if frames_code not in SMPTE_FRAMES_PER_S:
        raise _Bad(f"SMPTE division with {frames_code} frames per second (SMF 1.0 allows 24, 25, 29, 30)")
    if ticks_per_frame == 0:
        raise _Bad("SMPTE division with 0 ticks per frame")
    return 1.0 / (SMPTE_FRAMES_PER_S[frames_code] * ticks_per_frame)


def _read_vlq(data: bytes, pos: int, end: int, track: int) -> tuple[int, int]:
    """A variable-length quantity (at most 4 bytes, 0x0FFFFFFF, SMF 1.0) and the position after it."""
    value = 0
    for _ in range(4):
        if pos >= end:
            raise _Bad(f"track {track} ends inside a variable-length number at byte {pos}")
        byte = data[pos]
        pos += 1
        value = (value << 7) | (byte & 0x7F)
        if byte < 0x80:
            return value, pos
    raise _Bad(f"track {track}: a variable-length number longer than 4 bytes at byte {pos - 4}")


def _read_track(data: bytes, pos: int, end: int, track: int, tempos: list, budget: list[int]) -> list:
    """Channel events (tick, status, d1, d2) of one MTrk body; tempo changes go to ``tempos``."""
    events: list[tuple[int, int, int, int]] = []
    tick = 0
    running = 0  # last channel status in this track (0: none yet)
    while pos < end:
        delta, pos = _read_vlq(data, pos, end, track)
        tick += delta
        if pos >= end:
            raise _Bad(f"track {track} ends after a delta time, before its event (byte {pos})")
        budget[0] -= 1
        if budget[0] < 0:
            raise _Bad(f"more than {MAX_EVENTS:,} events")
        status = data[pos]
        if status < 0x80:
            if not running:
                raise _Bad(f"track {track}: data byte 0x{status:02X} at byte {pos} with no channel message "
                           "before it (running status needs one)")
            status = running  # this byte is the first data byte
        else:
            pos += 1
        if status < 0xF0:
            running = status
            n = DATA_BYTES[status >> 4]
            if pos + n > end:
                raise _Bad(f"track {track} ends inside a {MESSAGE_NAMES[status >> 4]} message (byte {pos})")
            d1 = data[pos]
            d2 = data[pos + 1] if n == 2 else 0
            if d1 > 0x7F or d2 > 0x7F:
                bad = d1 if d1 > 0x7F else d2
                raise _Bad(f"track {track}: {MESSAGE_NAMES[status >> 4]} at byte {pos - 1} has data byte "
                           f"0x{bad:02X} above 127 (MIDI data bytes are 0-127)")
            pos += n
            budget[1] -= 1
            if budget[1] < 0:
                raise _Bad(f"more than {MAX_CHANNEL_EVENTS:,} notes and controllers")
            events.append((tick, status, d1, d2))
        elif status == 0xFF:
            if pos >= end:
                raise _Bad(f"track {track} ends inside a meta event (byte {pos})")
            kind = data[pos]
            length, pos = _read_vlq(data, pos + 1, end, track)
            if pos + length > end:
                raise _Bad(f"track {track}: meta event 0x{kind:02X} at byte {pos} runs past the end of its track")
            if kind == META_TEMPO:
                tempos.append((tick, _tempo(data[pos:pos + length], track, pos)))
            elif kind == META_END_OF_TRACK:
                break  # anything after end-of-track in the chunk is not part of the track
            pos += length
        elif status in (0xF0, 0xF7):  # sysex and sysex escape: <length> <bytes>
            length, pos = _read_vlq(data, pos, end, track)
            if pos + length > end:
                raise _Bad(f"track {track}: sysex at byte {pos} runs past the end of its track")
            pos += length
        else:
            raise _Bad(f"track {track}: status byte 0x{status:02X} at byte {pos - 1} is a system common or "
                       "real-time message, which SMF 1.0 does not allow in a track")
    return events


def _tempo(body: bytes, track: int, pos: int) -> int:
    if len(body) != 3:
        raise _Bad(f"track {track}: tempo event at byte {pos} has {len(body)} data bytes, SMF 1.0 needs 3")
    usec = int.from_bytes(body, "big")
    if usec == 0:
        raise _Bad(f"track {track}: tempo of 0 microseconds per quarter note at byte {pos}")
    return usec


def _timed(tracks: list[list], tempos: list, division: int, seconds_per_tick: float | None,
           source: str) -> list[TimedEvent]:
    """Merge the tracks (ties keep track order, as SMF format 1 playback does) and convert ticks to seconds."""
    merged = sorted((e for events in tracks for e in events), key=lambda e: e[0])
    if seconds_per_tick is not None:  # SMPTE time: tempo events do not apply
        times = [e[0] * seconds_per_tick for e in merged]
    else:
        tempos.sort(key=lambda t: t[0])
        times = []
        seg_tick, seg_s, usec = 0, 0.0, 500_000  # SMF 1.0: 120 beats per minute until a tempo event
        k = 0
        for tick, *_ in merged:
            while k < len(tempos) and tempos[k][0] <= tick:
                seg_s += (tempos[k][0] - seg_tick) * usec / (1e6 * division)
                seg_tick, usec = tempos[k]
                k += 1
            times.append(seg_s + (tick - seg_tick) * usec / (1e6 * division))
    if times and times[-1] > MAX_SECONDS:
        raise MidiFileError(f"its notes last {times[-1] / 3600:.1f} hours, longer than rtvoice renders "
                            f"({MAX_SECONDS / 3600:g} hours)", source=source)
    return [(t, status, d1, d2) for t, (_, status, d1, d2) in zip(times, merged, strict=True)]
