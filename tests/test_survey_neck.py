"""`rtvoice survey --neck` and `--string S --fret F`: one placement across the strings and frets.

Outside facts: the 12-TET fret rule (common practice: the note at fret n speaks over
L 2^(-n/12), so a point fixed d from the saddle lies at d / (L 2^(-n/12)) of it), the mode
shape sin(k pi x) of an ideal string (Fletcher & Rossing, The Physics of Musical
Instruments, 2nd ed. 1998, ch. 2: a point pickup at a node of mode k hears nothing of it),
12-TET pitch (MIDI note 69 = A4 = 440 Hz, common practice), the PNG file signature
(ISO/IEC 15948:2004, section 5.2), and spectra measured from the engine's own rendered audio
by an independent least-squares fit (tests/analysis.py) and numpy's FFT.
"""

from __future__ import annotations

import csv
import math

import numpy as np
import pytest
from analysis import fit_damped_modes
from support.cli import run_cli

from rtvoice.engine import Settings, note_model_at
from rtvoice.offline.render import render_events
from rtvoice.survey.descriptors import window_factor
from rtvoice.survey.neck import compare_neck, harmonic_numbers, survey_neck

FS = 48000
SCALE_MM = 648.0
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # ISO/IEC 15948:2004, section 5.2
OPEN_NOTES = {1: 64, 2: 59, 3: 55, 4: 50, 5: 45, 6: 40}  # E4 B3 G3 D3 A2 E2: standard guitar tuning (common practice)


