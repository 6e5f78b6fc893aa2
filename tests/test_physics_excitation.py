"""Sine-series coefficients of plucks, strikes and shapes, against published closed forms
and scipy's numerical integration."""

import numpy as np
import pytest
import scipy.integrate
from hypothesis import given, settings
from hypothesis import strategies as st
from support.describe import failing

from rtvoice.physics.excitation import (
    excitation_amplitudes,
    pluck_amplitudes,
    pluck_shape,
    project_shape,
    projection_grid,
    shape_from_breakpoints,
    strike_velocity_coefficients,
)

K = np.arange(1, 41)


def quad_coefficient(f, k):
    """2 * integral_0^1 f(x) sin(k pi x) dx by scipy.integrate.quad (the definition of the sine series)."""
    val, _ = scipy.integrate.quad(lambda x: f(x) * np.sin(k * np.pi * x), 0, 1, limit=400)
    return 2 * val


def test_midpoint_pluck_values():
    # Fletcher & Rossing, The Physics of Musical Instruments, 2nd ed. 1998, ch. 2:
    # a_k = 2 h sin(k pi p) / (k^2 pi^2 p (1 - p)); p = 1/2, h = 1 (values in shared references).
    a = pluck_amplitudes(np.array([1, 2, 3, 5]), 0.5)
    # The reference values are printed to six decimals: agree to half a unit in the last place.
    np.testing.assert_allclose(a, [0.810569, 0.0, -0.090063, 0.032423], rtol=0, atol=5e-7)


def test_midpoint_pluck_odd_only_falling_as_inverse_square():
    # Blackstock, Fundamentals of Physical Acoustics, 2000: mid-point pluck has odd harmonics only, 1/k^2.
    a = pluck_amplitudes(K, 0.5)
    assert np.all(np.abs(a[1::2]) < 1e-15), \
        "even harmonics, want 0: " + failing(np.abs(a[1::2]) < 1e-15, a[1::2], K[1::2], "harmonics")
    odd = K[::2]
    np.testing.assert_allclose(np.abs(a[::2]) * odd**2, 8 / np.pi**2, rtol=1e-12)


@pytest.mark.parametrize(
    ("p", "k", "expected"), [(0.2, 1, 0.744439), (0.2, 5, 0.0), (0.25, 1, 0.764212), (0.25, 4, 0.0)]
)
def test_pluck_values_other_positions(p, k, expected):
    # Fletcher & Rossing 1998 ch. 2, values calculated from the closed form (shared references).
    assert pluck_amplitudes(np.array([k]), p)[0] == pytest.approx(expected, abs=1e-6)


@pytest.mark.parametrize("p", [0.07, 0.2, 0.5, 0.83])
def test_parseval(p):
    # Parseval for the sine series: sum a_k^2 = 2 integral u^2 = 2/3 for a unit triangle.
    a = pluck_amplitudes(np.arange(1, 200001), p)
    assert np.sum(a**2) == pytest.approx(2 / 3, rel=1e-4)


def test_near_bridge_pluck_falls_as_inverse_k():
    # Plucked near the bridge, all low harmonics sound with a_k ~ 2 / (k pi) (sin(k pi p) ~ k pi p).
    p = 0.002
    k = np.arange(1, 11)
    np.testing.assert_allclose(pluck_amplitudes(k, p) * k * np.pi / 2, 1.0, rtol=0.01)


@pytest.mark.parametrize(("p", "w"), [(0.2, 0.0), (0.2, 0.04), (0.5, 0.1), (0.13, 0.02)])
def test_pluck_closed_form_matches_quad(p, w):
    # The closed form against direct numerical integration of the explicit rounded shape (scipy.integrate.quad).
    for k in (1, 2, 3, 7, 13):
        expected = quad_coefficient(lambda x: float(pluck_shape(np.array([x]), p, w)[0]), k)
        assert pluck_amplitudes(np.array([k]), p, w)[0] == pytest.approx(expected, abs=2e-7)


