"""The instrument's settings: strings, frets, the hand, slanted pickups, positions saved in mm.

Outside facts used here (each named again beside its assertion):
- Mersenne's law with Taylor's wave speed, f0 = sqrt(T / mu) / 2L, mu = rho pi d^2 / 4, and
  Fletcher's stiff-string coefficient B = pi^3 E d^4 / (64 T L^2) (Fletcher, "Normal vibration
  frequencies of a stiff piano string", JASA 36, 203, 1964). Worked example
  (../shared/references.md, calc): plain steel d = 0.254 mm, L = 648 mm, f0 = 329.63 Hz,
  rho = 7850 kg/m^3, E = 200 GPa: mu = 3.978e-4 kg/m, T = 72.6 N, B = 1.323e-5; plain G3
  d = 0.432 mm at 196.0 Hz: T = 74.2 N, B = 1.08e-4.
- Stress in a plain wire tuned by Mersenne-Taylor: T / A = rho (2 L f0)^2 (from the two formulas
  above, calc); ASTM A228 music wire's minimum tensile strength at 0.020 in, 350 ksi = 2413 MPa
  (as rtvoice.physics.strings cites it).
- 12-TET fret rule (common practice): fret n lies L 2^(-n/12) from the saddle; on L = 648 mm fret
  22 lies 466.16 mm from the nut, 181.84 mm from the saddle (references.md, calc).
- 12-TET pitch, MIDI 69 = A4 = 440 Hz (MIDI 1.0 Detailed Specification; ISO 16:1975): E4 =
  329.63 Hz. Standard tuning E4 B3 G3 D3 A2 E2 = MIDI 64 59 55 50 45 40, string 1 the highest,
  and a light set .010 .013 .017 .026 .036 .046 in (common practice).
- 1 in = 25.4 mm exactly (the international inch, 1959).
- IEEE 754 binary64 arithmetic: 129.6 / 648 is not the double nearest 0.2 (Python's floats are
  binary64; calc), so some fractions have no decimal in mm that reads back to them exactly.
"""

from __future__ import annotations

import ast
import tomllib
import warnings
from fractions import Fraction
from pathlib import Path

import pytest
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st
from support.sounds import open_strings

from rtvoice.engine import (
    MAX_STRINGS,
    STRING_FIELDS,
    PresetFormatNotice,
    StringEntry,
    inharmonicity_of,
    lookup,
    string_physics_of,
    t60s_of,
)
from rtvoice.engine.presets import PresetWarning, preset_from_bytes, preset_text, read_preset_file
from rtvoice.engine.schema import PARAMS, PICKUP_FIELDS
from rtvoice.engine.settings import Settings, SettingsError, apply_assignments
from rtvoice.physics.strings import MATERIALS

ROOT = Path(__file__).resolve().parents[1]
MM_PER_INCH = 25.4  # exact, international inch (1959)
STEEL_DENSITY_KG_M3 = 7850.0  # references.md (handbook value for steel)
A228_STRENGTH_MPA = 2413.0  # ASTM A228, 350 ksi at 0.020 in
LAST_FRET_22_ON_648_MM = 648.0 - 466.16  # references.md: fret 22 lies 466.16 mm from the nut (calc)


def e4_hz() -> float:
    return 440.0 * 2 ** ((64 - 69) / 12)  # 12-TET from A4 = 440 Hz (ISO 16:1975)


def refused(assignments: list[str], base: Settings | None = None) -> SettingsError:
    with pytest.raises(SettingsError) as info:
        apply_assignments(base or Settings.defaults(), assignments)
    assert "\n" not in str(info.value)
    return info.value


