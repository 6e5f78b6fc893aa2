"""The partial levels a pluck and a pickup leave, as a model in dB: the comb and the envelope.

The engine sounds partial k of a plucked note with an onset level proportional to

    |a_k(p, w_p)| |g_k(q, a)| S_k |H(f_k)|

with a_k the pluck's sine-series coefficient (:func:`rtvoice.physics.excitation.pluck_amplitudes`:
sin(k pi p) / k^2 times a sinc over the contact width w_p), g_k the pickup's spatial weight
(:func:`rtvoice.physics.pickup.aperture_weights`: sin(k pi q) times a sinc over the aperture a),
S_k the sensing (velocity: the mode's angular frequency over the fundamental's,
:func:`rtvoice.physics.pickup.velocity_factor`; displacement: 1) and H the coil's low-pass
(:func:`rtvoice.physics.electronics.lowpass_response`). A recording adds an unknown smooth tone
filter. In dB the note splits into a *comb* |sin(k pi p) sin(k pi q)| times the two sincs, which
varies from partial to partial, and an *envelope* smooth in log frequency: the 1/k^2 of the pluck,
the sensing, the resonance and the tone filter. The envelope's unknown part is fitted by linear
least squares for each comb (variable projection: Golub & Pereyra, "The differentiation of
pseudo-inverses and nonlinear least squares problems", SIAM J. Numer. Anal. 10(2), 413, 1973).

Nulls: a partial at a node of the comb is measured at the noise, not at minus infinity. Both the
model and the measured level are soft-floored at :data:`FLOOR_DB` below the envelope
(10 log10(x^2 + floor^2)), so a measured null and a modelled one agree without either blowing up.
"""

from __future__ import annotations

from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from rtvoice.physics.electronics import lowpass_response
from rtvoice.physics.excitation import pluck_amplitudes
from rtvoice.physics.pickup import aperture_sinc, aperture_weights

FLOOR_DB = -30.0  # a comb null counts as this far below the envelope (a noise floor of 30 dB)
_FLOOR_POWER = 10.0 ** (FLOOR_DB / 10.0)
_TINY = 1e-300


class Sensing(StrEnum):
    """What a pickup senses, by the engine's own names (the schema's ``pickup.N.sensing`` choices)."""

    VELOCITY = "velocity"
    DISPLACEMENT = "displacement"


def db_power(power: np.ndarray) -> np.ndarray:
    """10 log10 of a power, safe at 0."""
    out: np.ndarray = 10.0 * np.log10(np.maximum(power, _TINY))
    return out


def comb_amplitude(k: np.ndarray, pluck: float, pickup: float, pluck_width: float = 0.0,
                   aperture: float = 0.0) -> np.ndarray:
    """|sin(k pi p) sinc(k pi w_p / 2) sin(k pi q) sinc(k pi a / 2)| (all fractions of the speaking length).

    The part of the engine's level that varies from partial to partial; the pluck's 1/k^2 and its
    1/(p (1 - p)) are left to the envelope (a slope and a constant in dB)."""
    spatial: np.ndarray = np.abs(aperture_weights(k, pickup, aperture) * np.sin(np.pi * k * pluck))
    if pluck_width > 0:
        spatial = spatial * np.abs(aperture_sinc(k, pluck_width))  # the contact averages as an aperture does
    return spatial


def factor_db(k: np.ndarray, fractions: np.ndarray) -> np.ndarray:
    """20 log10 max(|sin(k pi x)|, floor) for each x in ``fractions``: shape (len(k), len(fractions)).

    One place's share of the comb, floored on its own so a grid can add two of them."""
    s = np.abs(np.sin(np.pi * np.outer(k, fractions)))
    return db_power(np.maximum(s * s, _FLOOR_POWER))


def known_envelope_db(k: np.ndarray, freq_hz: np.ndarray, sensing: Sensing) -> np.ndarray:
    """The envelope's known part in dB: the pluck's 1/k^2 and, for velocity sensing, f_k (up to a constant)."""
    env = -40.0 * np.log10(k)
    if sensing is Sensing.VELOCITY:
        env = env + 20.0 * np.log10(freq_hz)
    out: np.ndarray = env
    return out


def resonance_db(freq_hz: np.ndarray, resonance_hz: float, q: float) -> np.ndarray:
    """20 log10 |H(f)| of the engine's coil-and-cable low-pass (DC gain 1)."""
    return db_power(np.abs(lowpass_response(freq_hz, resonance_hz, q)) ** 2)


