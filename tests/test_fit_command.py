"""`rtvoice fit` end to end: a take rendered by the engine at known places comes back as those places,
the fitted preset plays like the take, a take with its pickup moved matches a take played there, and
bad input writes nothing.

Partial levels are measured here by a method of the test's own (a flat-top windowed FFT read at each
partial, scipy.signal.windows.flattop, whose amplitude error is below 0.01 dB: D'Antona & Ferrero,
Digital Signal Processing for Measurement Systems, 2006), not by the fit's analysis.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy.signal.windows import flattop
from support.cli import run_cli

from rtvoice.engine import Settings, inharmonicity_of, string_physics_of
from rtvoice.offline.render import note_events, render_events
from rtvoice.offline.wav import write_wav

FS = 48000
SCALE_MM = 648.0


def take_at(path, *, pluck_mm: float, pickup_mm: float, string: int, fret: int, seconds: float = 2.0) -> Settings:
    """Render string ``string`` at ``fret`` of the default six-string with the pluck and pickup at
    these distances into ``path`` (MIDI channel n plays string n); the settings it used."""
    settings = Settings.defaults().with_values({
        "instrument.assign": "channel", "excitation.position": f"{pluck_mm}mm", "pickup.0.position": f"{pickup_mm}mm",
        "string.modes": 64})
    note = int(settings.strings[string - 1].note) + fret
    audio = render_events(note_events(note, 100, seconds, channel=string - 1), settings, FS, tail_cap_s=0.0)
    write_wav(path, audio[: int(seconds * FS)], FS)
    return settings


def partial_levels_db(path, f0_hz: float, b: float, count: int) -> np.ndarray:
    """Levels (dB) of partials 1..count at f_k = k f0 sqrt(1 + B k^2) (Fletcher 1964), flat-top window
    over 0.05 .. 0.55 s, read at the bin nearest each partial's peak."""
    from scipy.io import wavfile

    rate, x = wavfile.read(path)
    seg = np.asarray(x[int(0.05 * rate): int(0.55 * rate)], float)
    w = flattop(seg.size)
    n = 1 << 18
    spec = np.abs(np.fft.rfft(seg * w, n)) * 2 / w.sum()
    freqs = np.fft.rfftfreq(n, 1 / rate)
    k = np.arange(1, count + 1)
    fk = k * f0_hz * np.sqrt(1 + b * k**2)
    out = []
    for f in fk:
        band = (freqs > f - 0.3 * f0_hz) & (freqs < f + 0.3 * f0_hz)
        out.append(20 * np.log10(spec[band].max() + 1e-20))
    return np.array(out)


def _fit_json(capsys, *argv: str) -> dict:
    code, out, err = run_cli(["fit", *argv, "--json"], capsys)
    assert code == 0, err
    return json.loads(out)


def test_a_rendered_take_gives_back_its_string_places_stiffness_and_decay(tmp_path, capsys):
    """String 5 (A2) at fret 7 plays E3 = MIDI 52, 164.81 Hz (12-TET, A4 = 440 Hz, common practice);
    its B is the open string's times 2^(7/6) (Fletcher 1964 with L 2^(-n/12), the fret rule)."""
    take = tmp_path / "take.wav"
    settings = take_at(take, pluck_mm=70.0, pickup_mm=120.0, string=5, fret=7)
    s = _fit_json(capsys, str(take), "--string", "5")
    assert (s["string"], s["fret"], s["note"]) == (5, 7, 52)
    assert 1200 * abs(math.log2(s["f0_hz"] / (440 * 2 ** ((52 - 69) / 12)))) < 0.5
    b_expected = inharmonicity_of(settings, 5) * 2 ** (7 / 6)
    assert s["inharmonicity"] == pytest.approx(b_expected, rel=0.05)
    assert s["t60_low_s"] == pytest.approx(settings.get("string.t60_low"), rel=0.10)
    assert s["t60_high_s"] == pytest.approx(settings.get("string.t60_high"), rel=0.10)
    pair = sorted([s["pluck_mm"], s["pickup_mm"]])  # one take: which is which cannot be told
    assert pair == [pytest.approx(70.0, abs=3.0), pytest.approx(120.0, abs=3.0)]
    assert s["assignment"] == "guess"
    assert s["explained_energy"] > 0.9
    assert string_physics_of(settings, 5).inharmonicity > 0  # the gauge gives B (the string has no B of its own)


def test_without_a_string_the_lowest_fret_is_chosen(tmp_path, capsys):
    """E3 (MIDI 52) on the standard tuning E2 A2 D3 G3 B3 E4: the D string (4, open D3 = 50) at fret 2
    is the lowest fret that plays it (common practice)."""
    take = tmp_path / "e3.wav"
    take_at(take, pluck_mm=90.0, pickup_mm=40.0, string=4, fret=2)
    s = _fit_json(capsys, str(take))
    assert (s["string"], s["fret"], s["string_chosen"]) == (4, 2, "lowest fret")