# -- the default set against published formulas -----------------------------------------------------
def test_the_default_top_string_has_the_tension_and_stiffness_of_the_worked_example():
    # Mersenne-Taylor and Fletcher 1964, worked example in references.md: T = 72.6 N, B = 1.323e-5.
    physics = string_physics_of(Settings.defaults(), 1)
    assert physics.f0_hz == pytest.approx(329.63, abs=0.005)
    assert physics.linear_density_kg_m == pytest.approx(3.978e-4, rel=5e-4)
    assert physics.tension_n == pytest.approx(72.6, abs=0.05)
    assert physics.inharmonicity == pytest.approx(1.323e-5, rel=1e-3)
    assert inharmonicity_of(Settings.defaults(), 1) == physics.inharmonicity


def test_the_plain_g_is_stiffer_than_the_wound_d_as_published():
    # references.md (calc, Mersenne-Taylor and Fletcher 1964): plain G3 .017 in at 196.0 Hz: T = 74.2 N,
    # B = 1.08e-4; Fastl & Voelk report the plain G3 more inharmonic than the wound D3 below it.
    s = Settings.defaults()
    g3 = string_physics_of(s, 3)
    assert g3.tension_n == pytest.approx(74.2, abs=0.05) and g3.inharmonicity == pytest.approx(1.08e-4, rel=5e-3)
    assert inharmonicity_of(s, 3) > 2 * inharmonicity_of(s, 4)


def test_the_default_strings_are_standard_tuning_on_a_light_set():
    # Standard tuning and the light set in inches (common practice); 1 in = 25.4 mm (1959).
    s = Settings.defaults()
    assert [e.note for e in s.strings] == [64, 59, 55, 50, 45, 40]
    gauges_in = [0.010, 0.013, 0.017, 0.026, 0.036, 0.046]
    assert [e.diameter_mm for e in s.strings] == pytest.approx([g * MM_PER_INCH for g in gauges_in], rel=1e-12)
    assert [e.wound for e in s.strings] == [False, False, False, True, True, True]
    assert all(e.material == "music_wire" for e in s.strings)
    assert [e.wrap for e in s.strings[3:]] == ["nickel_plated_steel"] * 3


def test_given_stiffness_and_damping_win_over_the_gauge_and_the_instrument():
    s = apply_assignments(Settings.defaults(), ["strings.2.inharmonicity=2e-5", "strings.3.t60_low=4",
                                                "strings.3.t60_high=1"])
    assert inharmonicity_of(s, 2) == 2e-5
    assert t60s_of(s, 3) == (4.0, 1.0)
    assert t60s_of(s, 1) == (s.get("string.t60_low"), s.get("string.t60_high"))
    # A tension given instead of the gauge's: Fletcher's B follows it, B ~ 1 / T (Fletcher 1964).
    given_t = apply_assignments(Settings.defaults(), ["strings.1.tension_n=36.3"])
    assert string_physics_of(given_t, 1).tension_n == 36.3
    assert inharmonicity_of(given_t, 1) == pytest.approx(2 * 1.323e-5, rel=3e-3)
    with pytest.raises(KeyError):
        string_physics_of(s, 7)


# -- names, --set and reading back ---------------------------------------------------------------------
def test_set_style_assignments_take_units_and_note_names():
    s = apply_assignments(Settings.defaults(), ["strings.6.diameter_mm=0.046in", "pickup.0.position=162mm",
                                                "pickup.0.slant=-8mm", "strings.2.note=B3"])
    assert s.get("strings.6.diameter_mm") == pytest.approx(0.046 * MM_PER_INCH, rel=1e-15)  # 1 in = 25.4 mm
    assert s.get("pickup.0.position") == 162 / 648  # a quarter of the scale: exact in binary64
    assert s.get("pickup.0.slant") == pytest.approx(-8 / 648, rel=1e-15)
    assert s.get("strings.2.note") == 59  # B3 (scientific pitch notation, MIDI 60 = C4)
    assert apply_assignments(s, ["strings.6.diameter_mm=1.2"]).get("strings.6.diameter_mm") == 1.2  # bare: mm
    # Diameters do not depend on the scale length, in whatever order they are written.
    one = ["strings.6.diameter_mm=0.05in", "string.scale_length_mm=25.5in"]
    assert apply_assignments(s, one) == apply_assignments(s, one[::-1])


