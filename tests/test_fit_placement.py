"""Reading the pluck and pickup places, the aperture and the pickup's resonance from partial levels.

The levels are built here from the published closed forms, not from rtvoice's own code: the plucked
string's sine series a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)) (Fletcher & Rossing, The Physics of
Musical Instruments, 2nd ed. 1998, ch. 2), a pickup's mode shape sin(k pi q) averaged over its aperture,
sinc(k pi w / 2) (Paiva, Pakarinen & Välimäki, "Acoustics and Modeling of Pickups", JAES 60(10), 768,
2012), velocity sensing weighting mode k by its angular frequency (Horton & Moore, Am. J. Phys. 77(2),
144, 2009) and the coil-and-cable network H(s) = 1 / (L C s^2 + (R C + L / R_L) s + 1 + R / R_L)
evaluated by scipy.signal.freqs (the formula as in /work/shared references: Paiva et al. 2012). Then
the levels the engine itself computes and renders: the fit must be the engine's inverse.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
from hypothesis import given, settings
from hypothesis import strategies as st

from rtvoice.engine import Settings, electronics_filter, note_model_at, placed_note, resonance_of
from rtvoice.errors import UserError
from rtvoice.fit.comb import CombModel, Levels, comb_amplitude, known_envelope_db, log_frequency_basis
from rtvoice.fit.placement import (
    Assignment,
    PartialLevels,
    PlacementError,
    fit_placement,
    fit_placement_group,
    pickup_level_ratio,
    pluck_level_ratio,
)
from rtvoice.offline.render import render_events
from rtvoice.physics.pickup import aperture_weights, pickup_weights
from tests.analysis import fit_damped_modes

SCALE_MM = 648.0  # a common electric scale length (common practice)
E2_HZ = 82.41  # MIDI 40 in 12-TET, A4 = 440 Hz (MIDI 1.0 Detailed Specification; ISO 16:1975)
A2_HZ = 110.0
FS = 48000


# -- levels from the closed forms ----------------------------------------------------------------


def pluck_series(k: np.ndarray, p: float) -> np.ndarray:
    """a_k of a unit triangle peaked at p (Fletcher & Rossing 1998, ch. 2)."""
    return 2.0 * np.sin(k * np.pi * p) / (k**2 * np.pi**2 * p * (1.0 - p))


def pickup_shape(k: np.ndarray, q: float, aperture: float = 0.0) -> np.ndarray:
    """sin(k pi q) sinc(k pi w / 2) (Paiva, Pakarinen & Välimäki 2012); numpy's sinc(x) = sin(pi x) / (pi x)."""
    return np.sin(k * np.pi * q) * np.sinc(k * aperture / 2.0)


def rlc(inductance_h: float, resistance_ohm: float, capacitance_f: float, load_ohm: float):
    """(b, a) of H(s) = 1 / (L C s^2 + (R C + L / R_L) s + 1 + R / R_L), scaled to unit DC gain, and the
    published f_r = sqrt((1 + R / R_L) / (L C)) / 2 pi and Q = w_r L C / (R C + L / R_L)."""
    lc, damping, dc = inductance_h * capacitance_f, resistance_ohm * capacitance_f + inductance_h / load_ohm, \
        1.0 + resistance_ohm / load_ohm
    w_r = math.sqrt(dc / lc)
    return ([dc], [lc, damping, dc]), w_r / (2 * math.pi), w_r * lc / damping


def closed_form_levels(pluck_mm: float, pickup_mm: float, *, length_mm: float = SCALE_MM, f0_hz: float = E2_HZ,
                       top_hz: float = 6000.0, velocity: bool = True, aperture_mm: float = 0.0, circuit=None,
                       tone_db=None, error_db: float = 1.0, rng: np.random.Generator | None = None) -> PartialLevels:
    """Partials 1.. below ``top_hz`` of an ideal string, each level with a random error of ``error_db`` (sd)."""
    k = np.arange(1, int(top_hz / f0_hz) + 1, dtype=float)
    f = k * f0_hz
    level = np.abs(pluck_series(k, pluck_mm / length_mm) * pickup_shape(k, pickup_mm / length_mm,
                                                                         aperture_mm / length_mm))
    if velocity:
        level = level * k  # w_k / w_1 (Horton & Moore 2009)
    if circuit is not None:
        _, h = scipy.signal.freqs(*circuit, worN=2 * np.pi * f)
        level = level * np.abs(h)
    if tone_db is not None:
        level = level * 10 ** (tone_db(f) / 20)
    rng = rng or np.random.default_rng(0)
    level = level * 10 ** (rng.normal(0.0, error_db, k.size) / 20)
    return PartialLevels(k, f, level, np.ones(k.size))


