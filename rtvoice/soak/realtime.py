"""The real-time soak: ``rtvoice play --headless --record`` under a running JACK server.

Random MIDI (:mod:`rtvoice.soak.traffic`) goes from a JACK MIDI output of this process
(python-rtmidi on the JACK API) into the host's virtual port. Measured:

- the engine process's resident memory, from /proc once a second;
- xruns, read from the host's status line (its audio callback counts every underrun flag),
  in two windows of the same running host: a *baseline* in which the sender plays its random
  MIDI (another seed) into an unconnected port, so the server, the machine and the sending
  client do their share of work while the host hears nothing, and the *soak*, the same traffic
  connected to the host. A JACK server reports every xrun to every client, whichever client
  was late, so the baseline holds everything but the host's own reaction to MIDI. The soak may
  not exceed it beyond chance:
  at most the 99.9 % Poisson quantile of the baseline rate scaled to the soak's length (a
  baseline with no xrun counts as one, so a short quiet baseline does not forbid every xrun);
- when the JACK server's own log is given (scripts/soak and the test start a server of their
  own and keep its output), its "XRun" lines and, for each late cycle, the client the server
  names. Then the criterion is the host's *audio client* being late, soak against baseline,
  with the same Poisson limit: the all-client count also holds the sender's and the host's
  MIDI-port clients not being scheduled in time on a busy machine without real-time priority
  (JACK reports every xrun to every client, so the host's own count includes them too);
  those figures are reported beside it;
- the recording: every sample finite and |x| <= CEILING.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from rtvoice.engine import CEILING
from rtvoice.soak.held import HELD_NOTE
from rtvoice.soak.memory import rss_bytes, slope_kb_per_min
from rtvoice.soak.traffic import HELD_CHANNEL, RandomTraffic, TrafficRates

START_TIMEOUT_S = 60.0
MEMORY_JUDGE_S = 120.0  # shortest soak whose memory slope is judged (the CI run's 20 s is reported only)
RSS_LIMIT_KB_PER_MIN = 1000.0  # as offline (rtvoice.soak.offline): 1 MB/min fills 1 GB in 17 hours
XRUN_QUANTILE = 0.999
_XRUNS = re.compile(r"xruns (\d+)")


@dataclass
class RealtimeConfig:
    seconds: float = 20.0
    baseline_s: float = 10.0
    seed: int = 1
    rate: int = 48000
    block: int = 256
    workdir: str = "/tmp"
    client_name: str = ""
    server_log: str | None = None  # the JACK server's stdout, when this run may read it
    voices: int = 16
    bursts: bool = True  # soft floods of 2 x voices + 8 note-ons in one block, every 15 s on average


@dataclass
class RealtimeResult:
    config: RealtimeConfig
    started: bool = False
    exit_code: int | None = None
    baseline_s: float = 0.0
    soak_s: float = 0.0
    xruns_baseline: int = 0
    xruns_soak: int = 0
    xrun_limit: int = 0
    server_xruns_baseline: int | None = None
    server_xruns_soak: int | None = None
    late_baseline: dict = field(default_factory=dict)  # server log: late cycles per client
    late_soak: dict = field(default_factory=dict)
    host_client: str = ""
    host_late_baseline: int | None = None  # the host's audio client late at the deadline
    host_late_soak: int | None = None
    host_late_limit: int | None = None
    midi_sent: int = 0
    host_midi_events: int = -1  # events the host's engine handled (its summary line)
    engine_pid: int = -1
    rss_start_kb: float = float("nan")
    rss_end_kb: float = float("nan")
    rss_slope_kb_per_min: float = float("nan")
    rss_samples: int = 0
    record_s: float = 0.0
    record_peak: float = float("nan")
    record_finite: bool = False
    summary_line: str = ""
    log_tail: str = ""
    rss_trace: list = field(default_factory=list)

    def failures(self) -> list[str]:
        """Everything that broke a soak criterion: :meth:`safety_failures` and :meth:`timing_failures`."""
        return self.safety_failures() + (self.timing_failures() if self.started else [])

    def timing_failures(self) -> list[str]:
        """The xrun criterion: a timing figure, judged by scripts/soak, not by the test suite
        (the project's rule: speed is checked by benchmarks, never by timed tests)."""
        out = []
        if self.host_late_soak is not None and self.host_late_limit is not None:  # set together
            # The server names the late client: judge the host by its own audio client.
            if self.host_late_soak > self.host_late_limit:
                out.append(f"the host's audio client was late {self.host_late_soak} times in {self.soak_s:.0f} s "
                           f"of MIDI, more than {self.host_late_limit} allowed by the baseline "
                           f"({self.host_late_baseline} in {self.baseline_s:.0f} s)")
        elif self.xruns_soak > self.xrun_limit:
            out.append(f"{self.xruns_soak} xruns in {self.soak_s:.0f} s of MIDI, more than {self.xrun_limit} "
                       f"allowed by the baseline ({self.xruns_baseline} in {self.baseline_s:.0f} s)")
        return out

    def safety_failures(self) -> list[str]:
        """The host ran, exited cleanly, did not grow, and recorded finite sound under the ceiling."""
        out = []
        if not self.started:
            out.append("the host did not start: " + self.log_tail[-500:])
            return out
        if self.exit_code != 0:
            out.append(f"the host exited with {self.exit_code}")
        # A slope from the second half of a short run measures warm-up (interpreter and allocator
        # arenas growing to their working size), not a leak: judged from MEMORY_JUDGE_S on.
        if self.soak_s >= MEMORY_JUDGE_S and not self.rss_slope_kb_per_min < RSS_LIMIT_KB_PER_MIN:
            out.append(f"engine memory grew {self.rss_slope_kb_per_min:.0f} kB/min (limit {RSS_LIMIT_KB_PER_MIN:g})")
        if not self.record_finite:
            out.append("the recording holds NaN or inf")
        if not self.record_peak <= CEILING:
            out.append(f"the recording peaks at {self.record_peak:.6f}, above the ceiling {CEILING:.6f}")
        if self.record_s < 0.9 * (self.baseline_s + self.soak_s):
            out.append(f"the recording holds {self.record_s:.1f} s, less than the run")
        return out

    def to_dict(self) -> dict:
        d = asdict(self)
        d["failures"] = self.failures()
        return d


def xrun_limit(baseline: int, baseline_s: float, soak_s: float) -> int:
    """Most xruns the soak may show: the 99.9 % Poisson quantile at the baseline's rate."""
    from scipy.stats import poisson

    mean = max(baseline, 1) * soak_s / max(baseline_s, 1e-9)
    return int(poisson.ppf(XRUN_QUANTILE, mean))


def _jack(*args: str) -> str:
    done = subprocess.run(args, capture_output=True, text=True, timeout=10,
                          env={**os.environ, "JACK_NO_START_SERVER": "1"})
    return done.stdout if done.returncode == 0 else ""


def _wait_port(name: str, timeout_s: float) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if name in _jack("jack_lsp").split("\n"):
            return True
        time.sleep(0.1)
    return False


def _engine_child(host_pid: int) -> int:
    """The engine process: the host's multiprocessing child that is not the resource tracker."""
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as fh:
                ppid = int(fh.read().rsplit(")", 1)[1].split()[1])
            if ppid != host_pid:
                continue
            with open(f"/proc/{entry}/cmdline", "rb") as fh:
                cmd = fh.read().replace(b"\0", b" ").decode(errors="replace")
        except (OSError, IndexError, ValueError):
            continue
        if "multiprocessing" in cmd and "resource_tracker" not in cmd:
            return int(entry)
    return -1


def _log_xruns(text: str) -> int:
    found = _XRUNS.findall(text)
    return int(found[-1]) if found else 0


def _server_log_size(path: str | None) -> int | None:
    if not path:
        return None
    try:
        return Path(path).stat().st_size
    except OSError:
        return None


_LATE = re.compile(r"client = (\S+) was not finished")


def _server_slice(path: str, start: int, end: int) -> tuple[int, dict[str, int]]:
    """(XRun lines, late cycles per client) in bytes start..end of the server's log.

    The dummy driver logs "JackTimedDriver::Process XRun" when a cycle overran, and the engine
    "JackEngine::XRun: client = NAME was not finished, state = ..." for each client still
    pending at the deadline: state Running means its callback was still working, Triggered
    that it had not been scheduled yet.
    """
    with open(path, "rb") as fh:
        fh.seek(start)
        text = fh.read(max(0, end - start)).decode(errors="replace")
    late: dict[str, int] = {}
    for name in _LATE.findall(text):
        late[name] = late.get(name, 0) + 1
    return text.count("XRun"), late


class _Host:
    def __init__(self, cfg: RealtimeConfig, wav: Path, log: Path):
        self.log_path = log
        self.name = cfg.client_name or f"rtvsoak{os.getpid()}"
        args = [sys.executable, "-m", "rtvoice.cli", "play", "--headless", "--midi-in", "virtual",
                "--client-name", self.name, "--rate", str(cfg.rate), "--block", str(cfg.block),
                "--set", f"voices={cfg.voices}", "--record", str(wav)]
        self._log = open(log, "w")  # noqa: SIM115 - closed in stop()
        env = {**os.environ, "JACK_NO_START_SERVER": "1", "OPENBLAS_NUM_THREADS": "1"}
        self.proc = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=self._log, stderr=subprocess.STDOUT,
                                     env=env, start_new_session=True)

    def log(self) -> str:
        return self.log_path.read_text(errors="replace")

    def wait_ready(self) -> bool:
        deadline = time.monotonic() + START_TIMEOUT_S
        while "rtvoice: MIDI in:" not in self.log():
            if self.proc.poll() is not None or time.monotonic() > deadline:
                return False
            time.sleep(0.1)
        return _wait_port(f"{self.name}-midi:in", 15) and _wait_port(f"{self.name}:out_0", 15)

    def stop(self) -> int | None:
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGINT)
            try:
                self.proc.wait(20)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(5)
        self._log.close()
        return self.proc.returncode


