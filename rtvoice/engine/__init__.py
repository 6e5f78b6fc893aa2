"""The engine's front door: everything the rest of rtvoice may use of it.

The engine turns MIDI events into samples from the physics of the string: its settings and
parameter schema (the single source of truth), presets, the controller map, the block
renderer and its output stage, and read-outs of a running engine. Host, offline, survey, UI,
bench and soak import from here; the modules behind it are the engine's own business.
"""

from __future__ import annotations

from rtvoice.engine.controls import ControlMap, check_entries, default_entries
from rtvoice.engine.distances import within_neck
from rtvoice.engine.events import Error, Learned, Values
from rtvoice.engine.instrument import AssignRule, Instrument, Placement, fretted_place, string_and_fret
from rtvoice.engine.midi import NOTE_ON, channel_messages
from rtvoice.engine.notes import NoteModel, initial_amplitudes, note_model, resonance_of, velocity_gain
from rtvoice.engine.output import CEILING, CEILING_DBFS, Limiter, dc_blocker, electronics_filter
from rtvoice.engine.placed_notes import PlacedNote, note_model_at, placed_note
from rtvoice.engine.presets import (
    PresetError,
    PresetFormatNotice,
    PresetInfo,
    PresetWarning,
    list_presets,
    load_preset,
    preset_text,
    read_preset_file,
    write_atomic,
)
from rtvoice.engine.readouts import (
    SoundingPlace,
    VoiceReadout,
    active_voices,
    held_voice,
    loudest_voice_into,
    modes_per_voice,
    pool_token,
    sounding_partials,
    sounding_places,
    sounding_places_into,
    take_placements,
    voice_amplitudes,
)
from rtvoice.engine.renderer import OUTPUT_SCALE, Engine, EngineStats, Event
from rtvoice.engine.schema import MAX_PICKUPS, PARAMS, PICKUP_FIELDS, Param, lookup
from rtvoice.engine.settings import PRESET_FORMAT, Settings, SettingsError, apply_assignments
from rtvoice.engine.stringing import (  # the instrument's strings (issue 17)
    MAX_STRINGS,
    STRING_FIELDS,
    StringEntry,
    inharmonicity_of,
    string_physics_of,
    t60s_of,
)
from rtvoice.engine.units import (
    MM_PER_UNIT,
    NOTE_NAMES,
    allowed_text,
    in_unit,
    note_name,
    parse_length_mm,
    parse_note,
    split_unit,
)
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
    "AssignRule",
    "ControlMap",
    "Engine",
    "EngineStats",
    "Error",
    "Event",
    "Instrument",
    "Learned",
    "Limiter",
    "NoteModel",
    "Param",
    "PlacedNote",
    "Placement",
    "PresetError",
    "PresetInfo",
    "PresetWarning",
    "Settings",
    "SettingsError",
    "SoundingPlace",
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
    "fretted_place",
    "held_voice",
    "in_unit",
    "initial_amplitudes",
    "list_presets",
    "load_preset",
    "lookup",
    "loudest_voice_into",
    "modes_per_voice",
    "note_model",
    "note_model_at",
    "note_name",
    "parse_length_mm",
    "parse_note",
    "placed_note",
    "pool_token",
    "preset_text",
    "read_preset_file",
    "resonance_of",
    "sounding_partials",
    "sounding_places",
    "sounding_places_into",
    "string_and_fret",
    "take_placements",
    "split_unit",
    "velocity_gain",
    "voice_amplitudes",
    "within_neck",
    "write_atomic",
    # the instrument's strings and the preset format's notice (issue 17)
    "MAX_STRINGS",
    "STRING_FIELDS",
    "PresetFormatNotice",
    "StringEntry",
    "inharmonicity_of",
    "string_physics_of",
    "t60s_of",
]
