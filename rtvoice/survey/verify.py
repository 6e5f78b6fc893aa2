"""``--verify``: render sample points with the real engine and measure their descriptors.

Each point is played as one full-velocity note held over the listening window.
The energy of every harmonic is measured from the audio by a least-squares fit of
damped sinusoids at the note's mode frequencies and decay rates (what the fit
cannot explain is reported as the residual), then fed to the same descriptor
functions as the analytic map. Points render in a process pool, one per core.
"""

from __future__ import annotations

import concurrent.futures
import contextlib
import math
import multiprocessing
import os
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from rtvoice.engine import Engine, Settings, midi
from rtvoice.procutil import scoped_environ
from rtvoice.survey.descriptors import describe, window_factor
from rtvoice.survey.model import EngineModel
from rtvoice.survey.placing import NotePlace
from rtvoice.survey.result import SurveyResult

LEVEL_TOLERANCE_DB = 0.5
CENTROID_TOLERANCE = 0.01  # relative
DEFAULT_POINTS = 6
_LIMITER_BACKOFF_DB = 20.0
_BYPASS = {"electronics.resonance_hz": 0.0, "electronics.inductance_h": 0.0}


def fit_mode_amplitudes(
    x: np.ndarray,
    fs: float,
    freqs_hz: np.ndarray,
    sigma_per_s: np.ndarray,
    extra_poles: Sequence[complex] | np.ndarray = (),
) -> tuple[np.ndarray, float]:
    """(c_k, residual fraction) of x[n] ~ sum_k Re(c_k exp((-sigma_k + 2 pi i f_k) n / fs)) + ...

    Linear least squares over the complex exponentials of the modes, their
    conjugates and ``extra_poles`` (z^n terms: the output filters' own ringing,
    which a note-on starts). The normal matrix of exponentials is a geometric sum
    in closed form and each projection a one-pole recursion, so a 1 s window costs
    milliseconds. The residual fraction is the share of the signal's energy that
    this model does not explain.
    """
    x = np.asarray(x, dtype=float)
    n, m = x.size, freqs_hz.size
    modes = (-np.asarray(sigma_per_s, dtype=float) + 2j * np.pi * np.asarray(freqs_hz, dtype=float)) / fs
    logs = np.concatenate([modes, modes.conj(), np.log(np.asarray(extra_poles, dtype=complex))])
    pair = logs.conj()[:, None] + logs[None, :]  # log of conj(z_a) z_b
    with np.errstate(divide="ignore", invalid="ignore"):
        gram = np.where(pair == 0, n, np.expm1(n * pair) / np.expm1(pair))
    rhs = _projections(x, logs.conj())
    coef = np.linalg.lstsq(gram, rhs, rcond=None)[0]
    signal = float(x @ x)
    explained = float(np.real(np.vdot(rhs, coef)))
    residual = max(signal - explained, 0.0) / signal if signal > 0 else 0.0
    return 2.0 * coef[:m], residual


