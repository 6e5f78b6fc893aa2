"""Settings: one validated, immutable value for every schema parameter.

A :class:`Settings` is built from defaults, a preset's nested tables or dotted
``name=value`` changes, and is checked as a whole (single values against the
schema, then the rules that tie values together). Invalid input raises
:class:`SettingsError`, which names the source, the key, the value and what is
allowed; nothing partial is ever returned. Positions, slants and widths: see
:mod:`rtvoice.engine.distances`; the instrument's strings: :mod:`rtvoice.engine.stringing`.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any

from rtvoice.engine import stringing
from rtvoice.engine.controls import check_entries
from rtvoice.engine.distances import (
    NECK_MARGIN_MM,
    SCALE_KEY,
    bare_fraction_keys,
    check_geometry,
    checked_mm,
    fraction_from_text,
    is_fraction_of_length,
    neck_end_mm,
)
from rtvoice.engine.schema import (
    MAX_PICKUPS,
    PARAMS,
    PICKUP_FIELDS,
    STRING_FIELDS,
    TOP_LEVEL_TEXT,
    UnknownParameter,
    added_pickup,
    all_names,
    closest_name,
    default_pickup,
    lookup,
    string_names,
)
from rtvoice.engine.schema import SettingsError as SettingsError  # defined beside the schema, re-exported from here
from rtvoice.engine.stringing import DEFAULT_STRINGS, StringEntry
from rtvoice.physics.damping import loss_coefficients

MAX_TEXT = 2000
#: The preset layout this version writes (``format = 2``: positions, slants and widths in mm). A preset
#: that declares a larger number comes from a newer rtvoice: keys this version does not know are then
#: skipped and reported, not refused. Format 1 (or none) wrote them as bare fractions of the scale length.
PRESET_FORMAT = 2
MM_FORMAT = 2  # the first format that writes positions in mm
MAX_TOML_DEPTH = 32  # tables and arrays nested deeper than any preset needs (tomllib recurses per level)
INT64 = 2**63  # TOML 1.0: integers are 64-bit; larger ones "must" be an error
MIN_RESONANCE_HZ = 200.0  # pickup resonances lie in the kHz range; 0 bypasses the filter
MIN_INDUCTANCE_H = 0.01  # below this a "coil" is no pickup; 0 switches the circuit model off


@dataclass(frozen=True)
class Settings:
    """Every parameter's value. Use :meth:`get` with canonical dotted names."""

    values: Mapping[str, Any]
    pickups: tuple[Mapping[str, Any], ...]
    name: str = ""
    description: str = ""
    controls: tuple[Mapping[str, Any], ...] | None = None  # [[control]] map; None: the default map
    strings: tuple[StringEntry, ...] = field(default=DEFAULT_STRINGS)  # string 1 (the highest) first

    # -- construction -------------------------------------------------------------
    @classmethod
    def defaults(cls) -> Settings:
        values = {n: p.default for n, p in PARAMS.items()}
        return cls(values, (default_pickup(),))

    @classmethod
    def from_nested(cls, data: Mapping[str, Any], source: str = "", base: Settings | None = None,
                    ignored: list[str] | None = None, old_fractions: list[str] | None = None) -> Settings:
        """Settings from preset tables (``[string]``, ``[[pickup]]``, ``[[strings]]``, ...) over ``base``.

        Unknown keys are refused (a misspelt key must not silently leave a sound
        different from what was written), except in a preset whose ``format`` is
        newer than :data:`PRESET_FORMAT`: there they are skipped and their dotted
        names appended to ``ignored`` for the caller to report. A preset from before
        :data:`MM_FORMAT` (``format`` 1 or none) that gives positions, slants or widths
        as bare fractions has their names appended to ``old_fractions``: they are read
        as fractions of the open scale length, as they always were, and unless it sets
        ``instrument.assign`` every note is an open string of its own, as it was written for.
        """
        base = base or cls.defaults()
        declared = _preset_format(data.get("format", PRESET_FORMAT), source)
        newer = declared > PRESET_FORMAT
        skipped: list[str] = []

        def unknown(key: str, value: Any, reason: str = "unknown key", suggestion: str = "") -> None:
            if not newer:
                raise SettingsError(key, value, reason, source, suggestion=suggestion)
            skipped.append(key)

        changes: dict[str, Any] = {}
        name, description = base.name, base.description
        pickups: list[dict[str, Any]] | None = None
        strings: list[dict[str, Any]] | None = None
        controls = base.controls
        for top, value in data.items():
            if top == "format":
                continue
            if top in TOP_LEVEL_TEXT:
                if not isinstance(value, str) or len(value) > MAX_TEXT:
                    raise SettingsError(top, value, f"expected text of at most {MAX_TEXT} characters", source)
                name, description = (value, description) if top == "name" else (name, value)
            elif top == "voices":
                changes["voices"] = value
            elif top == "pickup":
                pickups = _read_pickups(value, source, unknown)
            elif top == "strings":
                strings = stringing.read_tables(value, source, unknown)
            elif top == "control":
                if not isinstance(value, list):
                    raise SettingsError("control", value, "expected [[control]] tables", source)
                controls = tuple(check_entries(value, source))
            elif isinstance(value, Mapping):
                for sub, v in value.items():
                    key = f"{top}.{sub}"
                    try:
                        lookup(key)
                    except UnknownParameter as err:
                        unknown(key, v, err.reason, err.suggestion)
                        continue
                    changes[key] = v
            elif any(n.startswith(f"{top}.") for n in PARAMS):
                raise SettingsError(top, value, f"expected a [{top}] table", source)
            else:
                unknown(top, value)
        if pickups is not None:
            for i, item in enumerate(pickups):
                for f, v in item.items():
                    changes[f"pickup.{i}.{f}"] = v
        if _written_for_open_strings(data, declared):
            changes.setdefault("instrument.assign", "open")
        n_pickups = None if pickups is None else len(pickups)
        settings = base._changed(changes, source, name, description, n_pickups=n_pickups, string_tables=strings)
        if ignored is not None:
            ignored.extend(skipped)
        if old_fractions is not None and ("format" not in data or declared < MM_FORMAT):
            old_fractions.extend(bare_fraction_keys(data))
        return settings if controls is base.controls else replace(settings, controls=controls)

    @classmethod
    def from_toml_text(cls, text: str, source: str = "", ignored: list[str] | None = None,
                       old_fractions: list[str] | None = None) -> Settings:
        """Settings from a preset's TOML text; see :meth:`from_nested` for ``ignored`` and ``old_fractions``."""
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as err:
            raise SettingsError("(file)", "", f"not valid TOML: {err}", source) from None
        except RecursionError:
            raise SettingsError("(file)", "", "tables or arrays nested too deeply", source) from None
        _check_plain_data(data, source)
        return cls.from_nested(data, source, ignored=ignored, old_fractions=old_fractions)

    def with_values(self, changes: Mapping[str, Any], source: str = "") -> Settings:
        """A copy with dotted-name ``changes`` applied; pickups (strings) may grow by appending index n (n + 1)."""
        return self._changed(dict(changes), source, self.name, self.description)

    def with_pickup_count(self, n: int) -> Settings:
        if not 1 <= n <= MAX_PICKUPS:
            raise SettingsError("pickup", n, f"between 1 and {MAX_PICKUPS} pickups", "")
        pickups = list(self.pickups[:n])
        last_mm = neck_end_mm(self.values)  # a fretted neck ends the string sooner than its middle
        end = 0.5 if last_mm is None else min(0.5, (last_mm - NECK_MARGIN_MM) / self.get(SCALE_KEY))
        while len(pickups) < n:
            pickups.append(added_pickup(pickups, end))
        return replace(self, pickups=tuple(pickups))

    def with_string_count(self, n: int, source: str = "") -> Settings:
        """A copy with ``n`` strings: the lowest dropped, or added a fourth below the last (see stringing)."""
        return self._changed({}, source, self.name, self.description, n_strings=n)

    def renamed(self, name: str, description: str | None = None) -> Settings:
        return replace(self, name=name, description=self.description if description is None else description)

    def _changed(self, changes: dict[str, Any], source: str, name: str, description: str,
                 n_pickups: int | None = None, n_strings: int | None = None,
                 string_tables: list[dict[str, Any]] | None = None) -> Settings:
        changes = self._resolve_lengths(changes, source)
        string_changes: dict[str, Any] = {}
        values = dict(self.values)
        pickups = [dict(p) for p in self.pickups]
        if n_pickups is not None:
            pickups = pickups[:n_pickups]
            while len(pickups) < n_pickups:
                pickups.append(added_pickup(pickups))
        for key, raw in changes.items():
            try:
                param, index = lookup(key)
            except UnknownParameter as err:
                raise SettingsError.unknown_name(err, raw, source) from None
            if key.startswith("strings."):
                string_changes[key] = raw  # read by stringing, which knows note names and lengths in mm
                continue
            try:
                value = param.check(raw)
            except (ValueError, OverflowError) as err:  # OverflowError: an int beyond float range
                raise SettingsError(key, raw, str(err), source, allowed=param.describe_range()) from None
            if index is None:
                values[key] = value
                continue
            if index > len(pickups):
                raise SettingsError(key, raw, f"pickup {index} needs pickup {len(pickups)} first", source)
            if index == len(pickups):
                pickups.append(default_pickup())
            pickups[index][key.rsplit(".", 1)[1]] = value
        if not pickups:
            raise SettingsError("pickup", [], "at least one pickup is needed", source)
        strings = stringing.strings_after(self.strings, string_changes, source, tables=string_tables,
                                          count=n_strings)
        settings = Settings(values, tuple(pickups), name, description, self.controls, strings)
        settings._check_together(source)
        return settings

    def _resolve_lengths(self, changes: dict[str, Any], source: str) -> dict[str, Any]:
        """``changes`` with every length typed with a unit (``"40mm"``, ``"25.5in"``) as the schema's number.

        The scale length is resolved first and positions and widths are divided by
        the one these changes leave, so the order they were written in (on the
        command line, in a file) never changes the sound.
        """
        if not any(isinstance(v, str) for v in changes.values()):
            return changes
        out = dict(changes)
        scale_mm = self.values[SCALE_KEY]
        if SCALE_KEY in out:
            scale_mm = out[SCALE_KEY] = checked_mm(PARAMS[SCALE_KEY], SCALE_KEY, out[SCALE_KEY], source)
        for key, raw in out.items():
            if isinstance(raw, str) and is_fraction_of_length(key):
                out[key] = fraction_from_text(lookup(key)[0], key, raw, scale_mm, source)
        return out

    def _check_together(self, source: str) -> None:
        lo, hi = self.values["string.t60_low"], self.values["string.t60_high"]
        try:
            loss_coefficients(lo, hi)
        except ValueError as err:
            raise SettingsError("string.t60_high", hi, str(err), source) from None
        f_r = self.values["electronics.resonance_hz"]
        if 0.0 < f_r < MIN_RESONANCE_HZ:
            raise SettingsError("electronics.resonance_hz", f_r,
                                f"use 0 (bypass) or at least {MIN_RESONANCE_HZ:g} Hz", source)
        ind = self.values["electronics.inductance_h"]
        if 0.0 < ind < MIN_INDUCTANCE_H:
            raise SettingsError("electronics.inductance_h", ind,
                                f"use 0 (circuit off) or at least {MIN_INDUCTANCE_H:g} H", source)
        check_geometry(self, source)
        stringing.check_strings(self, source)

    # -- reading ------------------------------------------------------------------
    def get(self, name: str) -> Any:
        param, index = lookup(name)
        if index is None:
            return self.values[name]
        if name.startswith("strings."):
            if index > len(self.strings):
                raise KeyError(f"{name}: there are {len(self.strings)} strings")
            return self.strings[index - 1].value(name.rsplit(".", 1)[1])
        if index >= len(self.pickups):
            raise KeyError(f"{name}: there are {len(self.pickups)} pickups")
        return self.pickups[index][name.rsplit(".", 1)[1]]

    def __getitem__(self, name: str) -> Any:
        return self.get(name)

    def names(self) -> list[str]:
        """Every canonical name but the strings' (see :meth:`string_names`), in schema order."""
        return all_names(len(self.pickups))

    def string_names(self) -> list[str]:
        """Every ``strings.<n>.<field>`` name of these strings, string 1 first."""
        return string_names(len(self.strings))

    def flat(self) -> dict[str, Any]:
        """Every canonical name but the strings' with its value."""
        return {n: self.get(n) for n in self.names()}

    def differences(self, other: Settings) -> list[str]:
        """Canonical names whose values differ (pickup and string count changes show as ``pickup``, ``strings``)."""
        diff = [n for n in PARAMS if self.values[n] != other.values[n]]
        if len(self.pickups) != len(other.pickups):
            diff.append("pickup")
        for i, (a, b) in enumerate(zip(self.pickups, other.pickups, strict=False)):
            diff += [f"pickup.{i}.{f}" for f in PICKUP_FIELDS if a[f] != b[f]]
        if len(self.strings) != len(other.strings):
            diff.append("strings")
        for n, (c, d) in enumerate(zip(self.strings, other.strings, strict=False), start=1):
            if c != d:  # compared whole first: differences() runs at every change, most leave the strings be
                diff += [f"strings.{n}.{f}" for f in STRING_FIELDS if c.value(f) != d.value(f)]
        return diff

    def to_nested(self) -> dict[str, Any]:
        """Preset tables for writing as TOML (every value, so a preset is complete)."""
        out: dict[str, Any] = {}
        if self.name:
            out["name"] = self.name
        if self.description:
            out["description"] = self.description
        out["voices"] = self.values["voices"]
        for key, value in self.values.items():
            if key == "voices":
                continue
            table, sub = key.split(".", 1)
            if PARAMS[key].kind == "shape":
                value = [list(p) for p in value]
            out.setdefault(table, {})[sub] = value
        out["pickup"] = [dict(p) for p in self.pickups]
        out["strings"] = [s.table() for s in self.strings]
        if self.controls is not None:
            out["control"] = [dict(c) for c in self.controls]
        return out