def test_width_multiplies_by_sinc():
    # A contact averaged over width w multiplies a_k by sinc(k pi w / 2L) (shared references: w/L = 0.05
    # gives 0.900316 at k = 10, first null at k = 40).
    ratio = pluck_amplitudes(np.array([10.0, 40.0]), 0.3, 0.05) / pluck_amplitudes(np.array([10.0, 40.0]), 0.3)
    assert ratio[0] == pytest.approx(0.900316, abs=1e-6)
    assert abs(ratio[1]) < 1e-12


@settings(max_examples=40, deadline=None)
@given(p=st.floats(0.05, 0.95), w_frac=st.floats(0.0, 1.0))
def test_pluck_closed_form_matches_dst_projection(p, w_frac):
    # Numerical projection with a DST-I over a fine grid (scipy.fft.dst type 1 / (N + 1)) must agree with
    # the closed form for any position and width.
    w = w_frac * 2 * min(p, 1 - p) * 0.99
    grid = projection_grid()
    numeric = project_shape(pluck_shape(grid, p, w), 40)
    np.testing.assert_allclose(numeric, pluck_amplitudes(K, p, w), atol=2e-6)


def test_strike_matches_smith_struck_string():
    # Smith, Physical Audio Signal Processing, "The Ideal Struck String": A_k proportional to
    # sin(k pi x0) sin(k pi w / 2) / k^2. Our b_k / (k pi) with unit impulse equals 4 sin sin / (k^2 pi^2 w).
    x0, w = 0.12, 0.03
    k = np.arange(1, 30)
    displacement = strike_velocity_coefficients(k, x0, w) / (k * np.pi)
    expected = 4 * np.sin(k * np.pi * x0) * np.sin(k * np.pi * w / 2) / (k**2 * np.pi**2 * w)
    np.testing.assert_allclose(displacement, expected, rtol=1e-12, atol=1e-15)


def test_strike_matches_quad_of_box_velocity():
    x0, w = 0.3, 0.05
    for k in (1, 2, 5, 9):
        expected = quad_coefficient(lambda x: (1 / w) if abs(x - x0) < w / 2 else 0.0, k)
        assert strike_velocity_coefficients(np.array([k]), x0, w)[0] == pytest.approx(expected, abs=1e-7)


def test_narrow_strike_falls_as_inverse_k():
    # PASP: as w -> 0 the struck string's displacement amplitudes fall as 1/k (at the peaks of sin(k pi x0)).
    k = np.arange(1, 8)
    x0 = 0.5 / 8  # sin(k pi x0) varies slowly for small k; divide it out
    disp = strike_velocity_coefficients(k, x0, 1e-6) / (k * np.pi)
    np.testing.assert_allclose(disp * k / np.sin(k * np.pi * x0), 2 / np.pi, rtol=1e-6)


def test_breakpoint_shape_of_a_triangle_matches_closed_form():
    grid = projection_grid()
    a = project_shape(shape_from_breakpoints([[0.3, 1.0]], grid), 40)
    np.testing.assert_allclose(a, pluck_amplitudes(K, 0.3), atol=2e-6)


def test_excitation_amplitudes_kinds():
    a, b = excitation_amplitudes("pluck", 10, 0.2, 0.0)
    assert np.all(b == 0) and a[4] == pytest.approx(0, abs=1e-12), \
        f"a pluck starts at rest (velocities {b}) and leaves out k = 5 at 0.2 (a_5 = {a[4]:.3g})"
    a, b = excitation_amplitudes("strike", 10, 0.25, 0.0)
    assert np.all(a == 0) and b[3] == pytest.approx(0, abs=1e-12), \
        f"a strike starts undisplaced (displacements {a}) and leaves out k = 4 at 0.25 (b_4 = {b[3]:.3g})"
    with pytest.raises(ValueError):
        excitation_amplitudes("bow", 10, 0.2, 0.0)
