"""The engine link's protocol (rtvoice/host/messages.py): every record crosses a real
multiprocessing pipe unchanged, and what is not a record of the protocol is counted and dropped.

Reference: the Python standard library's multiprocessing.connection (Connection.send pickles,
Connection.recv unpickles; send_bytes writes raw bytes) and pickle; MIDI 1.0 Detailed
Specification (channel-voice status bytes 0x80..0xEF, data bytes 0..127).
"""

from __future__ import annotations

import multiprocessing
import multiprocessing.connection
import os
import time
import typing

from rtvoice.engine import Settings
from rtvoice.engine.controls import default_entries
from rtvoice.host import messages as msgs
from rtvoice.host.link import EngineLink


def _samples() -> list[object]:
    """One record of every kind, fields filled with values of their declared types."""
    entries = tuple(default_entries())
    return [
        msgs.SetValue("pickup.0.position", 0.25), msgs.LoadSound(Settings.defaults()),
        msgs.MidiBytes(0x92, 60, 100), msgs.Learn("pickup.0.width"), msgs.Learn(None),
        msgs.SetControls(entries), msgs.AllNotesOff(), msgs.Close(),
        msgs.Ready(audio_port="silent clock", audio_ports=("rtvoice:out_0",), midi_ports=("a", "b (virtual)"),
                   notes=("sample rate: 48000 Hz as asked",), rate_hz=48000, block_frames=256,
                   server_period_frames=0, lookahead_s=0.0015, latency_s=0.0, pid=1234,
                   cpu_wakeup="not asked", heap_frozen=30000, heap_walked=900),
        msgs.Controls(entries), msgs.Values({"pickup.0.position": 0.3, "voices": 8}),
        msgs.Learned("pickup.0.width", 20, 3, {"target": "pickup.0.width", "cc": 20}, entries),
        msgs.Error("a line"), msgs.Error("a line", "Traceback ..."), msgs.Device("MIDI input gone: x"),
        msgs.Ports("silent clock", ("x",)), msgs.Respawn("the audio server is back"),
        msgs.Closed({"seconds": 1.5, "load_hist": [(0.1, 3)]}), msgs.Fatal("no audio output"),
        msgs.Exited("the engine stopped (exit code -9)"),
    ]


def _echo(conn) -> None:
    """Child process: send back whatever arrives, until None."""
    while (obj := conn.recv()) is not None:
        conn.send(obj)
    conn.close()


def test_every_record_crosses_a_pipe_to_another_process_and_back_unchanged():
    samples = _samples()
    kinds = set(typing.get_args(msgs.Command)) | set(typing.get_args(msgs.Message))
    assert {type(s) for s in samples} == kinds, "a new record needs a sample here"
    ctx = multiprocessing.get_context("spawn")  # as the link starts its engine: a fresh interpreter
    parent, child = ctx.Pipe(duplex=True)
    proc = ctx.Process(target=_echo, args=(child,), daemon=True)
    proc.start()
    child.close()
    try:
        for sample in samples:
            assert msgs.well_formed(sample, command=isinstance(sample, typing.get_args(msgs.Command)))
            parent.send(sample)
            back = parent.recv()
            assert type(back) is type(sample) and back == sample
        parent.send(None)
    finally:
        proc.join(30)
        if proc.is_alive():
            proc.kill()
    assert proc.exitcode == 0


def test_records_of_the_wrong_kind_or_with_fields_of_the_wrong_type_are_not_well_formed():
    assert not msgs.well_formed({"type": "ready", "rate": 48000})  # the old dict protocol
    assert not msgs.well_formed(("midi", 0x90, 60, 100), command=True)  # the old tuple protocol
    assert not msgs.well_formed(msgs.Learned(5, "20", 3))  # type: ignore[arg-type]
    assert not msgs.well_formed(msgs.MidiBytes(0x90, True, 1), command=True)  # bool is no data byte
    assert not msgs.well_formed(msgs.Ports("x", ["a"]))  # type: ignore[arg-type]  # a list, not a tuple
    assert not msgs.well_formed(msgs.Close())  # a command is no message
    assert not msgs.well_formed(msgs.Device("x"), command=True)  # and a message no command


def _keep_engine_end(made: list):
    """multiprocessing.connection.Pipe, also keeping a second handle on the engine process's end."""
    real_pipe = multiprocessing.connection.Pipe

    def pipe(duplex: bool = True):
        parent, child = real_pipe(duplex)
        made.append(multiprocessing.connection.Connection(os.dup(child.fileno())))
        return parent, child
    return pipe


def _wait(predicate, timeout_s: float = 5.0):
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline and not predicate():
        time.sleep(0.05)
    return predicate()


def test_unknown_and_malformed_messages_are_counted_and_dropped_by_the_link(monkeypatch):
    # The real link and a real engine process on the silent clock. The test keeps a second handle
    # on the engine process's end of the link's own pipe (a dup of the socket's descriptor, taken
    # as the pipe is made), so what it writes arrives at the link exactly as the engine's
    # messages do, through the same socket, framing and unpickling.
    made: list = []
    monkeypatch.setattr(multiprocessing.connection, "Pipe", _keep_engine_end(made))
    link = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    monkeypatch.undo()
    try:
        assert len(made) == 1  # the link's pipe, and no other
        engine_end = made[0]
        assert link.dropped_messages == 0
        bad = [
            {"type": "learned", "name": "pickup.0.width"},  # the old dict protocol
            ("device", "text"),  # a tuple
            msgs.Learned(5, "20", None),  # type: ignore[arg-type]  # fields of the wrong types
            msgs.Exited("not the engine's word"),  # the link's own message, never sent by an engine
            msgs.Close(),  # a command, going the wrong way
        ]
        for obj in bad:
            engine_end.send(obj)
        engine_end.send_bytes(b"\x80\x05 not a pickle")  # bytes that do not unpickle
        engine_end.send(msgs.Device("a test's device line"))  # a good one after them still arrives
        seen = []
        assert _wait(lambda: bool(seen.extend(link.poll_messages()) or seen))
        assert seen == [msgs.Device("a test's device line")]
        assert link.dropped_messages == len(bad) + 1
        assert link.alive()
        # and the link still works both ways (0.25 of the scale, 162 mm: within the default neck)
        link.set_value("pickup.0.position", 0.25)
        assert link.settings.get("pickup.0.position") == 0.25
        engine_end.close()
    finally:
        link.close()


def test_unknown_and_malformed_commands_are_counted_and_dropped_by_the_engine():
    # Sent through the link's own connection to the real engine process on the silent clock.
    link = EngineLink(Settings.defaults(), audio_device="none", midi_in="none")
    link.start()
    try:
        conn = link._conn
        bad = [
            ("midi", 0x90, 60, 100),  # the old tuple protocol
            {"set": "pickup.0.position"},  # a dict
            msgs.MidiBytes(0x90, 128, 100),  # a data byte out of range (MIDI 1.0: 0..127)
            msgs.MidiBytes(0xF8, 0, 0),  # a system real-time status, no channel message
            msgs.SetControls([{"target": "gain", "cc": 7}]),  # type: ignore[arg-type]  # a list
            msgs.Device("a message, going the wrong way"),
        ]
        for obj in bad:
            conn.send(obj)
        link.note_on(60, 90)  # a good command after them still plays
        assert _wait(lambda: link.snapshot().voices >= 1)
        assert link.alive()
    finally:
        link.close()
    assert link.summary["dropped_commands"] == len(bad)

