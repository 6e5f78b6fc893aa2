"""``rtvoice survey``: map how pickup and pluck positions shape the tone of a preset."""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from rtvoice.commands.render import add_sound_options, settings_from_args
from rtvoice.engine import resonance_of
from rtvoice.offline.options import output_path
from rtvoice.offline.render import text_progress
from rtvoice.survey.descriptors import DEFAULT_MISSING_BELOW_DB
from rtvoice.survey.grid import (
    DEFAULT_WINDOW_S,
    DESCRIPTOR_FIELDS,
    default_placement,
    placement_energies,
    survey,
)
from rtvoice.survey.inputs import SurveyError, parse_grid, parse_notes, parse_placement
from rtvoice.survey.model import SENSINGS

PROGRESS_ABOVE_POINTS = 50_000
COMPARE_ROWS = 24


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "survey",
        help="map how pickup and pluck positions shape the tone (CSV, optional PNG)",
        description="Tonal descriptors of every pickup/pluck placement on a grid, computed from "
        "the "
        "engine's string modes. Positions are fractions of the length from the bridge, or "
        "lengths with a unit, mm, cm or in (40:160:2mm, 2:12:0.5cm, 1.5in). Notes are MIDI numbers or "
        "names (E2, F#3, Bb1).",
    )
    p.add_argument(
        "--note",
        action="append",
        type=_notes,
        required=True,
        metavar="NOTE|A:B",
        help="MIDI note number or name (E2, F#3, Bb1; 60 = C4), or an inclusive range A:B[:STEP] "
        "such as E2:E3 (repeatable)",
    )
    p.add_argument(
        "--pickup",
        required=True,
        metavar="GRID",
        help="pickup positions START:STOP:STEP or one value (fraction or mm)",
    )
    p.add_argument("--pluck", metavar="GRID", help="pluck positions (default: the preset's)")
    p.add_argument("--width", metavar="GRID", help="pickup widths (default: the preset's)")
    p.add_argument(
        "--sensing",
        action="append",
        choices=SENSINGS,
        help="pickup sensing (repeatable; default: the preset's)",
    )
    p.add_argument(
        "--pickup-index",
        type=_count(0, 3, "pickup index"),
        metavar="I",
        default=0,
        help="which pickup the grid moves; the others stay as set (default 0)",
    )
    p.add_argument(
        "--window",
        type=_seconds,
        default=DEFAULT_WINDOW_S,
        metavar="SECONDS",
        help=f"listening window from the attack, s (default {DEFAULT_WINDOW_S:g})",
    )
    p.add_argument(
        "--reference",
        metavar="PICKUP[,PLUCK[,WIDTH]]",
        help="placement that level_db is relative to (default: the preset's)",
    )
    p.add_argument(
        "--missing-below",
        type=_decibels,
        default=DEFAULT_MISSING_BELOW_DB,
        metavar="DB",
        help=f"a harmonic this far below the strongest is missing (default {DEFAULT_MISSING_BELOW_DB:g})",
    )
    p.add_argument("-o", "--output", required=True, metavar="MAP.csv", type=output_path, help="CSV file to write")
    p.add_argument("--plot", metavar="MAP.png", type=output_path, help="also draw a heat map (needs the 'plot' extra)")
    p.add_argument(
        "--plot-value",
        choices=DESCRIPTOR_FIELDS,
        default="centroid_hz",
        metavar="NAME",
        help="descriptor the heat map shows: " + ", ".join(DESCRIPTOR_FIELDS) + " (default centroid_hz)",
    )
    p.add_argument(
        "--compare",
        nargs=2,
        metavar=("A", "B"),
        help="two placements PICKUP[,PLUCK[,WIDTH]] whose harmonic levels are listed",
    )
    p.add_argument("--compare-plot", metavar="BARS.png", type=output_path, help="bar chart of the --compare placements")
    p.add_argument("--verify", action="store_true", help="render sample points with the engine and compare")
    p.add_argument(
        "--verify-points",
        type=_count(1, 200, "verify points"),
        default=6,
        metavar="N",
        help="how many grid points --verify renders (default 6)",
    )
    p.add_argument(
        "--jobs",
        type=_count(1, 256, "jobs"),
        metavar="N",
        default=os.cpu_count() or 1,
        help="worker processes for --verify (default: one per core)",
    )
    add_sound_options(p)
    p.set_defaults(func=run_survey)


