"""Three plain numpy/scipy renderers of the engine's notes, for comparison.

Each starts from the engine's own state (the same notes: every mode's complex
amplitude in output units and its per-sample pole) and renders the mode sum
block by block; the output stage (coil filter, gain, DC blocker, limiter) is the
engine's own, so only the way the modes are summed differs.

(a) :class:`ResonatorBank`: one two-pole resonator per mode, each filtered with
    ``scipy.signal.lfilter`` (one call per mode per block, carried state).
(b) :class:`PhasorBank`: the complex phasor recursion z <- p z, stepped sample by
    sample, vectorised across all modes.
(c) :class:`KarplusStrongBank`: the extended Karplus-Strong string of Jaffe and
    Smith (Computer Music Journal 7(2), 1983) per voice: a delay loop with the
    two-point loss filter (decay stretching S and shortening rho), a first-order
    allpass for fine tuning, and the pluck-position comb 1 - z^-D on the
    excitation, all through ``scipy.signal.lfilter``. It is harmonic by
    construction (no stiffness) and its loss follows the two-point filter, so it
    matches the engine's partials for a harmonic string with matching damping.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.signal

from rtvoice.engine import Engine, Limiter, dc_blocker, electronics_filter, sounding_partials
from rtvoice.physics.damping import loss_coefficients


@dataclass(frozen=True)
class Partials:
    """The modes of the sounding voices: mode m of voice v is Re(amplitude[v, m] pole[v, m]^n).

    ``amplitude`` is in output units (pickup weights and the engine's output scale
    applied, before the coil filter and gain); ``pole`` is exp((-sigma + i omega) / fs).
    """

    amplitude: np.ndarray
    pole: np.ndarray
    sample_rate_hz: float
    freqs_hz: np.ndarray | None = None  # each mode's frequency (the first mode tunes a delay-line string)

    @property
    def voices(self) -> int:
        return self.amplitude.shape[0]

    @property
    def modes(self) -> int:
        return self.amplitude.shape[1]


def partials_of(engine: Engine) -> Partials:
    """The engine's sounding modes now (after the blocks it has rendered)."""
    amplitude, pole, freqs_hz = sounding_partials(engine)
    return Partials(amplitude, pole, engine.fs, freqs_hz)


class OutputChain:
    """The engine's output stage at a constant gain, run on samples: coil filter, gain, DC blocker, limiter.

    (The engine itself folds the same filters into its modes: engine/modal_filter.py.)
    """

    def __init__(self, engine: Engine):
        f_r, q = engine.resonance()
        self.elec = electronics_filter(f_r, q, engine.fs)
        self.gain = 10 ** (engine.settings.get("output.gain_db") / 20)
        self.dc = dc_blocker(engine.fs)
        self.limiter = Limiter(engine.fs, engine.block)

    def process(self, x: np.ndarray) -> np.ndarray:
        if self.elec is not None:
            self.elec.process(x)
        x *= self.gain
        self.dc.process(x)
        self.limiter.process(x)
        return x


class ResonatorBank:
    """(a) One two-pole resonator per mode, run with ``scipy.signal.lfilter``.

    Mode Re(c p^n) is the impulse response of
    H(z) = (Re c - Re(c conj p) z^-1) / (1 - 2 Re(p) z^-1 + |p|^2 z^-2)
    (partial fractions of c/2 / (1 - p z^-1) + conj(c)/2 / (1 - conj(p) z^-1)),
    so each resonator is fed one unit impulse and then rings on its own state.
    """

    def __init__(self, partials: Partials, block_frames: int):
        c = partials.amplitude.reshape(-1)
        p = partials.pole.reshape(-1)
        self.b = np.stack([c.real, -(c * p.conj()).real], axis=1)
        self.a = np.stack([np.ones(p.size), -2 * p.real, np.abs(p) ** 2], axis=1)
        self.zi = np.zeros((p.size, 2))
        self._impulse = np.zeros(block_frames)
        self._impulse[0] = 1.0
        self._silence = np.zeros(block_frames)
        self._first = True
        self._out = np.zeros(block_frames)

    def render(self) -> np.ndarray:
        """Mode sum of the next block (a view of an internal buffer)."""
        x = self._impulse if self._first else self._silence
        self._first = False
        out = self._out
        out[:] = 0.0
        b, a, zi = self.b, self.a, self.zi
        for m in range(b.shape[0]):
            y, zi[m] = scipy.signal.lfilter(b[m], a[m], x, zi=zi[m])
            out += y
        return out


