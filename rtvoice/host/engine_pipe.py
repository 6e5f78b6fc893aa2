"""The engine process's end of the link's pipe: commands in, messages out, on the main thread.

Each command from :class:`rtvoice.host.link.EngineLink` is sorted as it arrives: MIDI and
closing are handled at once, sound and controller-map changes are queued for the audio callback
(which owns the engine, see :mod:`rtvoice.host.audio_callback`). Going the other way, what the
callback and the main thread left in their deques is sent on at the meters' pace, value changes
coalesced. Everything crossing is a record of :mod:`rtvoice.host.messages`; a command of no
known kind, or a malformed one, is counted and dropped.

A mixin for :class:`rtvoice.host.engine_process.EngineHost`, which provides the connection, the
engine, the route, the MIDI inputs and the hand-over deques (declared below).
"""

from __future__ import annotations

import os
import sys
import time
from collections import deque
from dataclasses import replace
from multiprocessing.connection import Connection
from typing import TYPE_CHECKING, Any

from rtvoice.engine import ControlMap, Engine, midi
from rtvoice.host import heap
from rtvoice.host import messages as msgs
from rtvoice.host.audio_callback import Arrival

if TYPE_CHECKING:
    from rtvoice.host.midi_ports import MidiInputs
    from rtvoice.host.recorder import Recorder
    from rtvoice.host.route import AudioRoute


def send_to_link(conn: Connection, msg: msgs.Message) -> bool:
    """Send one message to the link; False when the pipe is gone (the link then sees the process end)."""
    try:
        conn.send(msg)
        return True
    except (OSError, EOFError, BrokenPipeError):
        return False


def _channel_message(status: int, data1: int, data2: int) -> bool:
    """A channel-voice message's bytes (MIDI 1.0: status 0x80..0xEF, data bytes 0..127)."""
    return 0x80 <= status <= 0xEF and 0 <= data1 <= 127 and 0 <= data2 <= 127


class EnginePipe:
    """Reading commands from the link and sending it what the engine has to say."""

    # -- provided by EngineHost -------------------------------------------------------------
    conn: Connection
    engine: Engine
    controls: ControlMap
    route: AudioRoute
    midi: MidiInputs
    recorder: Recorder | None
    notes: list[str]  # start-up notes, sent with Ready
    rate: int  # Hz
    block: int  # frames
    server_period: int | None  # frames, when the output is a server with a period of its own
    cpu_wakeup: str
    heap_frozen: int
    _inbox: deque[msgs.Command]  # for the callback
    _midi_in: deque[Arrival]  # for the callback
    _outbox: deque[msgs.Learned | msgs.Error | msgs.Values]  # from the callback
    _notices: deque[msgs.Device | msgs.Respawn]  # from the main thread
    _controls_changes: int  # counted by the callback
    _controls_sent: int  # what that count was when the map was last sent
    dropped_commands: int
    dropped_events: int
    _ports_changed: bool
    _rec_reported: bool

    if TYPE_CHECKING:
        def request_stop(self) -> None: ...

    def _send_ready(self) -> None:
        send_to_link(self.conn, msgs.Ready(
            audio_port=self.route.label, audio_ports=tuple(self.route.ports), midi_ports=tuple(self.midi.names()),
            notes=tuple(self.notes), rate_hz=int(self.rate), block_frames=self.block,
            server_period_frames=int(self.server_period or 0),
            lookahead_s=getattr(self.engine.stats, "latency_frames", 0) / self.rate,  # the limiter's delay
            latency_s=float(getattr(self.route.output, "latency_s", 0.0)), pid=os.getpid(),
            cpu_wakeup=self.cpu_wakeup, heap_frozen=self.heap_frozen, heap_walked=heap.full_collection_objects(),
        ))
        self.notes.clear()
        self._send_controls()

    def _send_controls(self) -> None:
        send_to_link(self.conn, msgs.Controls(tuple(self.controls.to_dicts())))

    def _command(self, cmd: object) -> None:
        """One command from the link: MIDI and closing are handled here, sound and map changes by
        the callback (which owns the engine). Anything malformed is counted and dropped."""
        if not msgs.well_formed(cmd, command=True):
            self.dropped_commands += 1
            return
        match cmd:
            case msgs.MidiBytes(status=status, data1=d1, data2=d2) if _channel_message(status, d1, d2):
                self._midi_in.append((time.monotonic(), status, d1, d2))
            case msgs.AllNotesOff():
                now = time.monotonic()
                for ch in range(16):
                    self._midi_in.append((now, midi.CONTROL_CHANGE | ch, midi.CC_SUSTAIN, 0))
                    self._midi_in.append((now, midi.CONTROL_CHANGE | ch, midi.CC_ALL_NOTES_OFF, 0))
            case msgs.Close():
                self.request_stop()
            case msgs.SetValue() | msgs.LoadSound() | msgs.Learn() | msgs.SetControls():
                self._inbox.append(cmd)
            case _:  # a MIDI message with a byte out of range
                self.dropped_commands += 1

    def _forward(self) -> None:
        """Messages the callback left, and coalesced value changes, to the UI."""
        while self._notices:
            send_to_link(self.conn, self._notices.popleft())
        values: dict[str, Any] = {}
        while self._outbox:
            match self._outbox.popleft():
                case msgs.Values(values=moved):
                    values.update(moved)  # coalesced: the last value of each parameter is what counts
                case msgs.Learned() as learned:
                    send_to_link(self.conn, replace(learned, entries=tuple(self.controls.to_dicts())))
                case msgs.Error(trace=trace) as err:
                    if trace:
                        sys.stderr.write(trace)  # to the engine's log; the UI shows the line
                    send_to_link(self.conn, replace(err, trace=""))
                case _:
                    self.dropped_events += 1
        if values:
            send_to_link(self.conn, msgs.Values(values))
        changes = self._controls_changes
        if changes != self._controls_sent:
            self._controls_sent = changes
            self._send_controls()
        if self._ports_changed:
            self._ports_changed = False
            send_to_link(self.conn, msgs.Ports(self.route.label, tuple(self.midi.names())))
        if self.recorder is not None and self.recorder.error and not self._rec_reported:
            self._rec_reported = True
            send_to_link(self.conn, msgs.Error(self.recorder.error))
