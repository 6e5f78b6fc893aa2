"""MIDI inputs: a virtual port named after rtvoice plus hardware (or named) inputs, polled.

Messages are read with python-rtmidi's non-blocking ``get_message()`` from inside
the audio callback, never through a callback in the library's own thread (on
JACK, messages taken that way were seen corrupted under interpreter-lock
contention). Each port's arrival times come from rtmidi's delta times
(:class:`~rtvoice.host.timing.PortClock`).

Ports are opened and closed from the engine process's main thread, which
publishes the current set as one tuple; the callback only ever reads that tuple.
A port that vanished is dropped from the tuple first and closed a little later,
when no callback can still be using it.

On JACK, rtmidi reads every event after one that starts a system exclusive message
without ending it (F0 .. with no F7) as more of that message, and drops it, until
some event ends with F7; MIDI 1.0 ends a sysex at any status byte. A sender that
breaks off a sysex would leave the input deaf. So a small output of our own,
connected to each of our inputs, sends a lone EOX (F7) a few dozen times a second
(:meth:`MidiInputs.resync`): at most that long is lost after a broken sysex. The
channel-message reader ignores a lone F7, and sysex is ignored here anyway.
"""

from __future__ import annotations

import re
import sys
import time
from dataclasses import dataclass, field
from types import ModuleType
from typing import Protocol

from rtvoice.engine import channel_messages
from rtvoice.host import jackinfo
from rtvoice.host.timing import PortClock

QUEUE_SIZE = 4096  # messages rtmidi buffers per port between polls
CLOSE_DELAY_S = 0.5
VIRTUAL_PORT = "in"


def load_rtmidi() -> ModuleType | None:
    """The rtmidi module, or None when python-rtmidi cannot load."""
    try:
        import rtmidi
    except (ImportError, OSError):
        return None
    return rtmidi


def choose_api(rtmidi: ModuleType) -> int:
    """The MIDI API that fits this machine: JACK when its server runs, else the platform's own."""
    compiled = rtmidi.get_compiled_api()
    if rtmidi.API_UNIX_JACK in compiled and jackinfo.server_running():
        return rtmidi.API_UNIX_JACK
    for api, platform in ((rtmidi.API_LINUX_ALSA, "linux"), (rtmidi.API_MACOSX_CORE, "darwin"),
                          (rtmidi.API_WINDOWS_MM, "win32")):
        if api in compiled and sys.platform.startswith(platform):
            return api
    return compiled[0] if compiled else rtmidi.API_UNSPECIFIED


def api_name(rtmidi: ModuleType, api: int) -> str:
    try:
        return rtmidi.get_api_display_name(api)
    except Exception:  # noqa: BLE001 - older python-rtmidi
        return str(api)


# python-rtmidi ships no type information: these say what the host uses of its ports.
class RtmidiPort(Protocol):
    """An rtmidi.MidiIn or rtmidi.MidiOut."""

    def open_port(self, port: int = 0, name: str | None = None) -> object: ...

    def open_virtual_port(self, name: str | None = None) -> object: ...

    def get_ports(self) -> list[str]: ...

    def close_port(self) -> None: ...

    def delete(self) -> None: ...


class RtmidiIn(RtmidiPort, Protocol):
    """An rtmidi.MidiIn: ``get_message()`` gives (message bytes, seconds since the previous one) or None."""

    def ignore_types(self, sysex: bool = True, timing: bool = True, active_sense: bool = True) -> None: ...

    def get_message(self) -> tuple[list[int], float] | None: ...


class RtmidiOut(RtmidiPort, Protocol):
    """An rtmidi.MidiOut."""

    def send_message(self, message: list[int]) -> None: ...


@dataclass
class MidiPort:
    name: str
    midiin: RtmidiIn
    virtual: bool = False
    clock: PortClock = field(default_factory=PortClock)
    own_client: str = ""  # the rtmidi client reading it (on JACK: its port is connected to the source)