class PhasorBank:
    """(b) z_m <- p_m z_m every sample for all modes at once; the output is Re(sum z)."""

    def __init__(self, partials: Partials, block_frames: int):
        self.z = partials.amplitude.reshape(-1).astype(np.complex128)  # a copy
        self.p = partials.pole.reshape(-1).astype(np.complex128)
        self._out = np.zeros(block_frames)

    def render(self) -> np.ndarray:
        out, z, p = self._out, self.z, self.p
        for n in range(out.size):
            out[n] = z.sum().real
            z *= p
        return out


# -- (c) extended Karplus-Strong ------------------------------------------------------
def loss_filter_phase_delay(stretch: float, omega: float) -> float:
    """Phase delay in samples of (1 - S) + S z^-1 at ``omega`` rad/sample."""
    return math.atan2(stretch * math.sin(omega), 1 - stretch + stretch * math.cos(omega)) / omega


def allpass_coefficient(delay: float, omega: float) -> float:
    """eta of (eta + z^-1) / (1 + eta z^-1) whose phase delay at ``omega`` is ``delay`` samples.

    Jaffe & Smith (1983) use eta = (1 - delay) / (1 + delay), the low-frequency
    limit; the exact solution at omega is sin((1 - delay) omega / 2) / sin((1 + delay) omega / 2)
    (from memory; checked numerically by the tests through the rendered pitch).
    """
    return math.sin((1 - delay) * omega / 2) / math.sin((1 + delay) * omega / 2)


def stretch_for_loss(b3_s: float, fundamental_hz: float, sample_rate_hz: float) -> float:
    """Decay stretching S of the two-point loss filter that matches sigma = b1 + b3 w^2.

    Per period, (1 - S) + S z^-1 passes |H(w)| ~ 1 - S (1 - S) w^2 / 2 (w in rad/sample),
    so the decay rate is f1 S (1 - S) w^2 / 2 per second: S (1 - S) = 2 b3 fs^2 / f1.
    S (1 - S) cannot exceed 1/4 (S = 1/2, the original Karplus-Strong average): a
    string asking for more high-frequency loss gets S = 1/2.
    """
    q = 2.0 * b3_s * sample_rate_hz**2 / fundamental_hz
    if q >= 0.25:
        return 0.5
    return (1.0 - math.sqrt(1.0 - 4.0 * q)) / 2.0


@dataclass
class KarplusStrongString:
    """One string loop: y[n] = x[n] + rho * (loss * allpass)(y)[n - N]."""

    delay: int  # integer part N of the loop delay, samples
    b: np.ndarray  # rho * loss * allpass numerator
    a: np.ndarray  # allpass denominator
    excitation: np.ndarray  # comb-filtered initial excitation, fed in from sample 0
    block: int

    def __post_init__(self):
        self.zi = np.zeros(max(len(self.a), len(self.b)) - 1)
        self.line = np.zeros(self.delay + self.block)  # y[t0 - N .. t0 + block - 1]
        self.t = 0  # samples rendered so far

    def render_into(self, out: np.ndarray) -> None:
        """Add this string's next block to ``out``.

        The block is computed in chunks of at most N samples: each chunk's loop input
        y[n - N] is then already known, so one lfilter call runs the whole chunk.
        """
        n, length, line, x = self.delay, self.block, self.line, self.excitation
        for j in range(0, length, n):
            k = min(n, length - j)
            seg = line[n + j:n + j + k]
            seg[:], self.zi = scipy.signal.lfilter(self.b, self.a, line[j:j + k], zi=self.zi)
            start = self.t + j
            if start < x.size:
                fed = x[start:start + k]
                seg[:fed.size] += fed
        self.t += length
        out += line[n:n + length]
        line[:n] = line[length:length + n]


