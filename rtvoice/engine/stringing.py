"""The instrument's strings: one record per string, read, checked, and the physics each gives.

Strings are numbered as players number them (common practice): string 1 is the highest,
the last string the lowest, and their open notes never rise from string 1 down. Each
:class:`StringEntry` holds its open note and construction (gauge, core, materials) and may
give a measured tension, its own stiffness B and its own T60s; what it leaves out comes
from the gauge (Mersenne-Taylor, Fletcher 1964: :mod:`rtvoice.physics.strings`) or from
the instrument's ``string.*`` parameters.

Names: ``strings.<n>.<field>`` (n from 1), fields and ranges in
:data:`~rtvoice.engine.schema.STRING_FIELDS`. Diameters are millimetres, or a length with
its unit (``0.046in``); notes are MIDI numbers or names (``E2``); ``none`` clears a field
that may be left out. In a preset each ``[[strings]]`` table is one whole string (fields
left out are None), so a preset says exactly which strings it has.

A string stressed past its material's strength would break; that is refused only where
the strings are played (``instrument.assign`` other than ``open``): open, every note is
an open string of its own, and presets written before there were strings keep loading
whatever their scale length.
"""

from __future__ import annotations

import functools
from collections.abc import Callable, Mapping
from dataclasses import asdict, dataclass
from typing import Any, Protocol

from rtvoice.engine.distances import SCALE_KEY, checked_mm, first_changed
from rtvoice.engine.schema import MAX_STRINGS, STRING_FIELDS, SettingsError, closest_name
from rtvoice.engine.units import parse_note
from rtvoice.physics.damping import loss_coefficients
from rtvoice.physics.strings import (
    DEFAULT_SIX_STRING,
    MATERIALS,
    StringKind,
    StringPhysics,
    StringSpec,
    string_physics,
)

DEFAULT_WRAP = "nickel_plated_steel"  # the wrap of the common light electric set (physics.strings)
NONE_WORD = "none"  # typed for a field that may be left out
MM_PER_M = 1000.0


@dataclass(frozen=True)
class StringEntry:
    """One string: open MIDI note and construction; None fields come from the gauge or the instrument.

    ``core_mm`` set makes a wound string (its ``wrap`` then names the wrap wire's material);
    ``material`` is the wire carrying the tension (the core of a wound string). ``tension_n``
    and ``inharmonicity`` (B of the open string) win over what the gauge gives; ``t60_low``
    and ``t60_high`` (s) over ``string.t60_low`` and ``string.t60_high``.
    """

    note: int
    diameter_mm: float
    core_mm: float | None = None
    material: str = "music_wire"
    wrap: str | None = None
    tension_n: float | None = None
    inharmonicity: float | None = None
    t60_low: float | None = None
    t60_high: float | None = None

    @property
    def wound(self) -> bool:
        return self.core_mm is not None

    def value(self, field: str) -> Any:
        """The value of ``field`` (one of :data:`~rtvoice.engine.schema.STRING_FIELDS`)."""
        return asdict(self)[field]

    def table(self) -> dict[str, Any]:
        """The fields a preset's ``[[strings]]`` table writes: every one that is not None."""
        return {f: v for f, v in asdict(self).items() if v is not None}

    def spec(self) -> StringSpec:
        """The physics' description of this string (SI units)."""
        kind = StringKind.WOUND if self.core_mm is not None else StringKind.PLAIN
        return StringSpec(
            open_midi_note=self.note, kind=kind, outer_diameter_m=self.diameter_mm / MM_PER_M,
            core_diameter_m=None if self.core_mm is None else self.core_mm / MM_PER_M,
            core_material=self.material, wrap_material=self.wrap, tension_n=self.tension_n,
            inharmonicity=self.inharmonicity,
        )


def _entry_of(spec: StringSpec) -> StringEntry:
    # Rounded to the nanometre: 0.010 in is 0.254 mm, not 0.25400000000000006.
    core = None if spec.core_diameter_m is None else round(spec.core_diameter_m * MM_PER_M, 6)
    return StringEntry(spec.open_midi_note, round(spec.outer_diameter_m * MM_PER_M, 6), core, spec.core_material,
                       spec.wrap_material, spec.tension_n, spec.inharmonicity)


#: The default strings: :data:`rtvoice.physics.strings.DEFAULT_SIX_STRING`, E4 B3 G3 D3 A2 E2.
DEFAULT_STRINGS: tuple[StringEntry, ...] = tuple(_entry_of(s) for s in DEFAULT_SIX_STRING.strings)


class Strung(Protocol):
    """What the string functions read of a :class:`~rtvoice.engine.settings.Settings`."""

    @property
    def values(self) -> Mapping[str, Any]: ...

    @property
    def strings(self) -> tuple[StringEntry, ...]: ...