def test_strings_are_named_looked_up_and_listed_apart_from_the_parameters():
    s = Settings.defaults()
    param, number = lookup("strings.6.core_mm")
    assert param is STRING_FIELDS["core_mm"] and number == 6
    assert s.get("strings.6.core_mm") == 0.48 and s.get("strings.1.core_mm") is None
    assert not [n for n in s.names() if n.startswith("strings")] and "strings.1.note" not in s.flat()
    assert s.string_names()[:2] == ["strings.1.note", "strings.1.diameter_mm"]
    assert len(s.string_names()) == 6 * len(STRING_FIELDS)
    assert "pickup.0.slant" in s.names() and "hand.fret" in s.names() and "instrument.assign" in s.names()
    with pytest.raises(KeyError):
        s.get("strings.7.note")


def test_strings_grow_shrink_and_report_their_changes():
    s = Settings.defaults()
    seven = apply_assignments(s, ["strings.7.note=B1"])
    assert len(seven.strings) == 7 and seven.strings[6] == StringEntry(**{**vars(s.strings[5]), "note": 35})
    assert seven.differences(s) == ["strings"] and s.differences(seven) == ["strings"]
    four = s.with_string_count(4)
    assert four.strings == s.strings[:4] and four.differences(s) == ["strings"]
    eight = s.with_string_count(8)
    assert [e.note for e in eight.strings][6:] == [35, 30]  # each a fourth below (common practice)
    changed = apply_assignments(s, ["strings.2.note=58", "strings.6.diameter_mm=1.2"])
    assert changed.differences(s) == ["strings.2.note", "strings.6.diameter_mm"]
    plain = apply_assignments(s, ["strings.4.core_mm=none"])
    assert plain.strings[3].core_mm is None and plain.strings[3].wrap is None  # the wrap goes with the core
    wound = apply_assignments(s, ["strings.3.core_mm=0.3"])
    assert wound.strings[2].wrap == "nickel_plated_steel"  # the default wrap
    bronze = apply_assignments(s, ["strings.3.core_mm=0.3", "strings.3.wrap=phosphor_bronze"])
    assert bronze.strings[2].wrap == "phosphor_bronze"


def test_a_misspelt_string_field_gets_a_suggestion():
    err = refused(["strings.6.diametr_mm=1.2"])
    assert err.key == "strings.6.diametr_mm" and err.suggestion == "strings.6.diameter_mm"
    err = refused(["strings.13.note=E1"])
    assert "1..12" in str(err)


# -- refusals, each naming its key ------------------------------------------------------------------
FRETTED = ["instrument.assign=hand"]


@pytest.mark.parametrize(("assignments", "key", "needle"), [
    (["strings.2.note=F4"], "strings.2.note", "above string 1's open note"),
    (["strings.1.note=G#9"], "strings.1.note", "MIDI note 128"),
    (["strings.1.diameter_mm=0"], "strings.1.diameter_mm", "out of range"),
    (["strings.1.diameter_mm=0mm"], "strings.1.diameter_mm", "out of range"),
    (["strings.1.core_mm=0.3"], "strings.1.core_mm", "thinner than the string"),
    (["strings.4.core_mm=0.7"], "strings.4.core_mm", "thinner than the string"),
    (["strings.1.wrap=phosphor_bronze"], "strings.1.wrap", "a wound string needs core_mm"),
    (["strings.1.material=gold"], "strings.1.material", "expected one of"),
    (["strings.1.t60_high=7"], "strings.1.t60_high", "must not exceed"),
    (["strings.9.note=E1"], "strings.9.note", "needs string 7 first"),
    (["hand.fret=23"], "hand.fret", "beyond the last fret (22)"),
    (["instrument.frets=2"], "instrument.frets", "beyond the last fret (2)"),
    (["instrument.frets=37"], "instrument.frets", "out of range"),
    (["instrument.assign=frets"], "instrument.assign", "expected one of"),
    (["pickup.0.slant=0.2", "pickup.0.position=0.05"], "pickup.0.slant", "lies off the 648 mm string"),
    ([*FRETTED, "pickup.0.position=200mm"], "pickup.0.position", "lies over the neck"),
    ([*FRETTED, "excitation.position=0.3"], "excitation.position", "lies over the neck"),
    (["instrument.assign=channel", "pickup.0.position=170mm", "pickup.0.slant=30mm"], "pickup.0.slant",
     "treble end at 185 mm"),
    ([*FRETTED, "pickup.0.position=170mm", "pickup.0.slant=-30mm"], "pickup.0.slant", "bass end at 185 mm"),
    ([*FRETTED, "strings.1.tension_n=200"], "strings.1.tension_n", "would break"),
    ([*FRETTED, "string.scale_length_mm=900"], "string.scale_length_mm", "would break"),
])
def test_each_refusal_names_its_key(assignments, key, needle):
    err = refused(assignments)
    assert err.key == key and needle in str(err) and err.source == "--set"


