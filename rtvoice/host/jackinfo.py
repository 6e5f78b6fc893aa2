"""A few facts from the JACK server, read through libjack with ctypes.

Used to tell hardware MIDI inputs (physical ports) from other programs' ports, and
to list ports for ``rtvoice devices``. The client opened here is never activated,
so it adds no work to the server's cycle. Everything returns empty when libjack or
the server is missing.
"""

from __future__ import annotations

import ctypes
import ctypes.util
from typing import Literal

JACK_NO_START_SERVER = 0x01
PORT_IS_INPUT, PORT_IS_OUTPUT, PORT_IS_PHYSICAL = 0x1, 0x2, 0x4
MIDI_TYPE = b"8 bit raw midi"
AUDIO_TYPE = b"32 bit float mono audio"

_lib: ctypes.CDLL | Literal[False] | None = None  # False: libjack cannot load (not tried again)
_client: int | None = None  # a jack_client_t pointer
_silence: object = None  # the error/info callback handed to libjack, kept alive here


def _load() -> ctypes.CDLL | None:
    global _lib, _silence
    if _lib is None:
        name = ctypes.util.find_library("jack") or "libjack.so.0"
        try:
            lib = ctypes.CDLL(name)
        except OSError:
            _lib = False
            return None
        lib.jack_client_open.restype = ctypes.c_void_p
        lib.jack_client_open.argtypes = [ctypes.c_char_p, ctypes.c_int, ctypes.c_void_p]
        lib.jack_get_ports.restype = ctypes.POINTER(ctypes.c_char_p)
        lib.jack_get_ports.argtypes = [ctypes.c_void_p, ctypes.c_char_p, ctypes.c_char_p, ctypes.c_ulong]
        lib.jack_free.argtypes = [ctypes.c_void_p]
        lib.jack_client_close.argtypes = [ctypes.c_void_p]
        lib.jack_get_sample_rate.argtypes = [ctypes.c_void_p]
        lib.jack_get_buffer_size.argtypes = [ctypes.c_void_p]
        lib.jack_port_by_name.restype = ctypes.c_void_p
        lib.jack_port_by_name.argtypes = [ctypes.c_void_p, ctypes.c_char_p]
        lib.jack_connect.argtypes = [ctypes.c_void_p, ctypes.c_char_p, ctypes.c_char_p]
        lib.jack_port_get_all_connections.restype = ctypes.POINTER(ctypes.c_char_p)
        lib.jack_port_get_all_connections.argtypes = [ctypes.c_void_p, ctypes.c_void_p]
        callback = ctypes.CFUNCTYPE(None, ctypes.c_char_p)
        _silence = callback(lambda _msg: None)  # keep a reference: libjack holds the pointer
        lib.jack_set_error_function(_silence)
        lib.jack_set_info_function(_silence)
        _lib = lib
    return _lib or None


def _connect(name: bytes = b"rtvoice-info") -> int | None:
    global _client
    lib = _load()
    if lib is None:
        return None
    if _client is None:
        _client = lib.jack_client_open(name, JACK_NO_START_SERVER, None) or None
    return _client


def server_running() -> bool:
    """True when a JACK server answers (the default one, or $JACK_DEFAULT_SERVER)."""
    return _connect() is not None


def server_format() -> tuple[int, int] | None:
    """(sample rate Hz, period frames) of the running server, or None."""
    client, lib = _connect(), _load()
    if client is None or lib is None:
        return None
    return int(lib.jack_get_sample_rate(client)), int(lib.jack_get_buffer_size(client))


def ports(kind: bytes = MIDI_TYPE, flags: int = 0, pattern: str | None = None) -> list[str]:
    """Full names of the ports of ``kind`` having all ``flags`` (e.g. PORT_IS_OUTPUT | PORT_IS_PHYSICAL)."""
    client, lib = _connect(), _load()
    if client is None or lib is None:
        return []
    return _names(lib, lib.jack_get_ports(client, pattern.encode() if pattern else None, kind, flags))


def connections(name: str) -> list[str] | None:
    """Full names of the ports connected to the port ``name``; None when there is no such port
    (or no server). A port that went away and came back under the same name has lost them."""
    client, lib = _connect(), _load()
    if client is None or lib is None:
        return None
    port = lib.jack_port_by_name(client, name.encode())
    if not port:
        return None
    return _names(lib, lib.jack_port_get_all_connections(client, port))


def connect(source: str, destination: str) -> bool:
    """Connect two ports by full name; True when they are connected (now or already)."""
    client, lib = _connect(), _load()
    if client is None or lib is None:
        return False
    lib.jack_connect(client, source.encode(), destination.encode())  # EEXIST when already connected
    return source in (connections(destination) or [])


def _names(lib: ctypes.CDLL, arr: ctypes._Pointer[ctypes.c_char_p]) -> list[str]:
    """The strings of a NULL-terminated array that libjack allocated (a NULL pointer: none); frees it."""
    if not arr:
        return []
    names = []
    i = 0
    while arr[i]:
        names.append(arr[i].decode("utf-8", "replace"))
        i += 1
    lib.jack_free(arr)
    return names


def disconnect() -> None:
    """Close the information client (so the server can stop without us)."""
    global _client
    if _client is not None and _lib:
        _lib.jack_client_close(_client)
    _client = None


def forget() -> None:
    """Drop the information client without closing it (its server is gone; closing could wait on it)."""
    global _client
    _client = None
