"""`rtvoice survey`: the analytic placement map against outside facts and against rendered audio.

Outside facts: the sine-series zeros of an ideal pluck and an ideal point pickup,
the brightening of the tone as the pickup moves toward the bridge, the textbook
coil-and-cable response, and spectra measured from the engine's own audio with
numpy's FFT (independent of the survey's model).
"""

import csv
import dataclasses
import math
import os
import subprocess
import sys
from fractions import Fraction

import numpy as np
import pytest
from analysis import fit_damped_modes
from support.describe import failing

from rtvoice.cli import main
from rtvoice.engine.presets import load_preset
from rtvoice.engine.settings import Settings
from rtvoice.offline.render import note_events, render_events
from rtvoice.survey import Placement, SurveyError, placement_energies, survey, survey_grid
from rtvoice.survey.csvout import COLUMNS, FRETTED_COLUMNS
from rtvoice.survey.inputs import parse_grid, parse_notes, parse_placement
from rtvoice.survey.model import EngineModel
from rtvoice.survey.verify import (
    CENTROID_TOLERANCE,
    LEVEL_TOLERANCE_DB,
    fit_mode_amplitudes,
    render_note,
    sample_points,
    verify,
)

FS = 48000
SCALE_MM = 648.0


def rtvoice(*args, prelude=""):
    """Run the real command line in a fresh process."""
    code = f"{prelude}\nfrom rtvoice.cli import main\nraise SystemExit(main({list(args)!r}))"
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    return subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env, timeout=300)


def ideal(**changes) -> Settings:
    """Point pickup, point pluck, no electronics: the textbook string, an open string of its own (the
    sine zeros below are at fractions of the note's own length, anywhere along it)."""
    base = {
        "pickup.0.width": 0.0,
        "excitation.width": 0.0,
        "pickup.0.sensing": "displacement",
        "electronics.resonance_hz": 0.0,
        "string.modes": 40,
    }
    return open_sound(None).with_values({**base, **changes})


# -- grids and other input ------------------------------------------------------------


def test_grid_in_fractions_includes_its_stop():
    assert parse_grid("0.1:0.3:0.1", "pickup", SCALE_MM) == pytest.approx([0.1, 0.2, 0.3])
    assert parse_grid("0.25", "pluck", SCALE_MM) == pytest.approx([0.25])


def test_grid_in_millimetres_uses_the_scale_length():
    once = parse_grid("40:160:2mm", "pickup", SCALE_MM)
    every = parse_grid("40mm:160mm:2mm", "pickup", SCALE_MM)
    assert once * SCALE_MM == pytest.approx(np.arange(40, 161, 2))
    assert every == pytest.approx(once)
    assert parse_placement("40mm,130mm", Placement(0.1, 0.2, 0.02), SCALE_MM, "--compare") == pytest.approx(
        Placement(40 / SCALE_MM, 130 / SCALE_MM, 0.02)
    )


def test_note_ranges():
    assert parse_notes("40:43") == [40, 41, 42, 43]
    assert parse_notes("40:52:6") == [40, 46, 52]
    with pytest.raises(ValueError):
        parse_notes("130")


@pytest.mark.parametrize(
    ("spec", "kind", "needle"),
    [
        ("0.5:0.1:0.01", "pickup", "empty grid"),
        ("0.1:0.2:0", "pickup", "step must be positive"),
        ("0:0.5:0.1", "pickup", "outside the string"),
        ("100:700:10mm", "pickup", "outside the string"),
        ("1.2", "pluck", "outside the string"),
        ("0.1:1.2:0.1", "width", "wider than the string"),
        ("700mm", "width", "wider than the string"),
        ("10mm:0.2:0.1", "pickup", "mm after the last number"),
    ],
)
def test_bad_grids_raise_a_user_error(spec, kind, needle):
    with pytest.raises(SurveyError, match=needle):
        parse_grid(spec, kind, SCALE_MM)


