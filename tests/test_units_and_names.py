"""Lengths in mm, cm and in; note names; order-free --set; "did you mean" for typing mistakes.

Outside facts used here:
- 1 in = 25.4 mm exactly: the international inch of the international yard and pound agreement
  (1959); 1 cm = 10 mm (SI). Common practice.
- MIDI note numbers: MIDI 1.0 Detailed Specification, 69 = A4 (440 Hz, ISO 16:1975) and, in the
  common convention (scientific pitch notation), 60 = C4 "middle C", 21 = A0 (lowest piano key),
  40 = E2, 127 = G9, 0 = C-1. Standard guitar tuning E2 A2 D3 G3 B3 E4 = MIDI 40 45 50 55 59 64
  (common practice; ../shared/references.md).
- 12-TET: f = 440 * 2^((n - 69) / 12) (ISO 16:1975 reference pitch; references.md).
"""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st
from support.cli import run_cli
from support.sounds import open_strings

from rtvoice.cli import main
from rtvoice.engine.presets import preset_from_bytes, preset_text
from rtvoice.engine.settings import Settings, SettingsError, apply_assignments
from rtvoice.engine.units import note_name, parse_length_mm, parse_note
from rtvoice.physics.tuning import midi_note_to_hz
from rtvoice.survey import Placement
from rtvoice.survey.inputs import SurveyError, parse_grid, parse_notes, parse_placement

MM_PER_INCH = 25.4  # exact, international inch (1959); common practice
DEFAULT_SCALE_MM = 648.0


# -- lengths ---------------------------------------------------------------------------


@pytest.mark.parametrize(("text", "mm"), [
    ("40mm", 40.0), ("4cm", 40.0), ("1.5in", 1.5 * MM_PER_INCH), ("25.5in", 647.7),  # 25.5 x 25.4
    ("40 mm", 40.0), ("0.5 CM", 5.0), ("1in", 25.4), ("-2mm", -2.0), ("1e1cm", 100.0),
])
def test_lengths_in_millimetres_centimetres_and_inches(text, mm):
    assert parse_length_mm(text) == pytest.approx(mm, rel=1e-15)


@pytest.mark.parametrize("text", ["40", "40 m", "mm", "4 0mm", "nanmm", "infin", "40 ft", "", "1e999mm"])
def test_a_length_needs_a_finite_number_and_a_unit(text):
    with pytest.raises(ValueError):
        parse_length_mm(text)


@given(st.floats(min_value=5.0, max_value=640.0, allow_nan=False))
def test_one_length_in_mm_cm_and_in_gives_the_same_fraction(mm):
    # Open strings: a pickup anywhere along the 648 mm string (the default neck ends at 181.8 mm); how a
    # length is read does not depend on the rule.
    defaults = open_strings()
    fractions = [
        apply_assignments(defaults, [f"pickup.0.position={text}"]).get("pickup.0.position")
        for text in (f"{mm!r}mm", f"{mm / 10!r}cm", f"{mm / MM_PER_INCH!r}in")
    ]
    assert fractions == pytest.approx([mm / DEFAULT_SCALE_MM] * 3, rel=1e-12)


def test_every_length_parameter_takes_units():
    s = apply_assignments(Settings.defaults(), [
        "string.scale_length_mm=25.5in", "excitation.position=4cm", "excitation.width=5mm",
        "pickup.0.position=1.5in", "pickup.1.width=0.5in",
    ])
    scale_mm = 25.5 * MM_PER_INCH
    assert s.get("string.scale_length_mm") == pytest.approx(647.7)
    assert s.get("excitation.position") == pytest.approx(40 / scale_mm)
    assert s.get("excitation.width") == pytest.approx(5 / scale_mm)
    assert s.get("pickup.0.position") == pytest.approx(1.5 * MM_PER_INCH / scale_mm)
    assert s.get("pickup.1.width") == pytest.approx(0.5 * MM_PER_INCH / scale_mm)


def test_fractions_typed_as_fractions_are_unchanged():
    s = apply_assignments(Settings.defaults(), ["pickup.0.position=0.25", "string.scale_length_mm=500"])
    assert s.get("pickup.0.position") == 0.25 and s.get("string.scale_length_mm") == 500.0
    with pytest.raises(SettingsError, match=r"1\.08 is out of range \[0\.005, 0\.995\]"):
        apply_assignments(Settings.defaults(), ["pickup.0.position=1.08"])


# -- order independence ----------------------------------------------------------------


@pytest.mark.parametrize("length", ["40mm", "4cm", "1.5in"])
def test_the_order_of_set_options_does_not_matter(length):
    one = ["string.scale_length_mm=500", f"pickup.0.position={length}", f"excitation.position={length}"]
    a = apply_assignments(Settings.defaults(), one)
    b = apply_assignments(Settings.defaults(), one[::-1])
    assert a == b and a.differences(b) == []
    assert a.get("pickup.0.position") == pytest.approx(parse_length_mm(length) / 500)


