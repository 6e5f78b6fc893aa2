"""``rtvoice fit``: from a recorded note to the instrument that sounds like it, and the take with
its pickup (or pluck) moved.

Everything is checked and fitted before anything is written: a bad take, a note the instrument
cannot play or a fit that does not converge gives one line on stderr, exit status 2, and no file.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np

from rtvoice.commands.render import add_sound_options, settings_from_args
from rtvoice.engine import CEILING, Settings, parse_length_mm, preset_text, write_atomic
from rtvoice.fit.fitting import FitError, InstrumentFit, fit_takes
from rtvoice.fit.moving import move_partials
from rtvoice.fit.placement import pickup_level_ratio, pluck_level_ratio
from rtvoice.fit.take import Take, check_take, read_take
from rtvoice.offline.options import output_path, whole_number
from rtvoice.offline.render import note_events, render_events
from rtvoice.offline.wav import write_wav

RENDER_SECONDS = 4.0  # the fitted note's length in --render (it rings on until it dies away or 30 s)


def length_mm(text: str) -> float:
    """An argparse type: a length with its unit (162mm, 16.2cm, 6.4in) or a bare number of mm."""
    try:
        value = float(text)
    except ValueError:
        try:
            value = parse_length_mm(text)
        except ValueError as err:
            raise argparse.ArgumentTypeError(str(err)) from None
    if not (math.isfinite(value) and value > 0):
        raise argparse.ArgumentTypeError(f"expected a length above 0, got {text}")
    return value


def _count(text: str) -> int:
    return whole_number(text, "a whole number, 0 or more")


def register(sub: argparse._SubParsersAction) -> None:
    f = sub.add_parser("fit", help="fit the instrument to a recorded note; move its pickup or pluck on the take",
                       description="Fit f0, inharmonicity, the loss law, the pluck and pickup distances, aperture "
                                   "and pickup resonance to one or more takes of one string at one fret, "
                                   "recorded straight from a pickup (WAV).")
    f.add_argument("takes", nargs="+", metavar="TAKE.wav",
                   help="one plucked note per file; several: the same string plucked at different spots")
    add_sound_options(f)
    f.add_argument("--scale-length", type=length_mm, metavar="LENGTH",
                   help="the instrument's scale length, saddle to nut (648mm; a bare number is mm); else the preset's")
    f.add_argument("--string", type=_count, metavar="S", help="the string the take was played on (1 = highest)")
    f.add_argument("--fret", type=_count, metavar="F", help="the fret it was stopped at (0 = open)")
    f.add_argument("--sensing", choices=("velocity", "displacement"),
                   help="how the pickup senses the string (magnetic: velocity); else the preset's first pickup's")
    f.add_argument("--pickup-distance", type=length_mm, metavar="LENGTH",
                   help="the pickup's distance from the saddle when known: the other distance is then the pluck")
    f.add_argument("-o", "--output", type=output_path, metavar="FILE",
                   help="write the fitted preset (.toml), or with --move-pickup / --move-pluck the moved take (.wav)")
    f.add_argument("--report", type=output_path, metavar="FILE.png", help="a picture of the fit")
    f.add_argument("--render", type=output_path, metavar="FILE.wav", help="the fitted instrument playing the note")
    f.add_argument("--json", action="store_true", help="print the estimates as one JSON object")
    f.add_argument("--move-pickup", type=length_mm, metavar="LENGTH",
                   help="the take with its pickup moved to LENGTH from the saddle (needs -o FILE.wav)")
    f.add_argument("--move-pluck", type=length_mm, metavar="LENGTH",
                   help="the take with its pluck moved to LENGTH from the saddle (needs -o FILE.wav)")
    f.set_defaults(func=run_fit)


def _check_outputs(args: argparse.Namespace) -> bool:
    """Whether -o is a moved take (and the options agree); raises FitError before any work."""
    moving = args.move_pickup is not None or args.move_pluck is not None
    if moving:
        if args.output is None or not args.output.lower().endswith(".wav"):
            raise FitError("--move-pickup / --move-pluck write the moved take: give -o MOVED.wav")
        if len(args.takes) != 1:
            raise FitError("--move-pickup / --move-pluck move one take at a time")
    elif args.output is not None and not args.output.lower().endswith(".toml"):
        raise FitError("-o writes the fitted preset: give a .toml file (or --move-pickup with a .wav)",
                       key="-o", value=args.output)
    if args.report is not None and not args.report.lower().endswith(".png"):
        raise FitError("--report draws a PNG picture: give a .png file", key="--report", value=args.report)
    if args.render is not None and not args.render.lower().endswith(".wav"):
        raise FitError("--render writes a WAV file: give a .wav file", key="--render", value=args.render)
    return moving


def run_fit(args: argparse.Namespace) -> int:
    moving = _check_outputs(args)
    base: Settings = settings_from_args(args)
    takes = [read_take(path) for path in args.takes]
    for take in takes:
        check_take(take)
    fit = fit_takes(takes, base, string=args.string, fret=args.fret, sensing=args.sensing,
                    pickup_mm=args.pickup_distance, scale_length_mm=args.scale_length)
    moved = moved_take(fit, takes[0], args.move_pickup, args.move_pluck) if moving else None
    rendered = render_fitted(fit, args.rate) if args.render else None
    # Everything is known: now write.
    if args.report:
        from rtvoice.fit.picture import write_picture  # matplotlib loads only when a picture is asked for
        write_picture(fit, args.report)
    if rendered is not None:
        write_wav(args.render, rendered, args.rate)
    if moved is not None:
        write_wav(args.output, moved, takes[0].sample_rate_hz)
    elif args.output:
        write_atomic(Path(args.output), preset_text(fit.settings).encode())
    if args.json:
        print(json.dumps(fit.summary()))
    else:
        for line in summary_lines(fit):
            print(line)
        for path, what in ((args.output, "moved take" if moving else "fitted preset"), (args.report, "picture"),
                           (args.render, "render of the fitted instrument")):
            if path:
                print(f"wrote {path} ({what})")
    return 0


def moved_take(fit: InstrumentFit, take: Take, pickup_to_mm: float | None, pluck_to_mm: float | None) -> np.ndarray:
    """The take with its measured partials scaled as moving the pickup and/or pluck would; held at
    the output ceiling if the move makes it louder than full scale."""
    analysis = fit.analyses[0]
    used = [q for q in analysis.partials if q.usable]
    k = np.array([q.k for q in used], float)
    ratio = np.ones(k.size)
    length = fit.speaking_length_mm
    p = fit.placement
    if pickup_to_mm is not None:
        ratio *= pickup_level_ratio(k, p.pickup_mm, pickup_to_mm, length, p.aperture_mm or 0.0)
    if pluck_to_mm is not None:
        ratio *= pluck_level_ratio(k, fit.plucks_mm[0], pluck_to_mm, length)
    out = move_partials(take.samples, take.sample_rate_hz, [q.freq_hz for q in used], ratio)
    peak = float(np.max(np.abs(out))) if out.size else 0.0
    if peak > CEILING:  # listening safety: never past the ceiling rtvoice's own output keeps
        out *= CEILING / peak
        sys.stderr.write(f"rtvoice fit: the moved take would peak at {20 * math.log10(peak):.1f} dBFS; "
                         f"scaled to the {20 * math.log10(CEILING):.1f} dBFS ceiling\n")
    return out


def render_fitted(fit: InstrumentFit, rate: int) -> np.ndarray:
    """The fitted instrument playing the take's note on its string (MIDI channel n plays string n)."""
    settings = fit.settings.with_values({"instrument.assign": "channel"}, "fit")
    events = note_events(fit.where.note, 100, RENDER_SECONDS, channel=fit.where.string - 1)
    return render_events(events, settings, rate)


