"""Helpers for tests that talk to a real JACK server (dummy backend, started by scripts/test).

They drive the JACK command-line tools (``jack_lsp``, ``jack_connect``, ``jack_disconnect``,
``jack_capture``) in subprocesses, so a test never shares the JACK client of the code under test.
Every tool runs with ``JACK_NO_START_SERVER=1``: a helper must fail, not start a server of its own.

Typical use::

    from jackutil import Recording, wait_for_ports  # tests/ is on sys.path under pytest

    ports = wait_for_ports(r"^rtvoice:out", count=2, timeout_s=5.0)
    with Recording(ports, duration_s=1.0, wav_path=tmp_path / "out.wav") as rec:
        ...  # play notes while jack_capture records
    rate_hz, samples = rec.read()  # samples: float32, shape (frames, channels)
"""

from __future__ import annotations

import os
import re
import subprocess
import time
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from types import TracebackType
from typing import Literal

import numpy as np

from rtvoice.procutil import stop_process

Direction = Literal["input", "output"]

#: Environment for every JACK tool: never auto-start a server.
JACK_ENV = {**os.environ, "JACK_NO_START_SERVER": "1"}

#: Seconds a short JACK tool (jack_lsp, jack_connect, ...) may take before we give up.
TOOL_TIMEOUT_S = 10.0


class JackError(RuntimeError):
    """A JACK tool failed or the server did not behave as expected."""


@dataclass(frozen=True)
class PortInfo:
    """One JACK port as reported by ``jack_lsp -p``.

    ``direction`` is seen from the port's own client: a client's ``output`` ports are its sources.
    """

    name: str
    direction: Direction | None
    physical: bool


def _run_tool(*args: str, timeout_s: float = TOOL_TIMEOUT_S) -> str:
    """Run a JACK tool and return its stdout; raise JackError on a non-zero exit."""
    try:
        done = subprocess.run(
            args,
            env=JACK_ENV,
            stdin=subprocess.DEVNULL,
            capture_output=True,
            text=True,
            timeout=timeout_s,
            check=False,
        )
    except FileNotFoundError as exc:
        raise JackError(f"{args[0]} not found; install jackd2 / jack-tools / jack-capture") from exc
    except subprocess.TimeoutExpired as exc:
        raise JackError(f"{' '.join(args)} did not finish within {timeout_s} s") from exc
    if done.returncode != 0:
        raise JackError(
            f"{' '.join(args)} exited with {done.returncode}: {done.stderr.strip()[-500:]}"
        )
    return done.stdout


def server_answers() -> bool:
    """Return True when a JACK server is running and answers ``jack_lsp``."""
    try:
        _run_tool("jack_lsp")
    except JackError:
        return False
    return True


def sample_rate_hz() -> int:
    """Return the running server's sample rate in Hz (``jack_samplerate``)."""
    return int(_run_tool("jack_samplerate").split()[-1])


def buffer_frames() -> int:
    """Return the running server's period (buffer size) in frames (``jack_bufsize``)."""
    match = re.search(r"\d+", _run_tool("jack_bufsize"))
    if match is None:
        raise JackError("jack_bufsize printed no number")
    return int(match.group())


def port_infos() -> list[PortInfo]:
    """Return every port of the running server, with direction and physical flag."""
    infos: list[PortInfo] = []
    name: str | None = None
    props: set[str] = set()

    def flush() -> None:
        if name is not None:
            direction: Direction | None = (
                "output" if "output" in props else "input" if "input" in props else None
            )
            infos.append(PortInfo(name, direction, "physical" in props))

    for line in _run_tool("jack_lsp", "-p").splitlines():
        if not line.strip():
            continue
        if line[0].isspace():
            text = line.strip()
            if text.startswith("properties:"):
                props = {p.strip() for p in text.removeprefix("properties:").split(",")}
            continue
        flush()
        name, props = line, set()
    flush()
    return infos


