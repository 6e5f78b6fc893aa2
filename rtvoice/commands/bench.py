"""``rtvoice bench``: run the benchmarks and print (or write) the figures."""

from __future__ import annotations

import argparse
import dataclasses
import json
import os
import sys
from collections.abc import Callable
from pathlib import Path

from rtvoice.bench.machine import BLAS_THREADS_ENV
from rtvoice.errors import UserError
from rtvoice.offline.options import whole_number

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


def case_count(text: str) -> int:
    """An argparse type: how many cases of one kind the fit's accuracy study runs (0 or more)."""
    return whole_number(text, "a whole number of takes, 0 or more")


def seed_value(text: str) -> int:
    """An argparse type: the seed of the study's random takes (numpy's SeedSequence takes 0 or more)."""
    return whole_number(text, "a whole number, 0 or more, as the seed")


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
    b.add_argument("--fit", metavar="N", type=case_count,
                   help="run only the accuracy study of `rtvoice fit`: N synthetic single-pickup takes, and a third "
                        "as many two-pickup takes and groups of three takes unless given below")
    b.add_argument("--fit-pairs", metavar="M", type=case_count, help="with --fit: M takes of two pickups mixed")
    b.add_argument("--fit-groups", metavar="G", type=case_count, help="with --fit: G groups of three takes")
    b.add_argument("--seed", metavar="S", type=seed_value,
                   help="with --fit: the seed of the study's random takes (default 1); a seed gives the same table")
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
    _check_fit_options(args)
    argv = [a for a, on in (("--quick", args.quick), ("--json", args.json)) if on]
    if args.write:
        argv += ["--write", args.write]
    if args.host_minutes is not None:
        argv += ["--host-minutes", repr(args.host_minutes)]
    for option, value in (("--fit", args.fit), ("--fit-pairs", args.fit_pairs), ("--fit-groups", args.fit_groups),
                          ("--seed", args.seed)):
        if value is not None:
            argv += [option, str(value)]
    _single_blas_thread(argv)
    if args.fit is not None:
        return _run_fit_study(args, argv)
    from rtvoice.bench import report, runner

    plan = runner.QUICK if args.quick else runner.FULL
    if args.host_minutes is not None:
        plan = dataclasses.replace(plan, realtime_seconds=60.0 * args.host_minutes)
    progress = None if args.json else (lambda msg: print(f"  {msg}", file=sys.stderr, flush=True))
    result = runner.run(plan, progress)
    result["command"] = "rtvoice bench" + "".join(f" {a}" for a in argv)
    return _show(result, args, report.render_text)


def _check_fit_options(args: argparse.Namespace) -> None:
    """The accuracy study's options go together, and only with --json and --write."""
    given = [o for o, v in (("--fit-pairs", args.fit_pairs), ("--fit-groups", args.fit_groups), ("--seed", args.seed))
             if v is not None]
    if args.fit is None and given:
        raise UserError("belongs to the accuracy study: give --fit N as well", key=given[0])
    if args.fit is not None and (args.quick or args.host_minutes is not None):
        raise UserError("runs only the accuracy study of `rtvoice fit`: leave out --quick and --host-minutes",
                        key="--fit")


def _run_fit_study(args: argparse.Namespace, argv: list[str]) -> int:
    """The accuracy study of ``rtvoice fit`` alone: the table (or, with --json, the object) on stdout."""
    import time

    from rtvoice.bench import fit_accuracy, machine
    from rtvoice.bench import fit_accuracy_report as fit_report

    plan = fit_accuracy.StudyPlan.for_singles(args.fit, 1 if args.seed is None else args.seed,
                                              pairs=args.fit_pairs, groups=args.fit_groups)
    facts = machine.describe()
    progress = None if args.json else (lambda msg: print(f"  {msg}", file=sys.stderr, flush=True))
    start = time.perf_counter()
    cases = fit_accuracy.run_study(plan, progress)
    result = fit_report.summarise(cases, plan)
    facts["load_average_at_end"] = machine.load_average()
    result |= {"command": "rtvoice bench" + "".join(f" {a}" for a in argv),
               "wall_s": time.perf_counter() - start, "machine": facts}
    return _show(result, args, fit_report.render_text)


def _show(result: dict, args: argparse.Namespace, as_text: Callable[[dict], str]) -> int:
    """The figures on stdout (the table, or with --json the object), and in --write's file (.json: JSON)."""
    text = json.dumps(result, indent=2) if args.json else as_text(result)
    sys.stdout.write(text if text.endswith("\n") else text + "\n")
    if args.write:
        path = Path(args.write)
        body = json.dumps(result, indent=2) + "\n" if path.suffix == ".json" else as_text(result)
        path.write_text(body, encoding="utf-8")
    return 0