def _status_xruns_after(host: _Host, wait_s: float = 2.5) -> int:
    """The xrun count of the next status line (printed once a second)."""
    before = host.log().count("\n")
    deadline = time.monotonic() + wait_s
    while time.monotonic() < deadline and host.log().count("\n") == before:
        time.sleep(0.05)
    return _log_xruns(host.log())


def run_realtime(cfg: RealtimeConfig | None = None, progress=None) -> RealtimeResult:
    import rtmidi

    cfg = cfg or RealtimeConfig()
    res = RealtimeResult(cfg)
    work = Path(cfg.workdir)
    work.mkdir(parents=True, exist_ok=True)
    wav, log = work / "soak-realtime.wav", work / "soak-realtime.log"
    host = _Host(cfg, wav, log)
    sender = None
    try:
        if not host.wait_ready():
            res.log_tail = host.log()[-2000:]
            return res
        res.started = True
        res.engine_pid = _engine_child(host.proc.pid)
        sender = rtmidi.MidiOut(rtmidi.API_UNIX_JACK, name=f"{host.name}-send")
        sender.open_virtual_port("out")
        _wait_port(f"{host.name}-send:out", 10)
        # Baseline: the same kind of traffic, sent into an unconnected port.
        x0, s0, t0 = _status_xruns_after(host), _server_log_size(cfg.server_log), time.monotonic()
        _soak(sender, cfg.baseline_s, cfg, res, None, seed=cfg.seed + 1000, measure=False)
        x1, s1, t1 = _status_xruns_after(host), _server_log_size(cfg.server_log), time.monotonic()
        res.baseline_s, res.xruns_baseline = t1 - t0, x1 - x0
        for cc in (123, 120):  # the baseline's notes never reached the host; start clean anyway
            for ch in range(16):
                sender.send_message([0xB0 | ch, cc, 0])
        _jack("jack_connect", f"{host.name}-send:out", f"{host.name}-midi:in")
        x1, s1, t1 = _status_xruns_after(host), _server_log_size(cfg.server_log), time.monotonic()
        _soak(sender, cfg.seconds, cfg, res, progress, seed=cfg.seed, measure=True)
        x2, s2, t2 = _status_xruns_after(host), _server_log_size(cfg.server_log), time.monotonic()
        res.soak_s, res.xruns_soak = t2 - t1, x2 - x1
        if cfg.server_log and s0 is not None and s1 is not None and s2 is not None:  # sizes imply a log
            res.server_xruns_baseline, res.late_baseline = _server_slice(cfg.server_log, s0, s1)
            res.server_xruns_soak, res.late_soak = _server_slice(cfg.server_log, s1, s2)
            res.host_late_baseline = res.late_baseline.get(host.name, 0)
            res.host_late_soak = res.late_soak.get(host.name, 0)
            res.host_late_limit = xrun_limit(res.host_late_baseline, res.baseline_s, res.soak_s)
            res.host_client = host.name
        res.xrun_limit = xrun_limit(res.xruns_baseline, res.baseline_s, res.soak_s)
        for cc in (123, 120):  # all notes off, all sound off on every channel
            for ch in range(16):
                sender.send_message([0xB0 | ch, cc, 0])
        time.sleep(0.3)
    finally:
        if sender is not None:
            sender.close_port()
            sender.delete()
        res.exit_code = host.stop()
        text = host.log()
        res.log_tail = text[-2000:]
        res.summary_line = next((ln for ln in text.splitlines() if "rtvoice: stopped" in ln), "")
        found = re.search(r"midi events (\d+)", res.summary_line)
        res.host_midi_events = int(found.group(1)) if found else -1
    if wav.is_file() and wav.stat().st_size > 44:
        from rtvoice.offline.wav import read_wav

        samples, _rate = read_wav(wav)
        x = np.asarray(samples, dtype=np.float64)
        res.record_s = x.shape[0] / cfg.rate
        res.record_finite = bool(np.all(np.isfinite(x)))
        res.record_peak = float(np.max(np.abs(x))) if x.size else 0.0
    return res