def read_csv(path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


def cell(rows: list[dict[str, str]], string: int, fret: int) -> dict[str, str]:
    (row,) = [r for r in rows if r["string"] == str(string) and r["fret"] == str(fret)]
    return row


def numbers(text: str) -> set[int]:
    return {int(k) for k in text.split()}


def twelve_tet_hz(note: int) -> float:
    return 440.0 * 2.0 ** ((note - 69) / 12)  # MIDI note 69 = A4 = 440 Hz (common practice)


# -- the fret rule: a harmonic that vanishes moves with the fret ----------------------------------


def test_a_pickup_162_mm_from_the_saddle_loses_harmonic_2_at_fret_12_of_every_string(tmp_path, capsys):
    # 12-TET fret rule (common practice): 162 mm of a 648 mm scale is 1/4 of the open string and
    # 1/2 of the note at fret 12 (speaking length 324 mm). sin(k pi x) vanishes at x = 1/2 for every
    # even k and at x = 1/4 for k = 4, 8, 12 (Fletcher & Rossing 1998, ch. 2). Against a pickup at
    # 120 mm (0.185 open, 0.370 at fret 12), which nulls neither, harmonic 2 is lost at fret 12
    # of every string and nowhere else on the neck.
    out = tmp_path / "neck.csv"
    code, _, err = run_cli(["survey", "--neck", "--set", "pickup.0.position=162mm", "--against",
                            "pickup.0.position=120mm", "-o", str(out)], capsys)
    assert code == 0, err
    rows = read_csv(out)
    assert len(rows) == 6 * 23  # every string x fret of the default six-string, frets 0 .. 22
    for string in range(1, 7):
        twelfth, open_ = cell(rows, string, 12), cell(rows, string, 0)
        assert float(twelfth["pickup_fraction"]) == pytest.approx(0.5, abs=1e-6)
        assert float(open_["pickup_fraction"]) == pytest.approx(0.25, abs=1e-6)
        assert {2, 4, 6} <= numbers(twelfth["lost"]), twelfth["lost"]
        assert {4, 8} <= numbers(open_["lost"]) and 2 not in numbers(open_["lost"]), open_["lost"]
        elsewhere = [f for f in range(23) if f != 12 and 2 in numbers(cell(rows, string, f)["lost"])]
        assert elsewhere == [], f"string {string} loses harmonic 2 at frets {elsewhere}"
        assert twelfth["gained"] == "" or 2 not in numbers(twelfth["gained"])


def test_the_grid_at_one_fret_fixes_the_pickup_in_space(tmp_path, capsys):
    # The pickup x pluck grid at string 6, fret 12 reads its positions as distances on the body:
    # 162 mm is the middle of the note (12-TET fret rule), so every even harmonic is missing
    # (sin(k pi / 2) = 0 for even k, Fletcher & Rossing 1998, ch. 2); on the open string only
    # every 4th is.
    missing = {}
    for fret in (0, 12):
        out = tmp_path / f"fret{fret}.csv"
        code, stdout, err = run_cli(["survey", "--string", "6", "--fret", str(fret), "--pickup", "162mm",
                                     "--set", "pickup.0.width=0", "-o", str(out)], capsys)
        assert code == 0, err
        assert f"string 6, fret {fret}" in stdout
        (row,) = read_csv(out)
        assert (row["note"], row["string"], row["fret"]) == (str(40 + fret), "6", str(fret))
        missing[fret] = numbers(row["missing"])
    assert {2, 4, 6, 8, 10, 12} <= missing[12]
    assert {4, 8, 12} <= missing[0] and not {2, 6} & missing[0]


# -- predicted against rendered ----------------------------------------------------------------------


def scenario() -> Settings:
    """A made-up two-pickup layout: a slanted magnetic pickup 100 mm from the saddle (bass end
    further away) and a narrow one 45 mm from it, plucked 120 mm from it; notes by MIDI channel."""
    return Settings.defaults().with_values({
        "instrument.assign": "channel",
        "pickup.0.position": "100mm", "pickup.0.slant": "-14mm", "pickup.0.width": "16mm",
        "pickup.1.position": "45mm", "pickup.1.width": "8mm", "pickup.1.level_db": -3.0,
        "excitation.position": "120mm",
    })


@pytest.mark.parametrize(("string", "fret"), [(1, 2), (3, 8), (5, 7)])
def test_predicted_partial_levels_of_a_fretted_note_match_a_render(string, fret):
    # The note is rendered by the offline renderer on MIDI channel `string` (one channel per
    # string, the convention of MIDI guitar controllers, common practice); each partial's energy
    # over the first second is measured by an independent least-squares fit of damped sinusoids
    # (tests/analysis.py) at the engine's mode frequencies and decay rates; the spectral centroid
    # by numpy's FFT. The map's energies agree within 1 dB for the partials within 30 dB of the
    # strongest, and its centroid within 1 %.
    settings = scenario()
    neck = survey_neck(settings, [string], [fret], window_s=1.0, sample_rate_hz=FS)
    note = OPEN_NOTES[string] + fret
    assert int(neck.notes[0, 0]) == note
    channel = string - 1
    events = [(0.0, 0x90 | channel, note, 127), (1.5, 0x80 | channel, note, 0)]
    audio = render_events(events, settings, FS, 256, tail_cap_s=0.0)[:FS]
    modes = note_model_at(settings, string, fret, settings.get("string.modes"), FS)
    count = modes.playable
    freqs, sigma = modes.freqs_hz[:count], modes.sigma_per_s[:count]
    measured = np.abs(fit_damped_modes(audio, FS, freqs, sigma)) ** 2 * window_factor(sigma, 1.0)
    predicted = neck.energy[0, 0, :count]
    strong = predicted >= predicted.max() * 1e-3
    assert strong.sum() >= 5
    diff_db = 10 * np.log10(measured[strong] / predicted[strong])
    assert np.max(np.abs(diff_db)) < 1.0, dict(zip(np.flatnonzero(strong) + 1, diff_db.round(3), strict=True))
    power = np.abs(np.fft.rfft(audio)) ** 2
    centroid = float((power * np.fft.rfftfreq(audio.size, 1 / FS)).sum() / power.sum())
    assert centroid == pytest.approx(float(neck.centroid_hz[0, 0]), rel=0.01)


# -- the CSV ----------------------------------------------------------------------------------------

NECK_COLUMNS = [
    "string", "fret", "note", "f1_hz", "pickup_mm", "pickup_fraction", "pluck_fraction", "centroid_hz",
    "centroid_ratio", "odd_even_db", "level_db", "electronics_db", "centroid_bare_hz", "missing",
]
DESCRIPTORS = ["centroid_hz", "centroid_ratio", "odd_even_db", "level_db", "electronics_db", "centroid_bare_hz"]
PLACEMENT = ["pickup_mm", "pickup_fraction", "pluck_fraction", *DESCRIPTORS, "missing"]


def test_neck_csv_columns_and_values_for_a_chosen_set(tmp_path, capsys):
    # A slanted pickup, treble end 5 mm nearer the saddle and bass end 5 mm further than its
    # centre at 97.2 mm (0.15 of 648 mm), linearly across six equally spaced strings; each note
    # sees it at distance / (L 2^(-n/12)) (12-TET fret rule, common practice); notes are the open
    # string's plus the fret, sounding at 12-TET pitch raised slightly by stiffness.
    out = tmp_path / "neck.csv"
    code, stdout, err = run_cli(["survey", "--neck", "--strings", "1,6", "--frets", "0,12",
                                 "--set", "pickup.0.slant=-10mm", "-o", str(out)], capsys)
    assert code == 0, err
    assert "2 string(s) x 2 fret(s)" in stdout
    with open(out, newline="", encoding="utf-8") as fh:
        header = next(csv.reader(fh))
    assert header == NECK_COLUMNS
    rows = read_csv(out)
    assert [(r["string"], r["fret"]) for r in rows] == [("1", "0"), ("1", "12"), ("6", "0"), ("6", "12")]
    under = {1: 97.2 - 5.0, 6: 97.2 + 5.0}
    for r in rows:
        string, fret = int(r["string"]), int(r["fret"])
        note = OPEN_NOTES[string] + fret
        assert int(r["note"]) == note
        f1, f0 = float(r["f1_hz"]), twelve_tet_hz(note)
        assert f0 <= f1 < f0 * 1.001
        assert float(r["pickup_mm"]) == pytest.approx(under[string], abs=0.01)
        assert float(r["pickup_fraction"]) == pytest.approx(under[string] / (SCALE_MM * 2 ** (-fret / 12)), rel=1e-5)
        assert float(r["pluck_fraction"]) == pytest.approx(0.2 * 2 ** (fret / 12), rel=1e-5)
        assert float(r["centroid_ratio"]) == pytest.approx(float(r["centroid_hz"]) / f1, rel=1e-3)
        if fret == 0:
            assert r["level_db"] == "0.000"  # each string's open note is the level reference


def test_a_neck_cell_is_the_grid_at_that_string_and_fret(tmp_path, capsys):
    # Two ways to the same note and placement: a cell of the neck map and the pickup x pluck grid
    # at that string and fret give the same descriptors (the level aside: each has its reference).
    neck_out, grid_out = tmp_path / "neck.csv", tmp_path / "grid.csv"
    assert run_cli(["survey", "--neck", "--strings", "3", "--frets", "9", "-o", str(neck_out)], capsys)[0] == 0
    assert run_cli(["survey", "--string", "3", "--fret", "9", "--pickup", "0.15", "-o", str(grid_out)], capsys)[0] == 0
    (neck,), (grid,) = read_csv(neck_out), read_csv(grid_out)
    for name in ("note", "f1_hz", "centroid_hz", "centroid_ratio", "odd_even_db", "electronics_db",
                 "centroid_bare_hz", "missing"):
        assert neck[name] == grid[name], name


def test_comparison_csv_has_both_placements_and_their_differences(tmp_path, capsys):
    out = tmp_path / "cmp.csv"
    code, stdout, err = run_cli(["survey", "--neck", "--strings", "6", "--frets", "0:3", "--set",
                                 "pickup.0.position=40mm", "--against", "pickup.0.position=150mm",
                                 "excitation.position=130mm", "-o", str(out)], capsys)
    assert code == 0, err
    with open(out, newline="", encoding="utf-8") as fh:
        header = next(csv.reader(fh))
    assert header == [*NECK_COLUMNS, *(f"against_{c}" for c in PLACEMENT), *(f"d_{c}" for c in DESCRIPTORS),
                      "lost", "gained"]
    rows = read_csv(out)
    assert [r["fret"] for r in rows] == ["0", "1", "2", "3"]
    for r in rows:
        assert float(r["against_pickup_mm"]) == pytest.approx(150.0, abs=0.01)
        for name in ("centroid_hz", "level_db"):
            assert float(r[f"d_{name}"]) == pytest.approx(float(r[name]) - float(r[f"against_{name}"]), abs=0.02)
        # Nearer the bridge sounds brighter (common practice among players and builders).
        assert float(r["d_centroid_hz"]) > 0


def test_lost_and_gained_swap_with_the_placements():
    a = Settings.defaults().with_values({"pickup.0.position": "162mm"})
    b = a.with_values({"pickup.0.position": "120mm"})
    ab, ba = compare_neck(a, b, [1, 6], [0, 12]), compare_neck(b, a, [1, 6], [0, 12])
    np.testing.assert_array_equal(ab.lost, ba.gained)
    np.testing.assert_array_equal(ab.gained, ba.lost)
    assert 2 in harmonic_numbers(ab.lost[0, 1]) and 2 in harmonic_numbers(ba.gained[0, 1])


# -- bad input --------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--neck", "--strings", "7"], "strings 1 .. 6"),
        (["--neck", "--strings", "x"], "whole numbers"),
        (["--neck", "--frets", "0:23"], "frets 0 .. 22"),
        (["--neck", "--set", "instrument.frets=12", "--frets", "13"], "frets 0 .. 12"),
        (["--string", "7", "--fret", "0", "--pickup", "0.1"], "strings 1 .. 6"),
        (["--string", "6", "--fret", "23", "--pickup", "0.1"], "frets 0 .. 22"),
        (["--string", "6", "--pickup", "0.1"], "give both"),
        (["--neck", "--set", "pickup.0.position=300mm"], "over the neck"),
        (["--neck", "--against", "pickup.0.position=300mm"], "over the neck"),
        (["--string", "6", "--fret", "5", "--pickup", "100:300:10mm"], "over the neck"),
        (["--neck", "--against", "pickup.0.position"], "KEY=VALUE"),
        (["--neck", "--against", "tuning.a4_hz=442"], "changes the notes"),
        (["--neck", "--note", "40"], "--neck maps"),
        (["--note", "40", "--pickup", "0.1", "--frets", "0:3"], "goes with --neck"),
    ],
)
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, capsys, args, needle):
    out, png = tmp_path / "neck.csv", tmp_path / "neck.png"
    code, _, err = run_cli(["survey", *args, "-o", str(out), "--plot", str(png)], capsys)
    assert code == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rtvoice survey: error:") and needle in lines[0], err
    assert list(tmp_path.iterdir()) == []