def run_survey(args: argparse.Namespace) -> int:
    settings = settings_from_args(args)
    out = Path(args.output)
    for option, path in (
        ("--output", out),
        ("--plot", args.plot),
        ("--compare-plot", args.compare_plot),
    ):
        if path and str(Path(path).parent) and not Path(path).parent.is_dir():
            raise SurveyError(option, str(path), "no such folder for the output file")
    if args.compare_plot and not args.compare:
        raise SurveyError("--compare-plot", args.compare_plot, "needs --compare A B")
    scale = settings.get("string.scale_length_mm")
    notes = list(dict.fromkeys(n for group in args.note for n in group))
    pickups = parse_grid(args.pickup, "pickup", scale)
    plucks = parse_grid(args.pluck, "pluck", scale) if args.pluck else None
    widths = parse_grid(args.width, "width", scale) if args.width else None
    own = default_placement(settings, min(args.pickup_index, len(settings.pickups) - 1))
    reference = parse_placement(args.reference, own, scale, "--reference") if args.reference else None
    sensings = list(dict.fromkeys(args.sensing)) if args.sensing else None
    compare = [parse_placement(c, reference or own, scale, "--compare") for c in args.compare or ()]
    if args.plot or args.compare_plot:  # fail before the work, not after it
        from rtvoice.survey.plot import check_map, pyplot

        pyplot("--plot" if args.plot else "--compare-plot", args.plot or args.compare_plot)
        if args.plot:
            check_map(
                args.plot,
                args.plot_value,
                len(notes),
                len(sensings or [0]),
                1 if plucks is None else plucks.size,
                1 if widths is None else widths.size,
            )

    n_points = len(notes) * len(sensings or [0]) * pickups.size
    n_points *= (1 if plucks is None else plucks.size) * (1 if widths is None else widths.size)
    tty = sys.stderr.isatty()
    started = time.perf_counter()
    result = survey(
        settings,
        notes,
        pickups,
        plucks,
        widths,
        sensings,
        pickup_index=args.pickup_index,
        window_s=args.window,
        sample_rate_hz=args.rate,
        reference=reference,
        missing_below_db=args.missing_below,
        progress=text_progress("surveying") if tty and n_points > PROGRESS_ABOVE_POINTS else None,
    )
    from rtvoice.survey.csvout import write_csv

    write_csv(out, result)
    f_r, q = resonance_of(settings)
    electronics = f"resonance {f_r:.0f} Hz, Q {q:.3g}" if f_r > 0 else "bypassed"
    print(
        f"wrote {out} ({result.size} points, {len(notes)} note(s); electronics {electronics}) "
        f"in {time.perf_counter() - started:.2f} s"
    )
    if args.plot:
        from rtvoice.survey.plot import plot_map

        plot_map(result, args.plot, args.plot_value)
        print(f"wrote {args.plot} ({args.plot_value})")
    if compare:
        _compare(args, settings, result, compare)
    if args.verify:
        return _verify(args, result, tty)
    return 0


def _compare(args, settings, result, placements) -> None:
    note, sensing = result.notes[0], result.sensings[0]
    modes, energies = placement_energies(
        settings,
        note,
        placements,
        sensing,
        pickup_index=args.pickup_index,
        window_s=args.window,
        sample_rate_hz=args.rate,
    )
    from rtvoice.survey.plot import comparison_levels, placement_label

    levels = comparison_levels(energies)
    scale = result.scale_length_mm
    print(f"compare (note {note}, {sensing}; dB re the strongest harmonic of both):")
    for i, p in enumerate(placements):
        print(f"  {chr(65 + i)}: {placement_label(p, scale)}")
    print("  harmonic  freq_hz      A_db      B_db    B-A_db")
    for k in range(min(COMPARE_ROWS, modes.count)):
        a, b = levels[0, k], levels[1, k]
        print(f"  {k + 1:8d} {modes.freqs_hz[k]:8.1f} {a:9.2f} {b:9.2f} {b - a:9.2f}")
    if args.compare_plot:
        from rtvoice.survey.plot import plot_comparison

        plot_comparison(args.compare_plot, note, modes.f1_hz, placements, energies, scale)
        print(f"wrote {args.compare_plot}")


def _verify(args, result, tty: bool) -> int:
    from rtvoice.survey.verify import CENTROID_TOLERANCE, LEVEL_TOLERANCE_DB, sample_points, verify

    points = sample_points(result, args.verify_points)
    progress = text_progress(f"rendering {len(points)} point(s)") if tty else None
    rows = verify(result, points, args.block, args.jobs, progress)
    print("verify (measured from rendered audio minus analytic):")
    print(
        "  note sensing       pickup   pluck   width  centroid_hz  d_centroid_%  d_level_db"
        "  d_odd_even_db"
        "  d_electronics_db  worst_harmonic_db  residual_%"
    )
    for r in rows:
        print(
            f"  {r.note:4d} {r.sensing:12s} {r.pickup:7.4f} {r.pluck:7.4f} {r.width:7.4f}"
            f" {r.centroid_hz:12.2f}"
            f" {r.centroid_diff_pct:13.4f} {r.level_diff_db:11.4f} {r.odd_even_diff_db:14.4f}"
            f" {r.electronics_diff_db:17.4f} {r.worst_harmonic_diff_db:18.4f}"
            f" {r.residual_pct:11.2e}"
        )
    worst_c = max(abs(r.centroid_diff_pct) for r in rows)
    worst_l = max(max(abs(r.level_diff_db), abs(r.odd_even_diff_db), abs(r.electronics_diff_db)) for r in rows)
    ok = all(r.within_tolerance for r in rows)
    verdict = "within" if ok else "OUTSIDE"
    print(
        f"verify: {len(rows)} point(s); largest differences {worst_c:.3f} % in centroid, "
        f"{worst_l:.3f} dB "
        f"in level, odd/even and electronics: {verdict} {LEVEL_TOLERANCE_DB:g} dB and "
        f"{100 * CENTROID_TOLERANCE:g} %"
    )
    return 0 if ok else 1


def _notes(text: str) -> list[int]:
    try:
        return parse_notes(text)
    except ValueError as err:
        raise argparse.ArgumentTypeError(str(err)) from None


def _ranged(kind, low, high, what, low_open=False):
    def parse(text: str):
        try:
            value = kind(text)
        except ValueError:
            raise argparse.ArgumentTypeError(f"{what} must be a number, got {text!r}") from None
        if not (low < value <= high if low_open else low <= value <= high):
            bound = f"above {low:g} and at most {high:g}" if low_open else f"between {low:g} and {high:g}"
            raise argparse.ArgumentTypeError(f"{what} must be {bound}, got {text}")
        return value

    return parse


def _count(low: int, high: int, what: str):
    return _ranged(int, low, high, what)


_seconds = _ranged(float, 0.0, 60.0, "listening window (s)", low_open=True)
_decibels = _ranged(float, 0.0, 300.0, "missing threshold (dB)", low_open=True)