def _soak(sender, seconds: float, cfg: RealtimeConfig, res: RealtimeResult, progress, seed: int,
          measure: bool) -> None:
    """Random MIDI for ``seconds``, sent as the blocks it belongs to come due; with ``measure``
    the engine's RSS once a second and a count of the messages."""
    rng = np.random.default_rng(seed)
    rates = TrafficRates() if cfg.bursts else TrafficRates(burst_every_s=float("inf"))
    traffic = RandomTraffic(rng, cfg.rate, cfg.block, rates)
    block_s = cfg.block / cfg.rate
    n_blocks = int(seconds / block_s)
    times, rss = [], []
    start = time.monotonic()
    next_rss = start
    held_on = False
    for b in range(n_blocks):
        due = start + b * block_s
        delay = due - time.monotonic()
        if delay > 0:
            time.sleep(delay)
        if not held_on:  # the sustained note: pedal down, note on, note off (the pedal holds it)
            for msg in ([0xB0 | HELD_CHANNEL, 64, 127], [0x90 | HELD_CHANNEL, HELD_NOTE, 127],
                        [0x80 | HELD_CHANNEL, HELD_NOTE, 0]):
                sender.send_message(msg)
            held_on = True
        for _off, status, d1, d2 in traffic.events(b, cfg.voices):
            sender.send_message([status, d1] if 0xC0 <= status < 0xE0 else [status, d1, d2])
            res.midi_sent += measure
        now = time.monotonic()
        if measure and now >= next_rss:
            next_rss += 1.0
            times.append(now - start)
            rss.append(rss_bytes(res.engine_pid) if res.engine_pid > 0 else -1)
            if progress is not None:
                progress(b / n_blocks)
    if not measure:
        return
    res.rss_samples = len(rss)
    res.rss_trace = [(round(t, 2), int(r)) for t, r in zip(times, rss, strict=True)]
    if rss and min(rss) > 0:
        res.rss_start_kb, res.rss_end_kb = rss[0] / 1000.0, rss[-1] / 1000.0
        res.rss_slope_kb_per_min = slope_kb_per_min(np.array(times), np.array(rss, float))
