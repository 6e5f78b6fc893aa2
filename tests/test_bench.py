"""The benchmark code itself: the baselines render the engine's partials, the scenes do what they claim.

No timing is asserted here (speed targets are checked by ``rtvoice bench``). Each
baseline must render the same partials (frequency and level) as the engine for a
simple note, so the comparison in the benchmark is like for like.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import subprocess
import sys
import time

import numpy as np
import pytest
import scipy.signal
from analysis import fit_damped_modes, peak_frequency_hz
from support.describe import failing
from support.sounds import open_strings

from rtvoice.bench.baselines import (
    KarplusStrongBank,
    OutputChain,
    PhasorBank,
    ResonatorBank,
    allpass_coefficient,
    partials_of,
    pluck_comb_response,
    stretch_for_loss,
)
from rtvoice.bench.scenes import HeldChord
from rtvoice.bench.timing import time_in_turns
from rtvoice.engine.renderer import Engine
from rtvoice.engine.settings import Settings
from rtvoice.physics.damping import LN_1000

FS = 48000
BLOCK = 128
F1 = 375.0  # exactly 128 samples per period at 48 kHz, so a quarter-length comb delay is 32 samples
NOTE = 66  # F#4, tuned to F1 through tuning.a4_hz
PLUCK = 0.25
PICKUP = 0.13
HARMONICS = 12
BLOCKS = 160  # 0.43 s
# Loss law sigma = b1 + b3 w^2 (Chaigne & Askenfelt, JASA 95(2), 1994) with b3 = f1 / (8 fs^2), the
# damping that the original two-point average (S = 1/2) gives per period: |cos(w / 2)| ~ 1 - w^2 / 8.
B1 = 0.5
B3 = F1 / (8 * FS**2)


def _sigma(f_hz):
    return B1 + B3 * (2 * np.pi * np.asarray(f_hz)) ** 2


def simple_note_settings() -> Settings:
    """One harmonic string (B = 0), plucked at 1/4, one displacement pickup, no coil filter, 0 dB.

    An open string of its own: the formulas below take the pluck and the pickup as fractions of the
    note's own length, and the B = 0 string of a harmonic series (a fretted voice would take its
    string's stiffness and see the pluck at distance / speaking length)."""
    return open_strings(Settings.defaults()).with_values({
        "tuning.a4_hz": F1 * 2 ** (3 / 12),  # note 66 is three semitones under A4 (12-TET)
        "string.inharmonicity": 0.0,
        "string.modes": 24,
        "string.t60_low": float(LN_1000 / _sigma(100.0)),
        "string.t60_high": float(LN_1000 / _sigma(2000.0)),
        "excitation.position": PLUCK,
        "excitation.width": 0.0,
        "pickup.0.position": PICKUP,
        "pickup.0.width": 0.0,
        "pickup.0.sensing": "displacement",
        "electronics.resonance_hz": 0.0,
        "output.gain_db": 0.0,
        "voices": 1,
    })


@pytest.fixture(scope="module")
def renders() -> dict[str, np.ndarray]:
    """The engine and each baseline rendering the same note from the same moment (after block 1)."""
    engine = Engine(simple_note_settings(), FS, BLOCK)
    engine.render([(0, 0x90, NOTE, 100)])
    partials = partials_of(engine)
    banks = {
        "resonators": ResonatorBank(partials, BLOCK),
        "phasors": PhasorBank(partials, BLOCK),
        "karplus_strong": KarplusStrongBank(engine, partials),
    }
    chains = {name: OutputChain(engine) for name in banks}
    out = {"engine": np.concatenate([engine.render(()).copy() for _ in range(BLOCKS)])}
    for name, bank in banks.items():
        out[name] = np.concatenate([chains[name].process(bank.render().copy()) for _ in range(BLOCKS)])
    return out