class KarplusStrongBank:
    """(c) One extended Karplus-Strong string per voice, tuned and damped like the engine's note."""

    def __init__(self, engine: Engine, partials: Partials | None = None):
        partials = partials or partials_of(engine)
        fs = engine.fs
        settings = engine.settings
        b1, b3 = loss_coefficients(settings.get("string.t60_low"), settings.get("string.t60_high"))
        beta = settings.get("excitation.position")
        self.block = engine.block
        self.strings = []
        assert partials.freqs_hz is not None, "partials_of gives each mode's frequency"
        for v in range(partials.voices):
            f1 = partials.freqs_hz[v, 0]  # set by partials_of
            self.strings.append(make_string(partials.amplitude[v], f1, b1, b3, beta, fs, engine.block))
        self._out = np.zeros(engine.block)

    def render(self) -> np.ndarray:
        out = self._out
        out[:] = 0.0
        for s in self.strings:
            s.render_into(out)
        return out


def make_string(amplitudes: np.ndarray, fundamental_hz: float, b1: float, b3: float, beta: float,
                sample_rate_hz: float, block_frames: int) -> KarplusStrongString:
    """A tuned, damped string loop whose harmonics start at the complex ``amplitudes``.

    The excitation is one period of the harmonics with the pluck-position comb
    divided out, then passed through the comb 1 - z^-D, D = round(beta P), with
    |H(e^{i 2 pi k / P})| = 2 |sin(pi k beta)| (Jaffe & Smith 1983).
    """
    fs = sample_rate_hz
    period = fs / fundamental_hz  # P, samples
    omega1 = 2 * np.pi / period
    stretch = stretch_for_loss(b3, fundamental_hz, fs)
    rho = math.exp(-b1 / fundamental_hz)  # decay shortening: b1 per second = -f1 ln rho
    remaining = period - loss_filter_phase_delay(stretch, omega1)
    delay = math.floor(remaining - 0.1)
    eta = allpass_coefficient(remaining - delay, omega1)
    b = rho * np.convolve([1 - stretch, stretch], [eta, 1.0])
    a = np.array([1.0, eta])
    # Harmonic k of the period: its amplitude before the comb is c_k / (1 - e^{-i 2 pi k D / P}).
    comb_delay = max(1, round(beta * period))
    k = np.arange(1, amplitudes.size + 1)
    comb = 1.0 - np.exp(-2j * np.pi * k * comb_delay / period)
    audible = (np.abs(comb) > 1e-6) & (k < period / 2)
    remainder = np.where(audible, amplitudes / np.where(audible, comb, 1.0), 0.0)
    n = np.arange(round(period))
    one_period = (remainder[None, :] * np.exp(2j * np.pi * np.outer(n, k) / period)).real.sum(axis=1)
    comb_b = np.zeros(comb_delay + 1)
    comb_b[0], comb_b[-1] = 1.0, -1.0
    excitation = scipy.signal.lfilter(comb_b, [1.0], np.concatenate([one_period, np.zeros(comb_delay)]))
    return KarplusStrongString(delay, b, a, excitation, block_frames)


def pluck_comb_response(beta: float, period: int, harmonics: np.ndarray) -> np.ndarray:
    """|H| of the pluck-position comb 1 - z^-(beta P) at harmonics k of a P-sample period,
    measured by filtering a unit impulse with ``scipy.signal.lfilter`` and taking its DFT."""
    d = round(beta * period)
    b = np.zeros(d + 1)
    b[0], b[-1] = 1.0, -1.0
    impulse = np.zeros(period)
    impulse[0] = 1.0
    h = scipy.signal.lfilter(b, [1.0], impulse)
    spectrum = np.fft.fft(h)
    return np.abs(spectrum[np.asarray(harmonics) % period])