def random_take(rng: np.random.Generator, noise_db: float = -60.0, pluck_mm: float | None = None,
                noise_rng: np.random.Generator | None = None) -> tuple[PartialLevels, dict]:
    """A take as a recording brings it, with its truth: a random string and fret of a 648 mm scale,
    pluck 20..200 mm (a contact 0..12 mm wide the fit is not told), pickup 20..180 mm (aperture 6..20 mm,
    not told), a coil resonance 2..7 kHz with Q 0.7..4 (a circuit as in :func:`rlc`), a mid peak of
    +-5 dB the fit is not told (:func:`_tone_db`'s filter at a random place), stiffness and detuning, and
    noise ``noise_db`` below the partials' RMS on each partial's amplitude, with 0.5 dB of level error.
    The same ranges as the issue's accuracy benchmark; partials up to 10 kHz or 80. ``pluck_mm`` and
    ``noise_rng`` make another take of the same string (the same seed) plucked elsewhere."""
    open_hz = 440.0 * 2 ** ((rng.choice([40, 45, 50, 55, 59, 64]) - 69) / 12)  # standard tuning (common practice)
    fret = int(rng.integers(0, 13))
    length = SCALE_MM * 2 ** (-fret / 12)
    f0 = open_hz * 2 ** (fret / 12) * 2 ** (rng.normal(0.0, 3.0) / 1200)
    stiffness = 10 ** rng.uniform(-5.0, -3.5) * 2 ** (fret / 6)  # Fletcher 1964: B ~ 1 / L^2
    truth = {"pluck_mm": rng.uniform(20.0, min(200.0, 0.5 * length)), "pickup_mm": rng.uniform(20.0, 180.0),
             "length_mm": length, "aperture_mm": rng.uniform(6.0, 20.0), "contact_mm": rng.uniform(0.0, 12.0)}
    # A place past the middle of the stopped string leaves the comb of its mirror image L - x
    # (|sin(k pi x)| = |sin(k pi (1 - x))|): one take cannot tell them, so the pickup stays short of it.
    truth["pickup_mm"] = rng.uniform(20.0, min(180.0, 0.45 * length)) if truth["pickup_mm"] > 0.45 * length \
        else truth["pickup_mm"]
    truth["pluck_mm"] = truth["pluck_mm"] if pluck_mm is None else pluck_mm
    capacitance = 1.0 / ((2 * np.pi * rng.uniform(2000.0, 7000.0)) ** 2 * 2.5)
    load = 2.5 / (np.sqrt(2.5 * capacitance) / rng.uniform(0.7, 4.0) - 6000.0 * capacitance)
    circuit, truth["resonance_hz"], truth["q"] = rlc(2.5, 6000.0, capacitance, load if load > 0 else 1e9)
    peak_hz, peak_db = np.exp(rng.uniform(np.log(300.0), np.log(3000.0))), rng.uniform(-5.0, 5.0)
    k = np.arange(1, 81, dtype=float)
    f = k * f0 * np.sqrt(1 + stiffness * k * k)
    k, f = k[f < 10000.0], f[f < 10000.0]
    p, q = truth["pluck_mm"] / length, truth["pickup_mm"] / length
    amp = np.abs(pluck_series(k, p) * np.sinc(k * truth["contact_mm"] / length / 2)
                 * pickup_shape(k, q, truth["aperture_mm"] / length)) * f / f[0]
    _, h = scipy.signal.freqs(*circuit, worN=2 * np.pi * f)
    amp = amp * np.abs(h) * 10 ** (_tone_db(f * 800.0 / peak_hz) * peak_db / 4.0 / 20)
    noise = np.sqrt(np.mean(amp**2)) * 10 ** (noise_db / 20)
    rng = rng if noise_rng is None else noise_rng
    measured = np.abs(amp + noise * (rng.normal(size=k.size) + 1j * rng.normal(size=k.size)) / np.sqrt(2))
    measured = measured * 10 ** (rng.normal(0.0, 0.5, k.size) / 20)
    sd_db = np.hypot(8.7 * noise / measured, 0.5)  # what an analysis would say of each level
    return PartialLevels(k, f, measured, 1.0 / sd_db**2), truth