def test_the_order_inside_a_preset_file_does_not_matter():
    first = b'[[pickup]]\nposition = "40mm"\n[string]\nscale_length_mm = 500\n'
    last = b'[string]\nscale_length_mm = 500\n[[pickup]]\nposition = "40mm"\n'
    a, b = preset_from_bytes(first, "a.toml"), preset_from_bytes(last, "b.toml")
    assert a.differences(b) == [] and a.get("pickup.0.position") == pytest.approx(40 / 500)


def test_order_independent_through_the_real_command_line(tmp_path):
    def render(*sets: str) -> bytes:
        out = tmp_path / "o.wav"
        argv = ["render", "--note", "E2", "--seconds", "0.05", "--tail-cap", "0", "-o", str(out)]
        for s in sets:
            argv += ["--set", s]
        assert main(argv) == 0
        return out.read_bytes()

    a = render("pickup.0.position=40mm", "string.scale_length_mm=500")
    b = render("string.scale_length_mm=500", "pickup.0.position=40mm")
    c = render(f"pickup.0.position={40 / 500!r}", "string.scale_length_mm=500")
    assert a == b == c  # rendering is deterministic, so the same settings give the same bytes


# -- presets ---------------------------------------------------------------------------


def test_a_preset_with_lengths_loads_and_saves_as_fractions():
    text = (b'name = "units"\n[string]\nscale_length_mm = "25.5in"\n[excitation]\nposition = "4cm"\n'
            b'[[pickup]]\nposition = "40mm"\nwidth = "0.6in"\n')
    s = preset_from_bytes(text, "units.toml")
    scale_mm = 25.5 * MM_PER_INCH
    assert s.get("string.scale_length_mm") == pytest.approx(scale_mm)
    assert s.get("pickup.0.position") == pytest.approx(40 / scale_mm)
    assert s.get("pickup.0.width") == pytest.approx(0.6 * MM_PER_INCH / scale_mm)
    assert s.get("excitation.position") == pytest.approx(40 / scale_mm)
    again = preset_from_bytes(preset_text(s).encode(), "again.toml")
    # Positions are saved in mm (preset format 2): what was typed as 40 mm is written as 40 mm.
    assert again.differences(s) == [] and 'position = "40mm"' in preset_text(s)


@pytest.mark.parametrize(("text", "needle"), [
    (b'[[pickup]]\nposition = "700mm"\n', "700 mm is out of range: beyond the 648 mm string"),
    (b'[[pickup]]\nposition = "40 parsecs"\n', "or a length like 40mm"),
    (b'[string]\nscale_length_mm = "90in"\n', "90 in (2286 mm) is out of range"),
    (b'[[pickup]]\npositon = 0.2\n', "did you mean pickup.0.position?"),
    (b'[string]\ninharmonicty = 0.001\n', "did you mean string.inharmonicity?"),
])
def test_a_bad_length_or_name_in_a_preset_is_one_line_naming_it(text, needle):
    with pytest.raises(SettingsError) as err:
        preset_from_bytes(text, "bad.toml")
    assert needle in str(err.value) and "\n" not in str(err.value) and str(err.value).startswith("bad.toml: ")


# -- errors in the typed unit ------------------------------------------------------------


@pytest.mark.parametrize(("assignments", "message"), [
    (["pickup.0.position=700mm"],
     "pickup.0.position = '700mm': 700 mm is out of range: beyond the 648 mm string (allowed 3.24 .. 644.76 mm)"),
    (["pickup.0.position=1mm"], "1 mm is out of range (allowed 3.24 .. 644.76 mm on the 648 mm string)"),
    (["pickup.0.position=70cm"], "70 cm is out of range: beyond the 64.8 cm string (allowed 0.324 .. 64.476 cm)"),
    (["pickup.0.position=30in"], "30 in is out of range: beyond the 25.511 in string"),
    (["pickup.0.width=40cm"], "40 cm is out of range (allowed 0 .. 32.4 cm on the 64.8 cm string)"),
    (["string.scale_length_mm=80in"], "80 in (2032 mm) is out of range (allowed 3.9371 .. 78.74 in)"),
    (["string.scale_length_mm=5cm"], "5 cm (50 mm) is out of range (allowed 10 .. 200 cm)"),
    # The scale set beside the position decides, whatever the order: 400 mm is past a 300 mm string.
    (["pickup.0.position=400mm", "string.scale_length_mm=300"], "beyond the 300 mm string"),
])
def test_a_length_out_of_range_is_refused_in_its_own_unit(assignments, message):
    with pytest.raises(SettingsError) as err:
        apply_assignments(Settings.defaults(), assignments)
    assert message in str(err.value) and "\n" not in str(err.value)


