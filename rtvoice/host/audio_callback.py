"""The engine process's audio callback: one block of the engine per call, and everything that runs on it.

Everything here runs on the audio thread (PortAudio's, or the silent clock's), and nothing else
does: keeping the callback's code in one module keeps its rules in one place. It takes no locks,
does no I/O and allocates only small temporaries: other threads hand it work through deques
(appends and pops are atomic) and read what it leaves in preallocated arrays and counters.

A mixin for :class:`rtvoice.host.engine_process.EngineHost`, which provides the engine, the audio
route, the clock, the ring, the MIDI inputs and the hand-over deques (declared below).
"""

from __future__ import annotations

import threading
import time
import traceback
from collections import deque
from operator import itemgetter
from typing import TYPE_CHECKING, Any

import numpy as np

from rtvoice.engine import ControlMap, Engine, Event, SettingsError
from rtvoice.host import messages as msgs
from rtvoice.host.audio import request_realtime_priority
from rtvoice.host.meters import CallbackMeter, VoiceStage
from rtvoice.host.overload import NoteOnGuard
from rtvoice.host.ring import SampleRing
from rtvoice.host.timing import BlockClock

if TYPE_CHECKING:
    from rtvoice.host.midi_ports import MidiInputs
    from rtvoice.host.route import AudioRoute

RAMP_IN_S = 0.5  # start quiet: the output rises from silence over this time
FADE_OUT_S = 0.08  # stop without a click
PUBLISH_EVERY_S = 1 / 30  # the main thread's meter rate; the callback stages voice data at about this rate too

#: A MIDI message waiting for the callback: (arrival time on time.monotonic(), status, data1, data2).
Arrival = tuple[float, int, int, int]


