"""The one base of every error a user can cause; the command line reports it in one line, exit 2.

An error keeps what went wrong as fields (where the input came from, the key, the
value, what is allowed, a close name the user may have meant) and composes its
one-line message from them, so a caller that needs one of them reads the field
instead of taking the text apart. This module imports nothing of the project: every
layer may derive its errors from :class:`UserError`.
"""

from __future__ import annotations

from enum import Enum
from typing import Any

MAX_SHOWN_VALUE = 60  # characters of a value's repr in a message
MAX_SHOWN_KEY = 80


class Unset(Enum):
    """No value given (None and '' are values a user can type)."""

    VALUE = 0


NO_VALUE = Unset.VALUE  # an enum member: the same object after pickling, so ``is NO_VALUE`` holds


class UserError(Exception):
    """Bad input (or a device the user must fix), never a bug.

    Fields, each optional but ``reason``: ``source`` (a file, an option such as
    ``--set``), ``key`` (the name inside it), ``value`` (what was refused),
    ``allowed`` (what would be taken, in words), ``suggestion`` (a close valid
    name). The message reads ``SOURCE: KEY = VALUE: REASON (allowed: ALLOWED)
    (did you mean SUGGESTION?)``, each part only when its field is set (the value
    only beside a key).
    """

    def __init__(self, reason: str, *, source: str = "", key: str = "", value: Any = NO_VALUE,
                 allowed: str = "", suggestion: str = ""):
        self.reason, self.source, self.key, self.value = reason, source, key, value
        self.allowed, self.suggestion = allowed, suggestion
        super().__init__(self._message())  # args[0] is the message, as for any exception

    def __str__(self) -> str:
        return self._message()

    def _message(self) -> str:
        text = f"{self.source}: " if self.source else ""
        if self.key:
            # Keys may come from a file: a quoted TOML key may hold a newline, and messages are one line.
            key = self.key if self.key.isprintable() else repr(self.key)[1:-1]
            key = key if len(key) <= MAX_SHOWN_KEY else key[:MAX_SHOWN_KEY - 3] + "..."
            text += f"{key}: " if self.value is NO_VALUE else f"{key} = {shown_value(self.value)}: "
        text += self.reason
        if self.allowed:
            text += f" (allowed: {self.allowed})"
        if self.suggestion:
            text += f" (did you mean {self.suggestion}?)"
        return text

    def __reduce__(self):
        # The default rebuilds from args (the message), which the keyword-only fields cannot take:
        # keep the fields as they are, so an error can cross a process boundary.
        return _rebuild, (type(self), self.args, dict(self.__dict__))


def _rebuild(cls: type[UserError], args: tuple, state: dict) -> UserError:
    err = cls.__new__(cls, *args)
    err.args = args
    err.__dict__.update(state)
    return err


def shown_value(value: Any) -> str:
    """``repr(value)``, cut to :data:`MAX_SHOWN_VALUE` characters for a one-line message."""
    shown = repr(value)
    return shown if len(shown) <= MAX_SHOWN_VALUE else shown[:MAX_SHOWN_VALUE - 3] + "..."
