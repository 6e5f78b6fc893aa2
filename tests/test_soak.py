"""Soak runs, short (the long ones run from scripts/soak): random MIDI offline and under JACK.

What must hold (issue 7, "Long runs"): memory does not grow, a sustained note's phase and
level do not drift, every block is finite and under the -1 dBFS ceiling (the customer's
listening-safety rule), no xruns beyond the server's own baseline.

Sources: the held note is compared with the closed form s_k(0) exp((-sigma_k + i omega_k) t),
f_k = k f0 sqrt(1 + B k^2) (Fletcher, JASA 36, 1964), sigma_k = b1 + b3 omega_k^2 (Chaigne &
Askenfelt, JASA 95(2), 1994), pluck a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)) (Fletcher &
Rossing 1998, ch. 2), 12-TET A4 = 440 Hz (ISO 16); the drift bound is float64 rounding
(u = 2^-53, IEEE 754) per block, derived in rtvoice/soak/held.py. The memory slope is a
least-squares line, checked against numpy.polyfit. The xrun limit is a Poisson quantile
(scipy.stats.poisson).
"""

from __future__ import annotations

import os
import shutil
import subprocess

import numpy as np
import pytest

from rtvoice.engine.output import CEILING
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings
from rtvoice.soak.held import HOLD_VALUES, HeldNote, drift_tolerance
from rtvoice.soak.memory import MemorySampler, slope_kb_per_min
from rtvoice.soak.offline import TRACED_LIMIT_KB_PER_MIN, OfflineConfig, run_offline
from rtvoice.soak.realtime import RealtimeConfig, run_realtime, xrun_limit

OFFLINE_AUDIO_S = 60.0


@pytest.fixture(scope="module")
def offline():
    return run_offline(OfflineConfig(audio_s=OFFLINE_AUDIO_S, memory_samples=30))


def test_offline_soak_every_block_finite_and_under_the_ceiling(offline):
    assert offline.error == ""  # the engine never raised
    assert offline.blocks == int(np.ceil(OFFLINE_AUDIO_S * 48000 / 256))
    assert offline.bad_blocks == 0
    assert offline.over_ceiling_blocks == 0
    assert offline.peak <= CEILING
    # The run did push the output stage: presets at +12 dB made the limiter work.
    assert offline.max_gain_reduction_db > 1.0
    # ... and the traffic did what it is for: bursts forced stealing, controllers moved
    # parameters, presets changed and the pool was rebuilt.
    assert offline.bursts >= 1 and offline.stolen > 0
    assert offline.cc_changes > 100 and offline.preset_changes >= 1 and offline.rebuilds >= 1
    assert offline.failures() == []


def test_offline_soak_memory_does_not_grow(offline):
    assert offline.error == ""
    assert offline.traced_slope_kb_per_min < TRACED_LIMIT_KB_PER_MIN
    assert offline.memory.count >= 20


def test_offline_soak_held_note_follows_the_closed_form(offline):
    assert offline.error == ""
    assert offline.segments >= 3
    assert offline.held_coverage >= 0.8
    assert offline.worst_drift_over_tolerance <= 1.0, offline.worst_drift
    # The note-on itself: s_k(0) from the pluck formula, to float64 precision.
    assert offline.max_initial_rel < 1e-9
    # Measurable all along: the fundamental stays within about 20 dB of its start (T60 60 s).
    assert offline.held_level_db_at_segment_end > -25.0


def _plucked_engine():
    s = Settings.defaults().with_values(HOLD_VALUES)
    engine, held = Engine(s, 48000, 256), HeldNote(48000, 256)
    engine.render(held.pluck_events())
    held.start(0, s)
    held.check(engine, 0)
    for b in range(1, 200):
        engine.render()
        held.check(engine, b)
    return engine, held, s


def test_held_note_check_sees_a_phase_error_of_a_nanoradian():
    # The check can fail: a phase error far below audibility, 1e-9 rad on every mode,
    # is more than the float64 bound after 200 blocks.
    engine, held, _ = _plucked_engine()
    assert held.current.worst_ratio <= 1.0
    slot = held.find_slot(engine)
    tol = drift_tolerance(held.current.omega, 200 * 256 / 48000, 200)
    assert tol.max() < 1e-9
    engine.pool.s[slot] *= np.exp(1j * 1e-9)
    engine.render()
    held.check(engine, 200)
    assert held.current.worst_ratio > 1.0


def test_held_note_check_sees_a_level_error_of_1e_minus_12():
    engine, held, _ = _plucked_engine()
    engine.pool.s[held.find_slot(engine)] *= 1.0 + 1e-12
    engine.render()
    held.check(engine, 200)
    assert held.current.worst_ratio > 1.0
    assert held.current.max_level > 9e-13