def test_a_pickup_over_the_neck_is_refused_with_both_distances_in_mm():
    # 12-TET fret rule (common practice): the last of 22 frets lies 181.84 mm from the saddle of 648 mm.
    err = refused([*FRETTED, "pickup.0.position=200mm"])
    assert "200 mm from the saddle" in err.reason
    assert f"the last fret (22) is {LAST_FRET_22_ON_648_MM:.4g} mm from the saddle" in err.reason
    # Just inside the last fret it is taken; open, the same pickup is taken anywhere on the string.
    apply_assignments(Settings.defaults(), [*FRETTED, f"pickup.0.position={LAST_FRET_22_ON_648_MM - 0.01}mm"])
    apply_assignments(Settings.defaults(), ["instrument.assign=open", "pickup.0.position=200mm",
                                            "excitation.position=0.5"])
    # With no frets the "last fret" is the nut: the whole string is free.
    apply_assignments(Settings.defaults(), [*FRETTED, "instrument.frets=0", "hand.fret=0",
                                            "pickup.0.position=600mm"])


def test_a_string_that_would_break_is_refused_with_its_stress_against_the_strength():
    # Plain steel tuned by Mersenne-Taylor carries rho (2 L f0)^2 whatever its gauge (calc); ASTM A228
    # holds 2413 MPa. On 900 mm, E4 needs 7850 (2 x 0.9 x 329.63)^2 = 2764 MPa: it would break.
    stress_mpa = STEEL_DENSITY_KG_M3 * (2 * 0.9 * e4_hz()) ** 2 / 1e6
    assert stress_mpa > A228_STRENGTH_MPA
    err = refused([*FRETTED, "string.scale_length_mm=900"])
    assert f"stress {stress_mpa:.0f} MPa above the material's strength {A228_STRENGTH_MPA:.0f} MPa" in err.reason
    # A string of its own is named by its own key: E5 on 648 mm is four times the E4's stress.
    err = refused([*FRETTED, "strings.1.note=E5"])
    assert err.key == "strings.1.note" and f"stress {4 * STEEL_DENSITY_KG_M3 * (2 * 0.648 * e4_hz()) ** 2 / 1e6:.0f}" \
        in err.reason
    # Open, the strings are not played: an old preset at 900 mm keeps loading (decision, see stringing.py).
    assert apply_assignments(Settings.defaults(), ["instrument.assign=open", "string.scale_length_mm=900"]).get(
        "string.scale_length_mm") == 900


def test_a_refused_change_set_leaves_nothing_half_done(tmp_path):
    s = Settings.defaults()
    refused(["strings.2.note=C4", "pickup.0.position=40mm", "strings.1.core_mm=0.3"], s)
    assert s == Settings.defaults()
    path = tmp_path / "bad.toml"
    path.write_text('format = 2\n[[strings]]\nnote = 64\ndiameter_mm = 0.25\n\n'
                    '[[strings]]\nnote = 40\ndiameter_mm = 1.1\nwrap = "nickel_plated_steel"\n')
    with pytest.raises(SettingsError, match=r"strings\.2\.wrap.*a wound string needs core_mm") as info:
        read_preset_file(path)
    assert str(path) in str(info.value)