# -- reading ---------------------------------------------------------------------------------
def field_value(field: str, raw: Any, key: str, source: str) -> Any:
    """``raw`` as the value of string field ``field``, or SettingsError naming ``key``."""
    param = STRING_FIELDS[field]
    if param.default is None and (raw is None or isinstance(raw, str) and raw.strip().lower() == NONE_WORD):
        return None
    if field == "note" and isinstance(raw, str):
        try:
            return parse_note(raw)
        except ValueError as err:
            raise SettingsError(key, raw, str(err), source, allowed="a MIDI note 0 .. 127 or a name like E2") from None
    if param.unit == "mm":
        return checked_mm(param, key, raw, source)
    try:
        return param.check(raw)
    except (ValueError, OverflowError) as err:
        allowed = param.describe_range() + (f" or {NONE_WORD}" if param.default is None else "")
        raise SettingsError(key, raw, str(err), source, allowed=allowed) from None


def read_tables(value: Any, source: str, unknown: Callable[[str, Any, str, str], None]) -> list[dict[str, Any]]:
    """The ``[[strings]]`` tables of a preset, with their fields still as written.

    Unknown fields go to ``unknown(key, value, reason, suggestion)``, which refuses them
    or (in a preset from a newer rtvoice) notes them as skipped.
    """
    if not isinstance(value, list) or not all(isinstance(v, Mapping) for v in value):
        raise SettingsError("strings", value, "expected [[strings]] tables", source)
    if not 1 <= len(value) <= MAX_STRINGS:
        raise SettingsError("strings", f"{len(value)} tables", f"between 1 and {MAX_STRINGS} strings", source)
    out = []
    for n, item in enumerate(value, start=1):
        kept = {}
        for f in item:
            if f in STRING_FIELDS:
                kept[f] = item[f]
            else:
                key = f"strings.{n}.{f}"
                unknown(key, item[f], "unknown key", closest_name(key))
        for needed in ("note", "diameter_mm"):
            if needed not in kept:
                raise SettingsError(f"strings.{n}.{needed}", "(missing)",
                                    "each [[strings]] table gives at least note and diameter_mm", source)
        out.append(kept)
    return out


def strings_after(strings: tuple[StringEntry, ...], changes: Mapping[str, Any], source: str, *,
                  tables: list[dict[str, Any]] | None = None, count: int | None = None) -> tuple[StringEntry, ...]:
    """``strings`` with whole ``tables`` (from a preset), a new ``count`` and dotted ``changes`` applied.

    A string one past the last is added as a copy of the last one's construction (the
    change sets its note); a shorter count drops strings from the low end, a longer one adds
    copies a fourth lower each (adjacent guitar strings are mostly a fourth apart, common
    practice). A wound string without a wrap gets :data:`DEFAULT_WRAP`; clearing a core also
    clears the wrap unless the same changes set one.
    """
    if not changes and tables is None and count is None:
        return strings  # the usual case at a controller's every move: nothing to rebuild
    wrap_given: set[int] = set()
    if tables is None:
        rows = [asdict(s) for s in strings]
    else:
        rows = []
        for n, table in enumerate(tables, start=1):
            row: dict[str, Any] = {f: STRING_FIELDS[f].default for f in STRING_FIELDS}
            row.update({f: field_value(f, v, f"strings.{n}.{f}", source) for f, v in table.items()})
            rows.append(row)
            wrap_given.add(n)
    if count is not None:
        if isinstance(count, bool) or not isinstance(count, int) or not 1 <= count <= MAX_STRINGS:
            raise SettingsError("strings", count, f"between 1 and {MAX_STRINGS} strings", source)
        del rows[count:]
        while len(rows) < count:
            rows.append({**rows[-1], "note": max(rows[-1]["note"] - 5, 0)})
    by_string: dict[int, dict[str, Any]] = {}
    for key, raw in changes.items():
        _, number, field = key.split(".")
        by_string.setdefault(int(number), {})[field] = raw
    for n in sorted(by_string):
        if n > len(rows) + 1:
            first = next(iter(by_string[n]))
            raise SettingsError(f"strings.{n}.{first}", by_string[n][first],
                                f"string {n} needs string {len(rows) + 1} first", source)
        if n == len(rows) + 1:
            rows.append(dict(rows[-1]))
        for field, raw in by_string[n].items():
            rows[n - 1][field] = field_value(field, raw, f"strings.{n}.{field}", source)
        if "wrap" in by_string[n]:
            wrap_given.add(n)
    for n, row in enumerate(rows, start=1):
        if row["core_mm"] is None and n not in wrap_given:
            row["wrap"] = None
        elif row["core_mm"] is not None and row["wrap"] is None:
            row["wrap"] = DEFAULT_WRAP
    return tuple(StringEntry(**row) for row in rows)