def _harmonic_peaks(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(frequency Hz, level dB) of the largest FFT peak near each harmonic k F1 (Hann window, 8x padding)."""
    n = x.size
    spectrum = np.abs(np.fft.rfft(x * np.hanning(n), 8 * n))
    freqs = np.fft.rfftfreq(8 * n, 1 / FS)
    f_peak, level = [], []
    for k in range(1, HARMONICS + 1):
        band = np.flatnonzero(np.abs(freqs - k * F1) <= 20.0)
        i = band[np.argmax(spectrum[band])]
        f_peak.append(peak_frequency_hz(x, FS, k * F1, 20.0))
        level.append(20 * np.log10(spectrum[i] + 1e-300))
    return np.array(f_peak), np.array(level)


def _nulls(k: np.ndarray) -> np.ndarray:
    """Harmonics that a pluck at 1/4 leaves out: sin(k pi / 4) = 0 (Fletcher & Rossing 1998, ch. 2)."""
    return k % 4 == 0


K = np.arange(1, HARMONICS + 1)


@pytest.mark.parametrize("name", ["resonators", "phasors"])
def test_modal_baselines_render_the_engine_partials(renders, name):
    f_engine, db_engine = _harmonic_peaks(renders["engine"])
    f_base, db_base = _harmonic_peaks(renders[name])
    sounding = ~_nulls(K)
    # Same frequencies: k F1 for a harmonic string (Fletcher 1964 with B = 0; 12-TET for F1), to 0.01 Hz.
    assert np.allclose(f_base[sounding], K[sounding] * F1, atol=0.01)
    assert np.allclose(f_base[sounding], f_engine[sounding], atol=0.01)
    # Same levels to 0.01 dB (the engine keeps its power tables in single precision).
    assert np.allclose(db_base[sounding], db_engine[sounding], atol=0.01)
    # And sample for sample, to single-precision rounding, once the output limiter's fixed delay has
    # passed: for its first latency_frames the engine's delay line still gives out the note-on block
    # rendered before the baselines start, the baselines' fresh one silence.
    d = Engine(simple_note_settings(), FS, BLOCK).stats.latency_frames
    peak = np.max(np.abs(renders["engine"]))
    assert np.max(np.abs(renders[name][d:] - renders["engine"][d:])) < 1e-4 * peak


@pytest.mark.parametrize("name", ["resonators", "phasors", "karplus_strong"])
def test_baseline_levels_follow_the_pluck_and_pickup_formulas(renders, name):
    # Fletcher & Rossing, The Physics of Musical Instruments, 2nd ed. 1998, ch. 2: a string plucked at p has
    # mode amplitudes a_k = 2 sin(k pi p) / (k^2 pi^2 p (1 - p)); a displacement pickup at x senses
    # sin(k pi x) (Paiva, Pakarinen & Valimaki, JAES 60(10), 2012). A least-squares fit of damped modes at the
    # decay rates of the loss law gives each harmonic's amplitude at the window start, referred back to the
    # note-on. The window starts once the Karplus-Strong excitation (one period plus the comb delay) is in.
    skip = 4 * BLOCK
    x = renders[name][skip:skip + 8192]
    k = np.arange(1, 8)
    freqs = k * F1
    since_note_on_s = (BLOCK + skip) / FS  # the renders start one block after the note-on
    amps = np.abs(fit_damped_modes(x, FS, freqs, _sigma(freqs))) * np.exp(_sigma(freqs) * since_note_on_s)
    a_k = 2 * np.sin(k * np.pi * PLUCK) / (k**2 * np.pi**2 * PLUCK * (1 - PLUCK))
    expected = np.abs(a_k * np.sin(k * np.pi * PICKUP))
    sounding = ~_nulls(k)
    ratio = amps[sounding] / amps[0]
    assert np.allclose(ratio, expected[sounding] / expected[0], rtol=0.02)
    assert np.all(amps[~sounding] < 1e-4 * amps[0]), (
        "amplitude over the fundamental's at the nulls, want < 1e-4: "
        + failing(amps[~sounding] < 1e-4 * amps[0], amps[~sounding] / amps[0], k[~sounding], "harmonics"))


def test_karplus_strong_renders_the_engine_partials(renders):
    f_engine, db_engine = _harmonic_peaks(renders["engine"])
    f_ks, db_ks = _harmonic_peaks(renders["karplus_strong"])
    sounding = ~_nulls(K)
    cents = 1200 * np.log2(f_ks[sounding] / f_engine[sounding])
    assert np.max(np.abs(cents)) < 0.3
    # Levels: within 0.25 dB for harmonics less than 25 dB under the fundamental, 1 dB for the weaker ones.
    # The one-period excitation is orthogonal to the loop's harmonics only while they do not decay, so each
    # strong harmonic leaks about P sigma / fs (here -35 dB) of itself into the others: a property of the
    # method, found by rendering each harmonic alone and adding them up.
    strong = sounding & (db_engine > db_engine[0] - 25)
    weak = sounding & ~strong
    assert np.allclose(db_ks[strong], db_engine[strong], atol=0.25)
    assert np.allclose(db_ks[weak], db_engine[weak], atol=1.0)
    # The pluck-position comb 1 - z^-(P/4) removes every 4th harmonic (Jaffe & Smith 1983).
    assert np.all(db_ks[~sounding] < db_ks[0] - 60), (
        f"Karplus-Strong nulls, want < {db_ks[0] - 60:.1f} dB: "
        + failing(db_ks[~sounding] < db_ks[0] - 60, db_ks[~sounding], K[~sounding], "harmonics"))
    assert np.all(db_engine[~sounding] < db_engine[0] - 60), (
        f"engine nulls, want < {db_engine[0] - 60:.1f} dB: "
        + failing(db_engine[~sounding] < db_engine[0] - 60, db_engine[~sounding], K[~sounding], "harmonics"))


def test_pluck_comb_magnitude_jaffe_smith():
    # Jaffe & Smith, "Extensions of the Karplus-Strong plucked-string algorithm", Computer Music Journal
    # 7(2), 1983: H(z) = 1 - z^-(beta N), |H| at harmonic k = 2 |sin(pi k beta)|; beta = 1/4 gives
    # |H_1| = 1.41421, |H_2| = 2, |H_4| = 0 (shared references).
    got = pluck_comb_response(0.25, 128, np.array([1, 2, 3, 4, 8]))
    assert got == pytest.approx([1.41421, 2.0, 1.41421, 0.0, 0.0], abs=1e-5)
    beta = 0.2
    k = np.arange(1, 20)
    assert pluck_comb_response(beta, 100, k) == pytest.approx(2 * np.abs(np.sin(np.pi * k * beta)), abs=1e-9)


@pytest.mark.parametrize(("delay", "omega"), [(0.3, 0.05), (0.75, 0.2), (1.05, 0.6)])
def test_allpass_phase_delay_checked_with_freqz(delay, omega):
    # The tuning allpass (eta + z^-1) / (1 + eta z^-1) of Jaffe & Smith (1983): its phase delay at omega,
    # measured with scipy.signal.freqz, is the fractional delay asked for.
    eta = allpass_coefficient(delay, omega)
    _, h = scipy.signal.freqz([eta, 1.0], [1.0, eta], worN=[omega])
    assert -np.angle(h[0]) / omega == pytest.approx(delay, abs=1e-9)
    # Jaffe & Smith's low-frequency form (1 - d) / (1 + d) is the limit as omega -> 0.
    assert allpass_coefficient(delay, 1e-4) == pytest.approx((1 - delay) / (1 + delay), abs=1e-6)


def test_stretch_matches_the_loss_law():
    # Two-point loss (1 - S) + S z^-1: |H(w)|^2 = 1 - 2 S (1 - S) (1 - cos w) (Jaffe & Smith 1983). Its decay
    # per second, -f1 ln |H|, must equal b3 (2 pi f)^2 at low frequencies for the S chosen.
    f1, b3 = 220.0, 2e-9
    s = stretch_for_loss(b3, f1, FS)
    assert 0 < s < 0.5
    f = 300.0
    w = 2 * np.pi * f / FS
    loss = -f1 * 0.5 * math.log(1 - 2 * s * (1 - s) * (1 - math.cos(w)))
    assert loss == pytest.approx(b3 * (2 * np.pi * f) ** 2, rel=1e-3)
    assert stretch_for_loss(1.0, f1, FS) == 0.5  # more loss than a two-point average can give


def test_held_chord_keeps_every_voice_and_the_ramp_running():
    chord = HeldChord.start(voices=6, modes=32, block_frames=BLOCK, ramps=True)
    assert chord.active == 6
    previous = chord.engine.pool.g[: chord.active].copy()
    for i in range(1, 41):
        chord.swing(i)
        chord.render()
        now = chord.engine.pool.g[: chord.active]
        # A smoothing ramp moves the pickup weights in every block.
        assert not np.allclose(now, previous, rtol=0, atol=1e-12), f"no ramp in block {i}"
        previous = now.copy()
    assert chord.active == 6
    steady = HeldChord.start(voices=6, modes=32, block_frames=BLOCK, ramps=False)
    before = steady.engine.pool.g[:6].copy()
    steady.render()
    assert np.array_equal(steady.engine.pool.g[:6], before)


def test_calls_timed_in_turns_alternate_and_each_step_sees_its_own_count():
    # The mechanics only (no timing is judged): every call timed `repeats` times in `turns` runs,
    # interleaved, each call's `between` given its own running count (warm-up included).
    order, seen = [], {"a": [], "b": []}
    timings = time_in_turns([lambda: order.append("a"), lambda: order.append("b")], repeats=12, warmup=2, turns=3,
                            between=[seen["a"].append, seen["b"].append])
    assert [t.count for t in timings] == [12, 12]
    assert order[:6] == ["a"] * 6 and order[6:12] == ["b"] * 6 and order[12:16] == ["a"] * 4
    assert seen["a"] == list(range(14)) and seen["b"] == list(range(14))


@pytest.mark.slow
def test_quick_bench_prints_every_figure_as_json(tmp_path):
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    written = tmp_path / "bench.json"
    proc = subprocess.run([sys.executable, "-m", "rtvoice.cli", "bench", "--quick", "--json", "--write", str(written)],
                          capture_output=True, text=True, env=env, timeout=300, check=False)
    assert proc.returncode == 0, proc.stderr
    result = json.loads(proc.stdout)
    assert json.loads(written.read_text()) == result
    for key in ("machine", "grid", "grid_steady", "table_product", "idle", "baselines", "song", "memory",
                "startup", "realtime_host", "targets", "profile"):
        assert key in result
    assert result["machine"]["OPENBLAS_NUM_THREADS"] == "1"
    assert all(p["active_voices"] == p["voices"] for p in result["grid"])
    names = {b for row in result["baselines"] for b in row["baselines"]}
    assert names == {"a_resonators_lfilter", "b_phasor_recursion", "c_karplus_strong"}
    assert len(result["targets"]) == 6  # the fretted six-string's note-on target among them
    assert all(t["met"] in (True, False) for t in result["targets"])


def test_real_time_runs_merge_as_one_run_would_count():
    # Taken in turns, each condition's runs are merged: the merged percentiles must be what one
    # meter fed every callback of both runs reports, and the counts their sums.
    from rtvoice.bench.realtime import hist_percentile, merge_runs
    from rtvoice.host.meters import CallbackMeter

    rng = np.random.default_rng(3)
    period = 128 / 48000
    a, b = rng.gamma(2.0, 0.02, 3000) * period, rng.gamma(5.0, 0.05, 1000) * period
    meters = [CallbackMeter(period) for _ in range(3)]
    for x, meter in ((a, meters[0]), (b, meters[1])):
        for t in x:
            meter.add(t)
    for t in np.concatenate([a, b]):
        meters[2].add(t)
    runs = [{"audio": "x", "seconds": s, "blocks": n, "xruns": xr, "late": 0,
             "load_hist": m.histogram_pairs(), "render_hist": m.histogram_pairs()}
            for m, s, n, xr in ((meters[0], 8.0, 3000, 2), (meters[1], 2.7, 1000, 5))]
    merged = merge_runs(runs)
    assert merged["xruns"] == 7 and merged["blocks"] == 4000 and merged["segment_xruns"] == [2, 5]
    for q, key in ((0.5, "load_median"), (0.99, "load_p99")):
        assert merged[key] == meters[2].run_percentile(q)
        assert hist_percentile(meters[0].histogram_pairs(), q) == meters[0].run_percentile(q)


def test_more_xruns_p_is_the_exact_conditional_test_of_two_poisson_counts():
    # Worked by hand from the binomial law (Przyborowski & Wilenski 1940, cited from memory): with
    # equal times, given 4 xruns in all, P(A has >= 3) = (C(4,3) + C(4,4)) / 2^4 = 5/16.
    from rtvoice.bench.realtime import more_xruns_p

    assert more_xruns_p(3, 60.0, 1, 60.0) == pytest.approx(5 / 16)
    # A ran three times as long: p = 3/4 per xrun, P(A has >= 3 of 3) = 27/64.
    assert more_xruns_p(3, 30.0, 0, 10.0) == pytest.approx(27 / 64)
    assert more_xruns_p(0, 60.0, 0, 60.0) == 1.0
    assert more_xruns_p(200, 60.0, 100, 60.0) < 1e-6  # twice the rate over a minute is no chance
    assert more_xruns_p(100, 60.0, 200, 60.0) > 0.999


def test_live_columns_count_the_product_and_scale_the_efficiency():
    # The grid's live-mode efficiency: the bare time scaled to the columns the engine multiplied.
    from rtvoice.bench.grid import GridPoint, time_cell
    from rtvoice.bench.limits import BareProduct
    from rtvoice.bench.timing import Timing

    chord = HeldChord.start(4, 128, 128, ramps=False)
    engine = chord.engine
    assert 0 < engine.live_columns <= 4 * 128
    packed = int(engine.voice_renderer.live.live_prefixes(4).sum())
    assert engine.live_columns == packed  # packed afresh at the note-ons
    first = engine.live_columns
    for _ in range(1000):  # 2.7 s: the sweeps drop the modes that died
        chord.render()
    assert engine.live_columns < first
    engine.render([(0, 0xB0, 120, 0)])  # all sound off: after the fade nothing sounds, nothing is multiplied
    for _ in range(200):
        chord.render()
    assert engine.pool.n_active == 0 and engine.live_columns == 0

    t = Timing(100.0, 150.0, 100.0, 90.0, 200.0, 10)
    bare = BareProduct(512, 128, Timing(80.0, 90.0, 80.0, 70.0, 100.0, 10), 0)
    point = GridPoint(4, 128, 128, False, 4, t, bare, 256.0, Timing(40.0, 50.0, 40.0, 30.0, 60.0, 10))
    assert point.efficiency == pytest.approx(0.8) and point.efficiency_live == pytest.approx(0.4)
    engine_t, _, active, columns, live_t = time_cell(4, 128, 128, repeats=20, ramps=False, warmup=2)
    assert active == 4 and 0 < columns <= 512 and live_t.count == engine_t.count


def test_the_live_bare_product_multiplies_as_many_modes_as_asked():
    # The bare product over the engine's live columns is the product of the leading modes alone
    # (checked against numpy's product of the same slices in double precision).
    from rtvoice.bench.limits import factored_operands, factored_product

    width = [512]
    part, _ = factored_product(512, 128, seed=5, columns=lambda: width[0])
    full, _ = factored_product(512, 128, seed=5)
    c_t, a = factored_operands(512, 128, seed=5)
    np.testing.assert_allclose(part(), full(), rtol=0, atol=0)
    for m in (100, 1, 600):
        width[0] = m
        k = min(m, 512)
        expected = c_t[:, :k].astype(complex) @ a[:k].astype(complex)
        np.testing.assert_allclose(part(), expected, rtol=1e-5, atol=1e-5)


@pytest.mark.slow
def test_idle_client_counts_blocks_of_the_server_period(jack_server):
    # The bench's xrun floor: a client writing silence runs one callback per period of the real server.
    proc = subprocess.run([sys.executable, "-m", "rtvoice.bench.idle_client", "2", str(jack_server.buffer_frames)],
                          capture_output=True, text=True, timeout=60, check=False)
    assert proc.returncode == 0, proc.stderr
    got = json.loads(proc.stdout.strip().splitlines()[-1])
    expected = got["seconds"] * jack_server.sample_rate_hz / jack_server.buffer_frames
    # Sane in kind, not in speed: callbacks ran, and never more than the server had periods (how many
    # of them a busy machine missed is a timing figure for `rtvoice bench`, not for a test).
    assert 0 < got["blocks"] <= expected * 1.05 + 2, (got, expected)
    assert 0 <= got["xruns"] < got["blocks"], got


def test_idle_client_refuses_bad_arguments_in_one_line():
    proc = subprocess.run([sys.executable, "-m", "rtvoice.bench.idle_client", "soon"], capture_output=True,
                          text=True, timeout=60, check=False)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1 and "SECONDS" in proc.stderr


def test_server_log_lines_are_read_as_the_servers_account_of_its_xruns():
    # jack2's own error lines (jackd 1.9, as it wrote them on this machine's dummy server).
    from rtvoice.bench.realtime import merge_server_logs, xrun_lines

    text = "\n".join([
        "JackTimedDriver::Process XRun = 14 usec",
        "JackEngine::XRun: client = rtvbench-engine was not finished, state = Running",
        "JackEngine::XRun: client = rtvbench-engine was not finished, state = Triggered",
        "JackEngine::XRun: client = my client:2 was not finished, state = Running",
        "Jack: JackClient::Activate",
        "JackTimedDriver::Process XRun = 7 usec",
    ])
    got = xrun_lines(text)
    assert got == {"timer_late": 2, "not_finished": {"rtvbench-engine": 2, "my client:2": 1}}
    assert xrun_lines("") == {"timer_late": 0, "not_finished": {}}
    both = merge_server_logs([got, {"timer_late": 1, "not_finished": {"rtvbench-idle": 3}}])
    assert both == {"timer_late": 3, "not_finished": {"rtvbench-engine": 2, "my client:2": 1, "rtvbench-idle": 3}}


_SLOW_CLIENT = """
import sys, time
from rtvoice.host.audio import PortAudioOutput, find_device, load_sounddevice
sd, reason = load_sounddevice("rtvtest-slow")
blocks = [0]
def callback(out, frames, underflow):
    out.fill(0.0)
    blocks[0] += 1
    if blocks[0] % 25 == 0:
        time.sleep(0.03)  # several periods: the server sees this client not finished
output = PortAudioOutput(sd, find_device(sd, "system"), 48000, 256, callback)
output.start()
time.sleep(1.5)
output.stop()
print(blocks[0])
"""


@pytest.mark.slow
@pytest.mark.skipif(not (shutil.which("jackd") and shutil.which("jack_wait")), reason="jackd / jack_wait not installed")
def test_a_server_of_the_benchs_own_names_the_client_that_overran_in_its_log():
    # A real JACK dummy server started as the bench starts it, and a PortAudio client that sleeps
    # through several periods every 25 callbacks: the server's log must blame that client.
    from rtvoice.bench.realtime import jack_server
    from rtvoice.procutil import scoped_environ

    with jack_server(name="rtvtest-log", period=256, prefer_realtime=False) as (name, _, log), \
            scoped_environ({"JACK_DEFAULT_SERVER": name, "JACK_NO_START_SERVER": "1"}):
        mark = log.mark()
        proc = subprocess.run([sys.executable, "-c", _SLOW_CLIENT], capture_output=True, text=True, timeout=60,
                              check=False)
        assert proc.returncode == 0, proc.stderr
        time.sleep(0.3)
        got = log.since(mark)
    assert got["not_finished"].get("rtvtest-slow", 0) >= 3


def test_host_minutes_set_the_real_time_part_of_the_plan(monkeypatch):
    # A fake runner, on purpose: the real one measures for minutes. The plan it is handed is the point.
    from rtvoice.bench import runner
    from rtvoice.cli import main

    seen = []
    monkeypatch.setenv("RTVOICE_BENCH_CHILD", "1")  # no re-run in a child process
    monkeypatch.setattr(runner, "run", lambda plan, progress=None: seen.append(plan) or {"plan": plan.name})
    monkeypatch.setattr("rtvoice.bench.report.render_text", lambda result: "")
    assert main(["bench", "--quick", "--host-minutes", "2.5"]) == 0
    assert main(["bench", "--quick"]) == 0
    assert seen[0].realtime_seconds == 150.0 and seen[0].voices == runner.QUICK.voices
    assert seen[1].realtime_seconds == runner.QUICK.realtime_seconds == 0.0


@pytest.mark.slow
@pytest.mark.skipif(not (shutil.which("jackd") and shutil.which("jack_wait")), reason="jackd / jack_wait not installed")
def test_the_real_time_host_benchmark_runs_every_condition_on_a_real_server():
    # The real-time part end to end, briefly: a JACK dummy server of the bench's own, the host headless
    # and with the Textual UI in turns, the idle client, the server's log, merged per condition.
    from rtvoice.bench.realtime import PERIOD_FRAMES, VOICES, callback_distribution

    got = callback_distribution(8.0)
    assert got["available"], got.get("reason")
    for scene in ("ringing", "swinging"):
        for key in ("without_ui", "with_ui"):
            m = got[scene][key]
            assert m["segments"] == 4 and len(m["segment_xruns"]) == 4
            # Figures present and sane in kind; how fast the machine was is `rtvoice bench`'s to report.
            periods = m["seconds"] * 48000 / PERIOD_FRAMES
            assert 0 < m["blocks"] <= periods * 1.05 + 2, (scene, key, m["blocks"], periods)
            assert m["voices_max"] >= VOICES and m["notes_dropped"] == 0, (scene, key, m)  # the whole chord sounded
            assert all(math.isfinite(m[q]) for q in ("load_median", "load_p99")), (scene, key, m)
            assert 0 < m["load_median"] <= m["load_p99"], (scene, key, m["load_median"], m["load_p99"])
            assert set(m["server_log"]) == {"timer_late", "not_finished"}
            assert sum(m["server_log"]["not_finished"].values()) <= m["blocks"]
        assert got[scene]["with_ui"]["ui_frames_drawn"] > 0
        assert 0 <= got[scene]["ui_more_xruns_p"] <= 1
    idle = got["ringing"]["idle_client"]
    assert 0 < idle["blocks"] <= idle["seconds"] * 48000 / PERIOD_FRAMES * 1.05 + 2, idle
    assert "idle_client" not in got["swinging"]
