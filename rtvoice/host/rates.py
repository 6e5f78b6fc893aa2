"""Which sample rate the host plays at: the one asked for, else the output's own.

An audio server runs at one rate for every client (a JACK server at 44.1 kHz takes
no stream at 48 kHz), and the engine renders at any rate; so unless ``--rate`` is
given, the host follows the server's or the device's rate. The silent clock, and
an output that cannot be asked, run at :data:`DEFAULT_RATE_HZ`.
"""

from __future__ import annotations

from dataclasses import dataclass

from rtvoice.host import jackinfo

DEFAULT_RATE_HZ = 48000


@dataclass(frozen=True)
class RateChoice:
    """The rate to play at and why (shown at start-up, in the UI and headless)."""

    rate_hz: int
    reason: str
    server_period_frames: int = 0  # the JACK server's period, when the output is on JACK


def choose_rate(asked_hz: int | None, device: dict | None) -> RateChoice:
    """The rate for an output ``device`` (a dict from :func:`rtvoice.host.audio.find_device`, or None
    for the silent clock) when ``asked_hz`` (``--rate``) is None, else ``asked_hz``."""
    jack = device is not None and "JACK" in str(device.get("hostapi_name", ""))
    fmt = jackinfo.server_format() if jack else None
    period = fmt[1] if fmt else 0
    if asked_hz is not None:
        return RateChoice(int(asked_hz), f"{int(asked_hz)} Hz as asked (--rate)", period)
    if device is None:
        return RateChoice(DEFAULT_RATE_HZ, f"{DEFAULT_RATE_HZ} Hz (silent clock)")
    if fmt:
        return RateChoice(fmt[0], f"{fmt[0]} Hz, the JACK server's rate", period)
    own = device.get("default_samplerate")
    if own and own > 0:
        return RateChoice(int(round(own)), f"{int(round(own))} Hz, the device's own rate")
    return RateChoice(DEFAULT_RATE_HZ, f"{DEFAULT_RATE_HZ} Hz (the device names no rate of its own)")


def block_note(block_frames: int, period_frames: int, rate_hz: int) -> str | None:
    """What to say when the engine's block differs from the server's period, else None."""
    if not period_frames or period_frames == block_frames:
        return None
    return (f"--block {block_frames} differs from the JACK server's {period_frames}-frame period: the engine renders "
            f"{block_frames}-frame blocks and PortAudio buffers between the two "
            f"({1000 * block_frames / rate_hz:.1f} ms blocks on {1000 * period_frames / rate_hz:.1f} ms periods)")


@dataclass(frozen=True)
class Latency:
    """From a MIDI message's arrival to its sound at the output, in parts (milliseconds).

    ``engine_ms``: the engine places each event on its sample one block after it arrived
    (so events keep their timing inside a block); ``output_ms``: what the audio stream
    reports (PortAudio's output latency, which holds the server's period and buffering);
    ``lookahead_ms``: the limiter's look-ahead, when it has one."""

    engine_ms: float
    output_ms: float
    lookahead_ms: float = 0.0

    @property
    def total_ms(self) -> float:
        return self.engine_ms + self.output_ms + self.lookahead_ms

    def text(self) -> str:
        parts = f"block {self.engine_ms:.1f} + output {self.output_ms:.1f}"
        if self.lookahead_ms:
            parts += f" + limiter {self.lookahead_ms:.1f}"
        return f"MIDI to sound {self.total_ms:.1f} ms ({parts} ms)"