# -- pictures ---------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "args",
    [
        ["--neck", "--plot-value", "odd_even_db"],
        ["--neck", "--set", "pickup.0.position=162mm", "--against", "pickup.0.position=120mm", "--plot-value",
         "level_db"],
        ["--string", "4", "--fret", "5", "--pickup", "40:170:10mm", "--pluck", "60:170:20mm"],
    ],
)
def test_plots_are_png_files(tmp_path, capsys, args):
    out, png = tmp_path / "map.csv", tmp_path / "map.png"
    code, stdout, err = run_cli(["survey", *args, "-o", str(out), "--plot", str(png)], capsys)
    assert code == 0, err
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    assert f"wrote {png}" in stdout


def test_a_whole_neck_map_has_one_finite_row_per_string_and_fret():
    neck = survey_neck(Settings.defaults())
    assert neck.shape == (6, 23)
    for name in ("f1_hz", "centroid_hz", "electronics_db", "centroid_bare_hz", "level_db"):
        assert np.all(np.isfinite(neck.value(name))), name
    # Up the neck each note is higher: f1 follows the 12-TET semitone ratio along every string.
    ratios = neck.f1_hz[:, 1:] / neck.f1_hz[:, :-1]
    assert np.allclose(ratios, 2 ** (1 / 12), rtol=2e-4)
    assert math.isclose(float(neck.pickup_fraction[0, 12]), 2 * float(neck.pickup_fraction[0, 0]), rel_tol=1e-9)


