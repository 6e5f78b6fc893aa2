"""f0 and the inharmonicity coefficient B from partial frequencies.

The partials of a stiff string lie at f_k = k f0 sqrt(1 + B k^2) (Fletcher, "Normal vibration
frequencies of a stiff piano string", JASA 36, 203, 1964), f0 being the frequency the string would
have without stiffness. Squared, (f_k / k)^2 = f0^2 + f0^2 B k^2 is a straight line in k^2: a
weighted linear least-squares fit on it gives the start, Gauss-Newton on f_k itself the answer,
and the covariance of that fit, scaled by its residuals, the uncertainties.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

CENTS_PER_OCTAVE = 1200.0
GAUSS_NEWTON_STEPS = 20


@dataclass(frozen=True)
class InharmonicityFit:
    """f0 (Hz, without stiffness) and B with their standard deviations; the partials' rms deviation
    from the fitted law in cents, and how many partials the fit used."""

    f0_hz: float
    f0_sd_hz: float
    inharmonicity: float
    inharmonicity_sd: float
    residual_cents_rms: float
    n_partials: int

    def partial_hz(self, k: np.ndarray | int) -> np.ndarray:
        """The fitted frequency of partial ``k``: k f0 sqrt(1 + B k^2)."""
        return stiff_partials_hz(np.asarray(k, dtype=float), self.f0_hz, self.inharmonicity)


def stiff_partials_hz(k: np.ndarray, f0_hz: float, inharmonicity: float) -> np.ndarray:
    """f_k = k f0 sqrt(1 + B k^2) (Fletcher 1964) for partial numbers ``k``; B below -1/k^2 gives nan."""
    k = np.asarray(k, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.asarray(k * f0_hz * np.sqrt(1.0 + inharmonicity * k * k))


def fit_inharmonicity(k: np.ndarray, freq_hz: np.ndarray, weight: np.ndarray | None = None) -> InharmonicityFit:
    """Least-squares f0 and B of f_k = k f0 sqrt(1 + B k^2) from partial numbers ``k`` and their
    frequencies ``freq_hz``; ``weight`` (relative, e.g. 1 / sd^2 of each frequency) defaults to equal.

    Needs at least two distinct partial numbers; with exactly two the fit is exact and the
    uncertainties are infinite. Raises ValueError for fewer, for non-positive frequencies or weights.
    """
    kk = np.asarray(k, dtype=float).reshape(-1)
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    w = np.ones_like(f) if weight is None else np.asarray(weight, dtype=float).reshape(-1)
    if not (kk.shape == f.shape == w.shape):
        raise ValueError("k, freq_hz and weight must have the same length")
    if np.unique(kk).size < 2:
        raise ValueError("at least two distinct partials are needed to fit f0 and B")
    if np.any(f <= 0) or np.any(kk < 1) or np.any(w < 0) or not np.any(w > 0):
        raise ValueError("partial numbers from 1, positive frequencies and non-negative weights are needed")
    f0, b = _linear_start(kk, f, w)
    f0, b = _gauss_newton(kk, f, w, f0, b)
    model = stiff_partials_hz(kk, f0, b)
    resid = f - model
    jac = _jacobian(kk, f0, b)
    n_used = int(np.count_nonzero(w > 0))
    dof = n_used - 2
    if dof > 0:
        scale = float(np.sum(w * resid * resid)) / dof
        cov = np.linalg.pinv((jac * w[:, None]).T @ jac) * scale
        f0_sd, b_sd = (float(math.sqrt(max(v, 0.0))) for v in np.diag(cov))
    else:
        f0_sd = b_sd = math.inf
    cents = CENTS_PER_OCTAVE * np.log2(f / model)
    used = w > 0
    cents_rms = float(np.sqrt(np.mean(cents[used] ** 2)))
    return InharmonicityFit(float(f0), f0_sd, float(b), b_sd, cents_rms, n_used)


def _linear_start(k: np.ndarray, f: np.ndarray, w: np.ndarray) -> tuple[float, float]:
    """(f0, B) from the straight line (f_k / k)^2 = f0^2 + f0^2 B k^2, weighted.

    A frequency's sd s_f becomes 2 (f/k) s_f / k on (f/k)^2: the weights are carried over so."""
    y = (f / k) ** 2
    wy = w / np.maximum((2.0 * f / (k * k)) ** 2, 1e-300)
    design = np.column_stack([np.ones_like(k), k * k])
    sw = np.sqrt(wy)
    coef, *_ = np.linalg.lstsq(design * sw[:, None], y * sw, rcond=None)
    c0, c1 = float(coef[0]), float(coef[1])
    if c0 <= 0:  # only when the frequencies are far from any stiff string: start harmonic
        return float(np.median(f / k)), 0.0
    return math.sqrt(c0), c1 / c0


def _jacobian(k: np.ndarray, f0: float, b: float) -> np.ndarray:
    root = np.sqrt(np.maximum(1.0 + b * k * k, 1e-12))
    return np.column_stack([k * root, f0 * k**3 / (2.0 * root)])


def _gauss_newton(k: np.ndarray, f: np.ndarray, w: np.ndarray, f0: float, b: float) -> tuple[float, float]:
    """Weighted Gauss-Newton on f_k - k f0 sqrt(1 + B k^2), from (f0, B); steps halved while the
    weighted residual grows, so it never leaves a better fit for a worse one."""

    def cost(f0_: float, b_: float) -> float:
        r = f - stiff_partials_hz(k, f0_, b_)
        value = float(np.sum(w * r * r))
        return value if math.isfinite(value) else math.inf

    current = cost(f0, b)
    if not math.isfinite(current):  # a start so negative in B that high partials have no frequency
        b = max(b, -0.5 / float(np.max(k)) ** 2)
        current = cost(f0, b)
    for _ in range(GAUSS_NEWTON_STEPS):
        jac = _jacobian(k, f0, b)
        r = f - stiff_partials_hz(k, f0, b)
        sw = np.sqrt(w)
        if not (np.all(np.isfinite(jac)) and np.all(np.isfinite(r))):
            break
        step, *_ = np.linalg.lstsq(jac * sw[:, None], r * sw, rcond=None)
        scale = 1.0
        while scale > 1e-6:
            trial = (f0 + scale * float(step[0]), b + scale * float(step[1]))
            trial_cost = cost(*trial)
            if trial_cost <= current:
                break
            scale *= 0.5
        else:
            break
        moved = abs(trial[0] - f0) <= 1e-15 * abs(f0) and abs(trial[1] - b) <= 1e-18
        f0, b = trial
        current = trial_cost
        if moved:
            break
    return f0, b