def _read_pickups(value: Any, source: str, unknown: Callable[[str, Any, str, str], None]) -> list[dict[str, Any]]:
    if not isinstance(value, list) or not all(isinstance(v, Mapping) for v in value):
        raise SettingsError("pickup", value, "expected [[pickup]] tables", source)
    if not 1 <= len(value) <= MAX_PICKUPS:
        raise SettingsError("pickup", f"{len(value)} tables", f"between 1 and {MAX_PICKUPS} pickups", source)
    out = []
    for i, item in enumerate(value):
        kept = {}
        for f in item:
            if f in PICKUP_FIELDS:
                kept[f] = item[f]
            else:
                unknown(f"pickup.{i}.{f}", item[f], "unknown key", closest_name(f"pickup.{i}.{f}"))
        out.append(kept)
    return out


def _written_for_open_strings(data: Mapping[str, Any], declared: int) -> bool:
    """A preset from before the instrument (``format`` 1, or none and positions as bare fractions) that
    does not choose how notes are placed: it was written for every note an open string of its own,
    and plays so still (its pluck may sit past where a fretted neck ends)."""
    if "format" in data and declared >= MM_FORMAT:
        return False
    if "format" not in data and not bare_fraction_keys(data):
        return False
    instrument = data.get("instrument")
    return not (isinstance(instrument, Mapping) and "assign" in instrument)


