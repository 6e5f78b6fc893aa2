"""Offline rendering: Standard MIDI Files and single notes to WAV files."""
