"""Audio output: a PortAudio stream through sounddevice, or a silent real-time clock.

Both call ``process(out, frames, underflow)`` once per block, ``out`` being a
float32 (frames, channels) array to fill, or None on the silent clock. The
silent clock keeps the engine, the meters and ``--record`` running in real time
when there is no output device (or ``--audio-device none``).
"""

from __future__ import annotations

import ctypes
import os
import sys
import threading
import time
from collections.abc import Callable
from typing import Protocol

from rtvoice.host.errors import HostError

INSTALL_HINTS = {
    "linux": "sudo apt-get install libportaudio2 (Debian/Ubuntu) or sudo dnf install portaudio (Fedora)",
    "darwin": "brew install portaudio",
    "win32": "pip install --force-reinstall sounddevice (its wheel bundles PortAudio)",
}

Process = Callable[[object, int, bool], None]


class OutputStream(Protocol):
    """What the host uses of a sounddevice.OutputStream (sounddevice ships no type information)."""

    @property
    def latency(self) -> float: ...

    @property
    def active(self) -> bool: ...

    def start(self) -> None: ...

    def abort(self) -> None: ...

    def close(self) -> None: ...


def request_realtime_priority(priority: int) -> int:
    """Ask for SCHED_FIFO at ``priority`` for the calling thread (Linux applies it per thread).

    An audio server normally gives its clients' threads real-time priority; a server run
    without it (``jackd --no-realtime``) or the silent clock does not, and then any busy
    process on the machine can pre-empt the callback. Returns the priority obtained (0: none).
    """
    if priority <= 0 or not hasattr(os, "sched_setscheduler"):
        return 0
    try:
        if os.sched_getscheduler(0) in (os.SCHED_FIFO, os.SCHED_RR):
            return os.sched_getparam(0).sched_priority  # the server gave us one already
        priority = min(priority, os.sched_get_priority_max(os.SCHED_FIFO))
        os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(priority))
        return priority
    except (OSError, AttributeError):
        return 0


def portaudio_hint() -> str:
    for prefix, hint in INSTALL_HINTS.items():
        if sys.platform.startswith(prefix):
            return hint
    return "install the PortAudio library for your system"


def load_sounddevice(client_name: str | None = None):
    """(sounddevice module, None) or (None, reason). Sets PortAudio's JACK client name first."""
    try:
        import sounddevice as sd
    except OSError:
        return None, f"PortAudio is missing, so there is no audio output: {portaudio_hint()}"
    except ImportError:
        return None, "the sounddevice package is missing: pip install sounddevice"
    if client_name:
        _set_jack_client_name(sd, client_name)
    return sd, None


_name_buffer = None  # PortAudio keeps the pointer: the bytes must outlive the stream


def _set_jack_client_name(sd, name: str) -> None:
    """PortAudio reads its JACK client name at initialisation, so set it and initialise again."""
    global _name_buffer
    try:
        lib = ctypes.CDLL(sd._libname)  # noqa: SLF001 - the library sounddevice loaded
        setter = lib.PaJack_SetClientName
    except (OSError, AttributeError):
        return
    _name_buffer = ctypes.create_string_buffer(name.encode())
    setter(_name_buffer)
    reinitialise(sd)


def reinitialise(sd) -> None:
    """Make PortAudio enumerate devices again (a device or server may have come or gone)."""
    try:
        sd._terminate()  # noqa: SLF001
        sd._initialize()  # noqa: SLF001
    except Exception:  # noqa: BLE001 - PortAudio errors surface as sd.PortAudioError
        pass


def jack_client_name(sd) -> str | None:
    try:
        lib = ctypes.CDLL(sd._libname)  # noqa: SLF001
        getter = lib.PaJack_GetClientName
        out = ctypes.c_char_p()
        if getter(ctypes.byref(out)) == 0 and out.value:
            return out.value.decode()
    except (OSError, AttributeError):
        pass
    return None


def output_devices(sd) -> list[dict]:
    """Every PortAudio device with outputs, with its host API name and index."""
    apis = sd.query_hostapis()
    out = []
    for dev in sd.query_devices():
        if dev["max_output_channels"] > 0:
            out.append(dict(dev, hostapi_name=apis[dev["hostapi"]]["name"]))
    return out