def fit_of(levels: PartialLevels, **kwargs):
    kwargs.setdefault("speaking_length_mm", SCALE_MM)
    kwargs.setdefault("sensing", "velocity")
    return fit_placement(levels.k, levels.freq_hz, levels.level, levels.weight, **kwargs)


def pair_errors(fit, pluck_mm: float, pickup_mm: float) -> tuple[float, float]:
    """|error| of the nearer and the farther distance: a single take is scored as the unordered pair."""
    got, truth = sorted([fit.pluck_mm, fit.pickup_mm]), sorted([pluck_mm, pickup_mm])
    return abs(got[0] - truth[0]), abs(got[1] - truth[1])


# -- one take -----------------------------------------------------------------------------------


@pytest.mark.parametrize(("pluck_mm", "pickup_mm", "seed"), [(130.0, 42.0, 1), (95.0, 160.0, 2), (210.0, 101.0, 3)])
def test_one_take_recovers_both_distances_as_a_guessed_pair(pluck_mm, pickup_mm, seed):
    # Targets of the issue: pickup within 3 mm, pluck within 5 mm, a single take scored as the pair
    # (the comb sin(k pi p) sin(k pi q) is symmetric; /work/shared references, "Fitting a recorded note").
    levels = closed_form_levels(pluck_mm, pickup_mm, rng=np.random.default_rng(seed))
    fit = fit_of(levels)
    near, far = pair_errors(fit, pluck_mm, pickup_mm)
    assert near < 3.0 and far < 5.0, (fit.pluck_mm, fit.pickup_mm)
    assert fit.assignment is Assignment.GUESS and "interchangeable" in fit.why
    assert fit.pickup_mm <= fit.pluck_mm  # the stated rule: the one nearer the saddle is called the pickup
    assert fit.pluck_fraction == pytest.approx(fit.pluck_mm / SCALE_MM)
    assert fit.residual_db_rms < 2.0  # the levels carry 1 dB errors: the model explains the rest


def test_a_given_pickup_distance_leaves_the_pluck_to_find():
    levels = closed_form_levels(70.0, 150.0, rng=np.random.default_rng(4))
    fit = fit_of(levels, pickup_mm=150.0)
    assert fit.assignment is Assignment.GIVEN and fit.pickup_mm == 150.0 and fit.pickup_sd_mm == 0.0
    assert abs(fit.pluck_mm - 70.0) < 5.0, fit.pluck_mm  # the issue's pluck target


def test_the_sds_cover_the_errors_over_many_takes():
    # With 1 dB level errors of known size the sds should be of the size of the errors: most errors
    # within 3 sds (a normal law puts 99.7 % there; the share asked is looser for the model's approximations).
    z = []
    for seed in range(8):
        rng = np.random.default_rng(100 + seed)
        pluck, pickup = rng.uniform(60, 200), rng.uniform(25, 55)
        fit = fit_of(closed_form_levels(pluck, pickup, rng=rng))
        z += [abs(fit.pluck_mm - pluck) / fit.pluck_sd_mm, abs(fit.pickup_mm - pickup) / fit.pickup_sd_mm]
    assert np.mean(np.array(z) < 3.0) >= 0.8, np.round(z, 2)


def test_a_pluck_over_the_pickup_is_flagged_not_given_as_two_confident_places():
    # Plucked at 1/3 over a pickup at 1/3: the comb is sin^2(k pi / 3), every third partial missing
    # (Fletcher & Rossing 1998, ch. 2): both distances are there, but they cannot be told apart.
    third = SCALE_MM / 3
    fit = fit_of(closed_form_levels(third, third, rng=np.random.default_rng(5)))
    assert fit.over_pickup and any("over the pickup" in n for n in fit.notes)
    for got, sd in ((fit.pluck_mm, fit.pluck_sd_mm), (fit.pickup_mm, fit.pickup_sd_mm)):
        assert abs(got - third) < max(3.0 * sd, 1.0), (got, sd)
    apart = fit_of(closed_form_levels(third, 40.0, rng=np.random.default_rng(5)))
    assert not apart.over_pickup