def list_ports(
    pattern: str | None = None,
    *,
    direction: Direction | None = None,
    physical: bool | None = None,
) -> list[str]:
    """Return the names of the server's ports, in server order.

    Args:
        pattern: regular expression searched (``re.search``) in each full port name
            (``client:port``); None keeps every port.
        direction: keep only ``"output"`` (sources) or ``"input"`` (sinks) ports.
        physical: keep only physical (True) or only non-physical (False) ports.
    """
    regex = re.compile(pattern) if pattern is not None else None
    return [
        info.name
        for info in port_infos()
        if (regex is None or regex.search(info.name))
        and (direction is None or info.direction == direction)
        and (physical is None or info.physical == physical)
    ]


def connections() -> dict[str, list[str]]:
    """Return, for every port, the ports it is connected to (``jack_lsp -c``).

    Each connection appears under both of its ends.
    """
    table: dict[str, list[str]] = {}
    current: str | None = None
    for line in _run_tool("jack_lsp", "-c").splitlines():
        if not line.strip():
            continue
        if line[0].isspace():
            if current is not None:
                table[current].append(line.strip())
        else:
            current = line
            table[current] = []
    return table


def connect(source: str, destination: str) -> None:
    """Connect an output port to an input port (``jack_connect``); raise JackError on failure."""
    _run_tool("jack_connect", source, destination)


def disconnect(source: str, destination: str) -> None:
    """Disconnect two ports (``jack_disconnect``); raise JackError on failure."""
    _run_tool("jack_disconnect", source, destination)


def wait_for_ports(
    pattern: str,
    *,
    count: int = 1,
    timeout_s: float = 5.0,
    direction: Direction | None = None,
    poll_s: float = 0.05,
) -> list[str]:
    """Wait until at least ``count`` ports match ``pattern`` and return all matching names.

    Args:
        pattern: regular expression searched in each full port name, as in :func:`list_ports`.
        count: how many matching ports must exist.
        timeout_s: give up after this many seconds.
        direction: as in :func:`list_ports`.
        poll_s: pause between two ``jack_lsp`` calls.

    Raises:
        TimeoutError: fewer than ``count`` ports matched within ``timeout_s``; the message
            lists the ports that did exist.
    """
    deadline = time.monotonic() + timeout_s
    while True:
        found = list_ports(pattern, direction=direction)
        if len(found) >= count:
            return found
        if time.monotonic() >= deadline:
            raise TimeoutError(
                f"{len(found)} of {count} ports matching {pattern!r} after {timeout_s} s; "
                f"ports present: {list_ports()}"
            )
        time.sleep(poll_s)


def wait_for_new_ports(
    before: set[str] | frozenset[str],
    *,
    direction: Direction | None = None,
    timeout_s: float = 5.0,
    settle_s: float = 0.1,
    poll_s: float = 0.05,
) -> list[str]:
    """Wait for ports that are not in ``before`` (e.g. those of a client just started).

    Returns the new port names in server order, after they stopped changing for ``settle_s``
    seconds (a client registers its ports one by one).

    Raises:
        TimeoutError: no new port appeared within ``timeout_s``.
    """
    deadline = time.monotonic() + timeout_s
    seen: list[str] = []
    stable_since = time.monotonic()
    while True:
        now_ports = [p for p in list_ports(direction=direction) if p not in before]
        now = time.monotonic()
        if now_ports != seen:
            seen, stable_since = now_ports, now
        elif seen and now - stable_since >= settle_s:
            return seen
        if now >= deadline:
            if seen:
                return seen
            raise TimeoutError(f"no new JACK port appeared within {timeout_s} s")
        time.sleep(poll_s)


@dataclass(frozen=True)
class JackServerInfo:
    """What the ``jack_server`` fixture knows about the running server."""

    sample_rate_hz: int
    buffer_frames: int
    ports: tuple[str, ...]
    required: bool
    """True when RTVOICE_JACK is set (scripts/test started or found the server)."""


def server_info(required: bool = False) -> JackServerInfo:
    """Query the running server; raise JackError when it does not answer."""
    return JackServerInfo(
        sample_rate_hz=sample_rate_hz(),
        buffer_frames=buffer_frames(),
        ports=tuple(list_ports()),
        required=required,
    )


