"""The real-time host: the engine in its own process, audio out, MIDI in, meters.

The UI (or the headless runner) talks to the engine through :class:`EngineLink`:
commands go over a pipe, what the UI shows comes back through shared memory.
"""

from rtvoice.host.errors import HostError
from rtvoice.host.link import EngineLink, Snapshot

__all__ = ["EngineLink", "HostError", "Snapshot"]
