"""Sounds the tests start from.

The default sound is a fretted six-string (``instrument.assign = "hand"``): at most six notes at
once, each on a string at a fret, with the pluck and the pickups short of the last fret. Checks of
the open-string model itself (a pickup at any fraction of a note's own length, chords of dozens of
notes, notes below the lowest string) start from :func:`open_strings`, which keeps everything of
the default sound but plays every note as an open string of its own.
"""

from __future__ import annotations

from rtvoice.engine import Settings


def open_strings(settings: Settings | None = None) -> Settings:
    """``settings`` (the default sound when None) with every note an open string of its own."""
    return (settings or Settings.defaults()).with_values({"instrument.assign": "open"}, "tests")