def read_wav(path: str | os.PathLike[str]) -> tuple[int, np.ndarray]:
    """Read a WAV written by jack_capture; return (sample rate in Hz, float32 samples).

    The samples always have shape (frames, channels). jack_capture writes 32-bit float WAV with
    an extra chunk scipy does not know; its warning about that chunk is silenced here.
    """
    from scipy.io import wavfile  # local: keep `import jackutil` light

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", wavfile.WavFileWarning)
        rate_hz, data = wavfile.read(os.fspath(path))
    samples = np.asarray(data, dtype=np.float32)
    if samples.ndim == 1:
        samples = samples[:, np.newaxis]
    return int(rate_hz), samples


class Recording:
    """Record JACK ports to a float WAV with ``jack_capture`` for a fixed duration.

    Entering starts ``jack_capture`` and returns only once every source port is connected to it,
    i.e. once sound from the sources reaches the file. Leaving waits for the recording to end
    (``duration_s`` after the start) and checks that the file was written. Channel ``i`` of the
    WAV holds ``ports[i]``.

    The invocation is::

        jack_capture -d DURATION_S -f wav -c N -dc -ns -p PORT1 ... -p PORTN WAV_PATH

    (32-bit float samples are jack_capture's default.)

    Port names are passed exactly (no patterns): resolve patterns first with
    :func:`wait_for_ports` or :func:`list_ports`. jack_capture only warns about a port it
    cannot find, so the connections are checked here and a missing one raises JackError.
    """

    def __init__(
        self,
        ports: Sequence[str],
        duration_s: float,
        wav_path: str | os.PathLike[str],
        *,
        connect_timeout_s: float = 5.0,
    ) -> None:
        """Prepare a recording of ``ports`` (exact names) for ``duration_s`` s into ``wav_path``."""
        if not ports:
            raise ValueError("Recording needs at least one port")
        if duration_s <= 0:
            raise ValueError(f"duration_s must be positive, got {duration_s}")
        self.ports = list(ports)
        self.duration_s = float(duration_s)
        self.wav_path = Path(wav_path)
        self.connect_timeout_s = connect_timeout_s
        self.process: subprocess.Popen[str] | None = None
        self.output = ""

    @property
    def command(self) -> list[str]:
        """The jack_capture command line this recording runs."""
        cmd = ["jack_capture", "-d", f"{self.duration_s:g}", "-f", "wav"]
        cmd += ["-c", str(len(self.ports)), "-dc", "-ns"]
        for port in self.ports:
            cmd += ["-p", port]
        return [*cmd, str(self.wav_path)]

    def start(self) -> Recording:
        """Start jack_capture and wait until every source port is connected to it."""
        missing = set(self.ports) - set(list_ports())
        if missing:
            raise JackError(f"cannot record unknown ports {sorted(missing)}")
        self.wav_path.parent.mkdir(parents=True, exist_ok=True)
        self.wav_path.unlink(missing_ok=True)
        self.process = subprocess.Popen(
            self.command,
            env=JACK_ENV,
            stdin=subprocess.DEVNULL,
            stdout=subprocess.PIPE,
            stderr=subprocess.STDOUT,
            text=True,
        )
        deadline = time.monotonic() + self.connect_timeout_s
        while not self._all_connected():
            if self.process.poll() is not None or time.monotonic() >= deadline:
                self._kill()
                raise JackError(
                    f"jack_capture did not connect to {self.ports} within "
                    f"{self.connect_timeout_s} s: {self.output.strip()[-500:]}"
                )
            time.sleep(0.02)
        return self

    def _all_connected(self) -> bool:
        table = connections()
        return all(
            any(peer.startswith("jack_capture") for peer in table.get(port, []))
            for port in self.ports
        )

    def _kill(self) -> None:
        if self.process is None:
            return
        if self.process.poll() is None:
            self.process.kill()
        self.output, _ = self.process.communicate()

    def wait(self) -> Path:
        """Wait until the recording has ended; return the WAV path, raise JackError on failure."""
        if self.process is None:
            raise JackError("Recording.wait() before start()")
        try:
            self.output, _ = self.process.communicate(timeout=self.duration_s + 15.0)
        except subprocess.TimeoutExpired:
            self._kill()
            raise JackError(f"jack_capture did not finish: {self.output.strip()[-500:]}") from None
        if self.process.returncode != 0:
            raise JackError(
                f"jack_capture exited with {self.process.returncode}: {self.output.strip()[-500:]}"
            )
        if not self.wav_path.is_file() or self.wav_path.stat().st_size <= 44:
            raise JackError(f"jack_capture wrote no audio to {self.wav_path}")
        return self.wav_path

    def read(self) -> tuple[int, np.ndarray]:
        """Return (sample rate in Hz, float32 samples of shape (frames, len(ports)))."""
        return read_wav(self.wav_path)

    def __enter__(self) -> Recording:
        return self.start()

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        if exc_type is not None:
            self._kill()  # the test already failed; do not wait for the full duration
            return
        self.wait()


