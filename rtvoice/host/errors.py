"""Errors of the real-time host that a user can cause or fix (device names, ports)."""


class HostError(RuntimeError):
    """The host cannot start or run as asked; the message says why and what to do."""
