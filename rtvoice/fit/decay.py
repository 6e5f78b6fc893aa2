"""The loss law sigma = b1 + b3 w^2 from the partials' decay rates, as the two T60s the engine takes.

Chaigne & Askenfelt, "Numerical simulations of piano strings. I", JASA 95(2), 1112 (1994), give
a string's damping as -2 b1 dy/dt + 2 b3 d^3y/dt^3, so that mode k decays as exp(-sigma_k t) with
sigma_k = b1 + b3 w_k^2. That is linear in (b1, b3): a weighted least-squares line of sigma
against w^2, made robust to a stray partial (a beating one, one in a comb null) by Huber weights
and held to b1, b3 >= 0 (no mode gains energy). The T60s at 100 Hz and 2000 Hz are read from it
with the engine's own functions (:mod:`rtvoice.physics.damping`), so rendering the fitted T60s
gives back the fitted decay rates exactly.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy.optimize import nnls

from rtvoice.physics.damping import LN_1000, T60_HIGH_REF_HZ, T60_LOW_REF_HZ, decay_rate_per_s, t60_s

HUBER_K = 1.345  # 95 % efficiency for Gaussian residuals (Huber, Robust Statistics, 1981)
ROBUST_STEPS = 8
MAD_TO_SD = 1.4826  # sd of a Gaussian from its median absolute deviation


@dataclass(frozen=True)
class LossFit:
    """The fitted loss law: b1 (1/s) and b3 (s) of sigma = b1 + b3 w^2, and as the engine's two
    settings, the T60s at 100 Hz and 2000 Hz with their standard deviations (seconds; inf where
    the law has no loss)."""

    b1_per_s: float
    b3_s: float
    t60_low_s: float
    t60_high_s: float
    t60_low_sd_s: float
    t60_high_sd_s: float
    n_partials: int = 0

    def sigma_per_s(self, freq_hz: np.ndarray | float) -> np.ndarray:
        """The fitted decay rate at ``freq_hz``."""
        return decay_rate_per_s(freq_hz, self.b1_per_s, self.b3_s)


def fit_loss_law(freq_hz: np.ndarray, sigma_per_s: np.ndarray, weight: np.ndarray | None = None) -> LossFit:
    """Least-squares b1, b3 >= 0 of sigma = b1 + b3 (2 pi f)^2 from partial frequencies and decay
    rates (1/s); ``weight`` (relative, e.g. 1 / sd^2 of each rate) defaults to equal. Entries that
    are not finite or have zero weight are left out. Raises ValueError with fewer than two distinct
    frequencies left."""
    f = np.asarray(freq_hz, dtype=float).reshape(-1)
    s = np.asarray(sigma_per_s, dtype=float).reshape(-1)
    w = np.ones_like(f) if weight is None else np.asarray(weight, dtype=float).reshape(-1)
    if not (f.shape == s.shape == w.shape):
        raise ValueError("freq_hz, sigma_per_s and weight must have the same length")
    keep = np.isfinite(f) & np.isfinite(s) & np.isfinite(w) & (w > 0) & (f > 0)
    f, s, w = f[keep], s[keep], w[keep]
    if np.unique(f).size < 2:
        raise ValueError("at least two partials at different frequencies are needed to fit the loss law")
    omega_sq = (2.0 * math.pi * f) ** 2
    # Columns scaled to order one so the normal equations stay well conditioned.
    col_scale = np.array([1.0, 1.0 / float(np.max(omega_sq))])
    design = np.column_stack([np.ones_like(f), omega_sq]) * col_scale
    robust = np.ones_like(w)
    coef = np.zeros(2)
    for _ in range(ROBUST_STEPS):
        coef = _nonnegative_lsq(design, s, w * robust)
        resid = (s - design @ coef) * np.sqrt(w)
        spread = MAD_TO_SD * float(np.median(np.abs(resid)))
        if spread <= 0:
            break
        scaled = np.abs(resid) / (HUBER_K * spread)
        robust = np.where(scaled <= 1.0, 1.0, 1.0 / np.maximum(scaled, 1e-300))
    b1, b3 = float(coef[0] * col_scale[0]), float(coef[1] * col_scale[1])
    cov = _covariance(design, s, w * robust, coef) * np.outer(col_scale, col_scale)
    sigma_ref = decay_rate_per_s(np.array([T60_LOW_REF_HZ, T60_HIGH_REF_HZ]), b1, b3)
    grad = np.column_stack([np.ones(2), (2.0 * math.pi * np.array([T60_LOW_REF_HZ, T60_HIGH_REF_HZ])) ** 2])
    sigma_sd = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", grad, cov, grad), 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        t60 = np.where(sigma_ref > 0, t60_s(np.maximum(sigma_ref, 1e-300)), math.inf)
        t60_sd = np.where(sigma_ref > 0, LN_1000 * sigma_sd / np.maximum(sigma_ref, 1e-300) ** 2, math.inf)
    return LossFit(b1, b3, float(t60[0]), float(t60[1]), float(t60_sd[0]), float(t60_sd[1]), int(f.size))


def _nonnegative_lsq(design: np.ndarray, y: np.ndarray, w: np.ndarray) -> np.ndarray:
    """Weighted least squares held to non-negative coefficients (plain least squares when that is
    already non-negative, as it is for any real string)."""
    sw = np.sqrt(w)
    a, b = design * sw[:, None], y * sw
    coef, *_ = np.linalg.lstsq(a, b, rcond=None)
    if np.all(coef >= 0):
        return np.asarray(coef)
    held, _ = nnls(a, b)
    return np.asarray(held)


def _covariance(design: np.ndarray, y: np.ndarray, w: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Covariance of the weighted fit, scaled by its reduced chi-square (relative weights)."""
    n = int(np.count_nonzero(w > 0))
    if n <= 2:
        return np.full((2, 2), math.inf)
    resid = y - design @ coef
    scale = float(np.sum(w * resid * resid)) / (n - 2)
    return np.asarray(np.linalg.pinv((design * w[:, None]).T @ design) * scale)
