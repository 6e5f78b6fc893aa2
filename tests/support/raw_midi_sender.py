"""The raw MIDI sender's subprocess: one JACK client, one MIDI output, events as hex lines on stdin.

Run by :class:`support.midi_senders.RawMidiSender` as ``python raw_midi_sender.py CLIENT_NAME``
(by path, so it needs nothing on ``sys.path``: it imports the standard library only). It talks
to libjack through ctypes; its process callback writes the queued events at the start of the
next period, so a busy test process cannot delay them.

The protocol, one line each way:

- it prints ``waiting``; ``open`` opens the client and it prints ``ready MAX_EVENT_BYTES``
  (anything else ends it before opening a client);
- a line of hex digits is one JACK MIDI event holding exactly those bytes;
- ``sync N`` prints ``done N TOO_BIG`` once every event before it was written (TOO_BIG counts
  events larger than a period's buffer, skipped);
- ``quit`` closes the client and prints ``closed``.
"""

from __future__ import annotations

import collections
import ctypes
import ctypes.util
import sys
import threading
import time

#: The JACK MIDI port type (jack/types.h JACK_DEFAULT_MIDI_TYPE).
MIDI_PORT_TYPE = b"8 bit raw midi"


def main(name: str) -> int:
    """The sender subprocess: one JACK client, one MIDI output, events as hex lines on stdin."""
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
    if len(sys.argv) != 2:
        sys.exit(f"usage: {sys.argv[0]} CLIENT_NAME")
    sys.exit(main(sys.argv[1]))
