"""The instrument heard: strings, frets, and pluck and pickups fixed in space.

Every check measures rendered samples (FFT peaks, least-squares fits) against a
published formula or a fact of the trade named beside it; nothing here reads the
engine's internals.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from rtvoice.engine import Engine, Settings, sounding_places, take_placements
from rtvoice.offline.render import render_events
from tests.analysis import peak_frequency_hz

FS = 48000
SCALE_MM = 648.0


def _quiet_chain(**changes):
    """A single narrow displacement pickup with the electronics bypassed, so partial levels show the
    pluck and the pickup's mode shapes alone."""
    base = {"pickup.0.width": 0.0, "pickup.0.sensing": "displacement", "electronics.resonance_hz": 0.0,
            "excitation.width": 0.0, "string.modes": 64}
    base.update(changes)
    return Settings.defaults().with_values(base)


def _partial_levels_db(x: np.ndarray, f0_hz: float, b: float, ks: range) -> np.ndarray:
    """Level in dB of partial k (FFT peak of a Hann-windowed second) at f_k = k f0 sqrt(1 + B k^2)."""
    seg = x[FS // 10: FS // 10 + FS]
    spec = np.abs(np.fft.rfft(seg * np.hanning(seg.size), 4 * seg.size))
    freqs = np.fft.rfftfreq(4 * seg.size, 1 / FS)
    out = []
    for k in ks:
        fk = k * f0_hz * np.sqrt(1 + b * k * k)
        band = np.abs(freqs - fk) < 0.25 * f0_hz
        out.append(20 * np.log10(spec[band].max() + 1e-30))
    return np.array(out)


def _play(settings: Settings, note: int, channel: int = 0, seconds: float = 1.3) -> np.ndarray:
    events = [(0.0, 0x90 | channel, note, 100), (seconds, 0x80 | channel, note, 0)]
    return render_events(events, settings, FS, 256, tail_cap_s=0.0)


def _midi_hz(note: int) -> float:
    # 12-TET with A4 = 440 Hz at MIDI note 69 (MIDI 1.0 note numbers; common practice)
    return 440.0 * 2 ** ((note - 69) / 12)


# -- fixed in space -------------------------------------------------------------------


def test_a_pickup_a_quarter_of_the_scale_from_the_saddle_is_at_the_middle_of_the_note_at_fret_12():
    # A pickup 162 mm from the saddle of a 648 mm scale lies at 1/4 of the open string and 1/2 of the
    # note stopped at fret 12 (12-TET fret rule: fret 12 halves the speaking length; common practice).
    # A point pickup at fraction x senses mode k by sin(k pi x) (Fletcher & Rossing, The Physics of
    # Musical Instruments, 2nd ed. 1998, ch. 2): open, harmonics 4 and 8 vanish; at fret 12 every even one.
    s = _quiet_chain(**{"instrument.assign": "channel", "pickup.0.position": "162mm",
                        "excitation.position": "85mm", "strings.6.inharmonicity": 0.0})
    open_e2 = _partial_levels_db(_play(s, 40, channel=5), _midi_hz(40), 0.0, range(1, 9))
    fret12 = _partial_levels_db(_play(s, 52, channel=5), _midi_hz(52), 0.0, range(1, 9))
    rel_open = open_e2 - open_e2.max()
    rel_12 = fret12 - fret12.max()
    assert rel_open[3] < -45 and rel_open[7] < -45, rel_open  # k = 4, 8: nodes of sin(k pi / 4)
    assert rel_open[1] > -30, rel_open  # k = 2 sounds on the open string
    assert max(rel_12[1], rel_12[3], rel_12[5]) < -45, rel_12  # k = 2, 4, 6: nodes of sin(k pi / 2)
    assert rel_12[0] > -20 and rel_12[2] > -30, rel_12


def test_under_the_open_rule_the_same_fraction_follows_each_notes_own_length():
    # The open rule keeps the older meaning: 0.25 of every note's own length, so E3 played as its own
    # open string loses harmonic 4 (sin(4 pi / 4) = 0; Fletcher & Rossing 1998, ch. 2), not harmonic 2.
    # (The default is the hand rule now: the test names the open rule it checks.)
    s = _quiet_chain(**{"instrument.assign": "open", "pickup.0.position": 0.25, "excitation.position": 0.13,
                        "string.inharmonicity": 0.0})
    rel = _partial_levels_db(_play(s, 52), _midi_hz(52), 0.0, range(1, 9))
    rel = rel - rel.max()
    assert rel[3] < -45 and rel[1] > -30, rel


def test_a_slanted_pickup_sits_at_its_own_distance_under_each_string():
    # Centre 0.225 of the scale, slant +0.05: 0.25 under string 1 and 0.20 under string 6, so the open
    # high E loses harmonic 4 and the open low E harmonic 5 (sin(k pi x); Fletcher & Rossing 1998, ch. 2).
    s = _quiet_chain(**{"instrument.assign": "channel", "pickup.0.position": 0.225, "pickup.0.slant": 0.05,
                        "excitation.position": 0.13, "strings.1.inharmonicity": 0.0,
                        "strings.6.inharmonicity": 0.0})
    high = _partial_levels_db(_play(s, 64, channel=0), _midi_hz(64), 0.0, range(1, 7))
    low = _partial_levels_db(_play(s, 40, channel=5), _midi_hz(40), 0.0, range(1, 7))
    high, low = high - high.max(), low - low.max()
    assert high[3] < -45 and high[4] > -40, high
    assert low[4] < -45 and low[3] > -40, low


# -- stiffness from the gauge and across frets -------------------------------------------


def _fitted_b(x: np.ndarray, f0_hz: float, ks: range, b_guess: float) -> float:
    """B from measured partial frequencies: (f_k / k)^2 = f0^2 (1 + B k^2) is a line in k^2
    (Fletcher, JASA 36, 203, 1964), fitted by least squares."""
    seg = x[FS // 10: FS // 10 + FS]
    fk = np.array([peak_frequency_hz(seg, FS, k * f0_hz * np.sqrt(1 + b_guess * k * k), 0.2 * f0_hz) for k in ks])
    k = np.array(list(ks), float)
    slope, intercept = np.polyfit(k * k, (fk / k) ** 2, 1)
    return float(slope / intercept)


def test_the_plain_high_e_has_the_stiffness_its_gauge_gives():
    # .010 in plain steel, 648 mm, E4 = 329.63 Hz, rho 7850 kg/m^3, E 200 GPa: B = 1.32e-5
    # (Fletcher 1964, B = pi^3 E d^4 / (64 T L^2), with T from Mersenne-Taylor; worked in
    # ../shared/references.md). Measured from the rendered partials 1..40.
    # Pluck and pickup at 0.13 and 0.11 of the scale put no node of sin(k pi x) on partials 1..40.
    s = _quiet_chain(**{"instrument.assign": "channel", "pickup.0.position": 0.11, "excitation.position": 0.13})
    b = _fitted_b(_play(s, 64, channel=0), _midi_hz(64), range(1, 41), 1.32e-5)
    assert b == pytest.approx(1.32e-5, rel=0.03)


def test_stiffness_grows_fourfold_at_the_12th_fret():
    # At one tension B = pi^3 E d^4 / (64 T L^2) goes as 1/L^2 (Fletcher 1964): halving the speaking
    # length at fret 12 (12-TET fret rule, common practice) gives 4 B. Kemp, SN Applied Sciences 2, 636
    # (2020) measures the same growth along a bass string's frets.
    s = _quiet_chain(**{"instrument.assign": "channel", "strings.6.inharmonicity": 2.0e-4,
                        "pickup.0.position": 0.11, "excitation.position": 0.07})
    b_open = _fitted_b(_play(s, 40, channel=5), _midi_hz(40), range(1, 25), 2e-4)
    b_12 = _fitted_b(_play(s, 52, channel=5), _midi_hz(52), range(1, 25), 8e-4)
    assert b_open == pytest.approx(2.0e-4, rel=0.03)
    assert b_12 / b_open == pytest.approx(4.0, rel=0.03)


def _cents_sharp(x: np.ndarray, note: int, k: int, b: float) -> float:
    """How far partial k lies above k times the measured fundamental, in cents."""
    seg = x[FS // 10: FS // 10 + FS]
    f0 = _midi_hz(note)
    f1 = peak_frequency_hz(seg, FS, f0 * np.sqrt(1 + b), 0.2 * f0)
    fk = peak_frequency_hz(seg, FS, k * f0 * np.sqrt(1 + b * k * k), 0.3 * f0)
    return float(1200 * np.log2(fk / (k * f1)))


def test_a_string_whose_10th_partial_is_100_cents_sharp_at_fret_12_has_its_6th_as_sharp_at_fret_21():
    # Kemp, "On inharmonicity in bass guitar strings", SN Applied Sciences 2, 636 (2020): on a low bass
    # string, partial 10 at the 12th fret and partial 6 at the 21st are both about 100 cents sharp, as
    # B ~ 1/L^2 at one tension predicts (calc in ../shared/references.md: B12 = 1.22e-3 gives 100 cents at
    # k = 10, B21 = B12 2^(9/6) = 3.46e-3 gives 101.6 cents at k = 6). Open B = B12 / 4 (Fletcher 1964).
    s = _quiet_chain(**{"instrument.assign": "channel", "strings.6.inharmonicity": 1.22e-3 / 4,
                        "pickup.0.position": 0.06, "excitation.position": 0.045})
    at_12 = _cents_sharp(_play(s, 52, channel=5), 52, 10, 1.22e-3)
    at_21 = _cents_sharp(_play(s, 61, channel=5), 61, 6, 3.46e-3)
    assert at_12 == pytest.approx(98.6, abs=4)  # 1200 log2(sqrt((1 + 100 B) / (1 + B))), B = 1.22e-3 (calc)
    assert at_21 == pytest.approx(98.6, abs=4)  # the same with k = 6, B = 3.46e-3 (calc)
    assert abs(at_12 - at_21) < 2  # the two agree, as Kemp reports


def test_the_plain_g_string_is_more_inharmonic_than_the_wound_d_below_it():
    # Fastl & Völk, "Inharmonicity of sounds from electric guitars: physical flaw or musical asset?"
    # (TU München; venue and year from memory, to be checked) report a plain G3 more inharmonic than a
    # wound D3. The default light set's G (.017 in plain) and D (.026 in on a 0.33 mm core) give
    # B = 1.08e-4 and 3.4e-5 (Fletcher 1964, calc in ../shared/references.md); measured from the audio.
    s = _quiet_chain(**{"instrument.assign": "channel", "pickup.0.position": 0.11, "excitation.position": 0.13})
    b_g = _fitted_b(_play(s, 55, channel=2), _midi_hz(55), range(1, 31), 1.08e-4)
    b_d = _fitted_b(_play(s, 50, channel=3), _midi_hz(50), range(1, 31), 3.4e-5)
    assert b_g == pytest.approx(1.08e-4, rel=0.05) and b_d == pytest.approx(3.35e-5, rel=0.05)
    assert b_g > 3 * b_d


# -- which string plays a note ------------------------------------------------------------


def _placed(settings: Settings, events: list[tuple[int, int, int, int]]) -> tuple[Engine, list]:
    engine = Engine(settings, FS, 256)
    engine.render(events)
    return engine, take_placements(engine)


@pytest.mark.parametrize(("hand", "string", "fret"), [(0.0, 4, 2), (7.0, 5, 7), (12.0, 6, 12)])
def test_the_hand_rule_plays_e3_where_the_hand_is(hand, string, fret):
    # Standard tuning E2 A2 D3 G3 B3 E4 (MIDI 40 45 50 55 59 64; common practice): E3 (52) lies at fret 2
    # of the D string, fret 7 of the A string and fret 12 of the low E string.
    s = Settings.defaults().with_values({"instrument.assign": "hand", "hand.fret": hand})
    _, placed = _placed(s, [(0, 0x90, 52, 100)])
    assert [(p.string, p.fret) for p in placed] == [(string, fret)]


def test_the_hand_rule_prefers_a_string_that_is_not_sounding():
    # The same E3 again on another channel while the first rings: the D string is busy, so the
    # next-nearest string to a hand at fret 2 (fret 7 of the A string) takes it (standard tuning).
    s = Settings.defaults().with_values({"instrument.assign": "hand", "hand.fret": 2.0})
    _, placed = _placed(s, [(0, 0x90, 52, 100), (10, 0x91, 52, 100)])
    assert [(p.string, p.fret) for p in placed] == [(4, 2), (5, 7)]


def test_the_channel_rule_plays_string_n_on_channel_n_and_leaves_out_what_it_cannot_reach():
    # One MIDI channel per string, channel 1 = string 1 (MIDI guitar controllers' convention, common
    # practice). C4 (60) is below the open E4 of string 1: no string 1 fret can play it.
    s = Settings.defaults().with_values({"instrument.assign": "channel"})
    engine, placed = _placed(s, [(0, 0x91, 62, 100), (5, 0x90, 60, 100), (9, 0x95, 45, 100)])
    assert [(p.note, p.string, p.fret) for p in placed] == [(62, 2, 3), (45, 6, 5)]
    assert engine.stats.unplayable == 1
    assert sorted((p.string, p.fret) for p in sounding_places(engine)) == [(2, 3), (6, 5)]


def test_a_note_below_every_open_string_or_past_the_last_fret_is_not_played():
    # Standard tuning's lowest note is E2 (40); 22 frets on the top E4 reach D6 (86) (common practice).
    s = Settings.defaults().with_values({"instrument.assign": "hand"})
    engine, placed = _placed(s, [(0, 0x90, 39, 100), (1, 0x90, 87, 100), (2, 0x90, 86, 100)])
    assert [(p.string, p.fret) for p in placed] == [(1, 22)]
    assert engine.stats.unplayable == 2


def test_one_note_per_string_a_new_note_stops_the_old_one():
    # A string sounds one note at a time: fretting F#4 on the ringing top string stops its open E4.
    s = Settings.defaults().with_values({"instrument.assign": "channel"})
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 64, 100)])
    engine.render([(0, 0x90, 66, 100)])
    assert [(p.string, p.fret, p.note) for p in sounding_places(engine)] == [(1, 2, 66)]