def test_the_bounds_the_message_shows_are_allowed():
    # 0.005 x 648 = 3.24 mm and 0.995 x 648 = 644.76 mm: typed exactly as shown, they are accepted
    # (open strings: the schema's range, the whole string).
    low = apply_assignments(open_strings(), ["pickup.0.position=3.24mm"]).get("pickup.0.position")
    high = apply_assignments(open_strings(), ["pickup.0.position=644.76mm"]).get("pickup.0.position")
    assert low == pytest.approx(0.005) and low >= 0.005 and high == pytest.approx(0.995) and high <= 0.995
    # The default six-string ends at its 22nd fret, 648 2^(-22/12) = 181.84 mm from the saddle (12-TET
    # fret rule, common practice): the bound its message shows, typed as shown, is accepted too.
    with pytest.raises(SettingsError) as err:
        apply_assignments(Settings.defaults(), ["pickup.0.position=200mm"])
    assert err.value.allowed == "less than 181.8 mm, 0.2806 of the scale length"
    near = apply_assignments(Settings.defaults(), ["pickup.0.position=181.8mm"]).get("pickup.0.position")
    assert near * DEFAULT_SCALE_MM == pytest.approx(181.8) and near < 2 ** (-22 / 12)
    assert apply_assignments(Settings.defaults(), ["pickup.0.position=0.2806"]).get("pickup.0.position") == 0.2806


# -- note names ------------------------------------------------------------------------


@pytest.mark.parametrize(("name", "number"), [
    ("C-1", 0), ("A0", 21), ("E2", 40), ("A2", 45), ("D3", 50), ("G3", 55), ("B3", 59), ("E4", 64),
    ("C4", 60), ("A4", 69), ("G9", 127), ("F#3", 54), ("Gb3", 54), ("Bb1", 34), ("A#1", 34),
    ("e2", 40), ("bb1", 34), ("b1", 35), ("f#3", 54), ("Cb4", 59), ("E#4", 65), ("60", 60), ("0", 0),
])
def test_note_names_give_midi_numbers(name, number):
    assert parse_note(name) == number


def test_a4_sounds_at_440_hz_and_c4_at_middle_c():
    # 12-TET from A4 = 440 Hz (ISO 16:1975): C4 = 261.6256 Hz, A0 = 27.5 Hz (references.md).
    assert float(midi_note_to_hz(parse_note("A4"))) == pytest.approx(440.0, rel=1e-12)
    assert float(midi_note_to_hz(parse_note("C4"))) == pytest.approx(261.6256, abs=5e-5)
    assert float(midi_note_to_hz(parse_note("A0"))) == pytest.approx(27.5, rel=1e-12)


@pytest.mark.parametrize("text", ["H2", "G#9", "C-2", "Cb-1", "128", "-1", "E", "2E", "E2.5", "", "Ebb2", "C10",
                                  "60.0", "1" * 400])
def test_names_and_numbers_outside_midi_are_refused(text):
    with pytest.raises(ValueError):
        parse_note(text)


@given(st.integers(min_value=0, max_value=127))
def test_note_name_and_parse_note_round_trip(n):
    assert parse_note(note_name(n)) == n
    assert note_name(parse_note(note_name(n))) == note_name(n)


@given(st.sampled_from("CDEFGAB"), st.sampled_from(["", "#", "b"]), st.integers(min_value=0, max_value=8))
def test_a_typed_name_comes_back_as_the_same_pitch(letter, accidental, octave):
    n = parse_note(f"{letter}{accidental}{octave}")
    assert parse_note(note_name(n)) == n
    # Sharps and flats are a semitone either side of the natural (12-TET, common practice).
    assert n - parse_note(f"{letter}{octave}") == {"": 0, "#": 1, "b": -1}[accidental]


def test_the_ui_uses_the_same_note_names():
    from rtvoice.ui import format as ui_format

    assert ui_format.note_name is note_name and ui_format.note_name(-1) == "-"


def test_survey_note_ranges_take_names():
    assert parse_notes("E2:E3") == list(range(40, 53))
    assert parse_notes("E2:E3:2") == list(range(40, 53, 2))
    assert parse_notes("E2") == [40] and parse_notes("40:A2") == [40, 41, 42, 43, 44, 45]
    for bad, needle in [("E3:E2", "empty"), ("E2:E3:0", "positive"), ("E2:E3:x", "semitones"),
                        ("E2:E3:1:1", "A:B:STEP"), ("H2", "name like E2"), ("200", "MIDI notes lie in 0 .. 127")]:
        with pytest.raises(ValueError, match=needle):
            parse_notes(bad)


# -- survey grids ------------------------------------------------------------------------