@pytest.mark.parametrize(("text", "needle"), [
    ("format = 2\nstrings = []", "between 1 and 12 strings"),
    ("format = 2\n" + "[[strings]]\nnote = 40\ndiameter_mm = 1.0\n" * 13, "between 1 and 12 strings"),
    ("format = 2\nstrings = 3", "expected [[strings]] tables"),
    ("format = 2\n[[strings]]\nnote = 40\n", "at least note and diameter_mm"),
    ("format = 2\n[[strings]]\nnote = 40\ndiameter_mm = 1.0\nmaterail = 'nylon'", "did you mean strings.1.material?"),
    ("format = 2\n[[strings]]\nnote = 'X9'\ndiameter_mm = 1.0", "name like E2"),
    ("format = 2\n[[strings]]\nnote = 40\ndiameter_mm = '1 parsec'", "a length like"),
])
def test_bad_string_tables_are_refused_in_one_line(tmp_path, text, needle):
    path = tmp_path / "bad.toml"
    path.write_text(text)
    with pytest.raises(SettingsError) as info:
        read_preset_file(path)
    assert needle in str(info.value) and "\n" not in str(info.value)


def test_string_fields_from_a_newer_preset_are_skipped_and_reported(tmp_path):
    path = tmp_path / "newer.toml"
    path.write_text("format = 3\n[[strings]]\nnote = 40\ndiameter_mm = 1.0\nvarnish = 2\n")
    with pytest.warns(PresetWarning, match=r"strings\.1\.varnish"):
        s = read_preset_file(path)
    assert [e.note for e in s.strings] == [40]


# -- presets: format 2 in mm, format 1 read as before -------------------------------------------------
def test_a_save_writes_positions_slants_and_widths_in_mm():
    s = apply_assignments(Settings.defaults(), ["pickup.0.position=162mm", "pickup.0.slant=-8mm",
                                                "pickup.0.width=13mm", "excitation.position=97.2mm",
                                                "string.scale_length_mm=648"])
    data = tomllib.loads(preset_text(s))
    assert data["format"] == 2
    assert data["pickup"][0] == {**data["pickup"][0], "position": "162mm", "slant": "-8mm", "width": "13mm"}
    assert data["excitation"]["position"] == "97.2mm"
    assert [t["note"] for t in data["strings"]] == [64, 59, 55, 50, 45, 40]
    assert "core_mm" not in data["strings"][0] and data["strings"][5]["core_mm"] == 0.48  # None is left out


def test_the_default_pluck_is_written_in_mm_and_reads_back_to_the_same_float():
    # IEEE 754 binary64: 129.6 / 648 rounded from the float 129.6 misses 0.2 (calc), but the typed decimal
    # 129.6 divided by 648 exactly is 1/5, whose nearest double is the float 0.2 (correct rounding, IEEE
    # 754-2008 4.3): a length is read as an exact rational and rounded once, so it comes back exactly.
    assert 129.6 / 648 != 0.2
    s = Settings.defaults()
    assert tomllib.loads(preset_text(s))["excitation"]["position"] == "129.6mm"
    assert preset_from_bytes(preset_text(s).encode(), "default.toml") == s


def test_a_format_2_file_with_bare_fractions_loads_silently():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = preset_from_bytes(b"format = 2\n[excitation]\nposition = 0.2\n", "bare.toml")
    assert s.get("excitation.position") == 0.2


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=0.01, max_value=0.99))
def test_every_pluck_fraction_is_written_in_mm_and_read_back_exactly(fraction):
    # Open strings: the pluck may sit anywhere along the string (a fretted neck ends at 0.28 of the
    # scale); how a place is written does not depend on the rule.
    s = open_strings().with_values({"excitation.position": fraction})
    text = preset_text(s)
    assert tomllib.loads(text)["excitation"]["position"].endswith("mm")
    assert preset_from_bytes(text.encode(), "p.toml").get("excitation.position") == fraction