class AudioCallback:
    """The audio callback and the state it owns, preallocated by :meth:`_prepare_callback`."""

    # -- provided by EngineHost -------------------------------------------------------------
    engine: Engine
    controls: ControlMap
    route: AudioRoute
    midi: MidiInputs  # replaced by the main thread when the audio server comes back
    clock: BlockClock
    ring: SampleRing
    block: int  # frames per block
    rate: int  # Hz
    period_s: float
    stopping: bool
    _rt_wanted: int  # SCHED_FIFO priority to ask for on the audio thread; 0 keeps it normal
    _inbox: deque[msgs.Command]  # sound and map commands, from the main thread
    _midi_in: deque[Arrival]  # MIDI from the UI (and the --mpe set-up), from the main thread
    _outbox: deque[msgs.Learned | msgs.Error | msgs.Values]  # for the main thread to forward (the engine's, ours)
    _controls_changes: int  # counted here, compared with what was sent by the main thread

    def _prepare_callback(self) -> None:
        """The callback's state, made before the stream starts so that the callback makes none."""
        self._raw: list[Arrival] = []
        self._events: list[Event] = []
        self._held: list[Event] = []  # polled in one block, due in the next
        self._gain = 0.0
        self._gain_target = 1.0  # 1 ramps in; the main thread sets 0 to fade out
        self._gain_buf = np.empty(self.block)
        self._idx = np.arange(1, self.block + 1, dtype=float)
        self._abs = np.empty(self.block)
        self.faded = False
        self.load = CallbackMeter(self.period_s)
        self.render_load = CallbackMeter(self.period_s)  # the engine's share of it (the rest is the host's)
        self.guard = NoteOnGuard(self.period_s)
        self.voice_stage = VoiceStage()
        self.xruns = 0
        self.late = 0  # callbacks that took longer than the block period
        self.midi_events = 0
        self.blocks = 0
        self.voices_max = 0  # most voices sounding at the end of a block, over the run
        # Highest since the main thread last published; it takes and resets them.
        self._peak_hold = 0.0
        self._gr_hold = 0.0
        self._ui_every = max(1, round(PUBLISH_EVERY_S / self.period_s))
        self._error_texts: set[str] = set()  # each distinct error is reported once
        self._rt_thread: int | None = None  # the thread the last callback ran on
        self._last_end = self._last_took = 0.0  # perf_counter at the end of the last callback, its duration
        self.rt_priority = 0

    def process(self, out: Any, frames: int, underflow: bool, gen: int) -> None:
        """The callback: ``out`` is the (frames, channels) array to fill, or None on the silent
        clock; ``gen`` is the generation of the output calling (a stale one is left silent)."""
        t_enter = time.perf_counter()
        if self._rt_thread != threading.get_ident():
            self._rt_thread = threading.get_ident()
            self.rt_priority = request_realtime_priority(self._rt_wanted)
        if gen != self.route.gen or frames != self.block:
            if out is not None:
                out.fill(0.0)
            return
        try:
            self._process(out, underflow)
        except Exception as err:  # noqa: BLE001 - never let an error stop the stream
            if out is not None:
                out.fill(0.0)
            text = f"audio callback: {type(err).__name__}: {err}"
            if text not in self._error_texts:
                self._error_texts.add(text)
                self._outbox.append(msgs.Error(text, traceback.format_exc()))
        t_exit = time.perf_counter()
        self._last_end, self._last_took = t_exit, t_exit - t_enter
        if t_exit - t_enter > self.period_s:
            self.late += 1  # this callback alone overran its period
        self.load.add(t_exit - t_enter)

    def _process(self, out: Any, underflow: bool) -> None:
        now = time.monotonic()
        if underflow:
            self.xruns += 1
        clock = self.clock
        clock.tick(now)
        if self._inbox:
            self._drain_inbox()
        raw, events, held = self._raw, self._events, self._held
        raw.clear()
        events.clear()
        if held:
            events.extend(held)  # polled last block, due in this one
            held.clear()
        self.midi.poll(now, raw)
        while self._midi_in:
            raw.append(self._midi_in.popleft())
        n = self.block
        for arrival, status, d1, d2 in raw:
            pos = clock.position(arrival)
            if pos < n:
                events.append((pos, status, d1, d2))
            else:
                held.append((pos - n, status, d1, d2))
        if len(events) > 1:
            events.sort(key=itemgetter(0))
        self.guard.admit(events)  # a flood of note-ons must not stall the callback
        self.midi_events += len(events)
        t_render = time.perf_counter()
        y = self.engine.render(events)
        took = time.perf_counter() - t_render
        self.guard.learn(took)
        self.render_load.add(took)
        steady = self._apply_gain(y)
        if out is not None:
            if out.shape[1] == 1:
                out[:, 0] = y
            else:
                out[:] = y[:, None]
        self.ring.push(y)
        if steady:  # the limiter's own peak, scaled: two calls fewer per block
            peak = self.engine.stats.peak * self._gain
        else:
            np.abs(y, out=self._abs)
            peak = float(self._abs.max())
        if peak > self._peak_hold:
            self._peak_hold = peak
        gr = self.engine.stats.gain_reduction_db
        if gr > self._gr_hold:
            self._gr_hold = gr
        self.blocks += 1
        voices = self.engine.stats.voices
        if voices > self.voices_max:
            self.voices_max = voices
        if self.blocks % self._ui_every == 0:
            self.voice_stage.stage(self.engine, self._gain)

    def _apply_gain(self, y: np.ndarray) -> bool:
        """The host's ramp-in and fade-out gain on ``y``, in place; True when it was one constant."""
        g, target = self._gain, self._gain_target
        if g == target:
            if g != 1.0:
                y *= g
            if g == 0.0 and self.stopping:
                self.faded = True
            return True
        rate = 1.0 / ((RAMP_IN_S if target > g else FADE_OUT_S) * self.rate)
        buf = self._gain_buf
        np.multiply(self._idx, rate if target > g else -rate, out=buf)
        buf += g
        if target > g:
            np.minimum(buf, target, out=buf)
        else:
            np.maximum(buf, target, out=buf)
        y *= buf
        self._gain = float(buf[-1])
        if self._gain == 0.0 and self.stopping:
            self.faded = True
        return False

    def _drain_inbox(self) -> None:
        """Apply the sound and map commands the main thread queued: here, because the callback owns
        the engine, so a change never lands in the middle of a block."""
        engine = self.engine
        while self._inbox:
            try:
                match self._inbox.popleft():
                    case msgs.SetValue(name=name, value=value):
                        engine.apply_settings(engine.settings.with_values({name: value}, source="set_value"))
                    case msgs.LoadSound(settings=settings):
                        engine.load_sound(settings)
                        self._controls_changes += 1
                    case msgs.Learn(target=target):
                        self.controls.learn(target)
                    case msgs.SetControls(entries=entries):
                        self.controls.set_entries(entries)
                        self._controls_changes += 1
                    # nothing else reaches the inbox: EnginePipe._command admits only these four
            except (SettingsError, ValueError) as err:
                self._outbox.append(msgs.Error(str(err)))