def test_random_takes_meet_the_issues_targets():
    # The issue's targets for single pickups, a single take scored as the pair: pickup within 3 mm and
    # pluck within 5 mm mean absolute error (Mohamad, Dixon & Harte, JASA 142(6), 3530, 2017 report
    # 3.53 and 5.11 mm on real recordings); here on takes with what the fit is not told (contact,
    # aperture, a tone filter, noise, stiffness, detuning).
    rng = np.random.default_rng(2024)
    errors = []
    for _ in range(12):
        levels, truth = random_take(rng)
        fit = fit_of(levels, speaking_length_mm=truth["length_mm"])
        errors.append(pair_errors(fit, truth["pluck_mm"], truth["pickup_mm"]))
    mean = np.mean(errors, axis=0)
    assert mean[0] < 3.0 and mean[1] < 5.0, np.round(errors, 2)


@pytest.mark.parametrize(("capacitance_f", "load_ohm", "f0_hz", "top_hz"),
                         [(1.1e-9, 175e3, A2_HZ, 8000.0), (600e-12, 200e3, E2_HZ, 10000.0)])
def test_the_resonance_of_a_velocity_pickup_within_ten_percent(capacitance_f, load_ohm, f0_hz, top_hz):
    # Coil L = 2.5 H, R = 6 kOhm into a cable and load (references: "Coil and cable"); the second case
    # is the published check value f_r = 4171 Hz, Q = 2.44. The issue's target: f_r within 10 % where Q >= 1.5.
    circuit, f_r, q = rlc(2.5, 6000.0, capacitance_f, load_ohm)
    assert q >= 1.5
    levels = closed_form_levels(120.0, 45.0, f0_hz=f0_hz, top_hz=top_hz, circuit=circuit,
                                rng=np.random.default_rng(6))
    fit = fit_of(levels)
    assert fit.resonance_hz is not None and abs(fit.resonance_hz / f_r - 1) < 0.10, (fit.resonance_hz, f_r)
    assert abs(fit.q / q - 1) < 0.35, (fit.q, q)
    assert 0 < fit.resonance_sd_hz < 0.1 * f_r


def test_no_resonance_is_claimed_where_the_partials_stop_below_it():
    circuit, f_r, _ = rlc(2.5, 6000.0, 200e-12, 1e6)  # about 7 kHz
    levels = closed_form_levels(120.0, 45.0, top_hz=0.5 * f_r, circuit=circuit, rng=np.random.default_rng(7))
    fit = fit_of(levels)
    assert fit.resonance_hz is None and fit.q is None and any("resonance" in n for n in fit.notes)


def test_a_wide_aperture_is_read_where_the_partials_pass_its_first_null():
    # A 25.4 mm aperture on 648 mm has its first null at k = 51.02 (references, Paiva et al. 2012).
    wide = closed_form_levels(136.0, 45.4, aperture_mm=25.4, top_hz=70 * E2_HZ, rng=np.random.default_rng(8))
    fit = fit_of(wide)
    assert fit.aperture_mm is not None and abs(fit.aperture_mm - 25.4) < 2.0, fit.aperture_mm
    assert pair_errors(fit, 136.0, 45.4) < (3.0, 5.0)
    short = closed_form_levels(136.0, 45.4, aperture_mm=25.4, top_hz=25 * E2_HZ, rng=np.random.default_rng(8))
    assert fit_of(short).aperture_mm is None  # partials up to k = 25: its sinc is barely bent


# -- several takes --------------------------------------------------------------------------------


def _tone_db(freq_hz: np.ndarray) -> np.ndarray:
    """An amplifier-like tone the fit is not told: a mid peak +4 dB at 800 Hz, Q 0.8 (the analog prototype
    of the "Audio EQ Cookbook" peaking filter, R. Bristow-Johnson, common practice)."""
    s = 2j * np.pi * freq_hz / (2 * np.pi * 800.0)
    a = 10 ** (4.0 / 40)
    return 20 * np.log10(np.abs((s * s + s * a / 0.8 + 1) / (s * s + s / (a * 0.8) + 1)))