class MidiInputs:
    """The open MIDI inputs for ``mode``: 'all' (hardware + virtual), 'virtual', 'none' or a name."""

    def __init__(self, mode: str, client_name: str = "rtvoice"):
        self.mode = mode
        self.client_name = client_name
        self.rtmidi: ModuleType | None = None  # set by open() (or by its user, as ``rtvoice devices`` does)
        self.api: int | None = None  # the rtmidi API, with ``rtmidi``
        self.inputs: tuple[MidiPort, ...] = ()
        self.events = 0
        self._closing: list[tuple[float, MidiPort]] = []
        self._count = 0
        self._lister: RtmidiIn | None = None
        self._eox: RtmidiOut | None = None  # on JACK: our MIDI output that ends a broken-off sysex on our inputs
        self._eox_port = ""

    @property
    def virtual_name(self) -> str:
        return f"{self.client_name}-midi:{VIRTUAL_PORT}" if self.api == getattr(self.rtmidi, "API_UNIX_JACK", -1) \
            else f"{self.client_name}-midi {VIRTUAL_PORT}"

    def open(self) -> list[str]:
        """Open the virtual port and every matching input; returns notes for the user."""
        if self.mode == "none":
            return []
        self.rtmidi = load_rtmidi()
        if self.rtmidi is None:
            return ["MIDI input is off: python-rtmidi cannot load (pip install python-rtmidi)"]
        self.api = choose_api(self.rtmidi)
        notes = []
        if self.api == self.rtmidi.API_UNIX_JACK:
            self._open_eox()
        if self.mode in ("all", "virtual"):
            try:
                mi = self._new_in(f"{self.client_name}-midi")
                mi.open_virtual_port(VIRTUAL_PORT)
                self.inputs = (*self.inputs, MidiPort(self.virtual_name, mi, virtual=True,
                                                      own_client=f"{self.client_name}-midi"))
                self._feed_eox(self.inputs[-1])
            except Exception as err:  # noqa: BLE001 - rtmidi raises its own error types
                notes.append(f"no virtual MIDI port on {api_name(self.rtmidi, self.api)}: {err}")
        if self.mode != "virtual":
            notes += self.scan()
        return notes

    def _loaded(self) -> ModuleType:
        """The rtmidi module; an error when nothing loaded it (a call before ``open``)."""
        if self.rtmidi is None:
            raise RuntimeError("MidiInputs: python-rtmidi is not loaded (call open() first, or set .rtmidi and .api)")
        return self.rtmidi

    def _new_in(self, name: str) -> RtmidiIn:
        mi: RtmidiIn = self._loaded().MidiIn(self.api, name=name, queue_size_limit=QUEUE_SIZE)
        mi.ignore_types(sysex=True, timing=True, active_sense=True)
        return mi

    def available(self) -> list[str]:
        """Names of the sources that could be opened now."""
        if self._lister is None:
            self._lister = self._new_in(f"{self.client_name}-scan")
        try:
            return list(self._lister.get_ports())
        except Exception:  # noqa: BLE001
            return []

    def wanted(self, names: list[str]) -> list[str]:
        """Of the sources ``names``, those this mode opens."""
        own = (f"{self.client_name}-",)
        names = [n for n in names if not n.startswith(own)]
        if self.mode == "all":
            if self.api == self._loaded().API_UNIX_JACK:
                physical = set(jackinfo.ports(jackinfo.MIDI_TYPE, jackinfo.PORT_IS_OUTPUT | jackinfo.PORT_IS_PHYSICAL))
                return [n for n in names if n in physical]
            return [n for n in names if "through" not in n.lower()]
        needle = self.mode.lower()
        return [n for n in names if needle in n.lower()]

    def scan(self) -> list[str]:
        """Open inputs that appeared, close those that vanished; returns notes for the user."""
        if self.rtmidi is None or self.mode in ("none", "virtual"):
            return self._reap()
        notes = []
        names = self.available()
        jack = self.api == self.rtmidi.API_UNIX_JACK
        keep = []
        for p in self.inputs:
            if p.virtual or p.name in names and not (jack and self._unplugged(p)):
                keep.append(p)
            else:
                self._closing.append((time.monotonic() + CLOSE_DELAY_S, p))
                notes.append(f"MIDI input gone: {p.name}")
        open_names = {p.name for p in keep if not p.virtual}
        for name in self.wanted(names):
            if name in open_names:
                continue
            try:
                self._count += 1
                own = f"{self.client_name}-in{self._count}"
                mi = self._new_in(own)
                mi.open_port(names.index(name), VIRTUAL_PORT)
            except Exception as err:  # noqa: BLE001
                notes.append(f"cannot open MIDI input {name}: {err}")
                continue
            keep.append(MidiPort(name, mi, own_client=own))
            self._feed_eox(keep[-1])
            notes.append(f"MIDI input opened: {name}")
        if len(keep) != len(self.inputs) or any(a is not b for a, b in zip(keep, self.inputs, strict=False)):
            self.inputs = tuple(keep)
        return notes + self._reap()

    # -- ending a broken-off sysex (JACK) ------------------------------------------------
    def _open_eox(self) -> None:
        try:
            out: RtmidiOut = self._loaded().MidiOut(self.api, name=f"{self.client_name}-eox")
            out.open_virtual_port("out")
        except Exception:  # noqa: BLE001 - without it a broken sysex can still deafen an input
            return
        self._eox = out
        own = re.compile(rf"^{re.escape(self.client_name)}-eox(-\d+)?:out$")  # JACK may add -01 to a taken name
        names = [n for n in jackinfo.ports(jackinfo.MIDI_TYPE, jackinfo.PORT_IS_OUTPUT) if own.match(n)]
        self._eox_port = names[-1] if names else f"{self.client_name}-eox:out"

    def _feed_eox(self, port: MidiPort) -> None:
        """Connect our EOX output to the JACK port of the rtmidi client reading ``port``."""
        if self._eox is None:
            return
        own = re.compile(rf"^{re.escape(port.own_client)}(-\d+)?:")
        mine = [n for n in jackinfo.ports(jackinfo.MIDI_TYPE, jackinfo.PORT_IS_INPUT) if own.match(n)]
        for name in mine[-1:]:
            jackinfo.connect(self._eox_port, name)

    def resync(self) -> None:
        """Send the lone EOX (main thread, a few dozen times a second)."""
        if self._eox is not None:
            try:
                self._eox.send_message([0xF7])
            except Exception:  # noqa: BLE001 - its server may be gone
                pass

    @staticmethod
    def _unplugged(port: MidiPort) -> bool:
        """On JACK: the source is there but no longer connected to us. It went away and came
        back under the same name between two scans (JACK dropped our connection with it)."""
        peers = jackinfo.connections(port.name)
        if peers is None:
            return False  # cannot tell (no libjack): trust the name
        mine = re.compile(rf"^{re.escape(port.own_client)}(-\d+)?:")  # JACK may add -01 to a taken name
        return not any(mine.match(peer) for peer in peers)

    def _reap(self) -> list[str]:
        now = time.monotonic()
        due = [p for t, p in self._closing if t <= now]
        self._closing = [(t, p) for t, p in self._closing if t > now]
        for p in due:
            _close(p.midiin)
        return []

    def names(self) -> list[str]:
        return [p.name + (" (virtual)" if p.virtual else "") for p in self.inputs]

    # -- audio callback -----------------------------------------------------------------
    def poll(self, now_s: float, out: list) -> None:
        """Append (arrival_s, status, data1, data2) for every channel message waiting.

        rtmidi hands over each JACK MIDI event (or ALSA sequencer message) as it came; a
        sender may still pack several messages or real-time bytes into one, or send
        garbage, so each is read as a byte stream (:func:`channel_messages`)."""
        for port in self.inputs:
            get = port.midiin.get_message
            clock = port.clock
            while True:
                item = get()
                if item is None:
                    break
                msg, delta = item
                arrival = clock.arrival(delta, now_s)
                # Only well-formed channel messages reach the engine: stray data bytes, cut
                # messages, system and undefined messages stay here.
                for status, d1, d2 in channel_messages(msg):
                    out.append((arrival, status, d1, d2))

    def close(self) -> None:
        ports, self.inputs = self.inputs, ()
        for p in ports:
            _close(p.midiin)
        for _, p in self._closing:
            _close(p.midiin)
        self._closing = []
        if self._lister is not None:
            _close(self._lister)
            self._lister = None
        if self._eox is not None:
            _close(self._eox)
            self._eox = None


def _close(midiin: RtmidiPort) -> None:
    try:
        midiin.close_port()
        midiin.delete()
    except Exception:  # noqa: BLE001 - a port of a vanished device may fail to close
        pass