def test_an_empty_grid_from_the_api_is_refused():
    with pytest.raises(SurveyError, match="empty grid"):
        survey(Settings.defaults(), [40], [])


@pytest.mark.parametrize(
    ("args", "needle"),
    [
        (["--pickup", "0.5:0.1:0.01"], "empty grid"),
        (["--pickup", "0:0.5:0.1"], "outside the string"),
        (["--pickup", "0.1", "--pluck", "20:700:5mm"], "outside the string"),
        (["--pickup", "0.1", "--width", "0.1:1.5:0.1"], "wider than the string"),
        (["--pickup", "0.1", "--width", "650mm"], "wider than the string"),
        (["--pickup", "0.1", "--reference", "2"], "outside the string"),
        (["--pickup", "0.1", "--note", "200"], "MIDI notes lie in 0 .. 127"),
    ],
)
def test_bad_input_is_one_line_and_exit_status_2(tmp_path, args, needle):
    out = tmp_path / "map.csv"
    r = rtvoice("survey", "--note", "40", *args, "-o", str(out))
    assert r.returncode == 2
    lines = r.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("rtvoice survey: error:") and needle in lines[0]
    assert "Traceback" not in r.stderr and not out.exists()


# -- outside facts: where harmonics vanish ---------------------------------------------

POSITIONS = [Fraction(1, n) for n in range(2, 9)] + [Fraction(2, 5), Fraction(3, 7)]


def test_missing_harmonics_sit_where_the_sines_vanish():
    # Ideal string plucked at p, ideal point pickup at x (displacement sensing):
    # mode k carries sin(k pi p) sin(k pi x) (Fletcher & Rossing, The Physics of Musical
    # Instruments, 2nd ed. 1998, ch. 2, a_k = 2 h sin(k pi p) / (k^2 pi^2 p (1 - p)); Paiva,
    # Pakarinen & Valimaki, "Acoustics and Modeling of Pickups", JAES 60(10) 2012, for the
    # pickup's sin(k pi x)). So harmonic k is absent exactly when k p or k x is a whole number.
    # A 150 dB threshold separates true zeros (-270 dB in floating point) from the weakest
    # sounding harmonic of a 40-mode string (about -95 dB).
    pos = [float(f) for f in POSITIONS]
    result = survey(ideal(), [40], pos, pos, missing_below_db=150.0)
    count = int(result.mode_counts[0])
    assert count == 40
    for i_p, p in enumerate(POSITIONS):
        for i_x, x in enumerate(POSITIONS):
            expected = [k for k in range(1, count + 1) if (k * p).denominator == 1 or (k * x).denominator == 1]
            assert result.plane().missing_harmonics(i_p, i_x) == expected, (p, x)


def test_missing_at_the_default_threshold_for_low_harmonics():
    # Pluck at 1/3 and pickup at 1/4 leave out every 3rd and every 4th harmonic (common practice;
    # follows from sin(k pi p) and sin(k pi x)); harmonics 1-7 that sound stay within 40 dB.
    plane = survey_grid(ideal(), 40, [0.25], [1 / 3], sensing="velocity")
    assert [k for k in plane.missing_harmonics(0, 0) if k <= 7] == [3, 4, 6]


def open_sound(preset: str | None) -> Settings:
    """A preset's (or the default) sound with each note an open string of its own: these checks are of
    the open-string model, which places pickups anywhere on a note's own length. A fretted instrument
    keeps pickups and pluck short of its last fret; its maps are checked in test_survey_neck.py."""
    settings = load_preset(preset) if preset else Settings.defaults()
    return settings.with_values({"instrument.assign": "open"})


# -- outside facts: brightness and placement --------------------------------------------


