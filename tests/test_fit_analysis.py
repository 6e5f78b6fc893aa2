"""The partial analysis of a recorded note against published formulas and the engine's own renders.

Synthetic takes are built here, independently of the code under test, from:
- stiff-string partials f_k = k f0 sqrt(1 + B k^2) (Fletcher, JASA 36, 203, 1964);
- the loss law sigma_k = b1 + b3 w_k^2 (Chaigne & Askenfelt, JASA 95(2), 1112, 1994), with
  T60 = 3 ln 10 / sigma (shared references);
- a pluck at fraction p: a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)) (Fletcher & Rossing, *The
  Physics of Musical Instruments*, 2nd ed. 1998, ch. 2), seen by a pickup at q through its mode
  shape sin(k pi q) and, sensing velocity, weighted by w_k (Paiva, Pakarinen & Välimäki, JAES
  60(10), 768, 2012; Horton & Moore, Am. J. Phys. 77(2), 144, 2009).
Targets are the issue's (f0 within 0.5 cent, B within 5 %, T60s within 10 %, levels within 0.5 dB
above the noise).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rtvoice.engine import Settings, apply_assignments, inharmonicity_of, t60s_of
from rtvoice.fit.analysis import PartialAnalysis, analyse_take
from rtvoice.fit.beating import fit_beating
from rtvoice.fit.decay import fit_loss_law
from rtvoice.fit.inharmonicity import fit_inharmonicity, stiff_partials_hz
from rtvoice.fit.take import Take, TakeError
from rtvoice.offline.render import PlayReport, iter_blocks, note_events, render_events
from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients

LN_1000 = 3.0 * math.log(10.0)  # T60 = 3 ln 10 / sigma (shared references)
FS = 48000


def cents(a: float, b: float) -> float:
    return 1200.0 * math.log2(a / b)


def tet_hz(note: int) -> float:
    """12-TET, A4 = MIDI 69 = 440 Hz (MIDI 1.0 Detailed Specification; ISO 16:1975)."""
    return 440.0 * 2.0 ** ((note - 69) / 12.0)


def loss_law(t60_low_s: float, t60_high_s: float) -> tuple[float, float]:
    """(b1, b3) with the given T60s at 100 Hz and 2000 Hz, solved here from sigma = b1 + b3 w^2."""
    s_low, s_high = LN_1000 / t60_low_s, LN_1000 / t60_high_s
    w_low, w_high = 2 * math.pi * 100.0, 2 * math.pi * 2000.0
    b3 = (s_high - s_low) / (w_high**2 - w_low**2)
    return s_low - b3 * w_low**2, b3


def plucked_note(f0: float, b: float, t60_low: float, t60_high: float, *, pluck: float = 0.2, pickup: float = 0.1,
                 fs: int = FS, seconds: float = 1.6, lead_s: float = 0.12, snr_db: float | None = None,
                 second: tuple[float, float] | None = None, seed: int = 0) -> tuple[Take, dict]:
    """A velocity-sensed plucked note (formulas in the module docstring) after ``lead_s`` of
    silence, peak 0.5; ``second`` = (relative level, detuning Hz) adds a second polarisation that
    starts with it; ``snr_db`` white noise against the note's rms."""
    k = np.arange(1, 81, dtype=float)
    f = k * f0 * np.sqrt(1 + b * k * k)
    keep = f < 0.45 * fs
    k, f = k[keep], f[keep]
    b1, b3 = loss_law(t60_low, t60_high)
    sigma = b1 + b3 * (2 * np.pi * f) ** 2
    a = 2 * np.sin(k * np.pi * pluck) / (k**2 * np.pi**2 * pluck * (1 - pluck))
    amp = a * np.sin(k * np.pi * pickup) * (f / f0)
    t = np.arange(int(seconds * fs)) / fs
    x = np.zeros(t.size)
    ratio, detune = second if second else (0.0, 0.0)
    for ak, fk, sk in zip(amp, f, sigma, strict=True):
        x += ak * np.exp(-sk * t) * np.sin(2 * np.pi * fk * t)
        if ratio:
            x += ratio * ak * np.exp(-sk * t) * np.sin(2 * np.pi * (fk + detune) * t)
    scale = 0.5 / np.max(np.abs(x))
    x = np.concatenate([np.zeros(int(lead_s * fs)), x * scale])
    noise_energy = 0.0
    if snr_db is not None:
        rms = math.sqrt(float(np.mean(x[int(lead_s * fs):] ** 2)))
        noise = np.random.default_rng(seed).normal(0.0, rms * 10 ** (-snr_db / 20), x.size)
        noise_energy = float(np.sum(noise[int(lead_s * fs):] ** 2))
        signal_energy = float(np.sum(x[int(lead_s * fs):] ** 2))
        x = x + noise
    truth = dict(f0=f0, b=b, t60_low=t60_low, t60_high=t60_high, k=k.astype(int), freq=f,
                 level=np.abs(amp) * scale * (1 + ratio), onset_s=lead_s)
    if snr_db is not None:
        truth["signal_share"] = signal_energy / (signal_energy + noise_energy)
    return Take(x, fs, "synthetic note"), truth


