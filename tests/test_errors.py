"""Every error a user can cause derives from one base, carries its facts as fields, and reaches the
command line as one line with exit status 2.

The classes are found by importing every module of the real package, so an error class added
later is checked without editing this file. The failures are real: real files on disk, the real
``--set`` parser, the real survey grid parser, a real (unstarted) engine link, the real command
line. Exit status 2 for bad input is common practice (argparse and POSIX utilities, e.g. the
"EXIT STATUS" of grep(1)).
"""

from __future__ import annotations

import importlib
import inspect
import os
import pickle
import subprocess
import sys
from pathlib import Path

import pytest

import rtvoice
from rtvoice.cli import main
from rtvoice.engine.presets import PresetError, read_preset_file
from rtvoice.engine.schema import UnknownParameter, lookup
from rtvoice.engine.settings import Settings, SettingsError, apply_assignments
from rtvoice.errors import NO_VALUE, UserError
from rtvoice.host.errors import HostError, MidiMessageError
from rtvoice.host.link import EngineLink
from rtvoice.offline.files import RenderError
from rtvoice.offline.midifile import MidiFileError, read_midi_events
from rtvoice.survey.inputs import SurveyError, parse_grid
from rtvoice.ui.sync import EngineView

PACKAGE_DIR = Path(rtvoice.__file__).parent
SCALE_MM = 648.0  # the schema's default scale length
#: The errors the command line is known to report; the walk below must find at least these.
KNOWN = {SettingsError, PresetError, MidiFileError, RenderError, SurveyError, HostError, MidiMessageError,
         UnknownParameter}

# A Standard MIDI File header chunk: "MThd", length 6, format, number of tracks, division
# (Standard MIDI Files 1.0, MIDI Manufacturers Association, 1996, "Header Chunks"). Format 2
# (independent sequences) is one rtvoice refuses; nothing after the header is read.
TYPE_2_HEADER = b"MThd" + (6).to_bytes(4, "big") + (2).to_bytes(2, "big") + (1).to_bytes(2, "big") \
    + (96).to_bytes(2, "big")


