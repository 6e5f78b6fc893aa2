"""The UI side of the engine: send it commands, read its meters and what it has to say.

The engine runs in a separate process (multiprocessing, 'spawn') so that no
Python work in the UI ever holds the interpreter lock the audio callback needs;
starting, replacing and stopping that process is :mod:`rtvoice.host.link_process`.
Commands travel over a pipe; what the UI draws comes back through shared memory
(:mod:`rtvoice.host.board`) and is read without waiting. Messages from the
engine (controller learned, device lost, errors) queue up for
:meth:`EngineLink.poll_messages`. What crosses the pipe is defined in :mod:`rtvoice.host.messages`;
anything else arriving is counted in :attr:`EngineLink.dropped_messages` and dropped.
"""

from __future__ import annotations

from collections import deque
from dataclasses import dataclass, field
from multiprocessing.connection import Connection
from multiprocessing.process import BaseProcess
from typing import Any

import numpy as np

from rtvoice.engine import Settings, SettingsError, check_entries
from rtvoice.host import messages as msgs
from rtvoice.host.board import SILENT_DB, SPECTRUM_BINS, STRING_FRET_FIELDS, STRING_LEVEL_FIELDS, Board
from rtvoice.host.errors import MidiMessageError
from rtvoice.host.link_process import LinkProcess, receive
from rtvoice.host.options import parse_mpe
from rtvoice.host.rates import DEFAULT_RATE_HZ, Latency

DEFAULT_CLIENT_NAME = "rtvoice"


@dataclass
class Snapshot:
    """What the UI shows, as of the engine's last update (about 30 times a second)."""

    voices: int = 0
    load_median: float = 0.0  # callback time as a share of the block period
    load_p99: float = 0.0
    xruns: int = 0
    late: int = 0  # callbacks that overran the block period (the engine's own share of xruns)
    peak_dbfs: float = SILENT_DB
    gain_reduction_db: float = 0.0
    midi_events: int = 0  # running count of MIDI events handled
    notes_dropped: int = 0  # note-ons over the per-block budget, dropped (a flood of them)
    note: int = -1  # MIDI note of the loudest voice, -1 for none
    velocity: int = 0  # its note-on velocity, 0 for none
    f0_hz: float = 0.0
    string: int = 0  # where the loudest voice sounds on a fretted instrument (1 = highest); 0 under the open rule
    fret: int = -1
    string_frets: tuple[int, ...] = ()  # per string (string 1 first): the fret sounding, -1 when silent
    string_levels_db: tuple[float, ...] = ()  # ... and its level, dB re full scale
    mode_levels_db: np.ndarray = field(default_factory=lambda: np.zeros(0))
    mode_freqs_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    spectrum_db: np.ndarray = field(default_factory=lambda: np.full(SPECTRUM_BINS, SILENT_DB))
    spectrum_bin_hz: float = 0.0
    audio_port: str = ""
    midi_ports: list[str] = field(default_factory=list)
    engine_alive: bool = False