@pytest.mark.parametrize("preset", [None, "nylon-fingertip", "little-bell", "dark-coil"])
def test_centroid_rises_as_the_pickup_moves_toward_the_bridge(preset):
    # A pickup nearer the bridge sounds brighter (common practice among players and builders).
    # Pickup distances halve step by step; plucks anywhere from 0.1 to 0.45 of the length.
    settings = open_sound(preset)
    pickups = [0.48, 0.24, 0.12, 0.06, 0.03]
    result = survey(settings, [40, 52, 64], pickups, np.linspace(0.1, 0.45, 15), sensings=["velocity", "displacement"])
    steps_hz = np.diff(result.centroid_hz, axis=-1)
    assert np.all(steps_hz > 0), "centroid steps toward the bridge (Hz), want > 0: " + failing(steps_hz > 0, steps_hz)


def test_centroid_rises_as_the_pluck_moves_toward_the_bridge():
    # Plucking nearer the bridge gives a brighter tone (common practice among players).
    # Open strings, as for the pickup above: the pickups reach nearly half of each note's length.
    result = survey(open_sound(None), [40, 64], [0.03, 0.06, 0.12, 0.24, 0.48], [0.3, 0.2, 0.15, 0.1])
    steps_hz = np.diff(result.centroid_hz, axis=-2)
    assert np.all(steps_hz > 0), "centroid steps toward the bridge (Hz), want > 0: " + failing(steps_hz > 0, steps_hz)


# -- outside facts: the electronics ------------------------------------------------------


def test_electronics_effect_matches_the_textbook_coil_and_cable():
    # Coil R, L, shunt C, load R_L: H(s) = 1 / (L C s^2 + (R C + L / R_L) s + 1 + R / R_L)
    # (Paiva, Pakarinen & Valimaki, JAES 60(10) 2012), DC gain normalised to 1; evaluated with
    # scipy.signal.freqs. Values of the shared worked example: f_r = 4171 Hz, Q = 2.44.
    import scipy.signal

    ind, res, cap, load = 2.5, 6000.0, 600e-12, 200e3
    circuit = {
        "electronics.inductance_h": ind,
        "electronics.resistance_ohm": res,
        "electronics.capacitance_f": cap,
        "electronics.load_ohm": load,
    }
    settings = Settings.defaults().with_values(circuit)
    bypassed = settings.with_values({"electronics.inductance_h": 0.0, "electronics.resonance_hz": 0.0})
    placements = [Placement(0.06, 0.2, 0.02), Placement(0.25, 0.12, 0.03)]
    for note in (40, 64):
        modes, bare = placement_energies(bypassed, note, placements)
        w, h = scipy.signal.freqs(
            [1.0 + res / load], [ind * cap, res * cap + ind / load, 1.0 + res / load], worN=2 * np.pi * modes.freqs_hz
        )
        expected_db = 10 * np.log10((bare * np.abs(h) ** 2).sum(axis=1) / bare.sum(axis=1))
        expected_centroid = (bare * modes.freqs_hz).sum(axis=1) / bare.sum(axis=1)
        for p, want_db, want_c in zip(placements, expected_db, expected_centroid, strict=True):
            result = survey(settings, [note], [p.pickup], [p.pluck], [p.width])
            assert result.electronics_db.item() == pytest.approx(want_db, abs=0.05)
            assert result.centroid_bare_hz.item() == pytest.approx(want_c, rel=1e-9)
            assert result.electronics_db.item() > 0  # the resonance (+7.9 dB peak) lifts these tones


# -- analytic against rendered ------------------------------------------------------------


def fft_centroid_hz(x: np.ndarray, fs: float) -> float:
    """sum f |X(f)|^2 / sum |X(f)|^2 over the FFT of the whole window (rectangular)."""
    power = np.abs(np.fft.rfft(x)) ** 2
    freqs = np.fft.rfftfreq(x.size, 1 / fs)
    return float((power * freqs).sum() / power.sum())


PRESETS = [None, "felt-hammer", "dark-coil", "split-phase", "glass-bridge"]