def project_exceptions() -> set[type[BaseException]]:
    """Every exception class defined in rtvoice, from every module of the package.

    The modules are found on disk, not with pkgutil's walk: ``rtvoice/engine`` is a namespace
    package (no ``__init__.py``) and pkgutil does not descend into those.
    """
    found = set()
    for path in sorted(PACKAGE_DIR.rglob("*.py")):
        parts = path.relative_to(PACKAGE_DIR.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        module = importlib.import_module(name)
        for _, cls in inspect.getmembers(module, inspect.isclass):
            if issubclass(cls, BaseException) and cls.__module__.split(".")[0] == "rtvoice":
                found.add(cls)
    return found


def public_errors() -> set[type[BaseException]]:
    # Warnings are not errors; a private class (midifile's _Bad) never leaves its module, which turns it
    # into the module's public error.
    return {c for c in project_exceptions() if not issubclass(c, Warning) and not c.__name__.startswith("_")}


def test_every_user_facing_error_derives_from_user_error_directly_and_from_no_other_project_error():
    errors = public_errors()
    assert errors >= KNOWN, f"the walk missed {KNOWN - errors}"
    for cls in errors - {UserError}:
        assert issubclass(cls, UserError), f"{cls.__module__}.{cls.__name__} is not a UserError"
        assert UserError in cls.__bases__, f"{cls.__name__} reaches UserError through {cls.__bases__}"
        project = {c for c in cls.__mro__ if c.__module__.split(".")[0] == "rtvoice"}
        assert project == {cls, UserError}, f"{cls.__name__} also derives from {project - {cls, UserError}}"


# -- the fields of real failures ----------------------------------------------------------


def test_a_bad_set_value_names_source_key_value_and_what_is_allowed():
    with pytest.raises(SettingsError) as info:
        apply_assignments(Settings.defaults(), ["pickup.0.position=1.5"])
    err = info.value
    assert (err.source, err.key, err.value, err.allowed) == ("--set", "pickup.0.position", 1.5, "0.005 .. 0.995")
    assert err.reason == "1.5 is out of range [0.005, 0.995]"
    # The message users have seen so far, word for word, composed from those fields.
    assert str(err) == "--set: pickup.0.position = 1.5: 1.5 is out of range [0.005, 0.995] (allowed: 0.005 .. 0.995)"
    assert isinstance(err, ValueError)  # callers that catch ValueError still catch it


def test_a_mistyped_name_carries_the_suggestion_as_a_field():
    with pytest.raises(UnknownParameter) as info:
        lookup("string.inharmonicty")
    err = info.value
    assert (err.name, err.suggestion) == ("string.inharmonicty", "string.inharmonicity")
    assert isinstance(err, KeyError)  # code that looks names up and catches KeyError still works
    assert str(err) == "unknown parameter 'string.inharmonicty' (did you mean string.inharmonicity?)"

    with pytest.raises(SettingsError) as info:
        apply_assignments(Settings.defaults(), ["string.inharmonicty=0.001"])
    err = info.value
    # The name is refused before the value is read: the value is the text as typed.
    assert (err.key, err.value, err.suggestion) == ("string.inharmonicty", "0.001", "string.inharmonicity")
    assert err.reason == "unknown parameter 'string.inharmonicty'"

    with pytest.raises(UnknownParameter) as info:
        lookup("pickup.9.position")  # the schema allows 4 pickups
    assert info.value.reason == "at most 4 pickups (index 0..3)" and info.value.name == "pickup.9.position"
    assert str(info.value).startswith("pickup.9.position: at most 4 pickups")


def test_a_bad_preset_file_names_the_file(tmp_path):
    empty = tmp_path / "empty.toml"
    empty.write_bytes(b"")
    with pytest.raises(PresetError) as info:
        read_preset_file(empty)
    assert (info.value.source, info.value.reason) == (str(empty), "empty file")
    assert str(info.value) == f"{empty}: empty file"

    bad_value = tmp_path / "bad.toml"
    bad_value.write_text("[string]\nt60_low = -3\n")
    with pytest.raises(SettingsError) as info:
        read_preset_file(bad_value)
    err = info.value
    assert (err.source, err.key, err.value, err.allowed) == (str(bad_value), "string.t60_low", -3, "0.05 .. 60 s")


def test_a_bad_midi_file_names_the_file(tmp_path):
    garbage = tmp_path / "garbage.mid"
    garbage.write_bytes(b"RIFF\x00\x00\x00\x00WAVE")
    with pytest.raises(MidiFileError) as info:
        read_midi_events(garbage)
    assert info.value.source == str(garbage)
    assert info.value.reason.startswith("not a readable Standard MIDI File: ")

    type_2 = tmp_path / "type2.mid"
    type_2.write_bytes(TYPE_2_HEADER)
    with pytest.raises(MidiFileError) as info:
        read_midi_events(type_2)
    assert info.value.source == str(type_2) and "type 2" in info.value.reason
    assert str(info.value) == f"{type_2}: type 2 MIDI files (independent sequences) are not supported"


def test_a_bad_survey_grid_names_the_option_and_the_grid():
    with pytest.raises(SurveyError) as info:
        parse_grid("0.3:0.1:0.01", "pickup", SCALE_MM)
    err = info.value
    assert (err.key, err.value, err.reason) == ("--pickup", "0.3:0.1:0.01", "empty grid: STOP is below START")
    assert str(err) == "--pickup = '0.3:0.1:0.01': empty grid: STOP is below START"


# MIDI data bytes are 0..127 and channel-voice status bytes 0x80..0xEF, 16 channels (MIDI 1.0 Detailed
# Specification, MIDI Manufacturers Association, 1996, "Channel Voice Messages").
@pytest.mark.parametrize(("call", "what", "value", "allowed"), [
    (lambda link: link.send_midi(0x90, 200, 64), "data1", 200, "whole numbers 0..127"),
    (lambda link: link.send_midi(0x90, 60, -1), "data2", -1, "whole numbers 0..127"),
    (lambda link: link.send_midi(0xF0, 60, 64), "status", 0xF0, "0x80..0xEF"),
    (lambda link: link.send_midi(0x7F, 60, 64), "status", 0x7F, "0x80..0xEF"),
    (lambda link: link.note_on(128), "note", 128, "whole numbers 0..127"),
    (lambda link: link.note_on(60, 100, channel=16), "channel", 16, "0..15, MIDI channels 1-16"),
    (lambda link: link.note_off(60, channel=True), "channel", True, "0..15, MIDI channels 1-16"),
])
def test_a_bad_midi_byte_is_refused_before_the_engine_is_needed(call, what, value, allowed):
    link = EngineLink(Settings.defaults())  # never started: the check needs no engine process
    with pytest.raises(MidiMessageError) as info:
        call(link)
    err = info.value
    assert (err.what, err.key, err.value, err.allowed) == (what, what, value, allowed)
    assert not isinstance(err, SettingsError)
    assert not link.alive()


def test_the_ui_reports_a_bad_midi_byte_instead_of_raising():
    said: list[str] = []
    view = EngineView(EngineLink(Settings.defaults()))
    assert view.note_on(200, 100, said.append) is False
    assert said == ["note = 200: not a MIDI data byte (allowed: whole numbers 0..127)"]


def test_the_fields_survive_a_trip_between_processes():
    """Errors may cross a process boundary (pickled); the fields and the message come back as they were."""
    with pytest.raises(SettingsError) as info:
        apply_assignments(Settings.defaults(), ["string.inharmonicty=0.001"])
    back = pickle.loads(pickle.dumps(info.value))
    assert type(back) is SettingsError and str(back) == str(info.value)
    assert (back.key, back.value, back.suggestion, back.source) == \
        ("string.inharmonicty", "0.001", "string.inharmonicity", "--set")
    plain = pickle.loads(pickle.dumps(PresetError("empty file", source="x.toml")))
    assert plain.value is NO_VALUE and str(plain) == "x.toml: empty file"


# -- the command line: one line, exit 2, nothing written -------------------------------------


def _files(folder: Path) -> list[Path]:
    return sorted(p for p in folder.rglob("*") if p.is_file())


@pytest.fixture
def bad_inputs(tmp_path) -> dict[str, Path]:
    folder = tmp_path / "inputs"
    folder.mkdir()
    (folder / "bad.toml").write_text("[string]\nt60_low = -3\n")
    (folder / "empty.toml").write_bytes(b"")
    (folder / "garbage.mid").write_bytes(b"RIFF\x00\x00\x00\x00WAVE")
    (folder / "type2.mid").write_bytes(TYPE_2_HEADER)
    return {p.name.replace(".", "_"): p for p in folder.iterdir()}


CLI_CASES = {
    "bad --set value": (["render", "--note", "60", "--seconds", "0.1", "-o", "{out}.wav", "--set",
                         "pickup.0.position=1.5"], "--set: pickup.0.position = 1.5: 1.5 is out of range"),
    "mistyped --set name": (["render", "--note", "60", "-o", "{out}.wav", "--set", "string.inharmonicty=0.001"],
                            "(did you mean string.inharmonicity?)"),
    "bad value in a preset file": (["render", "--note", "60", "-o", "{out}.wav", "--preset", "{bad_toml}"],
                                   "string.t60_low = -3: "),
    "empty preset file": (["presets", "show", "{empty_toml}"], "empty.toml: empty file"),
    "unreadable MIDI file": (["render", "{garbage_mid}", "-o", "{out}.wav"], "not a readable Standard MIDI File"),
    "type 2 MIDI file": (["render", "{type2_mid}", "-o", "{out}.wav"], "type 2 MIDI files"),
    "empty survey grid": (["survey", "--note", "60", "--pickup", "0.3:0.1:0.01", "-o", "{out}.csv"],
                          "--pickup = '0.3:0.1:0.01': empty grid: STOP is below START"),
}


def _argv(template: list[str], inputs: dict[str, Path], out: Path) -> list[str]:
    fill = {name: str(path) for name, path in inputs.items()} | {"out": str(out)}
    return [t.format(**fill) for t in template]


@pytest.mark.parametrize("case", list(CLI_CASES))
def test_the_command_line_prints_one_line_and_exits_2(case, bad_inputs, tmp_path, capsys):
    template, needle = CLI_CASES[case]
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    argv = _argv(template, bad_inputs, out_dir / "result")
    code = main(argv)
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert code == 2, captured
    assert len(lines) == 1 and lines[0].startswith(f"rtvoice {argv[0]}: error: ") and needle in lines[0], captured
    assert _files(out_dir) == []


def test_the_command_line_as_a_separate_process(bad_inputs, tmp_path):
    out_dir = tmp_path / "out"
    out_dir.mkdir()
    argv = _argv(CLI_CASES["type 2 MIDI file"][0], bad_inputs, out_dir / "result")
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1", RTVOICE_HOME=str(tmp_path / "home"))
    r = subprocess.run([sys.executable, "-m", "rtvoice.cli", *argv], capture_output=True, text=True, cwd=tmp_path,
                       env=env, timeout=60)
    assert r.returncode == 2 and "Traceback" not in r.stderr, r.stderr
    assert r.stderr.strip().splitlines() == \
        [f"rtvoice render: error: {bad_inputs['type2_mid']}: type 2 MIDI files (independent sequences) are not "
         "supported"]
    assert _files(out_dir) == []
