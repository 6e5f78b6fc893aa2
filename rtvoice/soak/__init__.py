"""Soak runs: long random MIDI offline (fast) and in real time under JACK.

``python -m rtvoice.soak`` (or ``scripts/soak``) runs the long variant; tests/test_soak.py
runs a short one. Offline: :func:`rtvoice.soak.offline.run_offline`; real time:
:func:`rtvoice.soak.realtime.run_realtime`. Layer: imports engine, offline and host
parts only; nothing imports it.
"""