def factory_values_as_before(path: Path) -> dict:
    """What a factory preset gave before strings and mm: its numbers over the defaults, fractions as written,
    every note an open string of its own (the only rule there was, and the default until the six-string)."""
    data = tomllib.loads(path.read_text())
    expected = {n: p.default for n, p in PARAMS.items()}
    expected["instrument.assign"] = "open"
    for top, value in data.items():
        if isinstance(value, dict):
            expected.update({f"{top}.{k}": v for k, v in value.items()})
        elif top == "voices":
            expected["voices"] = value
    for i, pickup in enumerate(data.get("pickup", [{}])):
        expected.update({f"pickup.{i}.{f}": p.default for f, p in PICKUP_FIELDS.items()})
        expected.update({f"pickup.{i}.{k}": v for k, v in pickup.items()})
    expected["excitation.shape"] = tuple(tuple(p) for p in expected["excitation.shape"])
    return expected


#: The ten factory presets as rtvoice wrote them before positions were in mm (preset format 1, fractions),
#: kept as they were shipped: what a user's older files look like.
FORMAT_1 = ROOT / "tests" / "data" / "format1"


@pytest.mark.parametrize("path", sorted(FORMAT_1.glob("*.toml")), ids=lambda p: p.stem)
def test_every_former_factory_preset_loads_as_before_with_a_notice_and_saves_in_mm(path):
    with pytest.warns(PresetFormatNotice) as caught:
        s = read_preset_file(path)
    notices = [str(w.message) for w in caught if issubclass(w.category, PresetFormatNotice)]
    scale = s.get("string.scale_length_mm")
    assert notices == [f"{path}: written before positions were in mm; its fractions are read as fractions of the "
                       f"{scale:g} mm scale length and will be saved in mm; every note plays as an open string of "
                       f"its own (instrument.assign = open), as before"]
    assert s.flat() == factory_values_as_before(path)
    assert s.strings == Settings.defaults().strings
    text = preset_text(s)
    assert tomllib.loads(text)["format"] == 2
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        again = preset_from_bytes(text.encode(), "again.toml")
    assert again == s and again.differences(s) == []


def test_an_old_preset_with_lengths_only_has_nothing_to_notice(tmp_path):
    path = tmp_path / "lengths.toml"
    path.write_text('format = 1\n[excitation]\nposition = "40mm"\n[[pickup]]\nposition = "1in"\n')
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        s = read_preset_file(path)
    # 1 in = 25.4 mm exactly (international yard and pound agreement, 1959); read as the exact quotient
    # rounded once (IEEE 754-2008 correct rounding), which the float division 25.4 / 648 misses by an ulp.
    assert s.get("pickup.0.position") == float(Fraction(254, 10) / 648)
    assert s.get("pickup.0.position") == pytest.approx(25.4 / 648, rel=1e-15)


def test_an_old_preset_with_bare_fractions_gets_the_notice_once_in_one_line(tmp_path):
    path = tmp_path / "old.toml"
    path.write_text("format = 1\n[string]\nscale_length_mm = 628\n[[pickup]]\nposition = 0.2\nwidth = 0.03\n")
    with pytest.warns(PresetFormatNotice) as caught:
        s = read_preset_file(path)
    assert len(caught) == 1 and "\n" not in str(caught[0].message) and "628 mm scale length" in str(caught[0].message)
    assert s.get("pickup.0.position") == 0.2 and s.get("pickup.0.width") == 0.03


# -- any valid settings round-trip exactly -----------------------------------------------------------
def _between(draw, low: float, high: float) -> float:
    return draw(st.floats(low, high, allow_nan=False, allow_infinity=False))