# -- the pickup x pluck grid on a fretted instrument ------------------------------------------------


def test_a_note_is_surveyed_where_the_engine_plays_it(tmp_path, capsys):
    # The hand rule picks a string and fret; the survey's CSV names the same ones the offline
    # renderer reports for the same note-on, and its centroid is the rendered audio's (numpy FFT).
    from rtvoice.engine import load_preset
    from rtvoice.offline.render import PlayReport, iter_blocks, note_events

    out = tmp_path / "grid.csv"
    code, _, err = run_cli(["survey", "--preset", "cedar-six", "--note", "62", "--pickup", "30:120:30mm",
                            "-o", str(out)], capsys)
    assert code == 0, err
    rows = read_csv(out)
    settings = load_preset("cedar-six")
    report = PlayReport()
    for _ in iter_blocks(note_events(62, 127, 0.1), settings, FS, 256, 0.0, report=report):
        pass
    (placed,) = report.placements
    assert placed.string > 0
    assert {(r["string"], r["fret"]) for r in rows} == {(str(placed.string), str(placed.fret))}
    for r in rows:
        moved = settings.with_values({"pickup.0.position": float(r["pickup_position"])})
        audio = render_events(note_events(62, 127, 1.5), moved, FS, 256, tail_cap_s=0.0)[:FS]
        power = np.abs(np.fft.rfft(audio)) ** 2
        centroid = float((power * np.fft.rfftfreq(audio.size, 1 / FS)).sum() / power.sum())
        assert centroid == pytest.approx(float(r["centroid_hz"]), rel=0.01)


def test_the_map_may_reach_over_the_neck_only_when_asked_and_never_past_the_note():
    from rtvoice.survey import SurveyError, place_at, survey, survey_grid

    settings = Settings.defaults().with_values({"instrument.assign": "channel"})
    over = [0.1, 0.4]  # 0.4 of 648 mm lies past the last fret (22 frets: 181.8 mm from the saddle)
    with pytest.raises(SurveyError, match="over the neck"):
        survey(settings, [64], over)  # string 1, open: the settings refuse a pickup there
    with pytest.raises(SurveyError, match="over the neck"):
        survey_grid(settings, 64, over)  # the map keeps to what the settings take, unless asked
    plane = survey_grid(settings, 64, over, past_last_fret=True)  # on the open string's length: heard
    assert np.all(np.isfinite(plane.centroid_hz))
    with pytest.raises(SurveyError, match="past the end of note 76"):
        survey(settings, [76], [0.1, 0.55], places=[place_at(settings, 1, 12)], past_last_fret=True)
