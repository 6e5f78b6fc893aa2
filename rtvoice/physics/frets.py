"""Where the frets lie and what a fretted note makes of points fixed on the instrument.

Lengths are in mm. The scale length L is the open string's speaking length, from the
nut to the bridge saddle; fret n stops the string at L 2^(-n/12) from the saddle
(12-tone equal temperament, common practice), so every fret raises the pitch by one
equal-tempered semitone at the same tension. Fret numbers may be fractional (a slide
between frets); fret 0 is the open string.

Strings are numbered as players number them (common practice): string 1 is the
highest-pitched, on the treble side of the neck; the last string is the lowest.

Every function takes floats or numpy arrays (broadcast together) and gives a float
when every input is a scalar, an array otherwise. Bad input (non-finite, negative
where only non-negative values mean anything) raises ValueError naming the argument,
the value and what is allowed.
"""

from __future__ import annotations

from typing import overload

import numpy as np
from numpy.typing import ArrayLike

SEMITONES_PER_OCTAVE = 12.0  # 12-tone equal temperament


def _checked(name: str, value: ArrayLike, *, minimum: float, inclusive: bool) -> np.ndarray:
    """``value`` as a float array, or ValueError naming the first element out of range."""
    a = np.asarray(value, dtype=float)
    bad = ~np.isfinite(a) | ((a < minimum) if inclusive else (a <= minimum))
    if np.any(bad):
        where = np.argwhere(bad)[0]
        shown = float(a[tuple(where)])
        at = f" (at index {tuple(int(i) for i in where)})" if a.ndim else ""
        allowed = f">= {minimum:g}" if inclusive else f"> {minimum:g}"
        raise ValueError(f"{name} = {shown!r}{at}: must be a finite number {allowed}")
    return a


def _out(a: np.ndarray) -> float | np.ndarray:
    return float(a) if a.ndim == 0 else a


def _semitone_factor(fret: ArrayLike) -> np.ndarray:
    """2^(-n/12): the part of the scale length still sounding at fret n."""
    n = _checked("fret", fret, minimum=0.0, inclusive=True)
    return np.exp2(-n / SEMITONES_PER_OCTAVE)


@overload
def speaking_length_mm(scale_length_mm: float, fret: float) -> float: ...
@overload
def speaking_length_mm(scale_length_mm: ArrayLike, fret: np.ndarray) -> np.ndarray: ...
@overload
def speaking_length_mm(scale_length_mm: ArrayLike, fret: ArrayLike) -> float | np.ndarray: ...
def speaking_length_mm(scale_length_mm: ArrayLike, fret: ArrayLike) -> float | np.ndarray:
    """Speaking length in mm of a string stopped at ``fret``: L 2^(-n/12).

    12-TET fret rule (common practice): halving the length raises the pitch an
    octave (Mersenne's law, f0 = sqrt(T / mu) / 2L), and 12 equal semitones make the
    octave, so each fret keeps 2^(-1/12) of the length before it. ``scale_length_mm``
    is L, nut to saddle.
    """
    length = _checked("scale_length_mm", scale_length_mm, minimum=0.0, inclusive=False)
    return _out(length * _semitone_factor(fret))


@overload
def fret_distance_from_nut_mm(scale_length_mm: float, fret: float) -> float: ...
@overload
def fret_distance_from_nut_mm(scale_length_mm: ArrayLike, fret: np.ndarray) -> np.ndarray: ...
@overload
def fret_distance_from_nut_mm(scale_length_mm: ArrayLike, fret: ArrayLike) -> float | np.ndarray: ...
def fret_distance_from_nut_mm(scale_length_mm: ArrayLike, fret: ArrayLike) -> float | np.ndarray:
    """Distance in mm from the nut to fret n: L (1 - 2^(-n/12)).

    12-TET fret rule (common practice): what is left of the scale length once the
    speaking length L 2^(-n/12) is taken away. Fret 12 lies at L / 2.
    """
    length = _checked("scale_length_mm", scale_length_mm, minimum=0.0, inclusive=False)
    return _out(length * (1.0 - _semitone_factor(fret)))


