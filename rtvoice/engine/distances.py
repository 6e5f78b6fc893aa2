"""Distances along the string: the pluck and the pickups, typed, written and placed on the neck.

Settings keep the pluck's and each pickup's position, width and slant as fractions of
the open scale length (``string.scale_length_mm``), measured from the bridge saddle. People
type them as fractions or as lengths with a unit (``162mm``, ``-8mm``); presets write them
in millimetres, with the shortest decimal that reads back to the very same fraction.

A pickup's slant is its treble-side distance minus its bass-side one: under string 1 it
sits at ``position + slant / 2``, under the lowest string at ``position - slant / 2``.

On a fretted instrument (``instrument.assign`` other than ``open``) the pluck and the
pickups stay where they are while a fret shortens the string, so each must lie between the
saddle and the last fret, L 2^(-frets/12) from the saddle (12-TET fret rule, common
practice; :func:`rtvoice.physics.frets.speaking_length_mm`). Open, every note is an open
string of its own and only the slant's ends are held on the string.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from decimal import Decimal, localcontext
from fractions import Fraction
from typing import Any, NoReturn, Protocol

from rtvoice.engine.schema import Param, SettingsError, UnknownParameter, lookup
from rtvoice.engine.units import LENGTH_EXAMPLES, Length, fraction_of_string, length_within, parse_length
from rtvoice.physics.frets import speaking_length_mm

SCALE_KEY = "string.scale_length_mm"
#: The fields kept as fractions of the open scale length (pickups' and the excitation's).
FRACTION_FIELDS = ("position", "slant", "width")
#: Significant digits tried, fewest first. A typed length is divided by the scale exactly and rounded
#: once (units.fraction_of_string), so 17 digits of the exact product fraction x scale always read
#: back to the same double (17 significant digits name any double: IEEE 754-2008, 5.12.2).
SHORTEST_DIGITS = range(1, 18)


class Instrument(Protocol):
    """What the checks read of a :class:`~rtvoice.engine.settings.Settings` (which has it all)."""

    @property
    def values(self) -> Mapping[str, Any]: ...

    @property
    def pickups(self) -> tuple[Mapping[str, Any], ...]: ...


def is_fraction_of_length(key: str) -> bool:
    """Positions, slants and widths: fractions of the open scale length, which may also be typed as lengths."""
    try:
        param, _ = lookup(key)
    except UnknownParameter:
        return False
    return key.startswith(("pickup.", "excitation.")) and key.rsplit(".", 1)[1] in FRACTION_FIELDS \
        and param.kind == "float" and not param.unit


def typed_length(key: str, raw: str, source: str, what: str) -> Length:
    """``raw`` read as a length with its unit, or SettingsError saying ``what`` else it could have been."""
    try:
        return parse_length(raw)
    except ValueError as err:
        reason = str(err) if "finite" in str(err) else f"expected {what} or a length like {LENGTH_EXAMPLES}"
        raise SettingsError(key, raw, reason, source) from None


def fraction_from_text(param: Param, key: str, raw: str, scale_mm: float, source: str) -> float:
    """A position, slant or width typed as a length, as a fraction of ``scale_mm``; refused in the typed unit."""
    length = typed_length(key, raw, source, f"a fraction of the length ({param.describe_range()})")
    assert param.low is not None and param.high is not None  # positions, slants and widths have a range
    try:
        return fraction_of_string(length, param.low, param.high, scale_mm)
    except ValueError as err:
        raise SettingsError(key, raw, str(err), source) from None


def checked_mm(param: Param, key: str, raw: Any, source: str) -> float:
    """A length in mm (a number, or text with its unit), checked against ``param``'s range in the typed unit."""
    if not isinstance(raw, str):
        try:
            mm: float = param.check(raw)  # a float parameter's check gives a float
            return mm
        except (ValueError, OverflowError) as err:
            raise SettingsError(key, raw, str(err), source, allowed=param.describe_range()) from None
    length = typed_length(key, raw, source, "a number of millimetres")
    assert param.low is not None and param.high is not None  # lengths in mm have a range in the schema
    try:
        return length_within(length, param.low, param.high)
    except ValueError as err:
        raise SettingsError(key, raw, str(err), source) from None


def bare_fraction_keys(data: Mapping[str, Any]) -> list[str]:
    """Dotted names of the positions, slants and widths a preset's tables give as bare numbers."""
    found = []
    excitation = data.get("excitation")
    if isinstance(excitation, Mapping):
        found += [f"excitation.{f}" for f in FRACTION_FIELDS if _is_number(excitation.get(f))]
    pickups = data.get("pickup")
    if isinstance(pickups, list):
        for i, item in enumerate(pickups):
            if isinstance(item, Mapping):
                found += [f"pickup.{i}.{f}" for f in FRACTION_FIELDS if _is_number(item.get(f))]
    return found


def _is_number(value: Any) -> bool:
    return isinstance(value, int | float) and not isinstance(value, bool)


