"""Fret positions, fretted stiffness and slanted pickups against the fret rule, Fletcher's formula and numpy."""

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from rtvoice.physics.frets import (
    fraction_of_speaking_length,
    fret_distance_from_nut_mm,
    interpolate_across_strings,
    speaking_length_mm,
    stiffness_at_fret,
)
from rtvoice.physics.modes import mode_frequencies_hz
from rtvoice.physics.strings import inharmonicity

SCALE_MM = 648.0  # a common electric scale length (common practice)


def test_fret_12_is_half_the_scale():
    # 12-TET fret rule (common practice): the octave fret halves the string.
    assert fret_distance_from_nut_mm(SCALE_MM, 12) == pytest.approx(SCALE_MM / 2, rel=1e-12)
    assert speaking_length_mm(SCALE_MM, 12) == pytest.approx(SCALE_MM / 2, rel=1e-12)


@pytest.mark.parametrize(("fret", "from_nut_mm"), [(1, 36.37), (5, 162.55), (7, 215.51), (12, 324.00), (22, 466.16)])
def test_fret_positions_on_648_mm(fret, from_nut_mm):
    # 12-TET fret rule, L (1 - 2^(-n/12)) from the nut (common practice); worked values for L = 648 mm from
    # the shared references (calc).
    assert fret_distance_from_nut_mm(SCALE_MM, fret) == pytest.approx(from_nut_mm, abs=0.005)


def test_fret_rule_over_arrays():
    # L (1 - 2^(-n/12)) from the nut and L 2^(-n/12) to the saddle (common practice), computed here directly.
    n = np.arange(0, 25)
    expected = SCALE_MM * (1 - 2.0 ** (-n / 12))
    assert np.allclose(fret_distance_from_nut_mm(SCALE_MM, n), expected, rtol=1e-13, atol=0)
    assert np.allclose(speaking_length_mm(SCALE_MM, n) + fret_distance_from_nut_mm(SCALE_MM, n), SCALE_MM)
    # "Rule of 17.817" (common practice): each fret lies 1/17.817 of the remaining length past the one before.
    remaining = speaking_length_mm(SCALE_MM, n[:-1])
    step = np.diff(fret_distance_from_nut_mm(SCALE_MM, n))
    divisor = 1 / (1 - 2 ** (-1 / 12))
    assert divisor == pytest.approx(17.817, abs=5e-4)
    assert np.allclose(remaining / step, divisor, rtol=1e-12)


def test_stiffness_is_four_times_at_fret_12():
    # Fletcher, JASA 36, 203 (1964): B = pi^3 E d^4 / (64 T L^2), so halving L at equal T quadruples B.
    assert stiffness_at_fret(1.323e-5, 12) == pytest.approx(4 * 1.323e-5, rel=1e-12)
    assert stiffness_at_fret(0.0, 7) == 0.0


def test_fretted_stiffness_agrees_with_fletcher_on_the_shorter_length():
    # Fletcher (1964) evaluated on the fretted speaking length L 2^(-n/12) at the same tension (calc).
    e, d, t = 200e9, 0.432e-3, 74.2
    b_open = inharmonicity(e, d, t, SCALE_MM / 1000)
    for n in (1, 5, 12, 19, 24):
        fretted = inharmonicity(e, d, t, speaking_length_mm(SCALE_MM, n) / 1000)
        assert stiffness_at_fret(b_open, n) == pytest.approx(fretted, rel=1e-12), f"fret {n}"


def test_bass_string_stiffness_at_frets_12_and_21():
    # Kemp, "On inharmonicity in bass guitar strings...", SN Applied Sciences 2, 636 (2020): partial 10 about
    # 100 cents sharp at fret 12, partial 6 about 100 cents sharp at fret 21; the two agree with B ~ 1/L^2.
    # Shared references (calc): B12 about 1.22e-3, B21 = B12 2^(9/6) = 3.46e-3, 101.6 cents at k = 6. Here B12
    # is solved exactly for 100 cents at k = 10 (1.2246e-3), which gives 101.7 cents at k = 6.
    b12_exact = (2 ** (1 / 6) - 1) / 100  # sqrt(1 + 100 B) = 2^(1/12)
    b_open = b12_exact / 4
    b12, b21 = stiffness_at_fret(b_open, 12), stiffness_at_fret(b_open, 21)
    assert b12 == pytest.approx(1.22e-3, rel=5e-3)
    assert b21 == pytest.approx(3.46e-3, rel=2e-3)

    def cents_sharp(b, k):
        return 1200 * math.log2(mode_frequencies_hz(1.0, b, k)[k - 1] / k)

    assert cents_sharp(b12, 10) == pytest.approx(100.0, abs=1e-9)
    assert cents_sharp(b21, 6) == pytest.approx(101.6, abs=0.2)