def record(
    ports: Sequence[str], duration_s: float, wav_path: str | os.PathLike[str]
) -> tuple[int, np.ndarray]:
    """Record ``ports`` for ``duration_s`` seconds; block; return (rate in Hz, samples).

    The sources must keep playing for the whole duration; see :class:`Recording` to act while
    the recording runs.
    """
    with Recording(ports, duration_s, wav_path) as rec:
        pass
    return rec.read()


def portaudio_jack_output_device() -> int:
    """Return the PortAudio (sounddevice) index of the JACK host API's default output device.

    This is the ``system`` device when PortAudio sees the JACK server. Raises JackError when
    PortAudio has no JACK host API or the API has no output device.
    """
    import sounddevice as sd  # local: raises OSError without libportaudio2

    for api in sd.query_hostapis():
        if "JACK" in api["name"]:
            index = api["default_output_device"]
            if index is None or index < 0:
                raise JackError("PortAudio's JACK host API has no output device")
            return int(index)
    raise JackError(
        "PortAudio has no JACK host API (was sounddevice imported before the server started?)"
    )


# -- a JACK MIDI source that writes any bytes ---------------------------------------------------

#: The JACK MIDI port type (jack/types.h JACK_DEFAULT_MIDI_TYPE).
MIDI_PORT_TYPE = b"8 bit raw midi"


