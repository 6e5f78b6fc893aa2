"""Plain ``rtvoice`` is ``rtvoice play``, options and all (the README says so)."""

from __future__ import annotations

import os
import subprocess
import sys

ENV = {**os.environ, "OPENBLAS_NUM_THREADS": "1", "JACK_NO_START_SERVER": "1"}


def test_plain_rtvoice_takes_plays_options(tmp_path):
    take = tmp_path / "take.wav"
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "--preset", "glass-bridge", "--headless",
                           "--audio-device", "none", "--midi-in", "none", "--duration", "1", "--record", str(take)],
                          capture_output=True, text=True, env=ENV, timeout=120, check=False)
    assert proc.returncode == 0, proc.stderr
    assert "invalid choice" not in proc.stderr and "rtvoice: audio:" in proc.stderr
    assert take.stat().st_size > 44  # a WAV header and samples: the silent clock recorded a second


def test_plain_rtvoice_help_is_still_the_commands_help():
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "--help"], capture_output=True, text=True,
                          env=ENV, timeout=60, check=False)
    assert proc.returncode == 0 and "render" in proc.stdout and "survey" in proc.stdout