def test_three_takes_share_the_pickup_and_each_keeps_its_pluck():
    plucks = (60.0, 118.0, 175.0)
    takes = [closed_form_levels(p, 95.0, tone_db=_tone_db, rng=np.random.default_rng(10 + i))
             for i, p in enumerate(plucks)]
    fit = fit_placement_group(takes, speaking_length_mm=SCALE_MM, sensing="velocity")
    assert fit.assignment is Assignment.SHARED and "common" in fit.why
    assert abs(fit.pickup_mm - 95.0) < 3.0, fit.pickup_mm
    assert np.all(np.abs(np.array(fit.pluck_mm) - plucks) < 5.0), fit.pluck_mm
    assert [t.pluck_mm for t in fit.takes] == list(fit.pluck_mm) and len(fit.takes) == 3


def test_takes_at_different_frets_share_a_pickup_fixed_on_the_body():
    # A fret n shortens the string to L 2^(-n/12) (12-TET fret rule, common practice); the pickup
    # and the plucks stay where they are on the body.
    frets, plucks = (0, 5, 7), (150.0, 80.0, 118.0)
    lengths = [SCALE_MM * 2 ** (-n / 12) for n in frets]
    takes = [closed_form_levels(p, 42.0, length_mm=length, f0_hz=E2_HZ * 2 ** (n / 12), top_hz=7000.0,
                                rng=np.random.default_rng(20 + n))
             for n, p, length in zip(frets, plucks, lengths, strict=True)]
    fit = fit_placement_group(takes, speaking_length_mm=lengths, sensing="velocity")
    assert abs(fit.pickup_mm - 42.0) < 3.0, fit.pickup_mm
    assert np.all(np.abs(np.array(fit.pluck_mm) - plucks) < 5.0), fit.pluck_mm
    assert [t.speaking_length_mm for t in fit.takes] == pytest.approx(lengths)


# -- the engine's own levels ------------------------------------------------------------------------


def _engine_settings(pluck_mm: float, pickup_mm: float) -> Settings:
    return Settings.defaults().with_values({
        "instrument.assign": "channel", "excitation.position": pluck_mm / SCALE_MM,
        "pickup.0.position": pickup_mm / SCALE_MM, "electronics.resonance_hz": 3500.0, "electronics.q": 2.0,
    })


def _engine_levels(settings: Settings, string: int, fret: int, n_modes: int = 60):
    """|initial amplitude| x |pickup weight| x |electronics filter| per mode, by the engine's own pieces."""
    model = note_model_at(settings, string, fret, n_modes, FS)
    placed = placed_note(settings, string, fret)
    k = np.arange(1, model.playable + 1, dtype=float)
    freqs = model.freqs_hz[: model.playable]
    heard = [{**p, "position": placed.pickup_on_note(p["position"], p["slant"]), "width": placed.on_note(p["width"])}
             for p in settings.pickups]
    omega = 2 * np.pi * freqs
    g = pickup_weights(k, heard, model.sigma_per_s[: k.size], omega, omega[0])
    filt = electronics_filter(*resonance_of(settings), FS)
    assert filt is not None  # the settings give the coil a resonance
    _, h = scipy.signal.freqz(filt.b, filt.a, worN=freqs, fs=FS)
    return model, placed, k, freqs, np.abs(model.initial[: k.size] * g * h)


@pytest.mark.parametrize(("string", "fret", "pluck_mm", "pickup_mm"), [(6, 3, 125.0, 44.0), (2, 7, 90.0, 150.0)])
def test_the_fit_inverts_the_engines_own_levels(string, fret, pluck_mm, pickup_mm):
    settings = _engine_settings(pluck_mm, pickup_mm)
    _, placed, k, freqs, level = _engine_levels(settings, string, fret)
    length = SCALE_MM / placed.scale
    contact_mm = settings.get("excitation.width") * SCALE_MM
    aperture_mm = settings.get("pickup.0.width") * SCALE_MM
    told = fit_placement(k, freqs, level, np.ones(k.size), speaking_length_mm=length, sensing="velocity",
                         pluck_width_mm=contact_mm, aperture_mm=aperture_mm)
    assert pair_errors(told, pluck_mm, pickup_mm) < (0.5, 0.5), (told.pluck_mm, told.pickup_mm)
    assert told.residual_db_rms < 0.5
    untold = fit_placement(k, freqs, level, np.ones(k.size), speaking_length_mm=length, sensing="velocity")
    assert pair_errors(untold, pluck_mm, pickup_mm) < (3.0, 5.0), (untold.pluck_mm, untold.pickup_mm)


