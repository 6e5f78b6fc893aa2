"""MIDI channel-voice semantics: what each message means for the voices.

Messages arrive as raw status and data bytes. :class:`ChannelState` keeps what a
receiver must remember per channel (pitch bend and its range set by RPN 0,
sustain pedal, RPN selection, pressure, CC74) and the MPE zone layout (MIDI
Polyphonic Expression, MMA/AMEI 2018: lower zone master channel 1, upper zone
master 16, zones set with the MPE Configuration Message, RPN 6).
Channels are numbered 0..15 here (MIDI channel 1 is 0).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

NOTE_OFF, NOTE_ON, POLY_PRESSURE, CONTROL_CHANGE = 0x80, 0x90, 0xA0, 0xB0
PROGRAM_CHANGE, CHANNEL_PRESSURE, PITCH_BEND = 0xC0, 0xD0, 0xE0

CC_DATA_ENTRY_MSB, CC_DATA_ENTRY_LSB = 6, 38
CC_SUSTAIN, CC_TIMBRE = 64, 74
CC_RPN_LSB, CC_RPN_MSB = 100, 101
CC_NRPN_LSB, CC_NRPN_MSB = 98, 99
CC_ALL_SOUND_OFF, CC_RESET_CONTROLLERS, CC_ALL_NOTES_OFF = 120, 121, 123
CC_OMNI_OFF, CC_OMNI_ON, CC_MONO_ON, CC_POLY_ON = 124, 125, 126, 127
RPN_PITCH_BEND_RANGE, RPN_MPE_CONFIG, RPN_NULL = (0, 0), (0, 6), (127, 127)

DEFAULT_BEND_RANGE = 2.0  # semitones (MIDI 1.0)
MPE_MEMBER_BEND_RANGE = 48.0  # semitones (MPE: per-note default)
LOWER_MASTER, UPPER_MASTER = 0, 15


@dataclass
class ChannelState:
    """Per-channel controller state for all 16 channels, plus the MPE zones."""

    bend_semitones: list[float] = field(default_factory=lambda: [0.0] * 16)
    bend_range: list[float] = field(default_factory=lambda: [DEFAULT_BEND_RANGE] * 16)
    sustain: list[bool] = field(default_factory=lambda: [False] * 16)
    pressure: list[float] = field(default_factory=lambda: [0.0] * 16)
    timbre: list[float] = field(default_factory=lambda: [0.5] * 16)
    rpn: list[tuple[int, int]] = field(default_factory=lambda: [RPN_NULL] * 16)
    bend_raw: list[int] = field(default_factory=lambda: [8192] * 16)
    lower_members: int = 0
    upper_members: int = 0

    def zone_master(self, channel: int) -> int | None:
        """The MPE master channel whose zone holds ``channel`` as a member, if any."""
        if self.lower_members and 1 <= channel <= self.lower_members:
            return LOWER_MASTER
        if self.upper_members and 15 - self.upper_members <= channel <= 14:
            return UPPER_MASTER
        return None

    def voice_bend(self, channel: int) -> float:
        """Bend in semitones that applies to a note on ``channel`` (member plus master in MPE)."""
        master = self.zone_master(channel)
        bend = self.bend_semitones[channel]
        return bend + self.bend_semitones[master] if master is not None else bend

    def set_bend(self, channel: int, value14: int) -> None:
        self.bend_raw[channel] = value14
        self.bend_semitones[channel] = (value14 - 8192) / 8192.0 * self.bend_range[channel]

    def configure_mpe(self, master: int, members: int) -> None:
        """Apply an MPE Configuration Message: ``members`` member channels for the zone of ``master``."""
        members = max(0, min(15, members))
        if master == LOWER_MASTER:
            self.lower_members = members
            self.upper_members = min(self.upper_members, 14 - members)
        else:
            self.upper_members = members
            self.lower_members = min(self.lower_members, 14 - members)
        for ch in range(16):
            in_zone = self.zone_master(ch) is not None
            self.bend_range[ch] = MPE_MEMBER_BEND_RANGE if in_zone else DEFAULT_BEND_RANGE
            self.set_bend(ch, self.bend_raw[ch])

    def reset_controllers(self, channel: int) -> None:
        """CC121: bend to centre, pedal up, pressure 0, RPN deselected (ranges are kept)."""
        self.set_bend(channel, 8192)
        self.sustain[channel] = False
        self.pressure[channel] = 0.0
        self.timbre[channel] = 0.5
        self.rpn[channel] = RPN_NULL

    def data_entry(self, channel: int, msb: int | None, lsb: int | None) -> str | None:
        """Apply CC6/CC38 to the selected RPN; returns the RPN's name when it changed something."""
        rpn = self.rpn[channel]
        if rpn == RPN_PITCH_BEND_RANGE:
            semis = int(self.bend_range[channel])
            cents = round((self.bend_range[channel] - semis) * 100)
            if msb is not None:
                semis, cents = msb, 0
            if lsb is not None:
                cents = lsb
            self.bend_range[channel] = semis + min(cents, 99) / 100.0
            self.set_bend(channel, self.bend_raw[channel])
            return "bend_range"
        if rpn == RPN_MPE_CONFIG and msb is not None and channel in (LOWER_MASTER, UPPER_MASTER):
            self.configure_mpe(channel, msb)
            return "mpe"
        return None