class EngineLink(LinkProcess):
    """Client of the engine process. Every method returns at once; none raises when the engine died,
    except :meth:`start` (and the validation in :meth:`set_value`)."""

    def __init__(self, settings: Settings, *, audio_device: str | None = None, rate: int | None = 48000,
                 block: int = 256, midi_in: str = "all", record: str | None = None,
                 client_name: str = DEFAULT_CLIENT_NAME, mpe: str | None = None,
                 engine_log: str | None = None):
        parse_mpe(mpe)  # a bad zone spec fails here, not in the engine process
        self._settings = settings
        self.config = {
            "audio_device": audio_device, "rate": None if rate is None else int(rate), "block": int(block),
            "midi_in": midi_in, "record": None if record is None else str(record),
            "client_name": client_name, "mpe": mpe,
            "engine_log": None if engine_log is None else str(engine_log),  # engine stdout/stderr go here
        }
        self._process: BaseProcess | None = None
        self._conn: Connection | None = None
        self._board: Board | None = None
        self._messages: deque[msgs.Notice] = deque()
        self._controls: list[dict[str, Any]] = []
        self._audio_port = ""
        self._midi_ports: list[str] = []
        self._closed = False
        self.summary: dict[str, Any] = {}  # the engine's run summary, after close()
        self._old: list[BaseProcess] = []  # processes that asked to be replaced, joined when they end
        self._respawning = False
        self._restarted = False
        self.ready_info: msgs.Ready | None = None  # what the engine reported when it started
        self.dropped_messages = 0  # what came over the pipe that was no message, or a malformed one
        self._spawned = False  # an engine was started before (a restarted one appends to --record)

    # -- what the engine reported at start-up -------------------------------------------
    @property
    def rate_hz(self) -> int:
        """The rate the engine plays at (it follows the output when no rate was asked for)."""
        if self.ready_info is not None:
            return self.ready_info.rate_hz
        return int(self.config["rate"] or DEFAULT_RATE_HZ)

    @property
    def latency(self) -> Latency | None:
        """MIDI-to-sound latency of the running engine, in parts (None before it is ready)."""
        return None if self.ready_info is None else self.ready_info.latency

    @property
    def startup_notes(self) -> list[str]:
        """What the engine said at start-up (the rate it follows, outputs or inputs it could not open)."""
        return [] if self.ready_info is None else list(self.ready_info.notes)

    # -- commands ---------------------------------------------------------------------
    @property
    def settings(self) -> Settings:
        """The sound as the engine has it, as far as this side knows (controller moves included)."""
        self._pump(0.0)
        return self._settings

    def set_value(self, name: str, value: Any) -> None:
        """Change one parameter (canonical dotted name); SettingsError here when not allowed."""
        self._settings = self._settings.with_values({name: value}, source="set_value")
        self._send(msgs.SetValue(name, self._settings.get(name)))

    def load_settings(self, settings: Settings) -> None:
        """Play a whole sound (a preset); its ``[[control]]`` map, if any, replaces the current one."""
        if not isinstance(settings, Settings):
            raise SettingsError("settings", settings, "expected a Settings object")
        self._settings = settings
        self._send(msgs.LoadSound(settings))

    def note_on(self, note: int, velocity: int = 100, channel: int = 0) -> None:
        _check_byte("note", note)
        _check_byte("velocity", velocity)
        _check_channel(channel)
        self._send(msgs.MidiBytes(0x90 | channel, note, velocity))

    def note_off(self, note: int, channel: int = 0) -> None:
        _check_byte("note", note)
        _check_channel(channel)
        self._send(msgs.MidiBytes(0x80 | channel, note, 0))

    def send_midi(self, status: int, data1: int = 0, data2: int = 0) -> None:
        """Any channel-voice message, as if it came from a MIDI input; MidiMessageError for a bad byte."""
        if isinstance(status, bool) or not isinstance(status, int) or not 0x80 <= status <= 0xEF:
            raise MidiMessageError("status", status, "not a channel message status byte", "0x80..0xEF")
        _check_byte("data1", data1)
        _check_byte("data2", data2)
        self._send(msgs.MidiBytes(status, data1, data2))

    def all_notes_off(self) -> None:
        self._send(msgs.AllNotesOff())

    def learn(self, name: str | None) -> None:
        """Map the next controller moved to parameter ``name``; None cancels learning."""
        if name is not None:
            check_entries([{"target": name, "cc": 1}], source="learn")
        self._send(msgs.Learn(name))

    def set_controls(self, entries: list[dict]) -> None:
        """Replace the controller map (entries as returned by :meth:`controls`)."""
        checked = check_entries(entries, source="controls")
        self._controls = [dict(e) for e in checked]
        self._send(msgs.SetControls(tuple(checked)))

    def controls(self) -> list[dict]:
        """The controller map now in use, one dict per entry (the preset's ``[[control]]`` form)."""
        self._pump(0.0)
        return [dict(e) for e in self._controls]

    def snapshot(self) -> Snapshot:
        """The engine's latest meters and UI data; never waits."""
        alive = self.alive()
        board = self._board
        if board is None:
            return Snapshot(audio_port=self._audio_port, midi_ports=list(self._midi_ports), engine_alive=False)
        fields, levels, freqs, spec = board.read()
        n = int(fields["n_modes"])
        return Snapshot(
            voices=int(fields["voices"]), load_median=fields["load_median"], load_p99=fields["load_p99"],
            xruns=int(fields["xruns"]), late=int(fields["late"]), peak_dbfs=fields["peak_dbfs"],
            gain_reduction_db=fields["gain_reduction_db"], midi_events=int(fields["midi_events"]),
            notes_dropped=int(fields["notes_dropped"]),
            note=int(fields["note"]), velocity=int(fields["velocity"]), f0_hz=fields["f0_hz"],
            string=int(fields["string"]), fret=int(fields["fret"]),
            string_frets=tuple(int(fields[name]) for name in STRING_FRET_FIELDS),
            string_levels_db=tuple(float(fields[name]) for name in STRING_LEVEL_FIELDS),
            mode_levels_db=levels[:n],
            mode_freqs_hz=freqs[:n], spectrum_db=spec, spectrum_bin_hz=fields["spectrum_bin_hz"],
            audio_port=self._audio_port, midi_ports=list(self._midi_ports), engine_alive=alive,
        )

    def poll_messages(self) -> list[msgs.Notice]:
        """Messages from the engine since the last call: Learned, Error, Device, Exited."""
        self._pump(0.0)
        out = list(self._messages)
        self._messages.clear()
        return out

    # -- the pipe: commands out, messages in --------------------------------------------
    def _send(self, command: msgs.Command) -> None:
        if self._conn is None or self._closed:
            return
        try:
            self._conn.send(command)
        except (OSError, EOFError, BrokenPipeError):
            self._lost()

    def _pump(self, timeout_s: float) -> None:
        conn = self._conn
        if conn is None:
            return
        try:
            while conn.poll(timeout_s):
                self._take(receive(conn))
                timeout_s = 0.0
        except (EOFError, OSError):
            if self._respawning and not self._closed:
                self._respawn()
            else:
                self._lost()
        if self._old:
            for p in self._old:
                p.join(0)
            self._old = [p for p in self._old if p.is_alive()]

    def _lost(self) -> None:
        if self._conn is not None and not self._closed:
            proc = self._process
            code = proc.exitcode if proc is not None else None
            if code is None and proc is not None:
                proc.join(0.2)
                code = proc.exitcode
            if not self.summary:
                self._messages.append(msgs.Exited(f"the engine stopped (exit code {code})"))
            self._conn.close()
            self._conn = None
            self._closed = True

    def _take(self, msg: object) -> bool:
        """Act on one message from the engine; False (and counted) when it was none or malformed."""
        if not msgs.well_formed(msg):
            self.dropped_messages += 1
            return False
        match msg:
            case msgs.Respawn(text=text):
                self._respawning = True
                self._messages.append(msgs.Device(text))
            case msgs.Ready(audio_port=port, midi_ports=ports):
                if self._restarted:
                    self._restarted = False
                    self._messages.append(msgs.Device(f"audio output back: {port}"))
                self._audio_port, self._midi_ports = port, list(ports)
                self.ready_info = msg
            case msgs.Ports(audio_port=port, midi_ports=ports):
                self._audio_port, self._midi_ports = port, list(ports)
            case msgs.Fatal(text=text):
                self._messages.append(msgs.Error(text))
            case msgs.Controls(entries=entries):
                self._controls = [dict(e) for e in entries]
            case msgs.Values(values=values):
                try:
                    self._settings = self._settings.with_values(values, source="engine")
                except SettingsError:
                    pass
            case msgs.Closed(summary=summary):
                self.summary = summary
            case msgs.Learned(entries=entries):
                self._controls = [dict(e) for e in entries]
                self._messages.append(msg)
            case msgs.Error() | msgs.Device():
                self._messages.append(msg)
            case _:  # Exited is the link's own word: it never comes over the pipe
                self.dropped_messages += 1
                return False
        return True


def _check_byte(what: str, value: int) -> None:
    if isinstance(value, bool) or not isinstance(value, int) or not 0 <= value <= 127:
        raise MidiMessageError(what, value, "not a MIDI data byte", "whole numbers 0..127")


def _check_channel(channel: int) -> None:
    if isinstance(channel, bool) or not isinstance(channel, int) or not 0 <= channel <= 15:
        raise MidiMessageError("channel", channel, "not a MIDI channel", "0..15, MIDI channels 1-16")