def test_the_fitted_preset_plays_like_the_take(tmp_path, capsys):
    take, fitted, again = tmp_path / "take.wav", tmp_path / "fitted.toml", tmp_path / "again.wav"
    take_at(take, pluck_mm=110.0, pickup_mm=45.0, string=3, fret=4)
    s = _fit_json(capsys, str(take), "--string", "3", "-o", str(fitted))
    code, _, err = run_cli(["render", "--preset", str(fitted), "--note", str(s["note"]), "--string", "3",
                            "--seconds", "2", "--set", "string.modes=64", "-o", str(again)], capsys)
    assert code == 0, err
    want = partial_levels_db(take, s["f0_hz"], s["inharmonicity"], 20)
    got = partial_levels_db(again, s["f0_hz"], s["inharmonicity"], 20)
    heard = want > want.max() - 40  # partials in a comb null are noise-level in both
    assert np.abs((got - want)[heard]).max() < 1.0


def test_moving_the_pickup_on_a_take_matches_a_take_played_there(tmp_path, capsys):
    """The issue's check: a take with the pickup at A moved to B matches a take rendered at B within
    1 dB on the first 20 partials not in a null; moving there and back returns the take within 0.5 dB."""
    at_a, at_b = tmp_path / "a.wav", tmp_path / "b.wav"
    moved, back = tmp_path / "moved.wav", tmp_path / "back.wav"
    take_at(at_a, pluck_mm=130.0, pickup_mm=45.0, string=2, fret=3)
    take_at(at_b, pluck_mm=130.0, pickup_mm=95.0, string=2, fret=3)
    s = _fit_json(capsys, str(at_a), "--string", "2", "--pickup-distance", "45mm", "--move-pickup", "95mm",
                  "-o", str(moved))
    assert s["assignment"] == "given" and s["pluck_mm"] == pytest.approx(130.0, abs=3.0)
    f0, b = s["f0_hz"], s["inharmonicity"]
    want, got = partial_levels_db(at_b, f0, b, 24), partial_levels_db(moved, f0, b, 24)
    heard = np.flatnonzero(want > want.max() - 40)[:20]
    assert np.abs(got[heard] - want[heard]).max() < 1.0
    _fit_json(capsys, str(moved), "--string", "2", "--pickup-distance", "95mm", "--move-pickup", "45mm",
              "-o", str(back))
    original, returned = partial_levels_db(at_a, f0, b, 24), partial_levels_db(back, f0, b, 24)
    heard = np.flatnonzero(original > original.max() - 40)[:20]
    assert np.abs(returned[heard] - original[heard]).max() < 0.5


def test_several_takes_share_the_pickup(tmp_path, capsys):
    """Three takes of one string plucked at different spots: the distance common to all is the pickup."""
    paths = []
    for i, pluck in enumerate((60.0, 105.0, 150.0)):
        paths.append(str(tmp_path / f"t{i}.wav"))
        take_at(paths[-1], pluck_mm=pluck, pickup_mm=80.0, string=4, fret=0)
    s = _fit_json(capsys, *paths, "--string", "4")
    assert s["assignment"] == "shared"
    assert s["pickup_mm"] == pytest.approx(80.0, abs=3.0)
    assert s["pluck_mm"] == [pytest.approx(p, abs=5.0) for p in (60.0, 105.0, 150.0)]


@pytest.mark.parametrize("make, extra, says", [
    (lambda p: p.write_text("not audio"), [], "WAV"),
    (lambda p: write_wav(p, np.zeros(FS), FS), [], "silent"),
    (lambda p: write_wav(p, 0.3 * np.sin(2 * np.pi * 220 * np.arange(FS) / 8000), 8000), [], "16"),
    (lambda p: write_wav(p, np.clip(3 * np.sin(2 * np.pi * 110 * np.arange(FS) / FS), -1, 1), FS), [], "clip"),
    (None, ["--string", "1"], "cannot play"),  # E3 is below string 1's open E4
    (None, ["-o", "out.wav"], ".toml"),
])
def test_bad_input_is_one_line_exit_2_and_writes_nothing(tmp_path, capsys, monkeypatch, make, extra, says):
    monkeypatch.chdir(tmp_path)
    take = tmp_path / "take.wav"
    if make is None:
        take_at(take, pluck_mm=90.0, pickup_mm=40.0, string=4, fret=2)
    else:
        make(take)
    before = sorted(p.name for p in tmp_path.iterdir())
    code, out, err = run_cli(["fit", str(take), "--report", "pic.png", "--render", "r.wav", *extra], capsys)
    assert code == 2
    assert err.count("\n") == 1 and says.lower() in err.lower(), err
    assert sorted(p.name for p in tmp_path.iterdir()) == before