def _preset_format(value: Any, source: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or not 1 <= value < INT64:
        raise SettingsError("format", value, f"expected a whole number >= 1 (this version writes {PRESET_FORMAT})",
                            source)
    return value


def _check_plain_data(data: Any, source: str, depth: int = 0, where: str = "") -> None:
    """Refuse what TOML allows but no preset holds: deep nesting, integers beyond 64 bits."""
    if depth > MAX_TOML_DEPTH:
        raise SettingsError(where or "(file)", "...", f"nested more than {MAX_TOML_DEPTH} levels deep", source)
    if isinstance(data, Mapping):
        for key, value in data.items():
            _check_plain_data(value, source, depth + 1, f"{where}.{key}" if where else str(key))
    elif isinstance(data, list):
        for value in data:
            _check_plain_data(value, source, depth + 1, where)
    elif isinstance(data, int) and not isinstance(data, bool) and not -INT64 <= data < INT64:
        raise SettingsError(where, data, "a whole number beyond 64 bits (TOML 1.0 integers are 64-bit)", source)


def parse_assignment(text: str, source: str = "") -> tuple[str, Any]:
    """Parse ``KEY=VALUE`` from the command line into (name, typed value).

    VALUE is read as a TOML value when it parses as one (numbers, quoted strings,
    lists), else as a bare word; lengths keep their unit (``40mm``, ``1.5in``) as
    text until the settings convert them with the scale length.
    """
    if "=" not in text:
        raise SettingsError(text, "", "expected KEY=VALUE", source)
    key, raw = (s.strip() for s in text.split("=", 1))
    try:
        lookup(key)
    except UnknownParameter as err:
        raise SettingsError.unknown_name(err, raw, source) from None
    try:
        value = tomllib.loads(f"v = {raw}")["v"]
    except tomllib.TOMLDecodeError:
        value = raw
    if isinstance(value, float) and not math.isfinite(value):
        raise SettingsError(key, raw, "expected a finite number", source)
    return key, value


def apply_assignments(settings: Settings, assignments: Iterable[str], source: str = "--set") -> Settings:
    """Apply ``KEY=VALUE`` strings (for a key given twice, the last wins).

    Lengths typed with a unit (``40mm``, ``4cm``, ``1.5in``) are converted after
    every assignment is read, with the scale length they leave: the order of the
    assignments never matters.
    """
    changes: dict[str, Any] = {}
    for text in assignments:
        key, value = parse_assignment(text, source)
        changes[key] = value
    return settings.with_values(changes, source)
