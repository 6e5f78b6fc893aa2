"""The engine process: its entry point, start-up, the main thread's loop, device checks and shutdown.

Threads here: the audio callback (PortAudio's thread, or the silent clock's), the
main thread (commands, meters, port scans, device checks, all at a relaxed pace)
and, with ``--record``, the file writer. The callback owns the engine: other
threads hand it work through deques (appends and pops are atomic) and read what
it leaves in preallocated arrays. The callback takes no locks, does no I/O and
allocates only small temporaries.

:class:`EngineHost` is put together from the callback (:mod:`rtvoice.host.audio_callback`),
the process's end of the link's pipe (:mod:`rtvoice.host.engine_pipe`) and, here, what holds
them together: the state they share, made once at start-up, and the main thread's loop.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy loads: BLAS single-threaded here

import signal  # noqa: E402
import sys  # noqa: E402
import threading  # noqa: E402
import time  # noqa: E402
import traceback  # noqa: E402
from collections import deque  # noqa: E402
from multiprocessing.connection import Connection  # noqa: E402
from typing import Any  # noqa: E402

from rtvoice.engine import (
    Engine,  # noqa: E402
    midi,  # noqa: E402
    modes_per_voice,  # noqa: E402
)
from rtvoice.host import cpu_wakeup, heap  # noqa: E402
from rtvoice.host import messages as msgs  # noqa: E402
from rtvoice.host.audio import request_realtime_priority  # noqa: E402
from rtvoice.host.audio_callback import PUBLISH_EVERY_S, Arrival, AudioCallback  # noqa: E402
from rtvoice.host.board import Board  # noqa: E402
from rtvoice.host.engine_pipe import EnginePipe, send_to_link  # noqa: E402
from rtvoice.host.errors import HostError  # noqa: E402
from rtvoice.host.meters import Publisher  # noqa: E402
from rtvoice.host.midi_ports import MidiInputs  # noqa: E402
from rtvoice.host.options import parse_mpe  # noqa: E402
from rtvoice.host.rates import block_note, choose_rate  # noqa: E402
from rtvoice.host.recorder import Recorder  # noqa: E402
from rtvoice.host.ring import SampleRing  # noqa: E402
from rtvoice.host.route import AudioRoute  # noqa: E402
from rtvoice.host.timing import BlockClock  # noqa: E402

SWITCH_INTERVAL_S = 0.0005  # let the callback thread take the interpreter lock quickly
SCAN_EVERY_S = 1.0
HEALTH_EVERY_S = 0.25
RING_S = 10.0
STOP_TIMEOUT_S = 1.5
GAP_NEED_S, GAP_POLL_S, GAP_TRIES = 0.0003, 0.0002, 40
RT_PRIORITY_ENV = "RTVOICE_RT_PRIORITY"
DEFAULT_RT_PRIORITY = 70  # SCHED_FIFO priority asked for the audio thread where allowed; 0 keeps it normal
#: SCHED_FIFO priority of the engine process's main thread (when the audio thread gets one): below
#: the audio thread, above every ordinary process, so that no busy program (the UI, a compiler) can
#: pre-empt this thread while it holds the interpreter lock the audio callback is waiting for. It
#: sleeps between its short jobs (publishing meters, forwarding messages), so it takes little.
MAIN_RT_PRIORITY = 5


def engine_main(conn: Connection, config: dict[str, Any]) -> None:
    """Entry point of the engine process (multiprocessing 'spawn' target)."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the whole process group: the UI decides
    _redirect_output(config.get("engine_log"))
    sys.setswitchinterval(SWITCH_INTERVAL_S)
    try:
        host = EngineHost(conn, config)
        host.start()
    except HostError as err:
        send_to_link(conn, msgs.Fatal(str(err)))
        return
    except Exception as err:  # noqa: BLE001 - report anything as one line to the UI, details to stderr
        traceback.print_exc()
        send_to_link(conn, msgs.Fatal(f"the engine failed to start: {type(err).__name__}: {err}"))
        return
    signal.signal(signal.SIGTERM, lambda *_: host.request_stop())
    host.run()
    if host.route.wedged:
        # PortAudio hangs on a stream whose server died, and would hang this process's exit too.
        sys.stdout.flush()
        sys.stderr.flush()
        os._exit(0)


def _redirect_output(path: str | None) -> None:
    """Send this process's stdout and stderr (C libraries' too) to ``path``, away from a UI's terminal."""
    if not path:
        return
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
    except OSError:
        return
    os.dup2(fd, 1)
    os.dup2(fd, 2)
    os.close(fd)