def _projections(x: np.ndarray, logs: np.ndarray, chunk: int = 1024) -> np.ndarray:
    """sum_n x[n] exp(logs n) for each entry of ``logs``: one table of powers serves every chunk."""
    n_chunks = -(-x.size // chunk)
    padded = np.zeros(n_chunks * chunk)
    padded[: x.size] = x
    powers = np.exp(np.outer(np.arange(chunk), logs))  # (chunk, bases)
    starts = np.exp(np.outer(np.arange(n_chunks) * chunk, logs))  # (chunks, bases)
    return np.sum((padded.reshape(n_chunks, chunk) @ powers) * starts, axis=0)


def render_note(
    settings: Settings, note: int, window_s: float, sample_rate_hz: float, block_frames: int, channel: int = 0
) -> tuple[np.ndarray, bool]:
    """(samples over the window, whether the limiter acted) of one held full-velocity note on MIDI
    ``channel`` (0-15; under the channel rule channel c plays string c + 1)."""
    engine = Engine(settings, sample_rate_hz, block_frames)
    n = int(round(window_s * engine.fs))
    skip = engine.stats.latency_frames  # the output's fixed delay: the window starts at the note-on
    out = np.empty(-(-(n + skip) // engine.block) * engine.block)
    limited = False
    for i in range(out.size // engine.block):
        events = [(0, midi.NOTE_ON | channel, note, 127)] if i == 0 else ()
        out[i * engine.block : (i + 1) * engine.block] = engine.render(events)
        limited = limited or engine.stats.gain_reduction_db > 0.0 or engine.stats.clipped > 0
    return out[skip : skip + n], limited


def measure_energies(
    settings: Settings, note: int, window_s: float, sample_rate_hz: float, block_frames: int,
    place: NotePlace | None = None,
) -> tuple[np.ndarray, float]:
    """(each harmonic's energy over the window at the settings' gain, residual), from audio.

    ``place``: the string and fret the note sounds at (rendered on its channel), for a fretted
    instrument. When the limiter would act the note is rendered quieter and the energies scaled
    back, so the measurement stays linear.
    """
    model = EngineModel(settings, sample_rate_hz)
    modes = model.note_modes(note, place)
    channel = place.channel if place else 0
    backoff_db = 0.0
    gain_db = settings.get("output.gain_db")
    while True:
        quieter = settings.with_values({"output.gain_db": max(gain_db - backoff_db, -60.0)})
        audio, limited = render_note(quieter, note, window_s, sample_rate_hz, block_frames, channel)
        if not limited or backoff_db >= 3 * _LIMITER_BACKOFF_DB:
            break
        backoff_db += _LIMITER_BACKOFF_DB
    amps, residual = fit_mode_amplitudes(audio, sample_rate_hz, modes.freqs_hz, modes.sigma_per_s, model.output_poles())
    scale = 10 ** ((gain_db - quieter.get("output.gain_db")) / 10)
    return np.abs(amps) ** 2 * window_factor(modes.sigma_per_s, window_s) * scale, residual


@dataclass(frozen=True)
class VerifyRow:
    """Analytic against measured descriptors at one point (differences measured minus analytic)."""

    note: int
    sensing: str
    pickup: float
    pluck: float
    width: float
    centroid_hz: float
    centroid_measured_hz: float
    centroid_diff_pct: float
    level_db: float
    level_diff_db: float
    odd_even_diff_db: float
    electronics_diff_db: float
    worst_harmonic_diff_db: float  # largest |difference| over harmonics within 40 dB of the strongest
    residual_pct: float

    @property
    def within_tolerance(self) -> bool:
        return (
            abs(self.centroid_diff_pct) < 100 * CENTROID_TOLERANCE
            and abs(self.level_diff_db) < LEVEL_TOLERANCE_DB
            and abs(self.odd_even_diff_db) < LEVEL_TOLERANCE_DB
            and abs(self.electronics_diff_db) < LEVEL_TOLERANCE_DB
        )


def sample_points(result: SurveyResult, count: int = DEFAULT_POINTS, seed: int = 0) -> list[tuple[int, ...]]:
    """Up to ``count`` distinct grid indices: the middle, then a fixed pseudo-random spread."""
    shape = result.shape
    points = [tuple(n // 2 for n in shape)]
    rng = np.random.default_rng(seed)
    tries = 0
    while len(points) < min(count, result.size) and tries < 100 * count:
        p = tuple(int(rng.integers(0, n)) for n in shape)
        if p not in points:
            points.append(p)
        tries += 1
    return points


def point_settings(result: SurveyResult, at: tuple[int, ...]) -> Settings:
    """The settings that play grid point ``at`` (note index, sensing, width, pluck, pickup)."""
    _, i_s, i_w, i_p, i_x = at
    i = result.pickup_index
    return result.settings.with_values(
        {
            f"pickup.{i}.position": float(result.pickups[i_x]),
            f"pickup.{i}.width": float(result.widths[i_w]),
            f"pickup.{i}.sensing": result.sensings[i_s],
            "excitation.position": float(result.plucks[i_p]),
        }
    )


def reference_settings(result: SurveyResult) -> Settings:
    i, ref = result.pickup_index, result.reference
    return result.settings.with_values(
        {
            f"pickup.{i}.position": ref.pickup,
            f"pickup.{i}.width": ref.width,
            f"pickup.{i}.sensing": result.reference_sensing,
            "excitation.position": ref.pluck,
        }
    )


@contextlib.contextmanager
def _single_blas_thread() -> Iterator[None]:
    """Spawned workers start with one BLAS thread each, so renders do not fight over the cores."""
    with scoped_environ(dict.fromkeys(("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"), "1")):
        yield


def _measure_task(args: tuple) -> tuple[np.ndarray, float]:
    return measure_energies(*args)


def run_tasks(tasks: Sequence[tuple], jobs: int, progress: Callable[[float], None] | None = None) -> list:
    """measure_energies(*task) for each task, over ``jobs`` worker processes (in order)."""
    results: list = [None] * len(tasks)
    if jobs <= 1 or len(tasks) <= 1:
        for i, task in enumerate(tasks):
            results[i] = _measure_task(task)
            if progress:
                progress((i + 1) / len(tasks))
        return results
    # fork reuses the imported engine (a spawned worker spends seconds importing scipy);
    # the command line is single-threaded when it forks. Elsewhere spawn.
    method = "fork" if "fork" in multiprocessing.get_all_start_methods() else "spawn"
    ctx = multiprocessing.get_context(method)
    with (
        _single_blas_thread(),
        concurrent.futures.ProcessPoolExecutor(min(jobs, len(tasks)), ctx) as pool,
    ):
        futures = {pool.submit(_measure_task, task): i for i, task in enumerate(tasks)}
        for done, fut in enumerate(concurrent.futures.as_completed(futures), 1):
            results[futures[fut]] = fut.result()
            if progress:
                progress(done / len(tasks))
    return results


def verify(
    result: SurveyResult,
    points: Sequence[tuple[int, ...]],
    block_frames: int = 256,
    jobs: int | None = None,
    progress: Callable[[float], None] | None = None,
) -> list[VerifyRow]:
    """Render ``points`` of ``result`` and each note's reference; compare with the analytic map."""
    jobs = jobs or os.cpu_count() or 1
    fs, window = result.sample_rate_hz, result.window_s
    notes_used = sorted({at[0] for at in points})
    tasks = [(reference_settings(result), result.notes[i], window, fs, block_frames, result.place(i))
             for i in notes_used]
    for at in points:
        s = point_settings(result, at)
        place = result.place(at[0])
        tasks.append((s, result.notes[at[0]], window, fs, block_frames, place))
        tasks.append((s.with_values(_BYPASS), result.notes[at[0]], window, fs, block_frames, place))
    measured = run_tasks(tasks, jobs, progress)
    ref_total = {i: float(measured[j][0].sum()) for j, i in enumerate(notes_used)}
    rows = []
    model = EngineModel(result.settings, fs, result.pickup_index)
    for j, at in enumerate(points):
        (energy, residual), (bare, _) = measured[len(notes_used) + 2 * j : len(notes_used) + 2 * j + 2]
        rows.append(_compare(result, at, model, energy, bare, ref_total[at[0]], residual))
    return rows


def _compare(
    result: SurveyResult,
    at,
    model: EngineModel,
    energy: np.ndarray,
    bare: np.ndarray,
    ref_total: float,
    residual: float,
) -> VerifyRow:
    i_n, i_s, i_w, i_p, i_x = at
    modes = model.note_modes(result.notes[i_n], result.place(i_n))
    measured = describe(energy, modes.freqs_hz, result.missing_below_db)
    analytic_energy = _analytic_energy(result, at, model, modes)
    strong = analytic_energy >= analytic_energy.max() * 1e-4
    with np.errstate(divide="ignore"):
        harm_diff = 10 * np.log10(energy[strong] / analytic_energy[strong])
    c_an = float(result.centroid_hz[at])
    c_me = float(measured.centroid_hz)
    level_me = 10 * math.log10(measured.total_energy / ref_total)
    elec_me = 10 * math.log10(measured.total_energy / bare.sum())
    return VerifyRow(
        note=result.notes[i_n],
        sensing=result.sensings[i_s],
        pickup=float(result.pickups[i_x]),
        pluck=float(result.plucks[i_p]),
        width=float(result.widths[i_w]),
        centroid_hz=c_an,
        centroid_measured_hz=c_me,
        centroid_diff_pct=100 * (c_me / c_an - 1),
        level_db=float(result.level_db[at]),
        level_diff_db=level_me - float(result.level_db[at]),
        odd_even_diff_db=_diff_db(float(measured.odd_even_db), float(result.odd_even_db[at])),
        electronics_diff_db=elec_me - float(result.electronics_db[at]),
        worst_harmonic_diff_db=float(np.max(np.abs(harm_diff))),
        residual_pct=100 * residual,
    )


ODD_EVEN_LIMIT_DB = 60.0  # beyond this the measured ratio means "none of the other kind"


def _diff_db(measured: float, analytic: float) -> float:
    """measured - analytic, both held within +-ODD_EVEN_LIMIT_DB (an absent kind fits tiny)."""
    lim = ODD_EVEN_LIMIT_DB
    return float(np.clip(measured, -lim, lim) - np.clip(analytic, -lim, lim))


def _analytic_energy(result: SurveyResult, at, model: EngineModel, modes) -> np.ndarray:
    _, i_s, i_w, i_p, i_x = at
    s_sq = np.abs(model.initial_amplitudes([result.plucks[i_p]], modes)[0, : modes.count]) ** 2
    g = model.pickup_weights(modes, [result.pickups[i_x]], result.widths[i_w], result.sensings[i_s])[0]
    gain = modes.chain_gain**2 * modes.electronics_gain**2 * window_factor(modes.sigma_per_s, result.window_s)
    return s_sq * np.abs(g) ** 2 * gain