def log_frequency_basis(freq_hz: np.ndarray, degree: int) -> np.ndarray:
    """Columns 1, u, u^2 ... u^degree (Legendre polynomials) of u = log f mapped onto [-1, 1] over the partials.

    The unknown smooth part of the envelope (tone filter, whatever of the resonance is not modelled)."""
    lf = np.log(freq_hz)
    span = max(float(lf.max() - lf.min()), 1e-9)
    u = 2.0 * (lf - lf.min()) / span - 1.0
    basis: np.ndarray = np.polynomial.legendre.legvander(u, degree)
    return basis


@dataclass(frozen=True)
class Levels:
    """One take's partials as the fit uses them: mode numbers, frequencies, levels in dB, LS weights."""

    k: np.ndarray
    freq_hz: np.ndarray
    level_db: np.ndarray
    weight: np.ndarray

    @property
    def count(self) -> int:
        return int(self.k.size)


@dataclass(frozen=True)
class EnvelopeFit:
    """The envelope fitted under one comb: the residual in dB (unweighted) and the envelope itself."""

    residual_db: np.ndarray
    envelope_db: np.ndarray


class CombModel:
    """Measured levels against comb + envelope, the envelope's free part solved linearly.

    ``fixed_db`` is any envelope part held fixed (the known 1/k^2 and sensing, a resonance);
    ``basis`` spans the free part."""

    def __init__(self, levels: Levels, fixed_db: np.ndarray, basis: np.ndarray):
        self.levels = levels
        self.fixed_db = fixed_db
        self.basis = basis
        self.sqrt_w = np.sqrt(levels.weight)
        self._power = 10.0 ** (levels.level_db / 10.0)

    def with_fixed(self, fixed_db: np.ndarray, basis: np.ndarray | None = None) -> CombModel:
        return CombModel(self.levels, fixed_db, self.basis if basis is None else basis)

    def fit_envelope(self, comb: np.ndarray) -> EnvelopeFit:
        """The envelope's free part by weighted least squares under ``comb`` (linear amplitudes).

        The floors depend on the envelope (they sit below it), so the solve runs three times: the
        first with the nulls of the comb weighed down, the next two with the floors in place."""
        # The comb's scale is the envelope's business: at unit RMS the floor sits FLOOR_DB below a
        # typical partial whatever the comb, so no envelope can rise until every partial is "a null".
        power = comb * comb
        power = power / max(float(np.average(power, weights=self.levels.weight)), _TINY)
        model_shape = db_power(power + _FLOOR_POWER)
        weight = self.levels.weight * (power / (power + _FLOOR_POWER))
        target = self.levels.level_db - model_shape - self.fixed_db
        envelope = self.fixed_db
        for _ in range(3):
            weighted = self.basis.T * weight  # normal equations: the basis has at most a few columns
            try:
                coef = np.linalg.solve(weighted @ self.basis, weighted @ target)
            except np.linalg.LinAlgError:  # every partial in a null: any envelope will do
                coef = np.linalg.lstsq(weighted @ self.basis, weighted @ target, rcond=None)[0]
            envelope = self.fixed_db + self.basis @ coef
            floor = 10.0 ** (envelope / 10.0) * _FLOOR_POWER
            measured = db_power(self._power + floor)  # the same soft floor as the model's
            target = measured - model_shape - self.fixed_db
            weight = self.levels.weight
        residual = target - self.basis @ coef
        return EnvelopeFit(residual, envelope)

    def weighted_residual(self, comb: np.ndarray) -> np.ndarray:
        out: np.ndarray = self.sqrt_w * self.fit_envelope(comb).residual_db
        return out

    def projector(self) -> np.ndarray:
        """W^(1/2) (I - B (B^T W B)^-1 B^T W): the weighted residual of any target after the free envelope."""
        wb = self.basis * self.sqrt_w[:, None]
        q, _ = np.linalg.qr(wb)
        eye = np.eye(self.levels.count)
        out: np.ndarray = (eye - q @ q.T) * self.sqrt_w[None, :]
        return out


def pluck_amplitude_ratio(k: np.ndarray, from_fraction: float, to_fraction: float, width: float) -> np.ndarray:
    """a_k(to) / a_k(from) of the engine's pluck (signed; the caller caps the nulls)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out: np.ndarray = pluck_amplitudes(k, to_fraction, width) / pluck_amplitudes(k, from_fraction, width)
    return out