def test_survey_grids_take_cm_and_in():
    mm = parse_grid("40:160:2mm", "pickup", DEFAULT_SCALE_MM)
    assert parse_grid("4:16:0.2cm", "pickup", DEFAULT_SCALE_MM) == pytest.approx(mm, rel=1e-12)
    assert parse_grid("2:12:0.5cm", "pluck", DEFAULT_SCALE_MM) * DEFAULT_SCALE_MM == pytest.approx(
        [20 + 5 * i for i in range(21)])
    assert parse_grid("1.5in", "pickup", DEFAULT_SCALE_MM) == pytest.approx([1.5 * MM_PER_INCH / DEFAULT_SCALE_MM])
    assert parse_grid("4cm:16cm:2mm", "pickup", DEFAULT_SCALE_MM) == pytest.approx(mm, rel=1e-12)
    placed = parse_placement("1.5in,13cm", Placement(0.1, 0.2, 0.02), DEFAULT_SCALE_MM, "--compare")
    assert [placed.pickup, placed.pluck, placed.width] == pytest.approx(
        [38.1 / DEFAULT_SCALE_MM, 130 / DEFAULT_SCALE_MM, 0.02], rel=1e-12)


@pytest.mark.parametrize(("spec", "kind", "needle"), [
    ("700mm", "pickup", "700 mm is outside the string (0 .. 648 mm from the bridge)"),
    ("2:30:1in", "pickup", "30 in is outside the string (0 .. 25.512 in from the bridge)"),
    ("0.2cm", "pickup", "0.2 cm is outside the allowed pickup positions 0.324 .. 64.476 cm"),
    ("40cm", "width", "40 cm is outside the allowed pickup widths 0 .. 32.4 cm"),
    ("4:16cm:2", "pickup", "write cm after the last number or after every number"),
])
def test_survey_grids_refuse_in_the_typed_unit(spec, kind, needle):
    with pytest.raises(SurveyError) as err:
        parse_grid(spec, kind, DEFAULT_SCALE_MM)
    assert needle in str(err.value)


# -- suggestions through the real parser ---------------------------------------------------


def refused_line(argv, capsys) -> str:
    """The one line ``rtvoice ARGV`` refuses with (exit status 2, no traceback)."""
    code, _, err = run_cli(argv, capsys)
    assert code == 2, err
    lines = err.strip().splitlines()
    assert len(lines) == 1 and "error" in lines[0] and "Traceback" not in err, err
    return lines[0]


@pytest.mark.parametrize(("argv", "needle"), [
    (["rendr"], "did you mean 'render'?"),
    (["presets", "lst"], "did you mean 'list'?"),
    (["render", "--note", "E2", "--prset", "hollow-middle", "-o", "{out}"], "did you mean --preset?"),
    (["render", "--note", "E2", "--set", "pickup.position=0.2", "-o", "{out}"], "did you mean pickup.0.position?"),
    (["render", "--note", "E2", "--set", "string.inharmonicty=0.001", "-o", "{out}"],
     "did you mean string.inharmonicity?"),
    (["render", "--note", "E2", "--set", "pickup.1.positon=0.3", "-o", "{out}"], "did you mean pickup.1.position?"),
    (["survey", "--note", "E2", "--pickup", "0.1", "--sensing", "velocty", "-o", "{out}"],
     "did you mean 'velocity'?"),
    (["survey", "--note", "E2", "--pickup", "0.1", "--pickup-indx", "1", "-o", "{out}"],
     "did you mean --pickup-index?"),
    (["render", "--note", "E2", "--zzzzzz", "3", "-o", "{out}"], "unrecognized option --zzzzzz"),
    (["render", "--note", "H2", "-o", "{out}"], "name like E2, F#3 or Bb1"),
    (["render", "--note", "G#9", "-o", "{out}"], "MIDI note 128"),
    (["survey", "--note", "E2:E1", "--pickup", "0.1", "-o", "{out}"], "empty note range"),
    (["render", "--note", "E2", "--set", "pickup.0.position=700mm", "-o", "{out}"],
     "pickup.0.position = '700mm': 700 mm is out of range: beyond the 648 mm string (allowed 3.24 .. 644.76 mm)"),
])
def test_mistakes_get_one_line_with_a_suggestion(tmp_path, capsys, argv, needle):
    out = tmp_path / "out.file"
    line = refused_line([a.format(out=out) for a in argv], capsys)
    assert needle in line
    assert not out.exists()


def test_abbreviations_argparse_accepts_still_work(tmp_path):
    out = tmp_path / "a.wav"
    assert main(["render", "--note", "A4", "--seconds", "0.05", "--tail-cap", "0", "--pre", "hollow-middle",
                 "-o", str(out)]) == 0
    assert out.is_file()


def test_a_distant_word_gets_no_suggestion(capsys):
    line = refused_line(["xyzzy"], capsys)
    assert "did you mean" not in line and "invalid choice" in line

