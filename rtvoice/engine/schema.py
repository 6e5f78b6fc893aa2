"""The parameter schema: one source of truth for presets, the command line, the UI
and controller mapping.

Every parameter has a canonical dotted name, a kind, a unit, a default, a range and
a one-line help. Pickups are a list: their fields are addressed as
``pickup.<index>.<field>`` (for example ``pickup.0.position``). The instrument's strings
are a list too, numbered as players number them, string 1 (the highest) first:
``strings.<n>.<field>`` (for example ``strings.6.diameter_mm``); their values live in
:mod:`rtvoice.engine.stringing`.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from rtvoice.errors import UserError
from rtvoice.physics.strings import MATERIALS

MAX_PICKUPS = 4
MAX_STRINGS = 12
MAX_SHAPE_POINTS = 64
SUGGEST_CUTOFF = 0.75  # difflib ratio: "inharmonicty" -> "inharmonicity" (0.97), not "colour" -> "t60_low"


class UnknownParameter(UserError, KeyError):
    """A parameter name the schema does not have (a KeyError too, for code that looks names up).

    ``name`` is the name asked for, ``reason`` says what is wrong with it and
    ``suggestion`` is the closest real name ('' when none is close).
    """

    def __init__(self, name: str, reason: str, *, shown_name: bool = False):
        self.name = name
        super().__init__(reason, key=name if shown_name else "", suggestion=closest_name(name))


class SettingsError(UserError, ValueError):
    """A value that the schema does not allow, with where it came from (a ValueError too, as before).

    The message is ``SOURCE: KEY = VALUE: REASON``, then ``(allowed: ...)`` and
    ``(did you mean ...?)`` when those fields are set.
    """

    def __init__(self, key: str, value: Any, reason: str, source: str = "", *, allowed: str = "",
                 suggestion: str = ""):
        super().__init__(reason, source=source, key=key, value=value, allowed=allowed, suggestion=suggestion)

    @classmethod
    def unknown_name(cls, err: UnknownParameter, value: Any, source: str) -> SettingsError:
        """The error for a name :func:`lookup` refused, given ``value`` in ``source``."""
        return cls(err.name, value, err.reason, source, suggestion=err.suggestion)


@dataclass(frozen=True)
class Param:
    """One parameter: what it is, in which unit, what values it may take.

    ``kind`` is ``"float"``, ``"int"``, ``"choice"`` or ``"shape"`` (a list of
    [x, y] breakpoints). ``live`` parameters act on ringing notes at once (smoothed);
    the others apply to the next note. ``structural`` ones rebuild the voice pool.
    """

    name: str
    kind: str
    default: Any
    unit: str = ""
    low: float | None = None
    high: float | None = None
    choices: tuple[Any, ...] = ()
    help: str = ""
    live: bool = False
    structural: bool = False
    log_scale: bool = False
    extra: dict[str, Any] = field(default_factory=dict, compare=False)

    def check(self, value: Any) -> Any:
        """Return ``value`` normalised to this parameter's type, or raise ValueError.

        The message says what is allowed; the caller adds the name and the source.
        """
        if self.kind == "float":
            if isinstance(value, bool) or not isinstance(value, int | float):
                raise ValueError(f"expected a number, got {_describe(value)}")
            value = float(value)
            if not math.isfinite(value):
                raise ValueError(f"expected a finite number, got {value!r}")
            self._check_range(value)
            return value
        if self.kind == "int":
            if isinstance(value, bool) or not isinstance(value, int):
                if isinstance(value, float) and value.is_integer():
                    value = int(value)
                else:
                    raise ValueError(f"expected a whole number, got {_describe(value)}")
            if self.choices and value not in self.choices:
                raise ValueError(f"expected one of {', '.join(map(str, self.choices))}, got {value}")
            self._check_range(value)
            return int(value)
        if self.kind == "choice":
            if value not in self.choices:
                allowed = ", ".join(repr(c) for c in self.choices)
                raise ValueError(f"expected one of {allowed}, got {_describe(value)}")
            return value
        if self.kind == "shape":
            return _check_shape(value)
        raise AssertionError(f"unknown kind {self.kind}")

    def _check_range(self, value: float) -> None:
        if self.low is not None and value < self.low or self.high is not None and value > self.high:
            raise ValueError(f"{value:g} is out of range [{self.low:g}, {self.high:g}] {self.unit}".rstrip())

    def describe_range(self) -> str:
        """Human-readable allowed values, for help screens and error messages."""
        if self.kind == "choice" or self.choices:
            return " | ".join(str(c) for c in self.choices)
        if self.kind == "shape":
            return f"list of up to {MAX_SHAPE_POINTS} [x, y] pairs, 0 < x < 1"
        return f"{self.low:g} .. {self.high:g} {self.unit}".rstrip()


def _describe(value: Any) -> str:
    return f"{type(value).__name__} {value!r}"[:80]


def _check_shape(value: Any) -> tuple[tuple[float, float], ...]:
    if not isinstance(value, list | tuple):
        raise ValueError(f"expected a list of [x, y] pairs, got {_describe(value)}")
    if len(value) > MAX_SHAPE_POINTS:
        raise ValueError(f"at most {MAX_SHAPE_POINTS} breakpoints, got {len(value)}")
    points = []
    for item in value:
        if not isinstance(item, list | tuple) or len(item) != 2:
            raise ValueError(f"each breakpoint must be [x, y], got {_describe(item)}")
        x, y = item
        for v in (x, y):
            if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
                raise ValueError(f"breakpoint values must be finite numbers, got {_describe(v)}")
        if not 0.0 < x < 1.0:
            raise ValueError(f"breakpoint x must lie strictly between 0 and 1, got {x:g}")
        if abs(y) > 1.0:
            raise ValueError(f"breakpoint y must lie in [-1, 1], got {y:g}")
        points.append((float(x), float(y)))
    xs = [p[0] for p in points]
    if len(set(xs)) != len(xs):
        raise ValueError("breakpoint x values must be distinct")
    return tuple(sorted(points))


_PARAMS = [
    Param("tuning.a4_hz", "float", 440.0, "Hz", 400.0, 480.0, help="Pitch of MIDI note 69 (A4)."),
    Param("string.modes", "int", 96, "", 1, 512, structural=True,
          help="Most modes per voice; modes at or above 0.45 x the sample rate are left out."),
    Param("string.inharmonicity", "float", 1.0e-4, "", 0.0, 0.01, log_scale=True,
          help="Stiffness coefficient B in f_k = k f0 sqrt(1 + B k^2)."),
    Param("string.t60_low", "float", 6.0, "s", 0.05, 60.0, log_scale=True,
          help="T60 of a partial at 100 Hz."),
    Param("string.t60_high", "float", 1.5, "s", 0.01, 60.0, log_scale=True,
          help="T60 of a partial at 2000 Hz (at most t60_low)."),
    Param("string.release", "float", 0.15, "s", 0.01, 10.0, log_scale=True,
          help="T60 after note-off (a muted string), unless the sustain pedal holds it."),
    Param("string.scale_length_mm", "float", 648.0, "mm", 100.0, 2000.0,
          help="Open speaking length from the bridge saddle to the nut; positions are fractions of it."),
    Param("instrument.assign", "choice", "hand", choices=("open", "hand", "channel"),
          help="open: every note an open string of its own (positions: fractions of its length); hand: the "
               "string where the note is nearest hand.fret; channel: MIDI channel n plays string n."),
    Param("instrument.frets", "int", 22, "", 0, 36, help="Number of frets on the neck."),
    Param("hand.fret", "float", 3.0, "", 0.0, 36.0, live=True,
          help="Where the fretting hand sits, as a fret number; the hand rule gives a note to the string on "
               "which it falls closest to this fret."),
    Param("excitation.kind", "choice", "pluck", choices=("pluck", "strike"),
          help="pluck: initial displacement; strike: initial velocity."),
    Param("excitation.position", "float", 0.2, "", 0.01, 0.99,
          help="Where the string is plucked or struck: from the bridge saddle, as a fraction of the open "
               "scale length (or a length: 162mm)."),
    Param("excitation.width", "float", 0.01, "", 0.0, 0.5,
          help="Contact width of finger, plectrum or hammer, as a fraction of the open scale length "
               "(or a length: 6mm)."),
    Param("excitation.shape", "shape", (),
          help="Optional initial profile as [x, y] breakpoints; replaces the triangle or contact."),
    Param("electronics.resonance_hz", "float", 4200.0, "Hz", 0.0, 20000.0, live=True,
          help="Resonance of the coil and cable low-pass (0, or 200 Hz and up); 0 bypasses it unless a coil is set."),
    Param("electronics.q", "float", 2.0, "", 0.3, 30.0, live=True, log_scale=True,
          help="Quality factor of the resonance."),
    Param("electronics.inductance_h", "float", 0.0, "H", 0.0, 20.0, live=True,
          help="Coil inductance; 0 = off, else at least 0.01 H and f_r, Q come from the circuit values."),
    Param("electronics.resistance_ohm", "float", 6000.0, "ohm", 0.0, 50000.0, live=True,
          help="Coil resistance (circuit mode)."),
    Param("electronics.capacitance_f", "float", 600e-12, "F", 1e-12, 1e-7, live=True, log_scale=True,
          help="Coil plus cable capacitance (circuit mode)."),
    Param("electronics.load_ohm", "float", 1.0e6, "ohm", 1.0e3, 1.0e9, live=True, log_scale=True,
          help="Load resistance of the input the pickup drives (circuit mode)."),
    Param("output.gain_db", "float", -6.0, "dB", -60.0, 12.0, live=True,
          help="Output gain before the limiter (whose ceiling is -1 dBFS)."),
    Param("voices", "int", 16, "", 1, 128, structural=True, help="Polyphony: voices sounding at once."),
]

PICKUP_FIELDS: dict[str, Param] = {
    p.name.split(".")[-1]: p
    for p in [
        Param("pickup.N.position", "float", 0.15, "", 0.005, 0.995, live=True,
              help="Centre of the pickup: from the bridge saddle, as a fraction of the open scale length "
                   "(or a length: 162mm)."),
        Param("pickup.N.slant", "float", 0.0, "", -0.2, 0.2, live=True,
              help="Treble-side minus bass-side distance, as a fraction of the open scale length "
                   "(or a length: -8mm); the centre stays at position."),
        Param("pickup.N.width", "float", 0.02, "", 0.0, 0.5, live=True,
              help="Aperture: the width of string the pickup senses, as a fraction of the open scale length "
                   "(or a length: 13mm)."),
        Param("pickup.N.sensing", "choice", "velocity", choices=("velocity", "displacement"), live=True,
              help="velocity: magnetic (weights mode k by its frequency); displacement: optical."),
        Param("pickup.N.level_db", "float", 0.0, "dB", -60.0, 12.0, live=True, help="Pickup level."),
        Param("pickup.N.polarity", "int", 1, "", -1, 1, choices=(1, -1), live=True,
              help="+1 or -1: a reversed pickup subtracts from the others."),
    ]
}

#: The fields of one string, ``strings.<n>.<field>``. ``None`` is allowed where the default is None
#: (written ``none`` on the command line; left out of a preset): a plain string has no core or wrap,
#: and the tension, B and T60s then come from the gauge and the instrument.
STRING_FIELDS: dict[str, Param] = {
    p.name.split(".")[-1]: p
    for p in [
        Param("strings.N.note", "int", 64, "", 0, 127,
              help="Open note, a MIDI number or a name (E2); string 1 is the highest."),
        Param("strings.N.diameter_mm", "float", 0.254, "mm", 0.05, 5.0,
              help="Outer diameter (or a length: 0.046in)."),
        Param("strings.N.core_mm", "float", None, "mm", 0.05, 5.0,
              help="Core diameter of a wound string; none for a plain string."),
        Param("strings.N.material", "choice", "music_wire", choices=tuple(MATERIALS),
              help="Material of the wire that carries the tension (the core of a wound string)."),
        Param("strings.N.wrap", "choice", None, choices=tuple(MATERIALS),
              help="Wrap wire of a wound string (nickel_plated_steel unless given); none for a plain string."),
        Param("strings.N.tension_n", "float", None, "N", 1.0, 2000.0,
              help="Measured tension, when the gauge alone cannot give it; none: from the gauge."),
        Param("strings.N.inharmonicity", "float", None, "", 0.0, 0.01, log_scale=True,
              help="B of the open string, winning over the gauge's; none: from the gauge (Fletcher 1964)."),
        Param("strings.N.t60_low", "float", None, "s", 0.05, 60.0, log_scale=True,
              help="This string's T60 at 100 Hz; none: string.t60_low."),
        Param("strings.N.t60_high", "float", None, "s", 0.01, 60.0, log_scale=True,
              help="This string's T60 at 2000 Hz; none: string.t60_high."),
    ]
}

PARAMS: dict[str, Param] = {p.name: p for p in _PARAMS}
TOP_LEVEL_TEXT = ("name", "description")
_PICKUP_NAME = re.compile(r"^pickup\.(\d+)\.([a-z_0-9]+)$")
_STRING_NAME = re.compile(r"^strings\.(\d+)\.([a-z_0-9]+)$")


def lookup(name: str) -> tuple[Param, int | None]:
    """(Param, index) for a canonical dotted name; :class:`UnknownParameter` if unknown.

    The index is None for a parameter of the whole sound, the pickup's index (from 0) for
    ``pickup.<i>.<field>`` and the string's number (from 1) for ``strings.<n>.<field>``.
    """
    if name in PARAMS:
        return PARAMS[name], None
    m = _PICKUP_NAME.match(name)
    if m and m.group(2) in PICKUP_FIELDS:
        index = int(m.group(1))
        if index >= MAX_PICKUPS:
            raise UnknownParameter(name, f"at most {MAX_PICKUPS} pickups (index 0..{MAX_PICKUPS - 1})",
                                   shown_name=True)
        return PICKUP_FIELDS[m.group(2)], index
    m = _STRING_NAME.match(name)
    if m and m.group(2) in STRING_FIELDS:
        number = int(m.group(1))
        if not 1 <= number <= MAX_STRINGS:
            raise UnknownParameter(name, f"strings are numbered 1..{MAX_STRINGS} (string 1 the highest)",
                                   shown_name=True)
        return STRING_FIELDS[m.group(2)], number
    raise UnknownParameter(name, f"unknown parameter {name!r}")


def closest_name(name: str) -> str:
    """The real parameter name closest to a mistyped ``name`` ('' when none is close)."""
    names = all_names(1) + [f"strings.1.{f}" for f in STRING_FIELDS]
    index = re.search(r"\.(\d+)\.", name)
    if index and int(index.group(1)) < MAX_PICKUPS:  # keep the pickup the name meant
        names = [n.replace("pickup.0.", f"pickup.{index.group(1)}.") for n in names]
    if index and 1 <= int(index.group(1)) <= MAX_STRINGS:  # ... and the string
        names = [n.replace("strings.1.", f"strings.{index.group(1)}.") for n in names]
    close = difflib.get_close_matches(name, names, n=1, cutoff=SUGGEST_CUTOFF)
    return close[0] if close else ""


def string_names(n_strings: int) -> list[str]:
    """Every ``strings.<n>.<field>`` name of ``n_strings`` strings, string 1 first."""
    return [f"strings.{n}.{f}" for n in range(1, n_strings + 1) for f in STRING_FIELDS]


def all_names(n_pickups: int) -> list[str]:
    """Every canonical name for a setting with ``n_pickups`` pickups, in schema order."""
    names = [n for n in PARAMS if n != "voices"]
    names += [f"pickup.{i}.{f}" for i in range(n_pickups) for f in PICKUP_FIELDS]
    return names + ["voices"]


def default_pickup() -> dict[str, Any]:
    return {f: p.default for f, p in PICKUP_FIELDS.items()}


#: Where added pickups go, as fractions of the string from the bridge: about 40, 100, 160 and 214 mm
#: on a 648 mm scale, bridge, middle and neck places of common electric guitars (from memory, common
#: practice), then the middle of the widest gap left.
ADDED_PICKUP_PLACES = (0.062, 0.154, 0.247, 0.33)
PICKUP_SPACING = 0.03  # an added pickup keeps at least this far (a fraction) from the others


def added_pickup(existing: Sequence[Mapping[str, Any]], end: float = 0.5) -> dict[str, Any]:
    """A new pickup, at a place of its own short of ``end`` (the middle of the string, or where a
    fretted neck's last fret stops it): never stacked on a pickup already there."""
    taken = sorted(t for t in (float(p["position"]) for p in existing) if t < end)
    pickup = default_pickup()
    for place in ADDED_PICKUP_PLACES:
        if place < end and all(abs(place - t) >= PICKUP_SPACING for t in taken):
            pickup["position"] = place
            return pickup
    edges = [0.02, *taken, end]  # between the bridge end and the middle (or the neck), where pickups sit
    gaps = [(b - a, (a + b) / 2) for a, b in zip(edges, edges[1:], strict=False)]
    pickup["position"] = round(max(gaps)[1], 4)
    return pickup
