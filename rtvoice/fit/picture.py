"""The fit's picture (``rtvoice fit --report FILE.png``): what was measured beside what the fitted
instrument gives, so a user can judge the fit by eye.

Three panels: each partial's onset level, measured and as the fitted pluck and pickup shape them
(dB, the fitted model's overall level and smooth envelope matched by least squares); each partial's
decay rate with the fitted loss law sigma = b1 + b3 w^2 and its T60s; and the comb across the
string, |sin(k pi x / L)| summed over the measured partials' levels, with the fitted pluck and pickup
marked in mm from the saddle. Drawn on matplotlib's file-only Agg backend, written atomically.
"""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np

from rtvoice.engine import write_atomic
from rtvoice.fit.fitting import FitError, InstrumentFit
from rtvoice.physics.electronics import lowpass_response
from rtvoice.physics.excitation import pluck_amplitudes
from rtvoice.physics.pickup import aperture_weights


def _pyplot():
    try:
        import matplotlib
    except ImportError:  # a dependency of rtvoice: missing only when an install was cut short
        raise FitError("--report needs matplotlib, which is not installed: rerun scripts/run") from None
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def model_levels_db(fit: InstrumentFit, take: int, k: np.ndarray, freq_hz: np.ndarray,
                    measured_db: np.ndarray) -> np.ndarray:
    """The fitted pluck, pickup and resonance's shape of partials ``k`` (dB), with a level and a tilt
    in log f matched to ``measured_db`` (the smooth envelope the fit leaves free)."""
    length = fit.speaking_length_mm
    p = fit.placement
    aperture = (p.aperture_mm or 0.0) / length
    shape = np.abs(pluck_amplitudes(k, fit.plucks_mm[take] / length)) * np.abs(
        aperture_weights(k, p.pickup_mm / length, aperture))
    if fit.sensing == "velocity":
        shape = shape * freq_hz
    if p.resonance_hz is not None and p.q is not None:
        shape = shape * np.abs(lowpass_response(freq_hz, p.resonance_hz, p.q))
    shape_db = 20.0 * np.log10(np.maximum(shape, 1e-9 * shape.max()))
    basis = np.column_stack([np.ones_like(freq_hz), np.log(freq_hz)])
    usable = np.isfinite(measured_db)
    coef, *_ = np.linalg.lstsq(basis[usable], (measured_db - shape_db)[usable], rcond=None)
    model: np.ndarray = shape_db + basis @ coef
    return model


def write_picture(fit: InstrumentFit, path: Path | str) -> None:
    """Draw the fit's three panels into the PNG at ``path`` (replaced whole, or left as it was)."""
    plt = _pyplot()
    analysis = fit.analyses[0]
    used = [q for q in analysis.partials if q.usable]
    k = np.array([q.k for q in used], float)
    freq = np.array([q.freq_hz for q in used])
    level_db = 20.0 * np.log10(np.maximum([q.level for q in used], 1e-12))
    fig, (levels, decays, comb) = plt.subplots(3, 1, figsize=(8.0, 10.0))
    s = fit.summary()
    fig.suptitle(f"{s['note_name']} on string {s['string']}, fret {s['fret']}: f0 {s['f0_hz']:.2f} Hz, "
                 f"B {s['inharmonicity']:.2e}, {100 * s['explained_energy']:.0f} % of the energy explained")
    levels.plot(k, level_db, "o", label="measured")
    levels.plot(k, model_levels_db(fit, 0, k, freq, level_db), "-", label="fitted pluck and pickup")
    levels.set_xlabel("partial number k")
    levels.set_ylabel("onset level (dB)")
    levels.legend()
    sigma = np.array([q.decay_per_s for q in used])
    decays.plot(freq, sigma, "o", label="measured decay rate")
    f = np.linspace(0.0, float(freq.max()) * 1.05, 200)
    b1, b3 = analysis.loss.b1_per_s, analysis.loss.b3_s
    decays.plot(f, b1 + b3 * (2 * math.pi * f) ** 2, "-",
                label=f"sigma = b1 + b3 w^2: T60 {s['t60_low_s']:.2f} s at 100 Hz, {s['t60_high_s']:.2f} s at 2 kHz")
    decays.set_xlabel("frequency (Hz)")
    decays.set_ylabel("decay rate (1/s)")
    decays.legend()
    length = fit.speaking_length_mm
    x_mm = np.linspace(0.5, length / 2.0, 600)
    amps = 10.0 ** (level_db / 20.0)
    profile = np.abs(np.sin(np.outer(x_mm / length, k) * math.pi)) @ amps / amps.sum()
    comb.plot(x_mm, profile, "-", color="0.4", label="sum of |sin(k pi x / L)| weighted by the measured levels")
    comb.axvline(s["pickup_mm"], color="C1", label=f"pickup {s['pickup_mm']:.1f} mm")
    for i, pluck in enumerate(fit.plucks_mm):
        comb.axvline(pluck, color="C2", linestyle="--", label=f"pluck {pluck:.1f} mm" if i == 0 else None)
    comb.set_xlabel(f"distance from the saddle (mm), the note's speaking length {length:.1f} mm")
    comb.set_ylabel("comb (relative)")
    comb.legend(fontsize="small")
    fig.tight_layout()
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=100)
    plt.close(fig)
    write_atomic(Path(path), buffer.getvalue())


__all__ = ["model_levels_db", "write_picture"]