class RawMidiSender:
    """An external JACK client ``name`` with one MIDI output ``name:out`` that sends any bytes.

    python-rtmidi refuses messages longer than three bytes that do not start with F0, so a
    sender that breaks the rules (random bytes, several messages or real-time bytes in one
    event) needs a client of its own. It runs in a subprocess (this file run as a script), a
    libjack client through ctypes whose process callback writes the queued events at the
    start of the next period, so a busy test process cannot delay it. Each :meth:`send` is one
    JACK MIDI event; :meth:`flush` waits until everything sent so far went out. Events JACK
    has no room for in one period's buffer (larger than ``max_event_bytes``) are skipped and
    counted in :attr:`too_big`.
    """

    def __init__(self, name: str, *, timeout_s: float = 10.0, env: dict[str, str] | None = None,
                 paused: bool = False) -> None:
        """Start the client; with ``paused`` only the process starts, and :meth:`open` then
        opens the client within milliseconds (to plug a device back at once)."""
        import sys

        self.name = name
        self.port = f"{name}:out"
        self.too_big = 0
        self.max_event_bytes = 0
        self._timeout_s = timeout_s
        self.process = subprocess.Popen(
            [sys.executable, os.path.abspath(__file__), "raw-midi-sender", name],
            env=env or JACK_ENV, stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL,
            text=True, bufsize=1,
        )
        self._sync = 0
        if self._reply(timeout_s) != "waiting":
            self.kill()
            raise JackError(f"raw MIDI sender {name} did not start")
        if not paused:
            self.open()

    def open(self) -> None:
        """Open the JACK client (and its port) of a sender started ``paused``."""
        assert self.process.stdin is not None
        self.process.stdin.write("open\n")
        self.process.stdin.flush()
        line = self._reply(self._timeout_s)
        if not line.startswith("ready"):
            self.close()
            raise JackError(f"raw MIDI sender {self.name} did not open its client: {line!r}")
        self.max_event_bytes = int(line.split()[1])

    def _reply(self, timeout_s: float) -> str:
        import select

        assert self.process.stdout is not None
        ready, _, _ = select.select([self.process.stdout], [], [], timeout_s)
        if not ready:
            raise JackError(f"raw MIDI sender {self.name} did not answer within {timeout_s} s")
        return self.process.stdout.readline().strip()

    def send(self, data: Sequence[int] | bytes) -> None:
        """Queue one JACK MIDI event holding exactly ``data`` (any bytes, at least one)."""
        if len(data) == 0:
            raise ValueError("a JACK MIDI event holds at least one byte")
        assert self.process.stdin is not None
        self.process.stdin.write(bytes(data).hex() + "\n")

    def flush(self, timeout_s: float = 10.0) -> None:
        """Wait until every event sent so far has been written to JACK."""
        assert self.process.stdin is not None
        self._sync += 1
        self.process.stdin.write(f"sync {self._sync}\n")
        self.process.stdin.flush()
        line = self._reply(timeout_s)
        if line.split()[:2] != ["done", str(self._sync)]:
            raise JackError(f"raw MIDI sender {self.name}: unexpected reply {line!r}")
        self.too_big = int(line.split()[2])

    def close(self) -> None:
        """Close the client: its port disappears from the server (an unplugged device)."""
        if self.process.poll() is None and self.process.stdin is not None and not self.process.stdin.closed:
            try:
                assert self.process.stdin is not None
                self.process.stdin.write("quit\n")
                self.process.stdin.flush()
                self.process.wait(5)
            except (OSError, subprocess.TimeoutExpired):
                self.process.kill()
                self.process.wait(5)
        self._close_pipes()

    def _close_pipes(self) -> None:
        for pipe in (self.process.stdin, self.process.stdout):
            if pipe is not None and not pipe.closed:
                try:
                    pipe.close()
                except OSError:
                    pass

    def unplug(self, timeout_s: float = 5.0) -> None:
        """Close the client and return as soon as its port is gone (the process ends after)."""
        assert self.process.stdin is not None
        self.process.stdin.write("quit\n")
        self.process.stdin.flush()
        if self._reply(timeout_s) != "closed":
            raise JackError(f"{self.port} did not close")

    def kill(self) -> None:
        """End the sender process at once (its server died: closing the client could wait)."""
        if self.process.poll() is None:
            self.process.kill()
        self.process.wait(5)
        self._close_pipes()

    def __enter__(self) -> RawMidiSender:
        return self

    def __exit__(self, *_exc: object) -> None:
        self.close()