@pytest.mark.parametrize("preset", PRESETS)
@pytest.mark.parametrize("note", [40, 64])
def test_analytic_centroid_and_level_match_rendered_audio(preset, note):
    # The engine renders the note through the offline renderer; the centroid comes from numpy's
    # FFT of the audio and the level from its summed squares, with no use of the survey's model.
    settings = open_sound(preset)
    own = settings.pickups[0]
    moved = 0.35 if own["position"] < 0.2 else 0.08
    result = survey(settings, [note], [own["position"], moved], window_s=1.0)
    energies = []
    for i, x in enumerate(result.pickups):
        s = settings.with_values({"pickup.0.position": float(x)})
        audio = render_events(note_events(note, 127, 1.5), s, FS, 256, tail_cap_s=0.0)[:FS]
        centroid = fft_centroid_hz(audio, FS)
        assert centroid == pytest.approx(result.centroid_hz[0, 0, 0, 0, i], rel=CENTROID_TOLERANCE)
        energies.append(float(audio @ audio))
    assert result.level_db[0, 0, 0, 0, 0] == pytest.approx(0.0, abs=1e-9)  # the reference itself
    measured = 10 * math.log10(energies[1] / energies[0])
    assert measured == pytest.approx(result.level_db[0, 0, 0, 0, 1], abs=LEVEL_TOLERANCE_DB)


def test_mode_fit_agrees_with_an_independent_least_squares_fit():
    # The verify fit (closed-form normal equations) against numpy's lstsq on the explicit basis
    # of the same damped sinusoids; then the output filters' own ringing (DC blocker, coil and
    # cable), added to the basis, leaves nothing of the engine's audio unexplained.
    # Open rule: the model's modes of note 52 as an open string of its own, which the engine then plays
    # (the fit, not the instrument, is checked here; fretted notes are verified in test_survey_neck.py).
    settings = open_sound(None)
    audio, limited = render_note(settings, 52, 0.5, FS, 256)
    model = EngineModel(settings, FS)
    modes = model.note_modes(52)
    ours, residual_modes = fit_mode_amplitudes(audio, FS, modes.freqs_hz, modes.sigma_per_s)
    theirs = fit_damped_modes(audio, FS, modes.freqs_hz, modes.sigma_per_s)
    assert not limited
    np.testing.assert_allclose(ours, theirs, rtol=1e-6, atol=1e-9 * np.abs(theirs).max())
    _, residual = fit_mode_amplitudes(audio, FS, modes.freqs_hz, modes.sigma_per_s, model.output_poles())
    assert residual < 1e-9 < residual_modes


@pytest.mark.parametrize("preset", PRESETS)
def test_verify_rendered_points_stay_within_tolerance(preset):
    # Issue 6: analytic and measured descriptors within 0.5 dB and 1 % in centroid.
    settings = open_sound(preset)
    result = survey(
        settings,
        [40, 57],
        np.linspace(0.03, 0.45, 8),
        np.linspace(0.08, 0.45, 5),
        sensings=["velocity", "displacement"],
        window_s=0.8,
    )
    rows = verify(result, sample_points(result, 4), jobs=2)
    assert len(rows) == 4
    for row in rows:
        assert abs(row.centroid_diff_pct) < 100 * CENTROID_TOLERANCE
        assert abs(row.level_diff_db) < LEVEL_TOLERANCE_DB
        assert abs(row.odd_even_diff_db) < LEVEL_TOLERANCE_DB
        assert abs(row.electronics_diff_db) < LEVEL_TOLERANCE_DB
        assert row.worst_harmonic_diff_db < LEVEL_TOLERANCE_DB
        assert row.residual_pct < 1e-4  # the modes and the output filters explain the audio
        assert row.within_tolerance


def test_verify_notices_a_model_that_differs_from_the_engine():
    # A map that is not what the engine plays must fail verification: computed for a
    # displacement pickup but labelled velocity, so the engine renders a brighter tone.
    # on the default neck: pickups at 65 and 162 mm, short of the last fret at 181.8 mm (12-TET fret rule)
    result = survey(Settings.defaults(), [40], [0.1, 0.25], sensings=["displacement"])
    forged = dataclasses.replace(result, sensings=("velocity",))
    rows = verify(forged, [(0, 0, 0, 0, 0)], jobs=1)
    assert not rows[0].within_tolerance


