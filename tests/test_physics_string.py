"""Tuning, stiffness, damping, pickups and electronics against published formulas and scipy."""

import math

import numpy as np
import pytest
import scipy.signal

from rtvoice.physics.damping import decay_rate_per_s, loss_coefficients, release_rate_per_s, t60_s
from rtvoice.physics.electronics import lowpass_biquad, lowpass_response, rlc_resonance
from rtvoice.physics.modes import mode_frequencies_hz, playable_mode_count
from rtvoice.physics.pickup import aperture_weights, first_aperture_null, pickup_weights
from rtvoice.physics.tuning import midi_note_to_hz


@pytest.mark.parametrize(("note", "hz"), [(69, 440.0), (60, 261.6256), (21, 27.5), (127, 12543.854)])
def test_equal_temperament(note, hz):
    # MIDI 1.0 Detailed Specification (note 69 = A4), ISO 16:1975 (A4 = 440 Hz), 12-TET.
    assert midi_note_to_hz(note) == pytest.approx(hz, abs=1e-3)


def test_bend_and_reference():
    assert midi_note_to_hz(69, 440.0, 12.0) == pytest.approx(880.0)
    assert midi_note_to_hz(69, 442.0) == pytest.approx(442.0)


def test_fletcher_stiff_string_worked_example():
    # Fletcher, JASA 36, 203 (1964): f_k = k f0 sqrt(1 + B k^2). Worked example (shared references, calc):
    # plain steel d = 0.254 mm, L = 648 mm, f0 = 329.63 Hz -> B = 1.323e-5, f_10 = 3298.48 Hz, f_20 = 6610.02 Hz.
    d, length, f0, rho, e = 0.254e-3, 0.648, 329.63, 7850.0, 200e9
    mu = rho * math.pi * d**2 / 4
    tension = (2 * length * f0) ** 2 * mu  # Mersenne: f0 = sqrt(T / mu) / 2L
    b = math.pi**3 * e * d**4 / (64 * tension * length**2)
    assert b == pytest.approx(1.323e-5, rel=2e-3)
    f = mode_frequencies_hz(f0, b, 20)
    assert f[9] == pytest.approx(3298.48, abs=0.05)
    assert f[19] == pytest.approx(6610.02, abs=0.1)
    cents = 1200 * np.log2(f[19] / (20 * f0))
    assert cents == pytest.approx(4.57, abs=0.01)


def test_playable_modes_stop_below_045_fs():
    f = mode_frequencies_hz(1000.0, 0.0, 40)
    assert playable_mode_count(f, 48000) == 21  # 21.6 kHz excluded (0.45 x 48 kHz)


def test_damping_law_reproduces_its_two_decay_times():
    # Chaigne & Askenfelt, JASA 95(2) 1994: sigma = b1 + b3 w^2; T60 = 3 ln 10 / sigma.
    b1, b3 = loss_coefficients(6.0, 1.5)
    assert t60_s(decay_rate_per_s(100.0, b1, b3)) == pytest.approx(6.0)
    assert t60_s(decay_rate_per_s(2000.0, b1, b3)) == pytest.approx(1.5)
    assert b1 > 0 and b3 > 0


def test_resonator_pole_radius_for_one_second_t60():
    # Two-pole resonator per mode: r = exp(-sigma / fs); T60 = 1 s at 48 kHz gives r = 0.99985610 (calc).
    sigma = 3 * math.log(10) / 1.0
    assert math.exp(-sigma / 48000) == pytest.approx(0.99985610, abs=1e-8)


def test_damping_refuses_impossible_pairs():
    with pytest.raises(ValueError, match="must not exceed"):
        loss_coefficients(1.0, 2.0)
    with pytest.raises(ValueError, match="steeper"):
        loss_coefficients(60.0, 0.1)  # needs b1 < 0


def test_release_rate_is_at_least_the_release_t60():
    sigma = np.array([0.5, 50.0])
    out = release_rate_per_s(sigma, 0.2)
    assert out[0] == pytest.approx(3 * math.log(10) / 0.2)
    assert out[1] == 50.0


