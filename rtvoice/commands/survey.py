"""``rtvoice survey``: map how pickup and pluck positions shape the tone of a preset."""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

from rtvoice.commands.render import add_sound_options, settings_from_args
from rtvoice.engine import resonance_of
from rtvoice.errors import NO_VALUE
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
from rtvoice.survey.neck import DEFAULT_HARMONICS, DEFAULT_LOST_BY_DB
from rtvoice.survey.placing import check_placement, fretted_settings, is_fretted, place_at

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
        "names (E2, F#3, Bb1). With --neck: one placement (the preset's, changed by --set) across "
        "every string and fret of the instrument.",
    )
    p.add_argument(
        "--note",
        action="append",
        type=_notes,
        metavar="NOTE|A:B",
        help="MIDI note number or name (E2, F#3, Bb1; 60 = C4), or an inclusive range A:B[:STEP] "
        "such as E2:E3 (repeatable; needed unless --string and --fret, or --neck)",
    )
    p.add_argument(
        "--pickup",
        metavar="GRID",
        help="pickup positions START:STOP:STEP or one value (fraction or mm; needed unless --neck)",
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
    p.add_argument("--string", type=_count(1, 12, "string"), metavar="S",
                   help="survey the grid for the note at string S (1 = the highest) and --fret F, positions "
                        "fixed on the body")
    p.add_argument("--fret", type=_count(0, 36, "fret"), metavar="F", help="the fret of --string (0 = open)")
    p.add_argument("--neck", action="store_true",
                   help="map the placement the preset and --set give across the neck: every string x fret")
    p.add_argument("--strings", type=_number_list("strings", 1), metavar="LIST",
                   help="strings --neck maps: 1,2,6, ranges 1:3, or all (default)")
    p.add_argument("--frets", type=_number_list("frets", 0), metavar="LIST",
                   help="frets --neck maps: 0:12, 0,5,12, or all (default)")
    p.add_argument("--against", action="append", nargs="+", type=_assignment, metavar="KEY=VALUE",
                   help="with --neck: a second placement, the same settings with these changes "
                        "(pickup.0.position=120mm); the CSV gains its values, the differences and lost harmonics")
    p.add_argument("--harmonics", type=_count(1, 512, "harmonics"), metavar="N",
                   help=f"with --against: how many of the lowest harmonics the lost and gained lists look at "
                        f"(default {DEFAULT_HARMONICS})")
    p.add_argument("--lost-by", type=_decibels, metavar="DB",
                   help=f"with --against: a harmonic this much weaker than at the other placement is lost "
                        f"(default {DEFAULT_LOST_BY_DB:g})")
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
    if args.neck:
        from rtvoice.commands.survey_neck import run_neck

        return run_neck(args, settings)
    _only_with(args, "--neck", NECK_ONLY)
    _only_with(args, "--neck and --against", AGAINST_ONLY)
    places = None
    if args.string is not None or args.fret is not None:
        if args.string is None or args.fret is None:
            missing = "--fret" if args.fret is None else "--string"
            raise SurveyError(missing, NO_VALUE, "--string S and --fret F name one note together: give both")
        if args.note:
            raise SurveyError("--note", NO_VALUE, "--string and --fret name the note: leave --note out")
        settings = fretted_settings(settings, "--string")
        places = [place_at(settings, args.string, args.fret)]
        notes = [places[0].note]
    elif not args.note:
        raise SurveyError("--note", NO_VALUE, "give the note(s) to survey, or --string S --fret F, or --neck")
    else:
        notes = list(dict.fromkeys(n for group in args.note for n in group))
    if args.pickup is None:
        raise SurveyError("--pickup", NO_VALUE, "give the pickup positions to survey (a grid or one value), or --neck")
    scale = settings.get("string.scale_length_mm")
    pickups = parse_grid(args.pickup, "pickup", scale)
    plucks = parse_grid(args.pluck, "pluck", scale) if args.pluck else None
    widths = parse_grid(args.width, "width", scale) if args.width else None
    own = default_placement(settings, min(args.pickup_index, len(settings.pickups) - 1))
    reference = parse_placement(args.reference, own, scale, "--reference") if args.reference else None
    sensings = list(dict.fromkeys(args.sensing)) if args.sensing else None
    compare = [parse_placement(c, reference or own, scale, "--compare") for c in args.compare or ()]
    if is_fretted(settings):  # the comparison runs after the CSV is written: check its placements now
        key = f"pickup.{args.pickup_index}"
        for c in compare:
            check_placement(settings, {f"{key}.position": c.pickup, "excitation.position": c.pluck,
                                       f"{key}.width": c.width}, "--compare", str(c))
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
        places=places,
        past_last_fret=False,  # only placements the settings take, as the engine would play them
    )
    from rtvoice.survey.csvout import write_csv

    write_csv(out, result)
    f_r, q = resonance_of(settings)
    electronics = f"resonance {f_r:.0f} Hz, Q {q:.3g}" if f_r > 0 else "bypassed"
    where = ""
    if places:
        where = f" at string {places[0].string}, fret {places[0].fret}"
    print(
        f"wrote {out} ({result.size} points, {len(notes)} note(s){where}; electronics {electronics}) "
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
        place=result.place(0),
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


#: Options that only a neck map takes, and those only its comparison takes (dest, option).
NECK_ONLY = (("strings", "--strings"), ("frets", "--frets"), ("against", "--against"))
AGAINST_ONLY = (("harmonics", "--harmonics"), ("lost_by", "--lost-by"))


def _only_with(args: argparse.Namespace, needed: str, options: tuple[tuple[str, str], ...]) -> None:
    for dest, option in options:
        if getattr(args, dest) is not None:
            raise SurveyError(option, NO_VALUE, f"goes with {needed}")


def _number_list(what: str, low: int):
    """Parse ``all`` or whole numbers and inclusive ranges A:B, comma-separated (None: all)."""

    def parse(text: str) -> list[int] | None:
        if text.strip().lower() == "all":
            return None
        out: list[int] = []
        for part in text.split(","):
            ends = part.split(":")
            try:
                first, last = int(ends[0]), int(ends[-1])
            except ValueError:
                raise argparse.ArgumentTypeError(
                    f"{what} are whole numbers, ranges A:B or all (1,2,6 or 0:12), got {text!r}") from None
            if len(ends) > 2 or last < first or first < low or last > 36:
                raise argparse.ArgumentTypeError(f"{what}: {part!r} is not a number or a range A:B within "
                                                 f"{low} .. 36")
            out.extend(range(first, last + 1))
        return out

    return parse


def _assignment(text: str) -> str:
    key, sep, _ = text.partition("=")
    if not sep or not key.strip():
        raise argparse.ArgumentTypeError(f"expected KEY=VALUE (pickup.0.position=120mm), got {text!r}")
    return text


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