# -- checks ----------------------------------------------------------------------------------
def check_strings(settings: Strung, source: str) -> None:
    """Each string's construction and T60s; their order; where they are played, that none would break."""
    values, strings = settings.values, settings.strings
    for n, entry in enumerate(strings, start=1):
        key = f"strings.{n}"
        if entry.core_mm is not None and entry.core_mm >= entry.diameter_mm:
            raise SettingsError(f"{key}.core_mm", entry.core_mm,
                                f"the core must be thinner than the string ({entry.diameter_mm:g} mm)", source)
        if entry.core_mm is None and entry.wrap is not None:
            raise SettingsError(f"{key}.wrap", entry.wrap, "a plain string has no wrap: a wound string needs "
                                "core_mm too", source, allowed=f"{key}.core_mm set, or wrap none")
        if n > 1 and entry.note > strings[n - 2].note:
            raise SettingsError(f"{key}.note", entry.note, f"above string {n - 1}'s open note "
                                f"({strings[n - 2].note}): string 1 is the highest and notes fall from there",
                                source, allowed=f"0 .. {strings[n - 2].note}")
        low, high = t60s_of(settings, n)
        try:
            loss_coefficients(low, high)
        except ValueError as err:
            which = f"{key}.t60_high" if entry.t60_high is not None else f"{key}.t60_low"
            raise SettingsError(which, high if which.endswith("high") else low, str(err), source) from None
    if values["instrument.assign"] == "open":
        return
    for n, entry in enumerate(strings, start=1):
        physics = string_physics_of(settings, n)
        if physics.over_strength:
            key = _break_key(settings, n)
            material = MATERIALS[entry.material].name
            raise SettingsError(
                key, _value(settings, key),
                f"string {n} would break on the {values[SCALE_KEY]:g} mm scale: stress "
                f"{physics.stress_pa / 1e6:.0f} MPa above the material's strength "
                f"{physics.strength_pa / 1e6:.0f} MPa ({material})", source,
                allowed="a lower note, a shorter scale, a lower tension or a stronger material")


def _break_key(settings: Strung, n: int) -> str:
    """The key to name for string ``n`` breaking: its own, unless it is a default string on a changed instrument."""
    entry = settings.strings[n - 1]
    if n > len(DEFAULT_STRINGS) or entry != DEFAULT_STRINGS[n - 1]:
        return f"strings.{n}.tension_n" if entry.tension_n is not None else f"strings.{n}.note"
    return first_changed(lambda k: settings.values[k], (SCALE_KEY, "tuning.a4_hz", "instrument.assign"))


def _value(settings: Strung, key: str) -> Any:
    if key.startswith("strings."):
        _, number, field = key.split(".")
        return settings.strings[int(number) - 1].value(field)
    return settings.values[key]


# -- what the strings give --------------------------------------------------------------------
def _entry(settings: Strung, n: int) -> StringEntry:
    if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= len(settings.strings):
        raise KeyError(f"string {n!r}: there are {len(settings.strings)} strings (numbered from 1)")
    return settings.strings[n - 1]


@functools.lru_cache(maxsize=256)
def _physics(entry: StringEntry, scale_length_mm: float, a4_hz: float) -> StringPhysics:
    return string_physics(entry.spec(), scale_length_mm / MM_PER_M, a4_hz)


def string_physics_of(settings: Strung, n: int) -> StringPhysics:
    """Tension, mass per length, B and stress of open string ``n`` (from 1) on the instrument.

    On ``string.scale_length_mm`` tuned with ``tuning.a4_hz``; see
    :func:`rtvoice.physics.strings.string_physics`. Cached: cheap at every settings change.
    """
    values = settings.values
    return _physics(_entry(settings, n), float(values[SCALE_KEY]), float(values["tuning.a4_hz"]))


def inharmonicity_of(settings: Strung, n: int) -> float:
    """B of open string ``n``: the string's own if given, else its gauge's (Fletcher 1964)."""
    entry = _entry(settings, n)
    if entry.inharmonicity is not None:
        return entry.inharmonicity
    return string_physics_of(settings, n).inharmonicity


def t60s_of(settings: Strung, n: int) -> tuple[float, float]:
    """(T60 at 100 Hz, T60 at 2000 Hz) in s of string ``n``: its own where given, else the instrument's."""
    entry = _entry(settings, n)
    low = entry.t60_low if entry.t60_low is not None else settings.values["string.t60_low"]
    high = entry.t60_high if entry.t60_high is not None else settings.values["string.t60_high"]
    return float(low), float(high)


__all__ = ["DEFAULT_STRINGS", "DEFAULT_WRAP", "MAX_STRINGS", "STRING_FIELDS", "StringEntry", "Strung", "check_strings",
           "field_value", "inharmonicity_of", "read_tables", "string_physics_of", "strings_after", "t60s_of"]
