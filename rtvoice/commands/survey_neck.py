"""``rtvoice survey --neck``: one placement across every string and fret, or two compared."""

from __future__ import annotations

import argparse
import time
from pathlib import Path

from rtvoice.engine import Settings, apply_assignments
from rtvoice.errors import NO_VALUE
from rtvoice.survey.inputs import SurveyError
from rtvoice.survey.neck import DEFAULT_HARMONICS, DEFAULT_LOST_BY_DB, NeckComparison, NeckMap, neck_cells
from rtvoice.survey.placing import fretted_settings

#: Options of the pickup x pluck grid that a neck map does not take (dest, option).
GRID_ONLY = (
    ("note", "--note"),
    ("pickup", "--pickup"),
    ("pluck", "--pluck"),
    ("width", "--width"),
    ("sensing", "--sensing"),
    ("reference", "--reference"),
    ("compare", "--compare"),
    ("string", "--string"),
    ("fret", "--fret"),
)


def run_neck(args: argparse.Namespace, settings: Settings) -> int:
    """Map the placement of ``settings`` across the neck (and ``--against`` another); write the CSV
    and the picture. Every input is checked before anything is computed or written."""
    for dest, option in GRID_ONLY:
        if getattr(args, dest) is not None:
            raise SurveyError(option, NO_VALUE, "--neck maps the placement the preset and --set give; "
                              "leave the grid options out (or --string S --fret F for a grid at one note)")
    if args.verify:
        raise SurveyError("--verify", NO_VALUE, "renders points of a pickup x pluck grid; it does not go with --neck")
    if not 0 <= args.pickup_index < len(settings.pickups):
        raise SurveyError("--pickup-index", args.pickup_index,
                          f"the settings have {len(settings.pickups)} pickup(s): use 0 .. {len(settings.pickups) - 1}")
    if args.against is None and (args.harmonics is not None or args.lost_by is not None):
        raise SurveyError("--harmonics" if args.harmonics is not None else "--lost-by", NO_VALUE,
                          "goes with --against")
    settings = fretted_settings(settings, "--neck")
    strings, frets = neck_cells(settings, args.strings, args.frets)
    against = None
    if args.against:
        changes = [text for group in args.against for text in group]
        against = fretted_settings(apply_assignments(settings, changes, source="--against"), "--against")
    if args.plot:  # fail before the work, not after it
        from rtvoice.survey.plot import pyplot

        pyplot("--plot", args.plot)
    started = time.perf_counter()
    options = dict(pickup_index=args.pickup_index, window_s=args.window, sample_rate_hz=args.rate,
                   missing_below_db=args.missing_below)
    neck: NeckMap | NeckComparison
    if against is None:
        from rtvoice.survey.neck import survey_neck

        neck = survey_neck(settings, strings, frets, **options)
        main = neck
    else:
        from rtvoice.survey.neck import compare_neck

        neck = compare_neck(settings, against, strings, frets,
                            harmonics=DEFAULT_HARMONICS if args.harmonics is None else args.harmonics,
                            lost_by_db=DEFAULT_LOST_BY_DB if args.lost_by is None else args.lost_by, **options)
        main = neck.main
    from rtvoice.survey.neck_csv import write_neck_csv

    out = Path(args.output)
    write_neck_csv(out, neck)
    rows, cols = main.shape
    summary = f"wrote {out} ({rows} string(s) x {cols} fret(s)"
    if isinstance(neck, NeckComparison):
        losing = int(neck.lost.any(axis=-1).sum())
        summary += f"; {losing} note(s) lose one of harmonics 1..{neck.harmonics} against the other placement"
    print(f"{summary}) in {time.perf_counter() - started:.2f} s")
    if args.plot:
        from rtvoice.survey.neck_plot import plot_neck, plot_neck_difference

        if isinstance(neck, NeckComparison):
            plot_neck_difference(neck, args.plot, args.plot_value)
        else:
            plot_neck(neck, args.plot, args.plot_value)
        print(f"wrote {args.plot} ({'difference of ' if against is not None else ''}{args.plot_value})")
    return 0