def check_against(result: PartialAnalysis, truth: dict, level_db: float = 0.5, min_snr_db: float = 20.0,
                  freq_rel: float = 1e-6) -> None:
    assert abs(cents(result.f0_hz, truth["f0"])) < 0.5
    assert result.inharmonicity.inharmonicity == pytest.approx(truth["b"], rel=0.05)
    assert result.loss.t60_low_s == pytest.approx(truth["t60_low"], rel=0.10)
    assert result.loss.t60_high_s == pytest.approx(truth["t60_high"], rel=0.10)
    assert result.onset_s == pytest.approx(truth["onset_s"], abs=1e-3)
    checked = 0
    for p in result.partials:
        if p.usable and p.k <= 30 and p.snr_db >= min_snr_db:
            assert 20 * math.log10(p.level / truth["level"][p.k - 1]) == pytest.approx(0.0, abs=level_db), p
            # each partial's frequency within its stated uncertainty (5 sd)
            assert abs(p.freq_hz - truth["freq"][p.k - 1]) <= 5 * p.freq_sd_hz + freq_rel * p.freq_hz, p
            checked += 1
    assert checked >= 15  # most partials below 30 stand well above the noise in these takes


# -- f0 and B from partial frequencies ------------------------------------------------------------

def test_stiff_partials_match_the_worked_example():
    # Fletcher 1964, shared references (calc): plain steel E4, f0 = 329.63 Hz, B = 1.323e-5:
    # f_10 = 3298.48 Hz (+1.14 cent), f_20 = 6610.02 Hz (+4.57 cent).
    f = stiff_partials_hz(np.array([10, 20]), 329.63, 1.323e-5)
    assert f[0] == pytest.approx(3298.48, abs=0.01)
    assert f[1] == pytest.approx(6610.02, abs=0.01)
    assert cents(f[1], 20 * 329.63) == pytest.approx(4.57, abs=0.01)


@settings(max_examples=60, deadline=None)
@given(f0=st.floats(25.0, 1500.0), b=st.one_of(st.just(0.0), st.floats(1e-7, 3e-3)),
       ks=st.sets(st.integers(1, 40), min_size=3, max_size=40))
def test_inharmonicity_fit_recovers_exact_frequencies(f0, b, ks):
    # Noise-free frequencies from Fletcher's law give back its f0 and B.
    k = np.array(sorted(ks), dtype=float)
    fit = fit_inharmonicity(k, k * f0 * np.sqrt(1 + b * k * k))
    assert fit.f0_hz == pytest.approx(f0, rel=1e-9)
    assert fit.inharmonicity == pytest.approx(b, rel=1e-6, abs=1e-12)
    assert fit.residual_cents_rms < 1e-6
    assert fit.n_partials == len(ks)


def test_inharmonicity_uncertainty_covers_the_error():
    # Frequencies jittered by a known 0.01 % (Gaussian): the reported sd is of that size and the
    # errors stay within a few of them.
    rng = np.random.default_rng(3)
    k = np.arange(1, 31, dtype=float)
    true = k * 98.0 * np.sqrt(1 + 2e-4 * k * k)
    z_f0, z_b = [], []
    for _ in range(40):
        fit = fit_inharmonicity(k, true * (1 + 1e-4 * rng.standard_normal(k.size)), 1.0 / (1e-4 * true) ** 2)
        z_f0.append((fit.f0_hz - 98.0) / fit.f0_sd_hz)
        z_b.append((fit.inharmonicity - 2e-4) / fit.inharmonicity_sd)
    assert 0.6 < np.std(z_f0) < 1.5 and 0.6 < np.std(z_b) < 1.5


def test_inharmonicity_needs_two_partials():
    with pytest.raises(ValueError):
        fit_inharmonicity(np.array([3.0]), np.array([330.0]))


# -- the loss law from decay rates ----------------------------------------------------------------

