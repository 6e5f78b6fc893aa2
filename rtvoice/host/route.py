"""Where the blocks go: a PortAudio device, or the silent clock when there is none or it was lost.

Each output gets a generation number; a callback of an older output (a lost stream
that wakes up late) finds its number stale and touches nothing. When a device is
lost the route falls back to the silent clock and tries to reconnect every few
seconds. PortAudio on JACK cannot close a stream whose server died (the call never
returns), and re-initialising it would hang too; then only a fresh engine process
can open audio again, which :meth:`AudioRoute.check` asks for once the server is back.
"""

from __future__ import annotations

from collections.abc import Callable

from rtvoice.host import jackinfo
from rtvoice.host.audio import (
    PortAudioOutput,
    SilentClock,
    find_device,
    jack_client_name,
    load_sounddevice,
    reinitialise,
)
from rtvoice.host.errors import HostError

LOST_AFTER_S = 1.0  # no callback for this long: the device or server is gone
RECONNECT_EVERY_S = 2.0

#: process(out, frames, underflow, generation)
Process = Callable[[object, int, bool, int], None]


class AudioRoute:
    def __init__(self, wanted: str | None, rate: int, block: int, client_name: str, process: Process):
        self.wanted, self.rate, self.block, self.client_name = wanted, rate, block, client_name
        self._process = process
        self.gen = 0
        self.output: PortAudioOutput | SilentClock | None = None
        self.sd = None
        self.description = ""
        self.ports: list[str] = []
        self.notes: list[str] = []  # what the user should hear about, for the start-up report
        self.lost = False
        self.wedged = False  # PortAudio stuck on a lost stream: only a new process can reopen audio
        self._lost_jack = False
        self._next_reconnect = 0.0
        self._callbacks, self._progress_at = -1, 0.0

    def _callback(self):
        self.gen += 1
        gen = self.gen
        return lambda out, frames, underflow: self._process(out, frames, underflow, gen)

    @property
    def label(self) -> str:
        """The output and, on JACK, its ports: what the UI shows as the audio port."""
        return self.description + (f" as {' '.join(self.ports)}" if self.ports else "")

    def running(self) -> bool:
        return self.output is not None and self.output.running()

    def probe(self) -> dict | None:
        """The output device :meth:`open` will use (None: the silent clock), before any stream opens,
        so the rate can follow it. A named device that matches nothing raises HostError."""
        if self.wanted == "none":
            return None
        if self.sd is None:
            self.sd, _reason = load_sounddevice(self.client_name)  # open() says the reason
            if self.sd is None:
                return None
        return find_device(self.sd, self.wanted)

    # -- opening ------------------------------------------------------------------------
    def open(self, first: bool = True) -> bool:
        """Open the wanted output; on first start a named device that fails raises HostError,
        the default one falls back to the silent clock. Returns True when a device opened."""
        if self.wanted == "none":
            self.use_silent_clock()
            return False
        if self.sd is None:
            self.sd, reason = load_sounddevice(self.client_name)
            if self.sd is None:
                self.notes.append(reason)
                self.use_silent_clock()
                return False
        try:
            device = find_device(self.sd, self.wanted)
        except HostError:
            if first:
                raise
            device = None
        if device is None:
            if first:
                self.notes.append("no audio output device found: running on a silent clock "
                                  "(meters and --record still work)")
                self.use_silent_clock()
            return False
        out = PortAudioOutput(self.sd, device, self.rate, self.block, self._callback())
        jack = "JACK" in device["hostapi_name"]
        try:
            out.start()
        except HostError as err:
            fmt = jackinfo.server_format() if jack else None
            if fmt and fmt[0] != self.rate:
                err = HostError(f"{err} (the JACK server runs at {fmt[0]} Hz: leave out --rate to follow it, "
                                f"or use --rate {fmt[0]})")
            if first and self.wanted is not None:
                raise err from None
            if first:
                self.notes.append(f"{err}: running on a silent clock")
                self.use_silent_clock()
            return False
        if self.output is not None:
            self.output.stop()
        self.output = out
        self.description = out.describe()
        client = jack_client_name(self.sd) if jack else None
        self.ports = [f"{client}:out_{i}" for i in range(out.channels)] if client else []
        self._callbacks = -1
        return True

    def use_silent_clock(self) -> None:
        if self.output is not None:
            self.output.stop()
        self.output = SilentClock(self.rate, self.block, self._callback())
        self.output.start()
        self.description = self.output.describe()
        self.ports = []

    # -- watching -----------------------------------------------------------------------
    def check(self, now: float) -> list[tuple[str, str]]:
        """Notice a lost device, try to get it back; returns events (kind, text) with kind
        'lost', 'back' (the caller reopens MIDI too) or 'respawn' (a fresh process is needed)."""
        out = self.output
        if isinstance(out, PortAudioOutput):
            if out.callbacks != self._callbacks:
                self._callbacks, self._progress_at = out.callbacks, now
                return []
            if now - self._progress_at < LOST_AFTER_S and out.running():
                return []
            text = f"audio output lost: {out.describe()}; running on a silent clock and trying to reconnect"
            self.gen += 1  # a late callback of the lost stream touches nothing
            self.wedged = not out.stop(timeout_s=1.0)
            self._lost_jack = "JACK" in out.device["hostapi_name"]
            self.output = None
            jackinfo.forget()
            self.use_silent_clock()
            self.lost = True
            self._next_reconnect = now + RECONNECT_EVERY_S
            return [("lost", text)]
        if not self.lost or now < self._next_reconnect:
            return []
        self._next_reconnect = now + RECONNECT_EVERY_S
        if self.wedged:
            if self._lost_jack and jackinfo.server_running():
                return [("respawn", "the audio server is back: restarting the engine")]
            return []
        if self.sd is None:
            return []
        reinitialise(self.sd)  # safe: the silent clock does not use PortAudio
        try:
            if find_device(self.sd, self.wanted) is None:
                return []
        except HostError:
            return []
        silent, self.output = self.output, None
        if silent is not None:
            silent.stop()
        if not self.open(first=False):
            self.use_silent_clock()
            return []
        self.lost = False
        self._progress_at = now
        return [("back", f"audio output back: {self.label}")]

    def stop(self) -> None:
        out, self.output = self.output, None
        if out is not None:
            out.stop()
        self.gen += 1
