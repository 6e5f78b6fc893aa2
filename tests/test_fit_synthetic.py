"""Synthetic takes for the accuracy benchmark of ``rtvoice fit``: each take holds what its truth says.

Checked against outside formulas and libraries: 12-TET and MIDI note numbers (MIDI 1.0 Detailed
Specification; A4 = 440 Hz, ISO 16:1975), the 12-TET fret rule (common practice), Fletcher's
stiff-string partials (JASA 36, 1964), the pickup's mode-shape weight sin(k pi x / L) (Paiva,
Pakarinen & Välimäki, JAES 60(10), 2012), the "Audio EQ Cookbook" (R. Bristow-Johnson, common
practice) through scipy.signal, T60 = 3 ln 10 / sigma, and spectra measured by tests/analysis.py.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from analysis import decay_rate_per_s, peak_frequency_hz
from scipy import signal

from rtvoice.engine import Settings, inharmonicity_of
from rtvoice.fit.synthetic import (
    Beating,
    TakePlan,
    draw_plan,
    group_takes,
    make_take,
    plan_settings,
    render_truth,
    synthetic_takes,
    truth_of,
)
from rtvoice.fit.synthetic_tone import ToneFilter

FS = 48000
SECONDS = 1.5  # long enough for the partials' peaks, short enough for a quick suite


def _plan(seed: int, **changes: object) -> TakePlan:
    return replace(draw_plan(np.random.default_rng(seed)), **changes)  # type: ignore[arg-type]


def _cents(f_hz: float, ref_hz: float) -> float:
    return 1200.0 * math.log2(f_hz / ref_hz)


def _twelve_tet_hz(note: int) -> float:
    """f = 440 * 2^((n - 69) / 12) (MIDI 1.0 Detailed Specification; ISO 16:1975)."""
    return 440.0 * 2.0 ** ((note - 69) / 12.0)


def _partial_levels_db(x: np.ndarray, f0_hz: float, freqs_hz: list[float]) -> tuple[np.ndarray, np.ndarray]:
    """(level in dB, frequency of the bin) of the largest Hann-windowed spectral peak within f0/4 of each
    of ``freqs_hz``."""
    pad = 4 * x.size
    spec = np.abs(np.fft.rfft(x * np.hanning(x.size), pad))
    bins = np.fft.rfftfreq(pad, 1.0 / FS)
    levels, where = [], []
    for f in freqs_hz:
        band = np.flatnonzero(np.abs(bins - f) <= f0_hz / 4)
        i = band[np.argmax(spec[band])]
        levels.append(20 * np.log10(spec[i]))
        where.append(bins[i])
    return np.array(levels), np.array(where)


def test_a_seed_gives_the_same_takes_and_another_seed_others():
    # The benchmark's promise (issue 18): the same command gives the same table.
    first = list(synthetic_takes(2, seed=5, seconds=0.5))
    again = list(synthetic_takes(2, seed=5, seconds=0.5))
    shorter = next(synthetic_takes(1, seed=5, seconds=0.5))
    other = next(synthetic_takes(1, seed=6, seconds=0.5))
    for a, b in zip(first, again, strict=True):
        assert np.array_equal(a.samples, b.samples) and a.truth == b.truth and a.settings_text == b.settings_text
    assert np.array_equal(shorter.samples, first[0].samples) and shorter.truth == first[0].truth, \
        "a longer run should start with the takes of a shorter one"
    assert other.truth != first[0].truth
    assert other.samples.shape != first[0].samples.shape or not np.allclose(other.samples, first[0].samples)
    assert (first[0].truth.kind, len(first[0].truth.pickup_mm)) == ("single", 1)
    assert (first[1].truth.kind, len(first[1].truth.pickup_mm)) == ("pair", 2)
    g1 = group_takes(np.random.default_rng(3), 2, seconds=0.3)
    g2 = group_takes(np.random.default_rng(3), 2, seconds=0.3)
    assert all(np.array_equal(a.samples, b.samples) and a.truth == b.truth for a, b in zip(g1, g2, strict=True))


@pytest.mark.parametrize("seed", range(8))
def test_the_truth_follows_twelve_tet_the_fret_rule_and_fletchers_stiffness(seed):
    plan = draw_plan(np.random.default_rng(seed), "pair" if seed % 2 else "single")
    settings = plan_settings(plan, FS)
    truth = truth_of(plan, settings, plan.onset_s, 0.0)
    assert truth.note == settings.strings[plan.string - 1].note + plan.fret
    # 12-TET (MIDI 1.0 spec, ISO 16), then the detuning in cents.
    assert truth.nominal_f0_hz == pytest.approx(_twelve_tet_hz(truth.note), rel=1e-12)
    assert truth.f0_hz == pytest.approx(_twelve_tet_hz(truth.note) * 2 ** (plan.detune_cents / 1200), rel=1e-12)
    assert abs(truth.detune_cents) <= 3.0
    # Fret rule: speaking length L 2^(-n/12) (common practice); B ~ 1/L^2 at one tension, x 2^(n/6) (Fletcher 1964).
    assert truth.speaking_length_mm == pytest.approx(truth.scale_length_mm * 2 ** (-plan.fret / 12), rel=1e-12)
    assert truth.inharmonicity == pytest.approx(inharmonicity_of(settings, plan.string) * 2 ** (plan.fret / 6),
                                                rel=1e-9)
    assert truth.pluck_mm == pytest.approx(plan.pluck_mm, abs=1e-9) and 20.0 <= truth.pluck_mm <= 200.0
    assert truth.pickup_mm == pytest.approx(plan.pickup_mm, abs=1e-9)
    assert all(20.0 <= d <= 180.0 and abs(d - truth.pluck_mm) >= 1.0 for d in truth.pickup_mm)
    assert 0.0 <= truth.pluck_width_mm <= 12.0 and 0.05 <= truth.onset_s <= 0.3


def test_the_partials_lie_at_the_stiff_string_frequencies_of_the_truth():
    # A bass string stopped at fret 5 (B about 7e-4): partial 6 lies some 20 cents above 6 f0
    # (Fletcher 1964, f_k = k f0 sqrt(1 + B k^2)); noise, tone filter and beating are all on.
    plan = _plan(11, preset="low-four", string=4, fret=5, pluck_mm=47.0, pluck_width_mm=2.0, pickup_mm=(31.0,),
                 kind="single", snr_db=40.0)
    take = make_take(plan, FS, SECONDS)
    truth = take.truth
    x = take.samples[round(truth.onset_s * FS):]
    for k in range(1, 7):
        measured = peak_frequency_hz(x, FS, truth.partial_hz(k), 0.15 * truth.f0_hz)
        # Within 1 cent: the second polarisation (at most 2 cents off, 10 dB down) pulls the peak a little.
        assert abs(_cents(measured, truth.partial_hz(k))) < 1.0, \
            f"partial {k}: expected {truth.partial_hz(k):.3f} Hz, measured {measured:.3f} Hz"
    assert _cents(truth.partial_hz(6), 6 * truth.f0_hz) > 5.0, "the check should tell a stiff string from a harmonic"


@pytest.mark.parametrize("snr_db", [40.0, 25.0])
def test_the_noise_floor_lies_at_the_truths_snr(snr_db):
    take = make_take(_plan(3, snr_db=snr_db), FS, SECONDS)
    x, onset = take.samples, round(take.truth.onset_s * FS)
    noise = float(np.mean(x[:onset] ** 2))  # the silence before the onset holds the noise alone
    note = float(np.mean(x[onset: onset + FS] ** 2)) - noise  # the note's first second
    measured = 10 * np.log10(note / noise)
    assert take.truth.snr_db == snr_db and abs(measured - snr_db) < 1.0, f"SNR {measured:.2f} dB, wanted {snr_db} dB"


def test_the_note_starts_at_the_truths_onset():
    take = make_take(_plan(4, snr_db=None), FS, 0.5)
    x, onset = take.samples, round(take.truth.onset_s * FS)
    period = math.ceil(FS / take.truth.f0_hz)
    assert not np.any(x[:onset]), "nothing may sound before the onset"
    assert np.max(np.abs(x[onset: onset + period])) > 0.05 * np.max(np.abs(x)), "the note should start at the onset"
    assert 20 * np.log10(np.max(np.abs(x))) == pytest.approx(take.truth.level_dbfs, abs=1e-9)


def test_the_tone_sections_are_the_cookbooks_prototypes_through_the_bilinear_transform():
    # Audio EQ Cookbook (Bristow-Johnson, common practice): each section is the bilinear transform of
    # an analog prototype pre-warped at its corner, W = 2 fs tan(pi f0 / fs).
    tone = ToneFilter(shelf_hz=150.0, shelf_db=3.5, peak_hz=900.0, peak_db=-4.5, peak_q=0.8, rolloff_hz=9000.0)
    sos = tone.sos(FS)

    def section(b, a, corner_hz):
        w = 2 * FS * math.tan(math.pi * corner_hz / FS)
        scale = np.array([1.0, w, w * w])
        bz, az = signal.bilinear(np.asarray(b) * scale, np.asarray(a) * scale, FS)
        return np.concatenate([bz, az]) / az[0]

    amp = 10 ** (tone.peak_db / 40)
    np.testing.assert_allclose(sos[1], section([1, amp / tone.peak_q, 1], [1, 1 / (amp * tone.peak_q), 1], 900.0),
                               rtol=1e-9, atol=1e-12)  # peaking EQ: (s^2 + s A/Q + 1) / (s^2 + s/(A Q) + 1)
    amp = 10 ** (tone.shelf_db / 40)
    q = 1 / math.sqrt(2)  # shelf slope S = 1
    # Low shelf: A (s^2 + s sqrt(A)/Q + A) / (A s^2 + s sqrt(A)/Q + 1).
    np.testing.assert_allclose(sos[0], section([amp, amp * math.sqrt(amp) / q, amp * amp],
                                               [amp, math.sqrt(amp) / q, 1], 150.0), rtol=1e-9, atol=1e-12)
    # The roll-off is a second-order Butterworth low-pass: scipy's own design.
    np.testing.assert_allclose(sos[2], signal.butter(2, 9000.0, fs=FS, output="sos")[0], rtol=1e-9, atol=1e-12)

    def gain_db(rows, f_hz):
        _, h = signal.sosfreqz(rows, worN=[f_hz], fs=FS)
        return 20 * np.log10(abs(h[0]))

    assert gain_db(sos[:1], 0.0) == pytest.approx(3.5, abs=1e-9)  # the shelf's full gain at DC,
    assert gain_db(sos[:1], 150.0) == pytest.approx(1.75, abs=1e-9)  # half of it (in dB) at its corner
    assert gain_db(sos[1:2], 900.0) == pytest.approx(-4.5, abs=1e-9)
    assert gain_db(sos[2:], 9000.0) == pytest.approx(-10 * math.log10(2), abs=1e-9)  # -3.01 dB


def test_the_take_is_its_truths_render_through_the_tone_filter():
    tone = ToneFilter(shelf_hz=200.0, shelf_db=4.0, peak_hz=1200.0, peak_db=-5.0, peak_q=1.0, rolloff_hz=7000.0)
    plan = _plan(5, preset="cedar-six", string=6, fret=0, pluck_mm=40.0, pickup_mm=(57.0,), kind="single",
                 snr_db=None, beating=None, tone=tone)
    take = make_take(plan, FS, SECONDS)
    truth = take.truth
    # The truth's preset text renders the same note (as `rtvoice render --string` would play it).
    clean = render_truth(Settings.from_toml_text(take.settings_text), truth.string, truth.fret, seconds=SECONDS,
                         sample_rate_hz=FS, velocity=truth.velocity)
    onset = round(truth.onset_s * FS)
    wanted = [truth.partial_hz(k) for k in range(1, 31)]
    clean_db, at_hz = _partial_levels_db(clean, truth.f0_hz, wanted)
    take_db, _ = _partial_levels_db(take.samples[onset: onset + clean.size], truth.f0_hz, wanted)
    heard = clean_db > clean_db.max() - 40  # partials the pickup and pluck leave well above the leakage
    expected = tone.response_db(at_hz, FS) + truth.gain_db  # scipy.signal.sosfreqz of the truth's sections
    error = (take_db - clean_db - expected)[heard]
    assert heard.sum() >= 10 and np.max(np.abs(error)) < 0.3, f"tone off by up to {np.max(np.abs(error)):.2f} dB"
    assert np.ptp(expected[heard]) > 5.0, "the tone should vary enough for the check to tell"


def _null_check_levels(pickup_mm: float) -> np.ndarray:
    plan = _plan(6, preset="cedar-six", string=6, fret=5, pluck_mm=37.0, pluck_width_mm=2.0, pickup_mm=(pickup_mm,),
                 aperture_mm=12.0, kind="single")
    x = render_truth(plan_settings(plan, FS), 6, 5, seconds=SECONDS, sample_rate_hz=FS, velocity=100)
    truth = truth_of(plan, plan_settings(plan, FS), 0.0, 0.0)
    levels, _ = _partial_levels_db(x, truth.f0_hz, [truth.partial_hz(k) for k in (3, 4, 5)])
    return levels


def test_a_pickup_at_a_quarter_of_the_stopped_string_nulls_the_fourth_partial():
    # The pickup senses sin(k pi d / L_n) (Paiva et al. 2012), L_n = L 2^(-n/12) at fret n (common practice):
    # at d = L_n / 4 partial 4 vanishes; the aperture's average over a symmetric window keeps the zero.
    quarter_mm = 648.0 * 2 ** (-5 / 12) / 4
    l3, l4, l5 = _null_check_levels(quarter_mm)
    assert l4 < min(l3, l5) - 20.0, f"partial 4 at {l4:.1f} dB, neighbours {l3:.1f} and {l5:.1f} dB"
    # A quarter of the open string (the fret rule left out) is no null of partial 4 for the note at fret 5
    # (it lies at a third of the stopped string: partial 3 vanishes there instead).
    o3, o4, o5 = _null_check_levels(648.0 / 4)
    assert o4 > max(o3, o5) - 20.0 and o3 < o4 - 20.0, f"levels {o3:.1f}, {o4:.1f}, {o5:.1f} dB"


def test_the_second_polarisation_beats_at_its_offset_level_and_decay():
    beating = Beating(offset_cents=1.5, level_db=-12.0, t60_ratio=0.7)
    plan = _plan(7, preset="cedar-six", string=3, fret=2, pluck_mm=45.0, pickup_mm=(70.0,), kind="single",
                 snr_db=None, tone=None, beating=beating)
    both, one = make_take(plan, FS, SECONDS), make_take(replace(plan, beating=None), FS, SECONDS)
    onset = round(both.truth.onset_s * FS)
    first = one.samples[onset:] / 10 ** (one.truth.gain_db / 20)
    second = both.samples[onset:] / 10 ** (both.truth.gain_db / 20) - first
    truth = one.truth
    f1 = peak_frequency_hz(first, FS, truth.partial_hz(1), 0.1 * truth.f0_hz)
    f2 = peak_frequency_hz(second, FS, truth.partial_hz(1), 0.1 * truth.f0_hz)
    assert _cents(f1, truth.partial_hz(1)) == pytest.approx(0.0, abs=0.05)
    assert _cents(f2, f1) == pytest.approx(1.5, abs=0.05)
    early = int(0.01 * FS)
    level = 10 * np.log10(np.mean(second[:early] ** 2) / np.mean(first[:early] ** 2))
    assert level == pytest.approx(-12.0, abs=0.5)
    # T60 = 3 ln 10 / sigma: T60s 0.7 times the first's decay 1/0.7 times as fast, at every frequency.
    others = [truth.partial_hz(k) for k in range(2, 9)]
    s1 = decay_rate_per_s(first, FS, truth.partial_hz(1), np.array(others))
    s2 = decay_rate_per_s(second, FS, f2, np.array(others) * 2 ** (1.5 / 1200))
    assert s2 / s1 == pytest.approx(1 / 0.7, rel=0.05)


def test_a_group_shares_string_pickup_and_tone_and_is_plucked_apart():
    takes = group_takes(np.random.default_rng(9), 3, kind="pair", seconds=0.3)
    truths = [t.truth for t in takes]
    shared = {(t.preset, t.string, t.fret, t.pickup_mm, t.aperture_mm, t.tone_filter, t.detune_cents) for t in truths}
    assert len(shared) == 1
    plucks = [t.pluck_mm for t in truths]
    assert all(abs(a - b) >= 15.0 for i, a in enumerate(plucks) for b in plucks[i + 1:])
    assert not np.allclose(takes[0].samples[:1000], takes[1].samples[:1000])


def test_an_unknown_kind_is_refused():
    with pytest.raises(ValueError, match="single"):
        draw_plan(np.random.default_rng(0), "triple")  # type: ignore[arg-type]