def test_the_fit_inverts_a_note_the_engine_rendered():
    # The samples themselves: each mode's amplitude by least squares on its known frequency and decay,
    # then the fit; the distances come back from what the engine played.
    pluck_mm, pickup_mm, string, fret = 140.0, 52.0, 5, 2
    settings = _engine_settings(pluck_mm, pickup_mm).with_values({"output.gain_db": -12.0})
    model, placed, k, freqs, _ = _engine_levels(settings, string, fret, n_modes=48)
    x = render_events([(0.0, 0x90 | (string - 1), placed.note, 90), (0.6, 0x80 | (string - 1), placed.note, 0)],
                      settings, FS, 256, tail_cap_s=0.0)
    start = int(0.02 * FS)  # after the electronics' own brief ringing
    segment = x[start: start + int(0.4 * FS)]
    sigma = model.sigma_per_s[: k.size]
    amps = np.abs(fit_damped_modes(segment, FS, freqs, sigma)) * np.exp(sigma * start / FS)
    fit = fit_placement(k, freqs, amps, np.ones(k.size), speaking_length_mm=SCALE_MM / placed.scale,
                        sensing="velocity", pluck_width_mm=settings.get("excitation.width") * SCALE_MM)
    assert pair_errors(fit, pluck_mm, pickup_mm) < (1.0, 1.0), (fit.pluck_mm, fit.pickup_mm)


# -- moving a pickup or a pluck ---------------------------------------------------------------------


def test_moving_the_pickup_there_and_back_is_the_identity_and_follows_the_mode_shapes():
    k = np.arange(1, 61, dtype=float)
    there = pickup_level_ratio(k, 40.0, 120.0, SCALE_MM, aperture_mm=12.0)
    back = pickup_level_ratio(k, 120.0, 40.0, SCALE_MM, aperture_mm=12.0)
    np.testing.assert_allclose(there * back, 1.0, rtol=1e-12)
    width = 12.0 / SCALE_MM
    expected = aperture_weights(k, 120.0 / SCALE_MM, width) / aperture_weights(k, 40.0 / SCALE_MM, width)
    capped = (np.abs(expected) > 100.0) | (np.abs(expected) < 0.01)  # beyond +-40 dB: a null, capped
    np.testing.assert_allclose(there[~capped], expected[~capped], rtol=1e-12)
    closed = pickup_shape(k, 120.0 / SCALE_MM, width) / pickup_shape(k, 40.0 / SCALE_MM, width)
    np.testing.assert_allclose(there[~capped], closed[~capped], rtol=1e-9)  # Paiva et al. 2012
    wider = pickup_level_ratio(k, 40.0, 120.0, SCALE_MM, aperture_mm=12.0, to_aperture_mm=25.4)
    closed = pickup_shape(k, 120.0 / SCALE_MM, 25.4 / SCALE_MM) / pickup_shape(k, 40.0 / SCALE_MM, width)
    capped = (np.abs(closed) > 100.0) | (np.abs(closed) < 0.01)
    np.testing.assert_allclose(wider[~capped], closed[~capped], rtol=1e-9)


def test_moving_the_pickup_turns_one_takes_levels_into_the_others():
    a, b = closed_form_levels(130.0, 40.0, error_db=0.0), closed_form_levels(130.0, 150.0, error_db=0.0)
    moved = a.level * np.abs(pickup_level_ratio(a.k, 40.0, 150.0, SCALE_MM))
    clear = (a.level > 1e-6 * a.level.max()) & (b.level > 1e-6 * b.level.max())  # nulls carry nothing to move
    np.testing.assert_allclose(moved[clear], b.level[clear], rtol=1e-9)


