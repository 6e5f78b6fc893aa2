"""The JACK server seen through its command-line tools: queries, ports, connections, waiting.

The helpers run ``jack_lsp``, ``jack_connect``, ``jack_disconnect``, ``jack_samplerate`` and
``jack_bufsize`` in subprocesses, so a test never shares the JACK client of the code under test.
Every tool runs with :data:`JACK_ENV` (``JACK_NO_START_SERVER=1``): a helper must fail, not start
a server of its own. A test that runs a server of its own points every helper at it by setting
``JACK_DEFAULT_SERVER`` in :data:`JACK_ENV` (``monkeypatch.setitem``); the other support modules
use this same dictionary.

Typical use::

    from support.jack_server import connect, wait_for_ports  # tests/ is on sys.path under pytest

    ports = wait_for_ports(r"^rtvoice:out", count=2, timeout_s=5.0)
"""

from __future__ import annotations

import os
import re
import subprocess
import time
from dataclasses import dataclass
from typing import Literal

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