def test_slope_is_least_squares_over_the_second_half_with_a_level_per_pool():
    rng = np.random.default_rng(3)
    t = np.linspace(0.0, 600.0, 80)
    v = 5e6 + 2000.0 * t / 60.0 * 1000 + rng.normal(0, 500, t.size)  # 2000 kB/min
    want = np.polyfit(t[40:] / 60, v[40:] / 1000, 1)[0]  # numpy.polyfit as the reference
    assert slope_kb_per_min(t, v) == pytest.approx(want, rel=1e-9)
    # A rebuild's step (another pool size) is no trend; a leak inside each regime still is.
    regimes = (t > 450).astype(int)
    stepped = v + 3e6 * regimes
    assert slope_kb_per_min(t, stepped, regimes) == pytest.approx(2000.0, rel=0.01)
    flat_step = 5e6 + 3e6 * regimes
    assert abs(slope_kb_per_min(t, flat_step, regimes)) < 1e-6


def test_memory_sampler_sees_a_leak_of_10_kb_per_sample():
    sampler, hoard = MemorySampler(16, trace=True), []
    for i in range(16):
        hoard.append(bytearray(10_000))
        sampler.sample(i * 6.0)  # 10 samples a minute: 100 kB/min
    trace = sampler.stop()
    assert trace.traced_slope() == pytest.approx(100.0, rel=0.05)
    assert trace.traced_slope() >= TRACED_LIMIT_KB_PER_MIN * 0.95


def test_xrun_limit_is_the_poisson_quantile():
    from scipy.stats import poisson

    assert xrun_limit(4, 10.0, 20.0) == int(poisson.ppf(0.999, 8.0))
    assert xrun_limit(0, 10.0, 20.0) == int(poisson.ppf(0.999, 2.0))  # none seen counts as one
    assert poisson.cdf(xrun_limit(4, 10.0, 20.0), 8.0) >= 0.999


@pytest.fixture
def private_server(jack_server, tmp_path, monkeypatch):
    """A JACK dummy server of this test's own, at the shared server's rate and period.

    The xrun criterion needs the server's log, which names the client that was late; the
    shared server's log is not ours (and its other clients are not this test's)."""
    if shutil.which("jackd") is None or shutil.which("jack_wait") is None:
        pytest.skip("jackd/jack_wait not found (Debian package jackd2)")
    name = f"rtvsrv{os.getpid()}"  # not a prefix of the host's client name (rtvsoak<pid>)
    log = tmp_path / "jackd.log"
    monkeypatch.setenv("JACK_DEFAULT_SERVER", name)
    monkeypatch.setenv("JACK_NO_START_SERVER", "1")
    with open(log, "w") as out:
        proc = subprocess.Popen(["jackd", "-n", name, "--no-realtime", "-d", "dummy",
                                 "-r", str(jack_server.sample_rate_hz), "-p", str(jack_server.buffer_frames)],
                                stdin=subprocess.DEVNULL, stdout=out, stderr=subprocess.STDOUT)
    try:
        subprocess.run(["jack_wait", "-w", "-t", "10"], capture_output=True, timeout=20, check=True)
        yield jack_server, str(log)
    finally:
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(5)


@pytest.mark.jack
def test_realtime_soak_under_jack(private_server, tmp_path):
    """20 s of random MIDI into ``rtvoice play --headless --record`` after an 8 s baseline:
    a clean run and exit, no memory growth, a finite recording under the ceiling.

    Steady random play (no note floods: those are the offline soak's and the live-MIDI
    tests' job; here they would mostly measure how busy the shared CI machine is)."""
    info, log = private_server
    cfg = RealtimeConfig(seconds=20.0, baseline_s=8.0, rate=info.sample_rate_hz, block=info.buffer_frames,
                         workdir=str(tmp_path), bursts=False, server_log=log)
    res = run_realtime(cfg)
    assert res.started, res.log_tail
    assert res.exit_code == 0, res.log_tail
    assert res.midi_sent > 300
    assert res.engine_pid > 0 and res.rss_samples >= 15
    assert res.record_finite
    assert res.record_peak <= CEILING
    assert res.record_peak > 1e-3  # it did play
    assert res.host_late_soak is not None  # the server's log was read
    assert res.safety_failures() == [], res.log_tail
    # xruns are a timing figure: scripts/soak judges them; the suite only shows them (the
    # project's rule: speed targets are checked by benchmarks, never by timed tests).
    print(f"xruns: host status {res.xruns_baseline} baseline / {res.xruns_soak} soak; late cycles per client "
          f"{res.late_baseline} / {res.late_soak}; {res.timing_failures() or 'within the baseline'}")