def _raw_midi_sender_main(name: str) -> int:
    """The sender subprocess: one JACK client, one MIDI output, events as hex lines on stdin."""
    import collections
    import ctypes
    import ctypes.util
    import sys
    import threading

    lib = ctypes.CDLL(ctypes.util.find_library("jack") or "libjack.so.0")
    lib.jack_client_open.restype = ctypes.c_void_p
    lib.jack_client_open.argtypes = [ctypes.c_char_p, ctypes.c_int, ctypes.c_void_p]
    lib.jack_port_register.restype = ctypes.c_void_p
    lib.jack_port_register.argtypes = [ctypes.c_void_p, ctypes.c_char_p, ctypes.c_char_p,
                                       ctypes.c_ulong, ctypes.c_ulong]
    lib.jack_port_get_buffer.restype = ctypes.c_void_p
    lib.jack_port_get_buffer.argtypes = [ctypes.c_void_p, ctypes.c_uint32]
    lib.jack_midi_clear_buffer.argtypes = [ctypes.c_void_p]
    lib.jack_midi_max_event_size.restype = ctypes.c_size_t
    lib.jack_midi_max_event_size.argtypes = [ctypes.c_void_p]
    lib.jack_midi_event_write.restype = ctypes.c_int
    lib.jack_midi_event_write.argtypes = [ctypes.c_void_p, ctypes.c_uint32, ctypes.c_char_p, ctypes.c_size_t]
    lib.jack_set_process_callback.argtypes = [ctypes.c_void_p, ctypes.c_void_p, ctypes.c_void_p]
    lib.jack_activate.argtypes = [ctypes.c_void_p]
    lib.jack_deactivate.argtypes = [ctypes.c_void_p]
    lib.jack_client_close.argtypes = [ctypes.c_void_p]
    print("waiting", flush=True)
    if sys.stdin.readline().strip() != "open":
        return 0
    client = lib.jack_client_open(name.encode(), 0x01, None)  # JackNoStartServer
    if not client:
        print("error cannot open a JACK client", flush=True)
        return 1
    port = lib.jack_port_register(client, b"out", MIDI_PORT_TYPE, 0x2, 0)  # JackPortIsOutput
    queue: collections.deque = collections.deque()
    state = {"too_big": 0, "max": 0, "written": 0}
    written = threading.Condition()

    @ctypes.CFUNCTYPE(ctypes.c_int, ctypes.c_uint32, ctypes.c_void_p)
    def process(nframes: int, _arg: int) -> int:
        buf = lib.jack_port_get_buffer(port, nframes)
        lib.jack_midi_clear_buffer(buf)
        state["max"] = int(lib.jack_midi_max_event_size(buf))
        done = 0
        while queue:
            data = queue[0]
            if isinstance(data, int):  # a sync mark
                queue.popleft()
                with written:
                    state["written"] = data
                    written.notify_all()
                continue
            if len(data) > state["max"] and done == 0:
                queue.popleft()  # larger than an empty period buffer: JACK can never carry it
                state["too_big"] += 1
                continue
            if lib.jack_midi_event_write(buf, 0, data, len(data)) != 0:
                break  # this period's buffer is full: the rest goes in the next one
            queue.popleft()
            done += 1
        return 0

    lib.jack_set_process_callback(client, process, None)
    if lib.jack_activate(client) != 0:
        print("error cannot activate the JACK client", flush=True)
        return 1
    time.sleep(0.05)
    print(f"ready {state['max']}", flush=True)
    for line in sys.stdin:
        word = line.split()
        if not word:
            continue
        if word[0] == "quit":
            break
        if word[0] == "sync":
            mark = int(word[1])
            queue.append(mark)
            with written:
                written.wait_for(lambda m=mark: state["written"] >= m, timeout=30.0)
            print(f"done {mark} {state['too_big']}", flush=True)
            continue
        queue.append(bytes.fromhex(word[0]))
    lib.jack_deactivate(client)
    lib.jack_client_close(client)
    print("closed", flush=True)
    return 0


if __name__ == "__main__":
    import sys

    if len(sys.argv) == 3 and sys.argv[1] == "raw-midi-sender":
        sys.exit(_raw_midi_sender_main(sys.argv[2]))
    sys.exit(f"usage: {sys.argv[0]} raw-midi-sender CLIENT_NAME")


# -- rtvoice play --headless as a subprocess ---------------------------------------------------

#: One status line of ``rtvoice play --headless`` (rtvoice/host/headless.py status_line).
STATUS_RE = re.compile(
    r"^voices\s+(?P<voices>\d+) \| load\s+(?P<load_median>[\d.]+)% median\s+(?P<load_p99>[\d.]+)% p99"
    r" \| xruns (?P<xruns>\d+) \| peak\s+(?P<peak_dbfs>-?[\d.]+|-inf) dBFS \| limiter\s+(?P<limiter_db>[\d.]+) dB"
    r" \| midi (?P<midi>\d+)(?: \| dropped (?P<dropped>\d+))?(?: \| late (?P<late>\d+))?"
)


@dataclass(frozen=True)
class Status:
    """One parsed status line: load as a share of the block period (0.5 = 50 %)."""

    voices: int
    load_median: float
    load_p99: float
    xruns: int
    peak_dbfs: float
    limiter_db: float
    midi: int
    dropped: int
    late: int
    """Callbacks that took longer than the block period (the host's own overruns)."""


