"""The machine's own xruns: a PortAudio client whose callback only writes silence.

Run as ``python -m rtvoice.bench.idle_client SECONDS [BLOCK]`` against a JACK server
(``JACK_DEFAULT_SERVER`` names it): it opens the ``system`` output the way the host
does (float32, fixed block, low latency, SCHED_FIFO for the callback thread where
allowed, the same CPU wake-up request as :mod:`rtvoice.host.cpu_wakeup`) and prints
one JSON line: ``{"seconds", "blocks", "xruns"}``. The xruns it counts are the
server's and the machine's, since its own callback does almost nothing; the benchmark
takes it in turns with the host so each is read against this floor.
"""

from __future__ import annotations

import json
import sys
import time

from rtvoice.host import cpu_wakeup
from rtvoice.host.audio import PortAudioOutput, find_device, load_sounddevice, request_realtime_priority
from rtvoice.host.errors import HostError

REALTIME_PRIORITY = 70  # the host's callback asks for the same


class _Silence:
    def __init__(self):
        self.blocks = 0
        self.xruns = 0
        self._asked = False

    def __call__(self, out, frames: int, underflow: bool) -> None:
        if not self._asked:
            self._asked = True
            request_realtime_priority(REALTIME_PRIORITY)
        out.fill(0.0)
        self.blocks += 1
        self.xruns += underflow


def run(seconds: float, block: int = 128, rate: int = 48000) -> dict:
    sd, reason = load_sounddevice("rtvbench-idle")
    if sd is None:
        raise RuntimeError(reason)
    silence = _Silence()
    device = find_device(sd, "system")  # a name given: a dict, or HostError when none or several match
    if device is None:
        raise RuntimeError("no audio output device named 'system'")
    output = PortAudioOutput(sd, device, rate, block, silence)
    fd, _ = cpu_wakeup.request_from_environment()
    output.start()
    start = time.monotonic()
    try:
        time.sleep(seconds)
    finally:
        output.stop()
        cpu_wakeup.release(fd)
    return {"seconds": round(time.monotonic() - start, 2), "blocks": silence.blocks, "xruns": silence.xruns}


def main(argv: list[str]) -> int:
    try:
        seconds = float(argv[0]) if argv else 10.0
        block = int(argv[1]) if len(argv) > 1 else 128
        if seconds <= 0 or block <= 0:
            raise ValueError
    except ValueError:
        print(f"usage: python -m rtvoice.bench.idle_client SECONDS [BLOCK] (positive numbers), not {argv}",
              file=sys.stderr)
        return 2
    try:
        print(json.dumps(run(seconds, block)))
    except (RuntimeError, OSError, HostError) as err:
        print(f"idle client: {err}", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