# -- raw bytes to channel messages -------------------------------------------------------
SYSEX_START, SYSEX_END, FIRST_REAL_TIME = 0xF0, 0xF7, 0xF8


def data_length(status: int) -> int:
    """Data bytes of a channel message: one for program change and channel pressure, else two."""
    return 1 if status & 0xF0 in (PROGRAM_CHANGE, CHANNEL_PRESSURE) else 2


def channel_messages(data: Sequence[int]) -> list[tuple[int, int, int]]:
    """The channel messages in one chunk of raw MIDI bytes, as (status, data1, data2).

    ``data`` is read as a MIDI 1.0 byte stream (MIDI 1.0 Detailed Specification): real-time
    bytes F8..FF may sit anywhere, even inside another message, and are skipped; running status
    lets a channel message omit a repeated status byte; a system exclusive message F0 .. F7 ends
    at F7 or at any other status byte but a real-time one; system common messages (and the
    undefined F4, F5) cancel running status; data bytes with no status before them and
    messages cut short are dropped. A one-data-byte message reports data2 = 0. Each chunk
    starts afresh (a JACK MIDI event holds whole messages), so nothing carries over between
    chunks. Never raises for a sequence of ints 0..255 (others raise ValueError, as bytes() does).
    """
    n = len(data)
    # The usual case, one well-formed message, without the loop below.
    if n == 3:
        s, a, b = data[0], data[1], data[2]
        if 0x80 <= s < 0xF0 and data_length(s) == 2 and 0 <= a < 0x80 and 0 <= b < 0x80:
            return [(s, a, b)]
    elif n == 2:
        s, a = data[0], data[1]
        if 0xC0 <= s < 0xE0 and 0 <= a < 0x80:
            return [(s, a, 0)]
    out: list[tuple[int, int, int]] = []
    running = 0  # the channel status in force, 0 for none
    first = -1  # the first data byte of a two-byte message in progress, -1 for none
    in_sysex = False
    for byte in bytes(data):
        if byte >= FIRST_REAL_TIME:
            continue  # real-time: may appear anywhere, carries nothing for the voices
        if byte >= 0x80:  # any other status byte ends a sysex and a message cut short
            in_sysex, first = byte == SYSEX_START, -1
            running = byte if byte < 0xF0 else 0  # system common and sysex cancel running status
            continue
        if in_sysex or not running:
            continue  # sysex payload, a system common message's data, or a stray data byte
        if data_length(running) == 1:
            out.append((running, byte, 0))
        elif first < 0:
            first = byte
        else:
            out.append((running, first, byte))
            first = -1
    return out
