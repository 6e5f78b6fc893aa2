"""The engine's front door: everything the rest of rtvoice may use of it.

The engine turns MIDI events into samples from the physics of the string: its settings and
parameter schema (the single source of truth), presets, the controller map, the block
renderer and its output stage, and read-outs of a running engine. Host, offline, survey, UI,
bench and soak import from here; the modules behind it are the engine's own business.
"""

from __future__ import annotations

from rtvoice.engine.controls import ControlMap, check_entries, default_entries
from rtvoice.engine.notes import NoteModel, initial_amplitudes, note_model, resonance_of, velocity_gain
from rtvoice.engine.output import CEILING, CEILING_DBFS
from rtvoice.engine.readouts import (
    VoiceReadout,
    active_voices,
    held_voice,
    loudest_voice_into,
    modes_per_voice,
    pool_token,
    sounding_partials,
    voice_amplitudes,
)
from rtvoice.engine.renderer import OUTPUT_SCALE, Engine, EngineStats, Event
from rtvoice.engine.settings import PRESET_FORMAT, Settings, SettingsError, apply_assignments

__all__ = [
    "CEILING",
    "CEILING_DBFS",
    "OUTPUT_SCALE",
    "PRESET_FORMAT",
    "ControlMap",
    "Engine",
    "EngineStats",
    "Event",
    "NoteModel",
    "Settings",
    "SettingsError",
    "VoiceReadout",
    "active_voices",
    "apply_assignments",
    "check_entries",
    "default_entries",
    "held_voice",
    "initial_amplitudes",
    "loudest_voice_into",
    "modes_per_voice",
    "note_model",
    "pool_token",
    "resonance_of",
    "sounding_partials",
    "velocity_gain",
    "voice_amplitudes",
]