@st.composite
def instruments(draw) -> Settings:
    """Valid settings of every kind: any parameters, 1-4 pickups, 1-12 strings of any construction."""
    changes: dict = {}
    for name, param in PARAMS.items():
        if param.kind == "float" and name not in ("hand.fret", "excitation.position", "string.t60_high"):
            changes[name] = _between(draw, param.low, param.high)
        elif param.kind in ("int", "choice") and name not in ("voices", "string.modes"):
            changes[name] = draw(st.sampled_from(param.choices) if param.choices
                                 else st.integers(int(param.low), int(param.high)))
    # 0 switches these off; otherwise a coil resonance from 200 Hz and a coil from 0.01 H (the schema's rules).
    changes["electronics.resonance_hz"] = draw(st.just(0.0) | st.floats(200.0, 20000.0))
    changes["electronics.inductance_h"] = draw(st.just(0.0) | st.floats(0.01, 20.0))
    fretted = changes["instrument.assign"] != "open"
    if fretted:  # strings that are played must hold: low notes on a short scale, cores at least half the string
        changes["string.scale_length_mm"] = _between(draw, 100.0, 700.0)
    low = changes["string.t60_low"]
    changes["string.t60_high"] = _between(draw, max(0.01, low / 399), low)  # the loss law's limits
    changes["hand.fret"] = _between(draw, 0.0, changes["instrument.frets"])
    last = 2 ** (-changes["instrument.frets"] / 12) if changes["instrument.assign"] != "open" else 0.99
    changes["excitation.position"] = _between(draw, 0.01, min(0.99, last * 0.999))
    for i in range(draw(st.integers(1, 4))):
        centre = _between(draw, 0.005, min(0.995, last * 0.999))
        room = min(centre, last * 0.999 - centre, 0.1)
        changes.update({f"pickup.{i}.position": centre, f"pickup.{i}.slant": _between(draw, -room, room),
                        f"pickup.{i}.width": _between(draw, 0.0, 0.5),
                        f"pickup.{i}.sensing": draw(st.sampled_from(PICKUP_FIELDS["sensing"].choices)),
                        f"pickup.{i}.level_db": _between(draw, -60.0, 12.0),
                        f"pickup.{i}.polarity": draw(st.sampled_from((1, -1)))})
    count = draw(st.integers(1, MAX_STRINGS))
    notes = sorted(draw(st.lists(st.integers(0, 40 if fretted else 127), min_size=count, max_size=count)),
                   reverse=True)
    for n, note in enumerate(notes, start=1):
        diameter = _between(draw, 0.11, 5.0)
        wound = draw(st.booleans())
        optional = {f: draw(st.none() | st.floats(STRING_FIELDS[f].low, STRING_FIELDS[f].high))
                    for f in ("tension_n", "inharmonicity", "t60_low")}
        if fretted:
            optional["tension_n"] = None
        t60_low = optional["t60_low"] or low
        t60_high = draw((st.none() if optional["t60_low"] is None else st.nothing())
                        | st.floats(max(0.01, t60_low / 399), t60_low))
        core = _between(draw, diameter / 2 if fretted else 0.05, diameter * 0.99) if wound else None
        fields = {"note": note, "diameter_mm": diameter, "material": draw(st.sampled_from(sorted(MATERIALS))),
                  "core_mm": core, "t60_high": t60_high, **optional}
        fields["wrap"] = draw(st.sampled_from(sorted(MATERIALS))) if fields["core_mm"] else None
        changes.update({f"strings.{n}.{f}": "none" if v is None else v for f, v in fields.items()})
    base = Settings.defaults().with_string_count(count)
    try:
        s = base.with_values(changes)
    except SettingsError as err:  # a string stressed past its material where it is played: not a valid one
        assume("would break" not in err.reason)
        raise
    text = draw(st.text(st.characters(codec="utf-8", exclude_categories=("Cs",)), max_size=20))
    return s.renamed(text, text[::-1])


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much])
@given(instruments())
def test_any_valid_settings_round_trip_exactly_through_a_preset(s):
    text = preset_text(s)
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a file of this version loads without a notice
        back = Settings.from_toml_text(text, source="again.toml")
    assert back == s and back.differences(s) == []
    data = tomllib.loads(text)
    for table in [data["excitation"], *data["pickup"]]:
        for f in ("position", "slant", "width"):
            if f in table:
                value = table[f]
                assert (isinstance(value, str) and value.endswith("mm")) or isinstance(value, float)


