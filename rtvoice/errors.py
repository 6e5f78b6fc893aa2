"""The errors a user can cause, which the command line reports in one line."""

from rtvoice.engine.presets import PresetError
from rtvoice.engine.settings import SettingsError
from rtvoice.offline.midifile import MidiFileError

#: Every exception that means "bad input", never a bug.
UserError = (PresetError, SettingsError, MidiFileError)
