"""The engine's front door: everything the rest of rtvoice may use of it.

The engine turns MIDI events into samples from the physics of the string: its settings and
parameter schema (the single source of truth), presets, the controller map, the block
renderer and its output stage, and read-outs of a running engine. Host, offline, survey, UI,
bench and soak import from here; the modules behind it are the engine's own business.
"""

from __future__ import annotations

from rtvoice.engine.controls import ControlMap, check_entries, default_entries
from rtvoice.engine.events import Error, Learned, Values
from rtvoice.engine.midi import NOTE_ON, channel_messages
from rtvoice.engine.notes import NoteModel, initial_amplitudes, note_model, resonance_of, velocity_gain
from rtvoice.engine.output import CEILING, CEILING_DBFS, Limiter, dc_blocker, electronics_filter
from rtvoice.engine.presets import (
    PresetError,
    PresetInfo,
    PresetWarning,
    list_presets,
    load_preset,
    preset_text,
    read_preset_file,
    write_atomic,
)
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
from rtvoice.engine.schema import MAX_PICKUPS, PARAMS, PICKUP_FIELDS, Param, lookup
from rtvoice.engine.settings import PRESET_FORMAT, Settings, SettingsError, apply_assignments
from rtvoice.engine.units import MM_PER_UNIT, NOTE_NAMES, allowed_text, in_unit, note_name, parse_note, split_unit
from rtvoice.engine.voices import block_split

__all__ = [
    "CEILING",
    "CEILING_DBFS",
    "MAX_PICKUPS",
    "MM_PER_UNIT",
    "NOTE_NAMES",
    "NOTE_ON",
    "OUTPUT_SCALE",
    "PARAMS",
    "PICKUP_FIELDS",
    "PRESET_FORMAT",
    "ControlMap",
    "Engine",
    "EngineStats",
    "Error",
    "Event",
    "Learned",
    "Limiter",
    "NoteModel",
    "Param",
    "PresetError",
    "PresetInfo",
    "PresetWarning",
    "Settings",
    "SettingsError",
    "Values",
    "VoiceReadout",
    "active_voices",
    "allowed_text",
    "apply_assignments",
    "block_split",
    "channel_messages",
    "check_entries",
    "dc_blocker",
    "default_entries",
    "electronics_filter",
    "held_voice",
    "in_unit",
    "initial_amplitudes",
    "list_presets",
    "load_preset",
    "lookup",
    "loudest_voice_into",
    "modes_per_voice",
    "note_model",
    "note_name",
    "parse_note",
    "pool_token",
    "preset_text",
    "read_preset_file",
    "resonance_of",
    "sounding_partials",
    "split_unit",
    "velocity_gain",
    "voice_amplitudes",
    "write_atomic",
]