def test_fixed_point_on_fretted_notes():
    # d / (L 2^(-n/12)) (shared references, calc): d = 162 mm on 648 mm is 1/4 open and 1/2 at fret 12.
    assert fraction_of_speaking_length(162.0, SCALE_MM, 0) == pytest.approx(0.25, rel=1e-12)
    assert fraction_of_speaking_length(162.0, SCALE_MM, 12) == pytest.approx(0.5, rel=1e-12)
    # Beyond the fret the point lies on the stopped part: reported as a fraction above 1, not hidden.
    assert fraction_of_speaking_length(400.0, SCALE_MM, 12) > 1.0


@given(
    scale_mm=st.floats(min_value=300.0, max_value=1200.0),
    last_fret=st.integers(min_value=1, max_value=36),
)
def test_speaking_length_strictly_falls_with_fret(scale_mm, last_fret):
    # 12-TET fret rule (common practice): every fret shortens the string by a factor 2^(-1/12).
    frets = np.arange(0, last_fret + 1)
    lengths = speaking_length_mm(scale_mm, frets)
    assert np.all(np.diff(lengths) < 0), lengths


@given(
    scale_mm=st.floats(min_value=300.0, max_value=1200.0),
    where=st.floats(min_value=0.01, max_value=0.99),
    fret_a=st.floats(min_value=0.0, max_value=24.0),
    step=st.floats(min_value=0.01, max_value=12.0),
)
def test_fixed_point_moves_toward_the_fret_as_the_note_rises(scale_mm, where, fret_a, step):
    # A point fixed d mm from the saddle is d / (L 2^(-n/12)) of the note (common practice): it grows with n.
    d = where * scale_mm
    assert fraction_of_speaking_length(d, scale_mm, fret_a + step) > fraction_of_speaking_length(d, scale_mm, fret_a)


def test_slanted_pickup_equal_spacing():
    # Linear across the strings (straight pickup), checked with numpy.interp; string 1 is the treble
    # side (common practice).
    got = interpolate_across_strings(100.0, 80.0, np.arange(1, 7), 6)
    assert np.allclose(got, np.interp(np.arange(6), [0, 5], [80.0, 100.0]), rtol=1e-14, atol=0)
    assert interpolate_across_strings(100.0, 80.0, 1, 6) == pytest.approx(80.0)
    assert interpolate_across_strings(100.0, 80.0, 6, 6) == pytest.approx(100.0)


def test_slanted_pickup_uneven_spacing():
    # With offsets across the neck the line is linear in the offset (numpy.interp as the reference).
    offsets = np.array([0.0, 10.1, 20.5, 31.2, 42.0, 52.4])  # string 1 first, uneven on purpose
    got = interpolate_across_strings(150.0, 130.0, np.arange(1, 7), 6, offsets)
    assert np.allclose(got, np.interp(offsets, [offsets[0], offsets[-1]], [130.0, 150.0]), rtol=1e-14)
    # Measured from the bass side instead (decreasing offsets): the same line.
    flipped = interpolate_across_strings(150.0, 130.0, np.arange(1, 7), 6, 52.4 - offsets)
    assert np.allclose(flipped, got, rtol=1e-14)


@pytest.mark.parametrize(
    ("call", "names"),
    [
        (lambda: speaking_length_mm(0.0, 1), "scale_length_mm = 0.0"),
        (lambda: speaking_length_mm(-648.0, 1), "scale_length_mm = -648.0"),
        (lambda: speaking_length_mm(648.0, -1), "fret = -1.0"),
        (lambda: speaking_length_mm(648.0, np.array([0.0, np.nan])), "fret = nan (at index (1,))"),
        (lambda: fret_distance_from_nut_mm(np.inf, 3), "scale_length_mm = inf"),
        (lambda: stiffness_at_fret(-1e-5, 3), "inharmonicity_open = -1e-05"),
        (lambda: fraction_of_speaking_length(-1.0, 648.0, 0), "distance_from_saddle_mm = -1.0"),
        (lambda: interpolate_across_strings(100.0, 80.0, 7, 6), "string_index = 7"),
        (lambda: interpolate_across_strings(100.0, 80.0, 1.5, 6), "string_index = 1.5"),
        (lambda: interpolate_across_strings(100.0, 80.0, 1, 0), "string_count = 0"),
        (lambda: interpolate_across_strings(100.0, 80.0, 1, 3, [0.0, 5.0]), "string_offsets_mm"),
        (lambda: interpolate_across_strings(100.0, 80.0, 1, 3, [0.0, 5.0, 5.0]), "strictly"),
    ],
)
def test_bad_input_names_the_value_and_what_is_allowed(call, names):
    with pytest.raises(ValueError, match="must") as err:
        call()
    assert names in str(err.value), str(err.value)
