"""``python -m rtvoice.soak``: the long soak (30 min offline, 10 min real time by default)."""

from __future__ import annotations

import argparse
import signal
import sys
import tempfile

from rtvoice.soak.offline import OfflineConfig, run_offline
from rtvoice.soak.realtime import RealtimeConfig, run_realtime
from rtvoice.soak.report import table, to_json


def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value >= 0:
        raise argparse.ArgumentTypeError(f"expected a number >= 0, got {text}")
    return value


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="python -m rtvoice.soak", description=__doc__)
    p.add_argument("--offline-minutes", type=_positive, default=30.0, help="audio rendered offline (0: skip)")
    p.add_argument("--realtime-minutes", type=_positive, default=10.0,
                   help="random MIDI under JACK in real time (0: skip); needs a running JACK server")
    p.add_argument("--baseline-seconds", type=_positive, default=60.0,
                   help="MIDI into an unconnected port before the real-time soak: the xrun baseline")
    p.add_argument("--seed", type=int, default=1)
    p.add_argument("--no-realtime-bursts", action="store_true",
                   help="real time: leave out the soft note floods (steady random play only)")
    p.add_argument("--rebuild-every", type=int, default=3, metavar="N",
                   help="offline: rebuild the voice pool (voices and modes change) at every Nth pluck of the "
                        "held note; 0 never")
    p.add_argument("--no-tracemalloc", action="store_true", help="offline: RSS only (about twice as fast)")
    p.add_argument("--server-log", metavar="FILE", help="the JACK server's output, to count its own XRun lines")
    p.add_argument("--rate", type=int, default=48000, help="the JACK server's sample rate")
    p.add_argument("--block", type=int, default=256, help="the JACK server's period")
    p.add_argument("--workdir", metavar="DIR", help="where the recording and host log go (default: a temp dir)")
    p.add_argument("--json", metavar="FILE", help="also write the figures as JSON ('-' for stdout)")
    return p


def _exit_on_sigterm(signum, _frame) -> None:
    raise SystemExit(128 + signum)  # unwinds, so the real-time run stops its host


def main(argv: list[str] | None = None) -> int:
    args = parser().parse_args(argv)
    signal.signal(signal.SIGTERM, _exit_on_sigterm)
    offline = realtime = None

    def progress(label: str):
        def show(fraction: float) -> None:
            sys.stderr.write(f"\r[soak] {label}: {100 * fraction:5.1f}%")
            sys.stderr.flush()
        return show

    if args.offline_minutes > 0:
        offline_cfg = OfflineConfig(audio_s=60 * args.offline_minutes, seed=args.seed,
                                    trace_memory=not args.no_tracemalloc,
                                    rebuild_every=args.rebuild_every if args.rebuild_every > 0 else 10**9)
        offline = run_offline(offline_cfg, progress("offline"))
        sys.stderr.write("\n")
    if args.realtime_minutes > 0:
        work = args.workdir or tempfile.mkdtemp(prefix="rtvoice-soak-")
        realtime_cfg = RealtimeConfig(seconds=60 * args.realtime_minutes, baseline_s=args.baseline_seconds,
                                      seed=args.seed, rate=args.rate, block=args.block, workdir=work,
                                      server_log=args.server_log, bursts=not args.no_realtime_bursts)
        sys.stderr.write(f"[soak] real time: host log and recording in {work}\n")
        realtime = run_realtime(realtime_cfg, progress("real time"))
        sys.stderr.write("\n")
    print(table(offline, realtime))
    if args.json:
        text = to_json(offline, realtime)
        if args.json == "-":
            print(text)
        else:
            with open(args.json, "w") as fh:
                fh.write(text + "\n")
    fails = (offline.failures() if offline else []) + (realtime.failures() if realtime else [])
    return 1 if fails else 0


if __name__ == "__main__":
    sys.exit(main())