def mm_text(fraction: float, param: Param, scale_mm: float) -> str | float:
    """``fraction`` of ``scale_mm`` as millimetres with their unit (``"129.6mm"``) for a preset.

    The shortest decimal that reads back (through the same conversion as a typed length)
    to exactly ``fraction``; the bare fraction when no decimal does, which a preset reads
    the same way.
    """
    assert param.low is not None and param.high is not None  # positions, slants and widths have a range
    exact = Fraction(fraction) * Fraction(scale_mm)
    for digits in SHORTEST_DIGITS:
        with localcontext() as ctx:
            ctx.prec = digits
            rounded = Decimal(exact.numerator) / Decimal(exact.denominator)
        text = f"{rounded.normalize():f}mm"
        try:
            back = fraction_of_string(parse_length(text), param.low, param.high, scale_mm)
        except ValueError:
            continue  # rounded past a bound: a longer decimal may come back inside it
        if back == fraction:
            return text
    return fraction


def first_changed(get: Callable[[str], Any], keys: Iterable[str]) -> str:
    """The first of ``keys`` whose value is not the schema's default, else the last key.

    A refusal that two values cause together names the one the player changed (a
    position rather than the fret count, the scale length rather than a default string).
    """
    keys = list(keys)
    for key in keys:
        param, _ = lookup(key)
        if get(key) != param.default:
            return key
    return keys[-1]


def check_geometry(settings: Instrument, source: str) -> None:
    """The hand within the frets; the slant's ends on the string; fretted, pluck and pickups off the neck."""
    values = settings.values

    def get(key: str) -> Any:
        _, index = lookup(key)
        return values[key] if index is None else settings.pickups[index][key.rsplit(".", 1)[1]]

    frets, hand = values["instrument.frets"], values["hand.fret"]
    if hand > frets:
        key = first_changed(get, ("hand.fret", "instrument.frets"))
        raise SettingsError(key, get(key), f"the hand at fret {hand:g} lies beyond the last fret ({frets})",
                            source, allowed=f"hand.fret 0 .. {frets}")
    scale_mm = values[SCALE_KEY]
    last_mm = neck_end_mm(values)

    def fits(fraction: float) -> bool:
        return 0.0 < fraction < 1.0 and (last_mm is None or fraction * scale_mm < last_mm)

    neck = [] if last_mm is None else ["instrument.frets", "instrument.assign"]
    pluck = values["excitation.position"]
    if not fits(pluck):
        _refuse(get, ["excitation.position", *neck], "the pluck", pluck, scale_mm, frets, last_mm, source)
    for i, pickup in enumerate(settings.pickups):
        centre, slant = pickup["position"], pickup.get("slant", 0.0)
        position_key, slant_key = f"pickup.{i}.position", f"pickup.{i}.slant"
        if not fits(centre):
            keys = [position_key, slant_key] if slant else [position_key]
            _refuse(get, [*keys, *neck], "the pickup", centre, scale_mm, frets, last_mm, source)
        for end, sign in (("treble end", 1.0), ("bass end", -1.0)):
            if not fits(centre + sign * slant / 2.0):
                _refuse(get, [slant_key, position_key, *neck], f"the pickup's {end}", centre + sign * slant / 2.0,
                        scale_mm, frets, last_mm, source)


#: How far short of the last fret a controller may carry the pluck or a pickup on a fretted neck.
NECK_MARGIN_MM = 1.0


def neck_end_mm(values: Mapping[str, Any]) -> float | None:
    """Where a fretted neck ends, in mm from the saddle: its last fret (the 12-TET fret rule, common
    practice). None under the open rule, where every note is an open string and nothing is over a neck."""
    if values["instrument.assign"] == "open":
        return None
    return float(speaking_length_mm(values[SCALE_KEY], values["instrument.frets"]))


def within_neck(settings: Instrument, name: str, fraction: float) -> float:
    """``fraction`` of the scale for the pluck or a pickup (``name``) held where the settings
    allow it: on a fretted instrument, at least NECK_MARGIN_MM short of the last fret (both ends of
    a slanted pickup); under the open rule, unchanged. A controller sweeping past the neck then
    stops there instead of being refused."""
    last_mm = neck_end_mm(settings.values)
    if last_mm is None:
        return fraction
    end = (last_mm - NECK_MARGIN_MM) / settings.values[SCALE_KEY]
    _, index = lookup(name)
    half_slant = abs(settings.pickups[index].get("slant", 0.0)) / 2.0 if index is not None else 0.0
    return min(fraction, float(end - half_slant))


def _refuse(get: Callable[[str], Any], keys: list[str], what: str, fraction: float, scale_mm: float, frets: int,
            last_mm: float | None, source: str) -> NoReturn:
    """Refuse ``what`` at ``fraction`` of the scale, naming the first key the player changed."""
    key = first_changed(get, keys)
    where = f"{what} at {fraction * scale_mm:.4g} mm from the saddle"
    if not 0.0 < fraction < 1.0:
        raise SettingsError(key, get(key), f"{where} lies off the {scale_mm:g} mm string", source,
                            allowed=f"both ends between 0 and {scale_mm:g} mm")
    assert last_mm is not None  # on the string, refused: so over a fretted neck
    raise SettingsError(key, get(key), f"{where} lies over the neck: the last fret ({frets}) is "
                        f"{last_mm:.4g} mm from the saddle", source,
                        allowed=f"less than {last_mm:.4g} mm, {last_mm / scale_mm:.4g} of the scale length")


__all__ = ["FRACTION_FIELDS", "SCALE_KEY", "Instrument", "bare_fraction_keys",
           "check_geometry", "checked_mm", "first_changed", "fraction_from_text", "is_fraction_of_length",
           "mm_text", "neck_end_mm", "typed_length", "within_neck"]
