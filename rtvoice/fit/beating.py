"""A partial that beats: two close damped components (a string's two polarisations) in one band.

The demodulated partial z(t) is modelled as c1 e^{p1 t} + c2 e^{p2 t}. The poles come from the
matrix pencil of Hua & Sarkar, "Matrix pencil method for estimating parameters of exponentially
damped/undamped sinusoids in noise", IEEE Trans. ASSP 38(5), 814 (1990); all eight real
parameters are then refined together by Gauss-Newton on the complex residual, which also gives
their covariance. The two-component model is kept only when it explains the band significantly
better than one component (an F test on the residuals), so a plain decaying partial keeps its
straight-line fit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

MAX_POINTS = 240  # the band is read at most this often over the span: plenty for beats of a few Hz
MIN_SPAN_S = 0.3  # shorter than this, two components a few Hz apart cannot be told apart
F_MIN = 25.0  # the second component must cut the residual this much more than noise would
MIN_RATIO = 0.03  # and be within 30 dB of the first
REFINE_STEPS = 8


@dataclass(frozen=True)
class Component:
    """One damped component: complex amplitude c at t = 0 (|c| = a/2), decay rate and frequency
    offset with their standard deviations, and the sd of log |c| (nepers)."""

    amplitude: complex
    sigma_per_s: float
    offset_hz: float
    sigma_sd_per_s: float
    offset_sd_hz: float
    amplitude_sd_np: float


@dataclass(frozen=True)
class Beating:
    """The stronger component at the onset and the other, and the F statistic of the second."""

    dominant: Component
    other: Component
    f_statistic: float

    @property
    def significant(self) -> bool:
        """Whether two components explain the band significantly better than one (F >= F_MIN) and
        the second is strong enough to be a polarisation rather than a trace of noise."""
        ratio = abs(self.other.amplitude) / max(abs(self.dominant.amplitude), 1e-300)
        return self.f_statistic >= F_MIN and ratio >= MIN_RATIO


def _pencil_poles(z: np.ndarray, orders: tuple[int, ...]) -> list[np.ndarray]:
    """Poles (per sample) of the samples ``z`` for each model order, by the matrix pencil
    (Hua & Sarkar 1990) with the pencil parameter a third of the samples."""
    pencil = max(max(orders), z.size // 3)
    hankel = np.lib.stride_tricks.sliding_window_view(z, pencil + 1)
    _, _, vh = np.linalg.svd(hankel, full_matrices=False)
    poles = []
    for order in orders:
        # The leading right singular vectors span the rows [1, z_j, z_j^2, ...]: shifting them by
        # one sample multiplies each by its pole, so the poles are the eigenvalues of that shift.
        signal = vh[:order]
        poles.append(np.asarray(np.linalg.eigvals(signal[:, 1:] @ np.linalg.pinv(signal[:, :-1]))))
    return poles


def _model(t: np.ndarray, amps: np.ndarray, poles: np.ndarray) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore"):  # a trial step far off: its cost is inf, refused
        return np.asarray(np.exp(np.outer(t, poles)) @ amps)


def _refine(t: np.ndarray, z: np.ndarray, amps: np.ndarray, poles: np.ndarray
            ) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Gauss-Newton on all real parameters (Re, Im of each amplitude and pole); returns amplitudes,
    poles, the parameters' covariance and the residual sum of squares."""

    def jacobian(a: np.ndarray, p: np.ndarray) -> np.ndarray:
        cols = []
        for j in range(p.size):
            e = np.exp(p[j] * t)
            for d in (e, 1j * e, a[j] * t * e, 1j * a[j] * t * e):
                cols.append(d)
        jac = np.column_stack(cols)
        return np.vstack([jac.real, jac.imag])

    def rss(a: np.ndarray, p: np.ndarray) -> float:
        r = z - _model(t, a, p)
        value = float(np.vdot(r, r).real)
        return value if math.isfinite(value) else math.inf

    current = rss(amps, poles)
    if not math.isfinite(current):
        return amps, poles, np.full((4 * poles.size, 4 * poles.size), math.inf), current
    for _ in range(REFINE_STEPS):
        r = z - _model(t, amps, poles)
        step, *_ = np.linalg.lstsq(jacobian(amps, poles), np.concatenate([r.real, r.imag]), rcond=None)
        da = step[0::4] + 1j * step[1::4]
        dp = step[2::4] + 1j * step[3::4]
        scale = 1.0
        while scale > 1e-4:
            trial_a, trial_p = amps + scale * da, poles + scale * dp
            trial = rss(trial_a, trial_p)
            if trial <= current:
                break
            scale *= 0.5
        else:
            break
        amps, poles, current = trial_a, trial_p, trial
    jac = jacobian(amps, poles)
    dof = max(2 * t.size - jac.shape[1], 1)
    cov = np.linalg.pinv(jac.T @ jac) * (current / dof)
    return amps, poles, cov, current


def _component(amps: np.ndarray, poles: np.ndarray, cov: np.ndarray, j: int) -> Component:
    c = complex(amps[j])
    block = cov[4 * j : 4 * j + 2, 4 * j : 4 * j + 2]
    unit = np.array([c.real, c.imag]) / max(abs(c), 1e-300)
    amp_sd = math.sqrt(max(float(unit @ block @ unit), 0.0)) / max(abs(c), 1e-300)
    return Component(
        amplitude=c,
        sigma_per_s=-float(poles[j].real),
        offset_hz=float(poles[j].imag) / (2.0 * math.pi),
        sigma_sd_per_s=math.sqrt(max(float(cov[4 * j + 2, 4 * j + 2]), 0.0)),
        offset_sd_hz=math.sqrt(max(float(cov[4 * j + 3, 4 * j + 3]), 0.0)) / (2.0 * math.pi),
        amplitude_sd_np=amp_sd,
    )


def fit_beating(t_s: np.ndarray, z: np.ndarray, max_offset_hz: float) -> Beating | None:
    """Two damped components in the band samples ``z`` at times ``t_s`` (s after the onset,
    evenly spaced), both decaying and within ``max_offset_hz`` of the band's centre; None when
    there are no such two (or the stretch is too short). Whether they explain the band
    significantly better than one is :attr:`Beating.significant`."""
    if t_s.size < 12 or t_s[-1] - t_s[0] < MIN_SPAN_S:
        return None
    stride = max(1, int(math.ceil(t_s.size / MAX_POINTS)))
    t, y = t_s[::stride], z[::stride]
    dt = float(t[1] - t[0])
    fits = []
    for per_sample in _pencil_poles(y, (1, 2)):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            poles = np.log(per_sample.astype(complex)) / dt
            basis = np.exp(np.outer(t, poles))
        if not (np.all(np.isfinite(poles)) and np.all(np.isfinite(basis))):
            return None
        amps, *_ = np.linalg.lstsq(basis, y, rcond=None)
        fits.append(_refine(t, y, amps, poles))
    (_, _, _, rss1), (amps, poles, cov, rss2) = fits
    dof = 2 * t.size - 8
    if rss2 <= 0 or dof <= 0:
        return None
    f_stat = ((rss1 - rss2) / 4.0) / (rss2 / dof)
    offsets = np.abs(poles.imag) / (2.0 * math.pi)
    if not math.isfinite(f_stat) or np.any(offsets > max_offset_hz) or np.any(poles.real > 0):
        return None
    first, second = _component(amps, poles, cov, 0), _component(amps, poles, cov, 1)
    if abs(second.amplitude) > abs(first.amplitude):
        first, second = second, first
    return Beating(first, second, float(f_stat))