@overload
def stiffness_at_fret(inharmonicity_open: float, fret: float) -> float: ...
@overload
def stiffness_at_fret(inharmonicity_open: ArrayLike, fret: np.ndarray) -> np.ndarray: ...
@overload
def stiffness_at_fret(inharmonicity_open: ArrayLike, fret: ArrayLike) -> float | np.ndarray: ...
def stiffness_at_fret(inharmonicity_open: ArrayLike, fret: ArrayLike) -> float | np.ndarray:
    """Inharmonicity coefficient B (dimensionless) of the string stopped at ``fret``.

    Fletcher, "Normal vibration frequencies of a stiff piano string", JASA 36, 203
    (1964): B = pi^3 E d^4 / (64 T L^2). Fretting leaves E, d and (nearly) T as they
    are and shortens L to L 2^(-n/12), so B_n = B_0 2^(n/6): four times the open
    value at fret 12. The small rise in tension from pressing the string onto the
    fret is left out.
    """
    b0 = _checked("inharmonicity_open", inharmonicity_open, minimum=0.0, inclusive=True)
    return _out(b0 / _semitone_factor(fret) ** 2)


@overload
def fraction_of_speaking_length(distance_from_saddle_mm: float, scale_length_mm: float, fret: float) -> float: ...
@overload
def fraction_of_speaking_length(
    distance_from_saddle_mm: ArrayLike, scale_length_mm: ArrayLike, fret: ArrayLike
) -> float | np.ndarray: ...
def fraction_of_speaking_length(
    distance_from_saddle_mm: ArrayLike, scale_length_mm: ArrayLike, fret: ArrayLike
) -> float | np.ndarray:
    """Where a point fixed on the instrument (a pickup, a plucking spot) lies on a
    fretted note, as a fraction of its speaking length from the saddle.

    d / (L 2^(-n/12)) (12-TET fret rule, common practice): the point stays put while
    the fret shortens the vibrating part, so the same pickup sits nearer the middle
    of a higher note (d = L/4 open is L/2 of the note at fret 12). A result of 1 or
    more means the point lies at or beyond the fret, on the stopped part of the
    string, which does not sound: the caller decides what that means.
    """
    d = _checked("distance_from_saddle_mm", distance_from_saddle_mm, minimum=0.0, inclusive=True)
    return _out(d / np.asarray(speaking_length_mm(scale_length_mm, fret)))


@overload
def interpolate_across_strings(
    bass_mm: float, treble_mm: float, string_index: int, string_count: int,
    string_offsets_mm: ArrayLike | None = None,
) -> float: ...
@overload
def interpolate_across_strings(
    bass_mm: float, treble_mm: float, string_index: ArrayLike, string_count: int,
    string_offsets_mm: ArrayLike | None = None,
) -> float | np.ndarray: ...
def interpolate_across_strings(
    bass_mm: float, treble_mm: float, string_index: ArrayLike, string_count: int,
    string_offsets_mm: ArrayLike | None = None,
) -> float | np.ndarray:
    """Distance in mm from the saddle of a slanted line (a pickup, a slanted saddle)
    under string ``string_index`` (1-based), given its distances under the outermost
    strings: ``treble_mm`` under string 1, ``bass_mm`` under string ``string_count``.

    A straight line across the strings: the distance changes linearly with each
    string's offset across the neck. Equal spacing is assumed unless
    ``string_offsets_mm`` gives each string's offset across the neck in mm (any
    origin, string 1 first, strictly increasing or strictly decreasing). With a
    single string both ends lie under it and their mean is taken.
    """
    bass = float(_checked("bass_mm", bass_mm, minimum=0.0, inclusive=True))
    treble = float(_checked("treble_mm", treble_mm, minimum=0.0, inclusive=True))
    count = _checked("string_count", string_count, minimum=1.0, inclusive=True)
    if count.ndim != 0 or count != np.round(count):
        raise ValueError(f"string_count = {string_count!r}: must be a whole number >= 1")
    n_strings = int(count)
    index = _checked("string_index", string_index, minimum=1.0, inclusive=True)
    if np.any(index != np.round(index)) or np.any(index > n_strings):
        raise ValueError(f"string_index = {string_index!r}: must be whole numbers from 1 to {n_strings}")
    if n_strings == 1:
        return _out(np.full(index.shape, 0.5 * (bass + treble)))
    if string_offsets_mm is None:
        across = (index - 1.0) / (n_strings - 1.0)
    else:
        offsets = np.asarray(string_offsets_mm, dtype=float)
        if offsets.shape != (n_strings,) or not np.all(np.isfinite(offsets)):
            raise ValueError(
                f"string_offsets_mm = {string_offsets_mm!r}: must be {n_strings} finite offsets, string 1 first"
            )
        steps = np.diff(offsets)
        if not (np.all(steps > 0) or np.all(steps < 0)):
            raise ValueError(
                f"string_offsets_mm = {string_offsets_mm!r}: must be strictly increasing or strictly decreasing"
            )
        picked = offsets[index.astype(int) - 1]
        across = (picked - offsets[0]) / (offsets[-1] - offsets[0])
    return _out(treble + across * (bass - treble))
