"""The errors a user can cause, which the command line reports in one line."""

from rtvoice.engine.presets import PresetError
from rtvoice.engine.settings import SettingsError
from rtvoice.host.errors import HostError
from rtvoice.offline.midifile import MidiFileError

#: Every exception that means "bad input" (or a device the user must fix), never a bug.
UserError = (PresetError, SettingsError, MidiFileError, HostError)
