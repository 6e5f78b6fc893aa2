"""Support code for the tests (no tests here), one module per concern.

``tests/`` is on ``sys.path`` under pytest (its rootdir conftest and the test modules live there
without an ``__init__.py``), so a test imports ``from support.jack_server import ...``.

- :mod:`support.jack_server`: the JACK server through its command-line tools (queries, ports,
  connections, waiting for ports).
- :mod:`support.capture`: recording JACK ports with ``jack_capture``.
- :mod:`support.midi_senders`: JACK MIDI sources (python-rtmidi, and a raw libjack client run
  from :mod:`support.raw_midi_sender` in a subprocess).
- :mod:`support.headless_host`: ``rtvoice play --headless`` as a subprocess, and its status line.
- :mod:`support.ui`: driving the Textual app against a real engine link.
- :mod:`support.describe`: failure messages that say what an array held.
- :mod:`support.sounds`: the sounds tests start from (the default six-string, or open strings).

Nothing here is imported by rtvoice itself.
"""
