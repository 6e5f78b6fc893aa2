"""Keep the CPUs' wake-up from idle short while the engine plays (Linux PM QoS).

A CPU that halts between audio callbacks comes back slowly and with cold caches. On
the two-CPU virtual machine the project is built on, a block of 32 ringing voices paced
to the 128-frame period took a median 264 us (p99 973) with the CPU halting between
blocks and 150 us (p99 613) with idle CPUs polling, a block carrying a re-pluck 758 us
(p99 1556) against 565 (p99 1081): one process, the two taken in turns; back to back,
without the gaps, such blocks take about 80 and 400 us.

The kernel's CPU latency request does the polling (Linux, Documentation/power/
pm_qos_interface.rst): a process writes the wake-up latency it tolerates, in
microseconds, to ``/dev/cpu_dma_latency`` as a 32-bit integer and keeps the file open;
while any such file is open the idle CPUs only take states that wake within the least
value asked (0: they poll). Closing the file, or the process ending, withdraws it. It
costs power: idle CPUs stay awake while rtvoice plays. ``RTVOICE_CPU_WAKEUP_US`` sets
the value asked (default 0), ``off`` asks nothing. Writing the file needs root or a
group given access to it; without, the host plays as before and says so.
"""

from __future__ import annotations

import os
import struct

DEVICE = "/dev/cpu_dma_latency"
ENV = "RTVOICE_CPU_WAKEUP_US"
DEFAULT_US = 0


def wanted_us(text: str | None) -> int | None:
    """The latency to ask for from the environment's ``text`` (None: ask nothing).

    Raises ValueError for anything but ``off`` or a whole number of microseconds >= 0.
    """
    if text is None or text.strip() == "":
        return DEFAULT_US
    if text.strip().lower() in ("off", "none", "no"):
        return None
    value = int(text)
    if value < 0:
        raise ValueError(f"{ENV} must be off or microseconds >= 0, not {text!r}")
    return value


def request(latency_us: int | None, device: str = DEVICE) -> tuple[int | None, str]:
    """Ask for CPU wake-ups within ``latency_us``; (open file descriptor or None, what happened).

    Keep the descriptor open for as long as the request should stand (:func:`release`).
    """
    if latency_us is None:
        return None, "not asked (off)"
    try:
        fd = os.open(device, os.O_WRONLY)
    except OSError as err:
        return None, f"not available ({device}: {err.strerror})"
    try:
        os.write(fd, struct.pack("i", latency_us))
    except OSError as err:
        os.close(fd)
        return None, f"refused ({device}: {err.strerror})"
    return fd, f"CPU wake-up held within {latency_us} us while playing"


def request_from_environment() -> tuple[int | None, str]:
    """:func:`request` with the value :data:`ENV` asks for; a value it cannot read is said in the
    text and the default asked instead."""
    try:
        return request(wanted_us(os.environ.get(ENV)))
    except ValueError as err:
        fd, text = request(DEFAULT_US)
        return fd, f"{text} ({err}; asked for the default)"


def release(fd: int | None) -> None:
    """Withdraw a request made by :func:`request`."""
    if fd is not None:
        try:
            os.close(fd)
        except OSError:
            pass


def current_us(device: str = DEVICE) -> int:
    """The latency the kernel now holds the CPUs to (the least of all requests; about 2e9 when none)."""
    fd = os.open(device, os.O_RDONLY)
    try:
        return struct.unpack("i", os.read(fd, 4))[0]
    finally:
        os.close(fd)
