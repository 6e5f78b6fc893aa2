"""``rtvoice bench``: run the benchmarks and print (or write) the figures."""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
from pathlib import Path

from rtvoice.bench.machine import BLAS_THREADS_ENV

MAX_HOST_MINUTES = 60.0


def host_minutes(text: str) -> float:
    """An argparse type: minutes of each condition of the real-time host benchmark, above 0, at most an hour."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number of minutes, got {text!r}") from None
    if not 0 < value <= MAX_HOST_MINUTES:  # also refuses nan
        raise argparse.ArgumentTypeError(f"expected minutes above 0 and at most {MAX_HOST_MINUTES:g}, got {text}")
    return value


def register(sub: argparse._SubParsersAction) -> None:
    from rtvoice.offline.options import output_path  # checked before minutes of measuring, not after

    b = sub.add_parser("bench", help="measure engine cost beside the machine's limit and the baselines")
    b.add_argument("--quick", action="store_true", help="a smaller grid that finishes in under 30 s")
    b.add_argument("--json", action="store_true", help="print one JSON object with every figure")
    b.add_argument("--write", metavar="FILE", type=output_path,
                   help="also write the figures to FILE (.json: JSON, else the table)")
    b.add_argument("--host-minutes", metavar="M", type=host_minutes,
                   help="minutes of each condition of the real-time host benchmark under JACK (default 1; "
                        "--quick skips it unless given): longer runs weigh xrun spells more fairly")
    b.set_defaults(func=run_bench)


def _single_blas_thread(argv: list[str]) -> None:
    """Re-run this command with one BLAS thread when the environment asks for more.

    BLAS reads its thread count when it loads, before any command runs, so the
    only reliable way to measure one core is a fresh process.
    """
    if os.environ.get(BLAS_THREADS_ENV) == "1" or os.environ.get("RTVOICE_BENCH_CHILD"):
        return
    env = dict(os.environ, **{BLAS_THREADS_ENV: "1", "RTVOICE_BENCH_CHILD": "1"})
    os.execve(sys.executable, [sys.executable, "-m", "rtvoice.cli", "bench", *argv], env)


def run_bench(args: argparse.Namespace) -> int:
    argv = [a for a, on in (("--quick", args.quick), ("--json", args.json)) if on]
    if args.write:
        argv += ["--write", args.write]
    if args.host_minutes is not None:
        argv += ["--host-minutes", repr(args.host_minutes)]
    _single_blas_thread(argv)
    from rtvoice.bench import report, runner

    plan = runner.QUICK if args.quick else runner.FULL
    if args.host_minutes is not None:
        plan = dataclasses.replace(plan, realtime_seconds=60.0 * args.host_minutes)
    progress = None if args.json else (lambda msg: print(f"  {msg}", file=sys.stderr, flush=True))
    result = runner.run(plan, progress)
    result["command"] = "rtvoice bench" + "".join(f" {a}" for a in argv)
    text = json.dumps(result, indent=2) if args.json else report.render_text(result)
    sys.stdout.write(text if text.endswith("\n") else text + "\n")
    if args.write:
        path = Path(args.write)
        body = json.dumps(result, indent=2) + "\n" if path.suffix == ".json" else report.render_text(result)
        path.write_text(body, encoding="utf-8")
    return 0