def _env_int(name: str, default: int) -> int:
    try:
        return int(os.environ.get(name, default))
    except ValueError:
        return default


class EngineHost(AudioCallback, EnginePipe):
    """One engine playing to one output, driven by one link; ``config`` is the dict the link built."""

    def __init__(self, conn: Connection, config: dict[str, Any]):
        self.conn = conn
        self.config = config
        self.block = int(config["block"])
        self.route = AudioRoute(config.get("audio_device"), 0, self.block,
                                config.get("client_name") or "rtvoice", self.process)
        # The rate follows the output (a JACK server's, a device's own) unless --rate asked for one.
        choice = choose_rate(config.get("rate"), self.route.probe())
        self.rate = self.route.rate = choice.rate_hz
        self.period_s = self.block / self.rate
        self.notes: list[str] = [f"sample rate: {choice.reason}"]
        said = block_note(self.block, choice.server_period_frames, self.rate)
        if said:
            self.notes.append(said)
        self.server_period = choice.server_period_frames
        try:
            self.engine = Engine(config["settings"], self.rate, self.block)
        except ValueError as err:
            raise HostError(str(err)) from None
        self.controls = self.engine.controls  # the sound's controller map acts inside the engine
        self.board = Board.attach(config["board"])
        self.clock = BlockClock(self.block, self.rate)
        self.ring = SampleRing(int(RING_S * self.rate))
        self.recorder = Recorder(config["record"], self.rate, self.ring, append=bool(config.get("record_append"))) \
            if config.get("record") else None
        self.midi = MidiInputs(config.get("midi_in") or "all", config.get("client_name") or "rtvoice")
        # Hand-over between threads.
        self._inbox: deque[msgs.Command] = deque()  # commands for the callback
        self._midi_in: deque[Arrival] = deque()  # from the UI
        self._outbox = self.engine.messages  # events from the callback (the engine's, and ours)
        self._notices: deque[msgs.Device | msgs.Respawn] = deque()  # from this process's main thread
        # The callback counts controller-map changes and the main thread sends the map when the
        # count moved: one writer each, so no change is lost between a read and a reset.
        self._controls_changes = 0
        self._controls_sent = 0
        self.dropped_commands = 0  # commands of no known kind or malformed, dropped
        self.dropped_events = 0  # the engine's events of no known kind, dropped
        self.stopping = False
        self.stop_requested_at = 0.0
        self._prepare_callback()
        self._ports_changed = False
        self._rec_reported = False
        self.publisher = Publisher(self.board, self.ring, self.rate)
        self.started_at = time.monotonic()
        self._rt_wanted = _env_int(RT_PRIORITY_ENV, DEFAULT_RT_PRIORITY)
        self.main_rt_priority = 0
        self._wakeup_fd: int | None = None
        self.cpu_wakeup = "not asked"  # what the CPU wake-up request got (see rtvoice.host.cpu_wakeup)
        self.heap_frozen = 0  # objects moved out of the collector's reach at start-up (see rtvoice.host.heap)

    # -- start-up -----------------------------------------------------------------------
    def start(self) -> None:
        self._wakeup_fd, self.cpu_wakeup = cpu_wakeup.request_from_environment()
        self.notes += self.midi.open()
        self._configure_mpe(self.config.get("mpe"))
        self.heap_frozen = heap.freeze_startup_heap()  # before the stream runs: the collection holds the lock
        self.route.open(first=True)
        self.notes += self.route.notes
        if self.recorder is not None:
            self.recorder.start()
        self._send_ready()

    def _configure_mpe(self, spec: str | None) -> None:
        """Zones from the --mpe option, sent to the engine as MPE Configuration Messages (RPN 6)."""
        now = time.monotonic()
        for zone, members in parse_mpe(spec):
            status = midi.CONTROL_CHANGE | (midi.LOWER_MASTER if zone == "lower" else midi.UPPER_MASTER)
            for cc, value in ((midi.CC_RPN_MSB, 0), (midi.CC_RPN_LSB, 6), (midi.CC_DATA_ENTRY_MSB, members),
                              (midi.CC_RPN_MSB, 127), (midi.CC_RPN_LSB, 127)):
                self._midi_in.append((now, status, cc, value))

    # -- the main thread ------------------------------------------------------------------
    def request_stop(self) -> None:
        if not self.stopping:
            self.stopping = True
            self.stop_requested_at = time.monotonic()
            self._gain_target = 0.0

    def run(self) -> None:
        if self._rt_wanted > 0:
            self.main_rt_priority = request_realtime_priority(min(MAIN_RT_PRIORITY, self._rt_wanted))
        next_publish = next_scan = next_health = time.monotonic()
        parent = os.getppid()
        while True:
            now = time.monotonic()
            timeout = max(0.0, min(next_publish, next_health) - now)
            try:
                if self.conn.poll(timeout):
                    while self.conn.poll(0):
                        self._command(self.conn.recv())
            except (EOFError, OSError):
                self.request_stop()  # the UI went away: fade out and leave
            now = time.monotonic()
            if now >= next_publish:
                next_publish = now + PUBLISH_EVERY_S
                self._wait_for_gap()
                self._publish()
                self._forward()
                self.midi.resync()
            if now >= next_health:
                next_health = now + HEALTH_EVERY_S
                self._check_audio(now)
                if os.getppid() != parent:
                    self.request_stop()
            if now >= next_scan and not self.stopping:
                next_scan = now + SCAN_EVERY_S
                self._wait_for_gap()
                for note in self.midi.scan():
                    self._notices.append(msgs.Device(note))
                    self._ports_changed = True
            if self.stopping and (self.faded or now - self.stop_requested_at > STOP_TIMEOUT_S
                                  or not self.route.running()):
                break
        self._shutdown()

    def _wait_for_gap(self, need_s: float = GAP_NEED_S) -> None:
        """Wait (briefly) until the callback has just finished, so that this thread's work of
        about ``need_s`` fits before the next block: while this thread holds the interpreter
        lock the callback cannot run."""
        room_end = self.period_s - self._last_took - need_s
        for _ in range(GAP_TRIES):
            since = time.perf_counter() - self._last_end
            if since <= room_end or since > 4 * self.period_s:  # room now, or no callbacks at all
                return
            time.sleep(GAP_POLL_S)

    def _publish(self) -> None:
        peak, self._peak_hold = self._peak_hold, 0.0
        gr, self._gr_hold = self._gr_hold, 0.0
        med, p99 = self.load.recent()
        self.publisher.publish({
            "load_median": med, "load_p99": p99, "xruns": self.xruns, "late": self.late, "peak": peak,
            "gain_reduction_db": gr,
            "midi_events": self.midi_events, "notes_dropped": self.guard.dropped,
            "heartbeat_s": time.monotonic(), "blocks": self.blocks,
            "block_frames": self.block,
        }, self.voice_stage.current(), modes_per_voice(self.engine))

    # -- devices ----------------------------------------------------------------------------
    def _check_audio(self, now: float) -> None:
        if self.stopping:
            return
        for kind, text in self.route.check(now):
            if kind == "respawn":
                self._notices.append(msgs.Respawn(text))
                self._forward()
                self.request_stop()
                continue
            if kind == "back":
                self.midi.close()  # the old MIDI clients went down with the server
                self.midi = MidiInputs(self.midi.mode, self.midi.client_name)
                for note in self.midi.open():
                    self._notices.append(msgs.Device(note))
            self._notices.append(msgs.Device(text))
            self._ports_changed = True

    # -- shutdown -----------------------------------------------------------------------------
    def _shutdown(self) -> None:
        self.route.stop()
        if self.route.wedged:
            # the MIDI clients died with the server; closing them could wait forever
            threading.Thread(target=self.midi.close, daemon=True).start()
        else:
            self.midi.close()
        if self.recorder is not None:
            self.recorder.stop()
        elapsed = time.monotonic() - self.started_at
        summary = {
            "seconds": elapsed, "blocks": self.blocks, "xruns": self.xruns, "late": self.late,
            "load_median": self.load.run_percentile(0.5), "load_p99": self.load.run_percentile(0.99),
            "render_median": self.render_load.run_percentile(0.5),
            "render_p99": self.render_load.run_percentile(0.99),
            "load_hist": self.load.histogram_pairs(), "render_hist": self.render_load.histogram_pairs(),
            "midi_events": self.midi_events, "notes_dropped": self.guard.dropped,
            "voices_max": self.voices_max, "clock_resyncs": self.clock.resyncs, "rt_priority": self.rt_priority,
            "main_rt_priority": self.main_rt_priority, "cpu_wakeup": self.cpu_wakeup,
            "heap_frozen": self.heap_frozen, "heap_walked": heap.full_collection_objects(),
            "dropped_commands": self.dropped_commands, "dropped_events": self.dropped_events,
        }
        cpu_wakeup.release(self._wakeup_fd)
        self._wakeup_fd = None
        if self.recorder is not None:
            summary.update(record=str(self.recorder.path), record_seconds=self.recorder.seconds,
                           record_lost=self.recorder.lost)
        self._forward()
        send_to_link(self.conn, msgs.Closed(summary))
        self.board.close()
        try:
            self.conn.close()
        except OSError:
            pass