# -- the command line ------------------------------------------------------------------


def _render_cli(tmp_path, *args):
    out = tmp_path / "n.wav"
    r = subprocess.run([sys.executable, "-m", "rtvoice.cli", "render", "-o", str(out), "--seconds", "0.2",
                        "--tail-cap", "0.1", *args], capture_output=True, text=True, timeout=120)
    return r, out


def test_render_string_plays_the_note_on_that_string_and_says_where(tmp_path):
    # E3 (52) on string 5 (A2, 45) is fret 7 (standard tuning, common practice).
    r, out = _render_cli(tmp_path, "--note", "E3", "--string", "5", "--json")
    assert r.returncode == 0, r.stderr
    report = json.loads(r.stdout)
    assert report["notes"] == [{"note": 52, "name": "E3", "string": 5, "fret": 7, "count": 1}]
    assert out.exists() and report["unplayable"] == 0


def test_render_says_in_words_which_string_and_fret_played(tmp_path):
    r, _ = _render_cli(tmp_path, "--note", "52", "--set", "instrument.assign=hand", "--set", "hand.fret=12")
    assert r.returncode == 0, r.stderr
    assert "E3 (52) on string 6, fret 12" in r.stdout


def test_render_refuses_a_string_that_cannot_play_the_note_and_writes_nothing(tmp_path):
    # E3 is below the open B3 of string 2 (standard tuning).
    r, out = _render_cli(tmp_path, "--note", "E3", "--string", "2")
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "string 2" in r.stderr and "B3" in r.stderr
    assert not out.exists()