def parse_status(line: str) -> Status | None:
    match = STATUS_RE.match(line.strip())
    if match is None:
        return None
    g = match.groupdict()
    return Status(int(g["voices"]), float(g["load_median"]) / 100, float(g["load_p99"]) / 100,
                  int(g["xruns"]), float("-inf") if g["peak_dbfs"] == "-inf" else float(g["peak_dbfs"]),
                  float(g["limiter_db"]), int(g["midi"]), int(g["dropped"] or 0), int(g["late"] or 0))


class HeadlessHost:
    """``rtvoice play --headless --midi-in virtual`` under the JACK client name ``name``.

    Its stderr goes to ``log_path``; :meth:`statuses` parses the status lines printed once a
    second. With ``record`` the host writes what it played to that WAV (``--record``), whose
    header is valid after every write, so :meth:`recorded` can read it while the host runs.
    """

    START_TIMEOUT_S = 40.0  # the host imports numpy and scipy: slow on a busy 2-core machine

    def __init__(self, name: str, log_path: Path, *, rate: int, block: int, extra: Sequence[str] = (),
                 record: Path | None = None, midi_in: str = "virtual",
                 env: dict[str, str] | None = None) -> None:
        import sys

        self.name = name
        self.log_path = Path(log_path)
        self.record_path = record
        self.rate = rate
        self.block = block
        self.out_port = f"{name}:out_0"
        self.midi_port = f"{name}-midi:in"
        args = [sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", midi_in,
                "--client-name", name, "--rate", str(rate), "--block", str(block), *extra]
        if record is not None:
            args += ["--record", str(record)]
        self._log = open(self.log_path, "w")  # noqa: SIM115 - closed in stop()
        self.process = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=self._log,
                                        stderr=subprocess.STDOUT, env=env or JACK_ENV,
                                        start_new_session=True)

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")

    def wait_for_log(self, text: str, timeout_s: float) -> bool:
        """Wait until ``text`` is in the log; False when it was not within ``timeout_s``."""
        deadline = time.monotonic() + timeout_s
        while text not in self.log():
            if time.monotonic() > deadline or self.process.poll() is not None:
                return text in self.log()
            time.sleep(0.05)
        return True

    def wait_ready(self, midi: bool = True) -> HeadlessHost:
        if not self.wait_for_log("rtvoice: MIDI in:", self.START_TIMEOUT_S):
            self.stop()
            raise JackError(f"host {self.name} did not start: {self.log()[-2000:]}")
        wait_for_ports(f"^{re.escape(self.out_port)}$", timeout_s=10)
        if midi:
            wait_for_ports(f"^{re.escape(self.midi_port)}$", timeout_s=10)
        return self

    def statuses(self) -> list[Status]:
        return [s for s in map(parse_status, self.log().splitlines()) if s is not None]

    def next_status(self, timeout_s: float = 5.0) -> Status:
        """Wait for a status line printed after this call and return it."""
        count = len(self.statuses())
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            found = self.statuses()
            if len(found) > count:
                return found[-1]
            time.sleep(0.05)
        raise JackError(f"host {self.name} printed no status line within {timeout_s} s: {self.log()[-1000:]}")

    def recorded(self) -> np.ndarray:
        """Everything ``--record`` has written so far (float32, mono)."""
        from rtvoice.offline.wav import read_wav as read_record

        assert self.record_path is not None
        samples, rate = read_record(self.record_path)
        assert rate == self.rate
        return np.asarray(samples, dtype=np.float64).reshape(-1)

    def running(self) -> bool:
        return self.process.poll() is None

    def stop(self, timeout_s: float = 15.0) -> int:
        """SIGTERM, then wait (SIGKILL after ``timeout_s``); returns the exit status."""
        code = stop_process(self.process, timeout_s)
        self._log.close()
        return code


class RtmidiSender:
    """A python-rtmidi JACK MIDI output ``name:out`` (rtmidi's own C++ client thread sends)."""

    def __init__(self, name: str) -> None:
        import rtmidi

        self.name = name
        self.port = f"{name}:out"
        self.out = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=name)
        self.out.open_virtual_port("out")
        wait_for_ports(f"^{re.escape(self.port)}$", timeout_s=10)
        self.send = self.out.send_message

    def close(self) -> None:
        if self.out is not None:
            self.out.close_port()
            self.out.delete()
            self.out = None