# -- the command line: CSV, pictures, comparison, verify ------------------------------------


def test_csv_has_the_documented_columns_and_one_row_per_point(tmp_path, capsys):
    out = tmp_path / "map.csv"
    rc = main(
        [
            "survey",
            "--note",
            "40",
            "--note",
            "52",
            "--pickup",
            "20:170:10mm",  # 16 places, all short of the default neck's last fret at 181.8 mm
            "--pluck",
            "0.05:0.25:0.1",
            "--sensing",
            "velocity",
            "--sensing",
            "displacement",
            "-o",
            str(out),
        ]
    )
    assert rc == 0
    assert "wrote" in capsys.readouterr().out
    with open(out, newline="") as fh:
        rows = list(csv.DictReader(fh))
    required = [
        "note",
        "pickup_position",
        "pickup_width",
        "pluck_position",
        "centroid_hz",
        "odd_even_db",
        "level_db",
        "missing",
    ]
    # The default six-string: two columns, string and fret, follow the note (README, "The CSV columns").
    assert list(rows[0]) == list(FRETTED_COLUMNS) and set(required) <= set(COLUMNS)
    assert len(rows) == 2 * 2 * 3 * 16
    for row in rows:
        assert float(row["pickup_position"]) * SCALE_MM == pytest.approx(float(row["pickup_position_mm"]), abs=0.01)
        assert all(k.isdigit() for k in row["missing"].split())
        assert float(row["centroid_ratio"]) == pytest.approx(float(row["centroid_hz"]) / float(row["f1_hz"]), rel=1e-3)
    by_note = {r["note"] for r in rows}
    assert by_note == {"40", "52"}
    # Standard tuning E2 A2 D3 G3 B3 E4 (common practice): E2 is the open low string; E3 lies nearest the
    # hand at fret 3 at fret 2 of the D string (string 4).
    assert {(r["note"], r["string"], r["fret"]) for r in rows} == {("40", "6", "0"), ("52", "4", "2")}


def test_plots_are_written_as_png(tmp_path, capsys):
    import matplotlib.image  # a dependency of rtvoice itself: missing, this test fails rather than skips

    out, png, bars = tmp_path / "map.csv", tmp_path / "map.png", tmp_path / "bars.png"
    rc = main(
        [
            "survey",
            "--note",
            "40",
            "--pickup",
            "10:180:10mm",  # within the default neck (its last fret lies 181.8 mm from the saddle)
            "--pluck",
            "20:180:20mm",
            "-o",
            str(out),
            "--plot",
            str(png),
            "--compare",
            "40mm,130mm",
            "160mm,130mm",
            "--compare-plot",
            str(bars),
        ]
    )
    assert rc == 0
    text = capsys.readouterr().out
    assert "compare (note 40" in text and "harmonic" in text
    for path in (png, bars):
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert matplotlib.image.imread(path).shape[0] > 200


def test_comparison_table_lists_the_sine_zero(tmp_path, capsys):
    # Pickup at 1/4 of the length: harmonic 4 is silenced (sin(4 pi / 4) = 0, common practice),
    # while a pickup at 1/5 keeps it. E2 (40) is the open low string of the default six-string, so its
    # length is the scale; the pluck at 0.27 (175 mm) lies short of the last fret (181.8 mm).
    out = tmp_path / "map.csv"
    rc = main(
        [
            "survey",
            "--note",
            "40",
            "--pickup",
            "0.1",
            "-o",
            str(out),
            "--set",
            "pickup.0.width=0",
            "--compare",
            "0.25,0.27",
            "0.2,0.27",
        ]
    )
    assert rc == 0
    line4 = [ln for ln in capsys.readouterr().out.splitlines() if ln.split()[:1] == ["4"]][0].split()
    assert float(line4[2]) == -60.0 and float(line4[3]) > -40.0