@settings(max_examples=60, deadline=None)
@given(t60_low=st.floats(0.5, 30.0), ratio=st.floats(1.0, 20.0), f0=st.floats(30.0, 600.0))
def test_loss_law_recovers_its_t60s(t60_low, ratio, f0):
    # sigma = b1 + b3 w^2 (Chaigne & Askenfelt 1994) sampled at partials gives back the two T60s.
    b1, b3 = loss_law(t60_low, t60_low / ratio)
    if b1 < 0:  # a ratio steeper than the law allows with b1 >= 0: not a string
        return
    f = f0 * np.arange(1, 31)
    fit = fit_loss_law(f, b1 + b3 * (2 * np.pi * f) ** 2)
    assert fit.t60_low_s == pytest.approx(t60_low, rel=1e-6)
    assert fit.t60_high_s == pytest.approx(t60_low / ratio, rel=1e-6)


def test_loss_law_inverts_the_engines_law():
    # The engine's own loss coefficients for T60s 6 s / 1.5 s, rendered as rates, fit back exactly;
    # T60 = 1 s is sigma = 6.9078 1/s (shared references).
    b1, b3 = loss_coefficients(6.0, 1.5)
    f = 82.41 * np.arange(1, 41)
    fit = fit_loss_law(f, decay_rate_per_s(f, b1, b3))
    assert (fit.t60_low_s, fit.t60_high_s) == pytest.approx((6.0, 1.5), rel=1e-9)
    assert fit_loss_law(np.array([100.0, 2000.0]), np.array([6.9078, 6.9078])).t60_low_s == pytest.approx(1.0, rel=1e-4)


def test_loss_law_shrugs_off_one_stray_partial():
    b1, b3 = loss_law(5.0, 1.0)
    f = 110.0 * np.arange(1, 21)
    sigma = b1 + b3 * (2 * np.pi * f) ** 2
    sigma[6] *= 3.0  # one partial beating or in a null, measured far off
    fit = fit_loss_law(f, sigma)
    assert fit.t60_low_s == pytest.approx(5.0, rel=0.02)
    assert fit.t60_high_s == pytest.approx(1.0, rel=0.02)


# -- two polarisations ----------------------------------------------------------------------------

def test_beating_components_are_separated():
    # z = c1 e^{p1 t} + c2 e^{p2 t}: the matrix pencil (Hua & Sarkar, IEEE Trans. ASSP 38(5), 814,
    # 1990) and the refinement give back both poles; the stronger is named the partial.
    t = np.arange(600) / 200.0
    z = 0.5 * np.exp((-1.3 + 2j * np.pi * 0.1) * t) + 0.2j * np.exp((-1.1 + 2j * np.pi * 0.8) * t)
    beat = fit_beating(t, z, max_offset_hz=5.0)
    assert beat is not None
    assert beat.dominant.sigma_per_s == pytest.approx(1.3, rel=1e-6)
    assert beat.dominant.offset_hz == pytest.approx(0.1, abs=1e-6)
    assert abs(beat.dominant.amplitude) == pytest.approx(0.5, rel=1e-6)
    assert beat.other.sigma_per_s == pytest.approx(1.1, rel=1e-6)
    assert beat.other.offset_hz == pytest.approx(0.8, abs=1e-6)
    single = 0.5 * np.exp((-1.3 + 2j * np.pi * 0.1) * t)
    rng = np.random.default_rng(1)
    assert fit_beating(t, single + 1e-3 * (rng.standard_normal(t.size) + 1j * rng.standard_normal(t.size)), 5.0) is None


# -- whole takes built from the formulas ----------------------------------------------------------

@pytest.mark.parametrize(("f0", "b", "t60s", "snr_db"), [
    (110.0, 1e-4, (6.0, 1.5), None),  # A2, the default string
    (110.0, 1e-4, (6.0, 1.5), 40.0),  # ... with white noise 40 dB under the note
    (41.2, 4e-4, (8.0, 2.0), 40.0),  # E1 of a bass: stiff and long
    (659.3, 2e-5, (3.0, 0.8), 40.0),  # E5 high on the first string: short-lived partials
])
def test_synthetic_note(f0, b, t60s, snr_db):
    take, truth = plucked_note(f0, b, *t60s, snr_db=snr_db)
    result = analyse_take(take)
    check_against(result, truth)
    # Partials the pluck at 1/5 leaves out (k = 5, 10, ...: sin(k pi / 5) = 0) never stand out.
    assert not any(p.usable for p in result.partials if p.k % 5 == 0)
    if snr_db is None:
        assert result.explained_energy > 0.999


def test_hint_and_partial_count():
    # A hint two semitones off still finds the note (12-TET A2 = 110 Hz); max_partials caps the list.
    take, truth = plucked_note(110.0, 1e-4, 6.0, 1.5, snr_db=40.0, seed=3)
    result = analyse_take(take, f0_hint_hz=110.0 * 2 ** (1.5 / 12), max_partials=12)
    assert abs(cents(result.f0_hz, truth["f0"])) < 0.5
    assert [p.k for p in result.partials] == list(range(1, 13))