def test_aperture_first_null_worked_example():
    # Paiva, Pakarinen & Valimaki, "Acoustics and Modeling of Pickups", JAES 60(10) 2012: a uniform
    # aperture multiplies by sinc(k pi w / 2L). L = 648 mm, w = 25.4 mm: first null at k = 51.02 (~4205 Hz at 82.41 Hz).
    w = 25.4 / 648
    k_null = first_aperture_null(w)
    assert k_null == pytest.approx(51.02, abs=0.01)
    assert k_null * 82.41 == pytest.approx(4205, abs=1)
    assert abs(aperture_weights(np.array([k_null]), 0.3, w)[0]) < 1e-12


def test_point_pickup_senses_mode_shape():
    # A point pickup at x senses sin(k pi x) (Fletcher & Rossing 1998): at x = 1/3 harmonics 3, 6, 9 vanish.
    w = aperture_weights(np.arange(1, 10), 1 / 3)
    assert np.all(np.abs(w[[2, 5, 8]]) < 1e-12), f"harmonics 3, 6, 9 weigh {w[[2, 5, 8]]}, want 0"


def test_velocity_pickup_weights_mode_by_frequency():
    # Magnetic pickups respond to velocity: mode k weighted by w_k (Horton & Moore, Am. J. Phys. 77(2) 2009).
    k = np.arange(1, 6)
    omega = 2 * np.pi * 100 * k
    pu = [{"position": 0.2, "width": 0.0, "sensing": "velocity", "level_db": 0.0, "polarity": 1}]
    w = pickup_weights(k, pu, np.zeros(5), omega, omega[0])
    np.testing.assert_allclose(np.abs(w), k * np.abs(np.sin(k * np.pi * 0.2)), rtol=1e-12)


def test_rlc_resonance_worked_examples():
    # Series R, L with shunt C and load R_L (shared references, calc): L = 2.5 H, R = 6 kOhm, C = 600 pF:
    # f_r = 4109 Hz, Q = 10.76 unloaded; with R_L = 200 kOhm f_r = 4171 Hz, Q = 2.44.
    assert rlc_resonance(2.5, 6000, 600e-12) == pytest.approx((4109, 10.76), rel=1e-3)
    assert rlc_resonance(2.5, 6000, 600e-12, 200e3) == pytest.approx((4171, 2.44), rel=1e-3)


def test_rlc_normalised_response_matches_circuit_via_scipy_freqs():
    # H(s) = 1 / (L C s^2 + (R C + L / R_L) s + 1 + R / R_L), evaluated by scipy.signal.freqs, normalised to
    # unity DC gain, equals the second-order low-pass with our f_r and Q; peak +7.9 dB at 3.99 kHz (calc).
    ind, res, cap, load = 2.5, 6000.0, 600e-12, 200e3
    f = np.linspace(100, 10000, 20000)
    _, h = scipy.signal.freqs([1.0], [ind * cap, res * cap + ind / load, 1 + res / load], worN=2 * np.pi * f)
    h = h * (1 + res / load)
    f_r, q = rlc_resonance(ind, res, cap, load)
    np.testing.assert_allclose(lowpass_response(f, f_r, q), h, rtol=1e-9)
    peak = np.argmax(np.abs(h))
    assert 20 * np.log10(abs(h[peak])) == pytest.approx(7.9, abs=0.05)
    assert f[peak] == pytest.approx(3990, abs=15)


def test_digital_lowpass_follows_the_analog_response():
    # The digital filter (scipy.signal.freqz) against the analog prototype: within 0.1 dB up to 12 kHz at
    # 48 kHz, for resonances across the guitar-pickup range (Vicanek 2016 matched design).
    fs = 48000.0
    f = np.array([100, 1000, 3000, 6000, 8000, 12000])
    for f_r, q in [(2400.0, 0.9), (4000.0, 2.5), (6000.0, 1.2), (3000.0, 10.0)]:
        b, a = lowpass_biquad(f_r, q, fs)
        _, hd = scipy.signal.freqz(b, a, worN=np.append(f, f_r), fs=fs)
        ha = lowpass_response(np.append(f, f_r), f_r, q)
        np.testing.assert_allclose(20 * np.log10(np.abs(hd)), 20 * np.log10(np.abs(ha)), atol=0.1)
        _, dc = scipy.signal.freqz(b, a, worN=[0.0], fs=fs)
        assert abs(dc[0]) == pytest.approx(1.0, abs=1e-9)  # unity DC gain