def test_plot_without_matplotlib_is_a_one_line_error(tmp_path):
    # matplotlib is installed here, so its absence is simulated by blocking the import
    # (sys.modules entry None makes `import matplotlib` raise ImportError).
    out = tmp_path / "map.csv"
    r = rtvoice(
        "survey",
        "--note",
        "40",
        "--pickup",
        "0.1:0.3:0.1",
        "-o",
        str(out),
        "--plot",
        str(tmp_path / "map.png"),
        prelude="import sys; sys.modules['matplotlib'] = None",
    )
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "rerun scripts/run" in r.stderr and "pip install" not in r.stderr
    assert not out.exists()


#: The PNG file signature (PNG specification, ISO/IEC 15948:2004, section 5.2).
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


#: The distribution's name in pyproject.toml (the import package is rtvoice).
DISTRIBUTION = "rtvoice-modal-string"


def test_plain_install_draws_a_png_without_a_display(tmp_path):
    # matplotlib comes with rtvoice itself, not through an extra: a plain install (scripts/run) has it.
    from importlib.metadata import requires

    plain = [r for r in requires(DISTRIBUTION) or [] if "extra ==" not in r]
    assert any(r.replace(" ", "").startswith("matplotlib") for r in plain), plain
    # No display, and a user's MPLBACKEND naming a screen backend: the picture is still drawn to the file.
    env = {k: v for k, v in os.environ.items() if k not in ("DISPLAY", "WAYLAND_DISPLAY")}
    env.update(OPENBLAS_NUM_THREADS="1", MPLBACKEND="tkagg")
    png = tmp_path / "map.png"
    # (places within the default neck, whose last fret lies at 0.28 of the scale)
    r = subprocess.run([sys.executable, "-m", "rtvoice.cli", "survey", "--note", "40", "--pickup", "0.03:0.27:0.03",
                        "--pluck", "0.05:0.25:0.05", "-o", str(tmp_path / "map.csv"), "--plot", str(png)],
                       capture_output=True, text=True, env=env, timeout=300)
    assert r.returncode == 0, r.stderr
    data = png.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    # ISO/IEC 15948, 5.3, 11.2.2 and 11.2.5: the first chunk is IHDR (length 13) with a nonzero width and height;
    # the last is IEND, empty, with the CRC-32 of its type 0xAE426082.
    assert data[8:16] == b"\x00\x00\x00\x0dIHDR"
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")
    assert width > 200 and height > 200
    assert data[-12:] == b"\x00\x00\x00\x00IEND\xae\x42\x60\x82"


def test_cli_verify_reports_differences_within_tolerance(tmp_path, capsys):
    out = tmp_path / "map.csv"
    rc = main(
        [
            "survey",
            "--note",
            "45",
            "--pickup",
            "0.03:0.27:0.03",  # within the default neck (its last fret lies at 0.28 of the scale)
            "--pluck",
            "0.1:0.25:0.05",
            "-o",
            str(out),
            "--verify",
            "--verify-points",
            "3",
            "--jobs",
            "2",
            "--window",
            "0.5",
        ]
    )
    text = capsys.readouterr().out
    assert rc == 0, text
    assert "verify: 3 point(s)" in text and "within 0.5 dB and 1 %" in text


# -- the function the UI calls ----------------------------------------------------------------


def test_survey_grid_is_one_plane_of_the_full_survey():
    settings = load_preset("split-phase")
    pickups, plucks = np.linspace(0.02, 0.5, 25), np.linspace(0.05, 0.5, 10)
    plane = survey_grid(settings, 52, pickups, plucks, width=0.03, sensing="velocity")
    full = survey(settings, [40, 52], pickups, plucks, [0.01, 0.03], ["displacement", "velocity"])
    same = full.plane(1, 1, 1)
    assert plane.centroid_hz.shape == (10, 25) and plane.missing.shape[:2] == (10, 25)
    for name in ("centroid_hz", "odd_even_db", "level_db", "electronics_db", "centroid_bare_hz"):
        np.testing.assert_allclose(getattr(plane, name), getattr(same, name), rtol=1e-12)
    np.testing.assert_array_equal(plane.missing, same.missing)