def test_moving_the_pluck_follows_the_plucked_strings_series():
    k = np.arange(1, 41, dtype=float)
    ratio = pluck_level_ratio(k, 100.0, 170.0, SCALE_MM)
    expected = pluck_series(k, 170.0 / SCALE_MM) / pluck_series(k, 100.0 / SCALE_MM)  # Fletcher & Rossing 1998
    capped = (np.abs(expected) > 100.0) | (np.abs(expected) < 0.01)
    np.testing.assert_allclose(ratio[~capped], expected[~capped], rtol=1e-9)
    assert np.all((np.abs(ratio) <= 100.0 + 1e-9) & (np.abs(ratio) >= 0.01 - 1e-12))  # nulls held at +-40 dB
    np.testing.assert_allclose(ratio * pluck_level_ratio(k, 170.0, 100.0, SCALE_MM), 1.0, rtol=1e-12)


# -- properties -------------------------------------------------------------------------------------


@settings(max_examples=40, deadline=None)
@given(p=st.floats(0.01, 0.5), q=st.floats(0.01, 0.5), seed=st.integers(0, 2**16))
def test_swapping_pluck_and_pickup_leaves_the_residual_unchanged(p, q, seed):
    # sin(k pi p) sin(k pi q) = sin(k pi q) sin(k pi p): the model cannot, and must not, prefer an order.
    rng = np.random.default_rng(seed)
    k = np.arange(1, 31, dtype=float)
    f = k * E2_HZ
    levels = Levels(k, f, rng.normal(-20, 10, k.size), rng.uniform(0.2, 1.0, k.size))
    model = CombModel(levels, known_envelope_db(k, f, "velocity"), log_frequency_basis(f, 2))
    np.testing.assert_allclose(model.weighted_residual(comb_amplitude(k, p, q)),
                               model.weighted_residual(comb_amplitude(k, q, p)), rtol=1e-12, atol=1e-12)


@settings(max_examples=6, deadline=None)
@given(pluck_mm=st.floats(60.0, 200.0), pickup_mm=st.floats(25.0, 55.0), gain_db=st.floats(-60.0, 60.0))
def test_the_fit_reads_shapes_not_levels_and_sensing_is_a_known_tilt(pluck_mm, pickup_mm, gain_db):
    # A recording's level is arbitrary, and a velocity pickup's levels are a displacement pickup's
    # times w_k / w_1 (Horton & Moore 2009): the same take told either way gives the same distances.
    levels = closed_form_levels(pluck_mm, pickup_mm, velocity=False, rng=np.random.default_rng(1))
    base = fit_of(levels, sensing="displacement")
    louder = fit_of(PartialLevels(levels.k, levels.freq_hz, levels.level * 10 ** (gain_db / 20), levels.weight),
                    sensing="displacement")
    as_velocity = fit_of(PartialLevels(levels.k, levels.freq_hz, levels.level * levels.k, levels.weight))
    for other in (louder, as_velocity):
        assert other.pluck_mm == pytest.approx(base.pluck_mm, abs=0.05)
        assert other.pickup_mm == pytest.approx(base.pickup_mm, abs=0.05)


# -- bad input --------------------------------------------------------------------------------------


def test_bad_partials_are_user_errors_with_one_line_messages():
    k = np.arange(1, 6, dtype=float)
    with pytest.raises(PlacementError, match="usable partials") as err:
        fit_placement(k, k * 100, np.ones(5), np.ones(5), speaking_length_mm=SCALE_MM, sensing="velocity")
    assert isinstance(err.value, UserError) and "\n" not in str(err.value)
    k = np.arange(1, 21, dtype=float)
    with pytest.raises(PlacementError, match="one length"):
        fit_placement(k, k * 100, np.ones(20), np.ones(19), speaking_length_mm=SCALE_MM, sensing="velocity")
    with pytest.raises(PlacementError, match="sensing"):
        fit_placement(k, k * 100, np.ones(20), np.ones(20), speaking_length_mm=SCALE_MM, sensing="optical")
    with pytest.raises(PlacementError, match="one value per take"):
        fit_placement_group([closed_form_levels(100.0, 40.0)] * 2, speaking_length_mm=[SCALE_MM],
                            sensing="velocity")