def test_beating_second_polarisation():
    # A second polarisation 10 dB down, 0.6 Hz sharp, starting with the first: the decay and
    # stiffness are the first's; the level at the onset is both together.
    take, truth = plucked_note(98.0, 1.5e-4, 5.0, 1.2, snr_db=40.0, second=(0.3, 0.6), seconds=2.5, seed=2)
    result = analyse_take(take)
    # A partial too short-lived to show the beat has one frequency between the two.
    check_against(result, truth, freq_rel=1e-4)


def test_explained_energy_is_the_notes_share():
    # With white noise 6 dB under the note, the partials explain the note's share of the energy.
    take, truth = plucked_note(146.8, 1e-4, 5.0, 1.5, snr_db=6.0, seed=4)
    result = analyse_take(take)
    assert result.explained_energy == pytest.approx(truth["signal_share"], abs=0.02)
    assert abs(cents(result.f0_hz, truth["f0"])) < 0.5


# -- the engine's own renders ---------------------------------------------------------------------

def _render(settings: Settings, note: int, seconds: float = 1.6) -> np.ndarray:
    # Cut at the note-off: the release after it is another decay.
    return render_events(note_events(note, 100, seconds), settings, FS)[: int(seconds * FS)]


@pytest.mark.parametrize(("note", "changes"), [
    (40, {}),  # E2 with the default string
    (57, {"string.inharmonicity": 5e-4, "string.t60_low": 4.0, "string.t60_high": 0.8}),
])
def test_engine_render_open_string(note, changes):
    s = apply_assignments(Settings.defaults(), ["instrument.assign=open"]).with_values(changes)
    result = analyse_take(Take(_render(s, note), FS, "engine render"))
    # The engine tunes f0 (Fletcher's, without stiffness) to 12-TET and uses the settings' B and T60s.
    assert abs(cents(result.f0_hz, tet_hz(note))) < 0.05
    assert result.inharmonicity.inharmonicity == pytest.approx(s.get("string.inharmonicity"), rel=0.01)
    assert result.loss.t60_low_s == pytest.approx(s.get("string.t60_low"), rel=0.02)
    assert result.loss.t60_high_s == pytest.approx(s.get("string.t60_high"), rel=0.02)
    assert result.explained_energy > 0.99


def test_engine_render_fretted_string():
    # Under the hand rule a note plays on a string at a fret: its B is the string's times 2^(n/6)
    # (Fletcher 1964: B ~ 1/L^2, with the fret rule L 2^(-n/12), common practice), its loss law the
    # string's own.
    s = apply_assignments(Settings.defaults(), ["instrument.assign=hand"])
    note = 45
    report = PlayReport()
    for _ in iter_blocks(note_events(note, 100, 0.05), s, FS, report=report):
        pass
    place = report.placements[0]
    assert place.fret > 0  # the case this test is for
    result = analyse_take(Take(_render(s, note), FS, "engine render"))
    assert abs(cents(result.f0_hz, tet_hz(note))) < 0.05
    expected_b = inharmonicity_of(s, place.string) * 2.0 ** (place.fret / 6.0)
    assert result.inharmonicity.inharmonicity == pytest.approx(expected_b, rel=0.01)
    t60_low, t60_high = t60s_of(s, place.string)
    assert result.loss.t60_low_s == pytest.approx(t60_low, rel=0.02)
    assert result.loss.t60_high_s == pytest.approx(t60_high, rel=0.02)


# -- takes no fit can use -------------------------------------------------------------------------

def _refusal(take: Take) -> str:
    with pytest.raises(TakeError) as info:
        analyse_take(take)
    message = str(info.value)
    assert "\n" not in message
    return message


def test_two_notes_at_once():
    # A2 and D#3 a tritone apart (12-TET), both plucked: no single stiff series explains both.
    a, _ = plucked_note(tet_hz(45), 1e-4, 5.0, 1.5, seed=1)
    b, _ = plucked_note(tet_hz(51), 1e-4, 5.0, 1.5, pluck=0.23, pickup=0.13, seed=2)
    assert "two notes" in _refusal(Take(a.samples + b.samples, FS, "chord"))


def test_noise_alone_is_no_note():
    x = np.random.default_rng(5).normal(0.0, 0.05, FS)
    assert "no plucked note" in _refusal(Take(x, FS, "hiss"))


def test_note_too_close_to_the_end():
    take, _ = plucked_note(110.0, 1e-4, 6.0, 1.5, seconds=0.15, lead_s=0.6)
    assert "too short" in _refusal(take)