def find_device(sd, wanted: str | None) -> dict | None:
    """The output device named (a substring), the default one for None, None when there is none.

    Raises HostError when a name matches no device or several.
    """
    devices = output_devices(sd)
    if wanted is None:
        try:
            index = sd.default.device[1]
            if index is None or index < 0:
                index = sd.query_devices(kind="output")["index"]
        except Exception:  # noqa: BLE001 - no default output
            return devices[0] if devices else None
        return next((d for d in devices if d["index"] == index), devices[0] if devices else None)
    if wanted.isdigit():
        match = [d for d in devices if d["index"] == int(wanted)]
    else:
        exact = [d for d in devices if d["name"].lower() == wanted.lower()]
        match = exact or [d for d in devices if wanted.lower() in f"{d['name']} {d['hostapi_name']}".lower()]
    if len(match) == 1:
        return match[0]
    listing = "; ".join(f"{d['index']}: {d['name']} ({d['hostapi_name']})" for d in devices) or "none"
    if not match:
        raise HostError(f"no audio output device matches {wanted!r} (outputs: {listing}; or use --audio-device none)")
    raise HostError(f"{wanted!r} matches several audio outputs ({listing}): give more of the name or its number")


class PortAudioOutput:
    """A float32 output stream of fixed block size on ``device`` (a dict from :func:`find_device`)."""

    def __init__(self, sd, device: dict, rate: int, block: int, process: Process):
        self.sd, self.device, self.rate, self.block = sd, device, rate, block
        self.channels = min(2, int(device["max_output_channels"]))
        self._process = process
        self.stream: OutputStream | None = None
        self.callbacks = 0

    def describe(self) -> str:
        return f"{self.device['name']} ({self.device['hostapi_name']})"

    def start(self) -> None:
        sd = self.sd

        def callback(outdata, frames, _time, status):
            self.callbacks += 1
            self._process(outdata, frames, bool(status.output_underflow))

        try:
            self.stream = sd.OutputStream(samplerate=self.rate, blocksize=self.block, device=self.device["index"],
                                          channels=self.channels, dtype="float32", latency="low",
                                          callback=callback, prime_output_buffers_using_stream_callback=False)
            self.stream.start()
        except Exception as err:  # noqa: BLE001 - sd.PortAudioError and ValueError for bad formats
            self.stream = None
            raise HostError(f"cannot open audio output {self.describe()} at {self.rate} Hz, "
                            f"{self.block} frames: {err}") from None

    @property
    def latency_s(self) -> float:
        return float(self.stream.latency) if self.stream is not None else 0.0

    def running(self) -> bool:
        return self.stream is not None and bool(self.stream.active)

    def stop(self, timeout_s: float = 2.0) -> bool:
        """Stop and close the stream; False when PortAudio did not return in time (a dead server)."""
        stream, self.stream = self.stream, None
        if stream is None:
            return True
        done = threading.Event()

        def close():
            try:
                stream.abort()
                stream.close()
            except Exception:  # noqa: BLE001
                pass
            done.set()

        threading.Thread(target=close, daemon=True, name="rtvoice-audio-close").start()
        return done.wait(timeout_s)


class SilentClock:
    """Calls ``process(None, frames, late)`` every block period from a thread, sleeping in between."""

    channels = 0
    latency_s = 0.0

    def __init__(self, rate: int, block: int, process: Process):
        self.rate, self.block = rate, block
        self._process = process
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.callbacks = 0

    def describe(self) -> str:
        return "none (silent clock)"

    def start(self) -> None:
        self._stop.clear()
        self._thread = threading.Thread(target=self._run, daemon=True, name="rtvoice-silent-clock")
        self._thread.start()

    def _run(self) -> None:
        period = self.block / self.rate
        due = time.monotonic()
        while not self._stop.is_set():
            due += period
            late = False
            wait = due - time.monotonic()
            if wait > 0:
                time.sleep(wait)
            elif wait < -4 * period:  # fell far behind (suspended): start afresh, count it
                due = time.monotonic()
                late = True
            self.callbacks += 1
            self._process(None, self.block, late)

    def running(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    def stop(self, timeout_s: float = 2.0) -> bool:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout_s)
        return not self.running()
