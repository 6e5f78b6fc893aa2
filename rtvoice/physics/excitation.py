"""Sine-series projection of a pluck, a strike or any initial shape.

A string of unit length fixed at both ends, released from displacement u(x) with
velocity v(x), moves as y(x, t) = sum_k sin(k pi x) [a_k cos(w_k t) + b_k / w_k sin(w_k t)],
where a_k and b_k are the sine-series coefficients 2 * integral_0^1 f(x) sin(k pi x) dx
of u and v. A pluck sets u (v = 0); a strike sets v (u = 0).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import scipy.fft

#: Grid size for numerical projection; 2**14 - 1 points makes the DST-I a power of two long.
PROJECTION_GRID = 16383


def _sinc_half_width(k: np.ndarray, width: float) -> np.ndarray:
    """sin(k pi w / 2) / (k pi w / 2): the average of sin(k pi x) over a window of width w."""
    return np.sinc(k * width / 2.0)  # numpy's sinc(x) is sin(pi x) / (pi x)


def pluck_amplitudes(k: np.ndarray, position: float, width: float = 0.0) -> np.ndarray:
    """Sine-series coefficients a_k of a unit-height triangle peaked at ``position``.

    a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)). A finger or plectrum of contact
    ``width`` rounds the corner: the shape is the triangle averaged over a sliding
    window of that width, which multiplies a_k by sinc(k pi w / 2) and so low-passes
    the spectrum (the peak then sits slightly under 1). Requires width <= 2 min(p, 1 - p).
    """
    k = np.asarray(k, dtype=float)
    p = float(position)
    a: np.ndarray = 2.0 * np.sin(k * np.pi * p) / (k * k * np.pi**2 * p * (1.0 - p))
    return a * _sinc_half_width(k, width) if width > 0 else a


def pluck_shape(x: np.ndarray, position: float, width: float = 0.0) -> np.ndarray:
    """The initial displacement whose coefficients :func:`pluck_amplitudes` gives.

    A unit triangle peaked at ``position``; with ``width`` > 0 the window average
    replaces the corner by a parabola over [p - w/2, p + w/2].
    """
    x = np.asarray(x, dtype=float)
    p, w = float(position), float(width)
    tri = np.where(x < p, x / p, (1.0 - x) / (1.0 - p))
    if w <= 1e-9:
        return tri
    a, b = x - w / 2.0, x + w / 2.0
    inside = (a < p) & (b > p)
    a_in, b_in = np.where(inside, a, 0.0), np.where(inside, b, 0.0)
    rounded = ((p * p - a_in * a_in) / (2 * p) + ((1 - p) ** 2 - (1 - b_in) ** 2) / (2 * (1 - p))) / w
    return np.where(inside, rounded, tri)


def strike_velocity_coefficients(k: np.ndarray, position: float, width: float = 0.0) -> np.ndarray:
    """Sine-series coefficients b_k of a unit-impulse strike centred at ``position``.

    The initial velocity is 1/w over a contact of width w (so its integral, the
    impulse, is 1): b_k = 2 sin(k pi x0) sinc(k pi w / 2). The displacement amplitude
    of mode k is b_k / w_k, which falls as 1/k for a narrow hammer.
    """
    k = np.asarray(k, dtype=float)
    b: np.ndarray = 2.0 * np.sin(k * np.pi * float(position))
    return b * _sinc_half_width(k, width) if width > 0 else b


def shape_from_breakpoints(breakpoints: Sequence[Sequence[float]], x: np.ndarray) -> np.ndarray:
    """Piecewise-linear shape through ``breakpoints`` ([x, y] pairs), zero at both ends."""
    pts = sorted((float(px), float(py)) for px, py in breakpoints)
    xs = [0.0] + [px for px, _ in pts] + [1.0]
    ys = [0.0] + [py for _, py in pts] + [0.0]
    shape: np.ndarray = np.interp(np.asarray(x, dtype=float), xs, ys)
    return shape


def project_shape(samples: np.ndarray, n_modes: int) -> np.ndarray:
    """First ``n_modes`` sine-series coefficients of a shape sampled at x_n = n / (N + 1).

    ``samples`` holds the N interior points n = 1..N; a DST-I does the projection:
    a_k = DST-I(samples)[k - 1] / (N + 1), exact for band-limited shapes and
    converging as the grid refines otherwise.
    """
    samples = np.asarray(samples, dtype=float)
    coeffs = scipy.fft.dst(samples, type=1) / (samples.size + 1)
    out = np.zeros(n_modes)
    m = min(n_modes, coeffs.size)
    out[:m] = coeffs[:m]
    return out


def projection_grid(n_points: int = PROJECTION_GRID) -> np.ndarray:
    """Interior grid x_n = n / (N + 1), n = 1..N, that :func:`project_shape` expects."""
    return np.arange(1, n_points + 1) / (n_points + 1.0)


def excitation_amplitudes(
    kind: str,
    n_modes: int,
    position: float,
    width: float,
    shape: Sequence[Sequence[float]] = (),
) -> tuple[np.ndarray, np.ndarray]:
    """(a_k, b_k): displacement and velocity coefficients for modes 1..n_modes.

    ``kind`` is ``"pluck"`` (initial displacement) or ``"strike"`` (initial
    velocity). With breakpoints in ``shape`` the profile is that shape, projected
    numerically; otherwise it is the closed form (a rounded triangle for a pluck, a
    flat contact for a strike) at ``position`` with contact ``width``.
    """
    k = np.arange(1, n_modes + 1, dtype=float)
    if shape:
        grid = projection_grid()
        coeffs = project_shape(shape_from_breakpoints(shape, grid), n_modes)
    elif kind == "pluck":
        coeffs = pluck_amplitudes(k, position, width)
    elif kind == "strike":
        coeffs = strike_velocity_coefficients(k, position, width)
    else:
        raise ValueError(f"unknown excitation kind {kind!r}: use 'pluck' or 'strike'")
    zeros = np.zeros(n_modes)
    return (coeffs, zeros) if kind == "pluck" else (zeros, coeffs)