# -- the reading path stays data only ---------------------------------------------------------------------
@pytest.mark.parametrize("module", ["stringing.py", "distances.py"])
def test_the_new_reading_modules_run_nothing_from_the_data(module):
    # As tests/test_presets.py checks presets.py and settings.py: no eval, exec, compile, dynamic attribute
    # access or unpickling on the way from a preset's text to the settings.
    source = (ROOT / "rtvoice" / "engine" / module).read_text()
    forbidden = {"eval", "exec", "compile", "__import__", "getattr", "setattr", "globals", "locals", "vars"}
    calls = [node.func.id for node in ast.walk(ast.parse(source))
             if isinstance(node, ast.Call) and isinstance(node.func, ast.Name)]
    imports = [a.name for node in ast.walk(ast.parse(source)) if isinstance(node, ast.Import | ast.ImportFrom)
               for a in node.names]
    assert not set(calls) & forbidden
    assert not {"pickle", "marshal", "subprocess", "importlib"} & set(imports)


# -- the factory instruments ------------------------------------------------------------------------
def _factory(name: str) -> Settings:
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # written in this version's format: no notice, nothing skipped
        return read_preset_file(ROOT / "presets" / f"{name}.toml")


@pytest.mark.parametrize("path", sorted((ROOT / "presets").glob("*.toml")), ids=lambda p: p.stem)
def test_every_factory_preset_is_written_in_mm_and_loads_silently(path):
    text = path.read_text()
    assert tomllib.loads(text)["format"] == 2
    s = _factory(path.stem)
    assert preset_from_bytes(preset_text(s).encode(), "again.toml") == s
    assert "mm" in s.description  # each says where its pluck and pickups sit


@pytest.mark.parametrize(("name", "scale_mm", "notes"), [
    # Standard six-string tuning E4 B3 G3 D3 A2 E2 and four-string bass tuning G2 D2 A1 E1 (MIDI numbers,
    # 12-TET with A4 = 69; common practice); a baritone a fourth below, B3 .. B1 (common practice).
    ("cedar-six", 648.0, (64, 59, 55, 50, 45, 40)),
    ("glass-bridge", 628.0, (64, 59, 55, 50, 45, 40)),
    ("harbor-baritone", 710.0, (59, 54, 50, 45, 40, 35)),
    ("low-four", 864.0, (43, 38, 33, 28)),
    ("nylon-fingertip", 650.0, (64, 59, 55, 50, 45, 40)),
])
def test_the_factory_instruments_are_strung_and_tuned_as_named(name, scale_mm, notes):
    s = _factory(name)
    assert s.get("instrument.assign") == "hand"
    assert s.get("string.scale_length_mm") == scale_mm
    assert tuple(e.note for e in s.strings) == notes
    for n in range(1, len(notes) + 1):
        assert not string_physics_of(s, n).over_strength


def test_the_nylon_instrument_is_strung_with_nylon_and_the_slanted_layout_slants():
    nylon = _factory("nylon-fingertip")
    assert {e.material for e in nylon.strings} == {"nylon"}
    lean = _factory("leaning-bridge")
    # 38 mm under the top string and 50 mm under the low one: slant = treble - bass = -12 mm.
    assert lean.get("pickup.0.slant") * 648 == pytest.approx(-12.0)
    assert (lean.get("pickup.0.position") + lean.get("pickup.0.slant") / 2) * 648 == pytest.approx(38.0)