def summary_lines(fit: InstrumentFit) -> list[str]:
    """The estimates as text, each with its uncertainty."""
    s = fit.summary()
    lines = [
        f"note {s['note_name']} on string {s['string']} at fret {s['fret']} ({s['string_chosen']}); "
        f"speaking length {s['speaking_length_mm']:.1f} mm of {s['scale_length_mm']:.1f}",
        f"f0 {s['f0_hz']:.3f} +- {s['f0_sd_hz']:.3f} Hz ({s['cents_off']:+.1f} cents from 12-TET); "
        f"inharmonicity B {s['inharmonicity']:.3e} +- {s['inharmonicity_sd']:.1e}",
        f"T60 {s['t60_low_s']:.2f} +- {s['t60_low_sd_s']:.2f} s at 100 Hz, "
        f"{s['t60_high_s']:.2f} +- {s['t60_high_sd_s']:.2f} s at 2 kHz",
    ]
    plucks = s["pluck_mm"] if isinstance(s["pluck_mm"], list) else [s["pluck_mm"]]
    sds = s["pluck_sd_mm"] if isinstance(s["pluck_sd_mm"], list) else [s["pluck_sd_mm"]]
    lines.append("pluck " + ", ".join(f"{p:.1f} +- {d:.1f}" for p, d in zip(plucks, sds, strict=True))
                 + f" mm, pickup {s['pickup_mm']:.1f} +- {s['pickup_sd_mm']:.1f} mm from the saddle "
                 f"({s['assignment']}: {s['assignment_why']})")
    if s["aperture_mm"] is not None:
        lines.append(f"pickup aperture {s['aperture_mm']:.1f} +- {s['aperture_sd_mm']:.1f} mm")
    if s["resonance_hz"] is not None:
        lines.append(f"pickup resonance {s['resonance_hz']:.0f} +- {s['resonance_sd_hz']:.0f} Hz, "
                     f"Q {s['q']:.2f} +- {s['q_sd']:.2f}")
    else:
        lines.append("pickup resonance: not reached by the partials (the preset's is kept)")
    lines.append(f"the fitted partials explain {100 * s['explained_energy']:.0f} % of the take's energy")
    return lines
