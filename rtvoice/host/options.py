"""Parsing of host options shared by the command line, the link and the engine process."""

from __future__ import annotations

from rtvoice.host.errors import HostError

MPE_HELP = "lower, upper, lower=N, upper=N or lower=N,upper=M (N member channels, 0-15)"


def parse_mpe(spec: str | None) -> list[tuple[str, int]]:
    """MPE zones from ``--mpe`` as [(zone, member channels)]; [] for none or 'off'.

    A zone without a count gets all 15 member channels (MPE 2018: one zone over all channels).
    """
    if not spec or spec == "off":
        return []
    zones = []
    for part in spec.split(","):
        zone, _, count = part.partition("=")
        zone = zone.strip().lower()
        if zone not in ("lower", "upper"):
            raise HostError(f"--mpe {spec!r}: expected {MPE_HELP}")
        try:
            members = int(count) if count.strip() else 15
        except ValueError:
            raise HostError(f"--mpe {spec!r}: {count!r} is not a number of member channels") from None
        if not 0 <= members <= 15:
            raise HostError(f"--mpe {spec!r}: member channels must be 0..15")
        zones.append((zone, members))
    return zones
