"""A string's mass, tension, stiffness and stress from its gauge, material and pitch.

SI units throughout (m, kg, N, Pa, Hz). A plain string is one round wire; a wound
string is a round core with one close-wound layer of round wrap wire. The core
carries the tension and gives the bending stiffness; core and wrap together give
the mass. Published formulas: Mersenne's law with Taylor's wave speed,
f0 = sqrt(T / mu) / 2L; Fletcher's stiff-string coefficient,
B = pi^3 E d^4 / (64 T L^2) (Fletcher, "Normal vibration frequencies of a stiff
piano string", JASA 36, 203, 1964).

Bad input (a non-finite or non-positive size, a core as thick as the string)
raises ValueError naming the value and what is allowed. A string stressed past its
material's tensile strength is reported (:attr:`StringPhysics.over_strength`), not
refused: what to do about it belongs to the caller.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass
from enum import Enum
from types import MappingProxyType

from rtvoice.physics.tuning import midi_note_to_hz

INCH_M = 0.0254  # exact, by definition of the inch


@dataclass(frozen=True)
class Material:
    """Handbook properties of a string material; ``source`` names where each came from."""

    name: str
    density_kg_m3: float
    youngs_modulus_pa: float
    tensile_strength_pa: float
    source: str


MATERIALS: Mapping[str, Material] = MappingProxyType({
    "music_wire": Material(
        "music_wire", 7850.0, 200e9, 2.413e9,
        "Plain high-carbon steel, ASTM A228 music wire. Density: spring-material tables list 0.284 lb/in^3 "
        "(7860 kg/m^3) and MakeItFrom.com's ASTM A228 page 7.8 g/cm^3; 7850 kg/m^3 is the usual handbook "
        "figure for steel. Young's modulus: published values run from 190 GPa (MakeItFrom.com, ASTM A228) "
        "to 30e6 psi = 207 GPa (spring-material tables); 200 GPa lies between them. Tensile strength: "
        "ASTM A228's minimum for 0.020 in (0.51 mm) wire, 350 ksi = 2413 MPa (its tensile table as "
        "reproduced by Interwire Group); thinner wire must be stronger (387 ksi at 0.010 in), so this "
        "is a lower bound for every plain string and core up to 0.020 in.",
    ),
    "nickel_plated_steel": Material(
        "nickel_plated_steel", 7850.0, 200e9, 1.95e9,
        "Steel wrap wire with a thin nickel plating, taken as its steel: density and Young's modulus as "
        "music_wire (the plating, nickel at about 8900 kg/m^3, is a few micrometres thick and is "
        "neglected; from memory). Tensile strength: the wrap wire's grade is not standardised for "
        "strings; 283 ksi = 1950 MPa, the top of ASTM A227 class I hard-drawn spring wire's minima in "
        "spring-material tables, is assumed. The wrap carries no tension in this module's model, so "
        "this value is not used to check a string.",
    ),
    "phosphor_bronze": Material(
        "phosphor_bronze", 8860.0, 110e9, 1.0e9,
        "Phosphor bronze UNS C51000 (Cu, 4.2-5.8 % Sn). Density 8.86 g/cm^3 and Young's modulus "
        "16e6 psi = 110 GPa: Olin Brass C51000 (ASTM B103) data sheet. Tensile strength: ASTM B159 "
        "spring temper (H08) wire of 0.025 in and under, 145 ksi minimum = 1000 MPa (as reproduced by "
        "Interwire Group).",
    ),
    "nylon": Material(
        "nylon", 1140.0, 4.0e9, 0.43e9,
        "Drawn nylon 6,6 monofilament. Density 1.14 g/cm^3 (textile handbooks for nylon 6,6). Young's "
        "modulus 4 GPa: from memory (drawn nylon 6,6 fibre, about 3-5 GPa; moulded, undrawn nylon is "
        "nearer 1.5-3 GPa). Tensile strength: nylon 6,6 fibre tenacity 4.3-8.8 g/denier (textile "
        "handbooks) is 430-890 MPa at 1.14 g/cm^3; the low end is taken.",
    ),
})


class StringKind(Enum):
    """How a string is built."""

    PLAIN = "plain"  # one round wire
    WOUND = "wound"  # a round core under one close-wound layer of round wrap wire


def _positive(name: str, value: float) -> float:
    # numbers.Real takes numpy's scalars too; a bool is a number to Python but never a size.
    if isinstance(value, bool) or not (isinstance(value, numbers.Real) and math.isfinite(value) and value > 0):
        raise ValueError(f"{name} = {value!r}: must be a finite number > 0")
    return float(value)


def plain_linear_density_kg_m(diameter_m: float, density_kg_m3: float) -> float:
    """Mass per length in kg/m of a round solid wire: mu = rho pi d^2 / 4 (its cross-section
    times its density)."""
    d = _positive("diameter_m", diameter_m)
    return _positive("density_kg_m3", density_kg_m3) * math.pi * d * d / 4.0


def wound_linear_density_kg_m(
    outer_diameter_m: float, core_diameter_m: float, core_density_kg_m3: float, wrap_density_kg_m3: float
) -> float:
    """Mass per length in kg/m of a round core under one close-wound layer of round wrap wire.

    The wrap wire's diameter is w = (outer - core) / 2 and its centre line is a helix of
    diameter D = core + w. Unrolled, the cylinder of that helix is a strip pi D wide,
    covered by side-by-side bands of width w (close wound: neighbouring turns touch), so
    one metre of string holds pi D / w metres of wrap wire whatever the helix's pitch
    (a steeper turn is longer but there are fewer of them per metre). Times the wire's
    cross-section pi w^2 / 4 and density: wrap mu = rho_w pi^2 w (core + w) / 4, to which
    the core's rho_c pi core^2 / 4 is added. Derived here (calc); tests/test_physics_strings.py
    checks it against the arc length of a helix whose turns touch, integrated numerically.

    Assumptions: a round core, one layer of round wrap wire, turns touching, the wire
    neither flattened nor sunk into the core, the cylinder's curvature neglected
    where the turns touch (a relative error near 1e-5 for guitar sizes). Real
    strings differ: hexagonal cores, two or three wrap layers, flattened or ground
    wraps, gaps between turns. That is why a :class:`StringSpec` may give its
    measured tension or mass per length instead.
    """
    outer = _positive("outer_diameter_m", outer_diameter_m)
    core = _positive("core_diameter_m", core_diameter_m)
    if core >= outer:
        raise ValueError(
            f"core_diameter_m = {core_diameter_m!r}: must be less than outer_diameter_m = {outer_diameter_m!r}"
        )
    w = (outer - core) / 2.0
    wrap = _positive("wrap_density_kg_m3", wrap_density_kg_m3) * math.pi**2 * w * (core + w) / 4.0
    return plain_linear_density_kg_m(core, core_density_kg_m3) + wrap


def tension_n(linear_density_kg_m: float, length_m: float, f0_hz: float) -> float:
    """Tension in N that tunes a string of speaking length ``length_m`` to ``f0_hz``:
    T = mu (2 L f0)^2 (Mersenne's law f0 = sqrt(T / mu) / 2L, with Taylor's wave speed
    c = sqrt(T / mu))."""
    mu = _positive("linear_density_kg_m", linear_density_kg_m)
    return mu * (2.0 * _positive("length_m", length_m) * _positive("f0_hz", f0_hz)) ** 2


def f0_hz(linear_density_kg_m: float, length_m: float, tension_n: float) -> float:
    """Fundamental in Hz of an ideal (flexible) string: f0 = sqrt(T / mu) / 2L (Mersenne's
    law with Taylor's wave speed); the inverse of :func:`tension_n`."""
    mu = _positive("linear_density_kg_m", linear_density_kg_m)
    return math.sqrt(_positive("tension_n", tension_n) / mu) / (2.0 * _positive("length_m", length_m))


def inharmonicity(youngs_modulus_pa: float, core_diameter_m: float, tension_n: float, length_m: float) -> float:
    """Stiffness coefficient B (dimensionless) in f_k = k f0 sqrt(1 + B k^2):
    B = pi^3 E d^4 / (64 T L^2) (Fletcher, JASA 36, 203, 1964).

    For a wound string ``core_diameter_m`` is the core's: the wrap adds mass but,
    its turns free to slide on one another, little bending stiffness (an assumption;
    the wrap's own small stiffness is left out). ``length_m`` is the speaking length.
    """
    d = _positive("core_diameter_m", core_diameter_m)
    t = _positive("tension_n", tension_n)
    length = _positive("length_m", length_m)
    return math.pi**3 * _positive("youngs_modulus_pa", youngs_modulus_pa) * d**4 / (64.0 * t * length**2)


def stress_pa(tension_n: float, core_diameter_m: float) -> float:
    """Tensile stress in Pa of the wire that carries the tension: T / (pi d^2 / 4).

    For a wound string that is the core (the helical wrap carries next to no axial
    load; an assumption of this model).
    """
    d = _positive("core_diameter_m", core_diameter_m)
    return _positive("tension_n", tension_n) / (math.pi * d * d / 4.0)


def exceeds_strength(stress_pa: float, tensile_strength_pa: float) -> bool:
    """True when a stress in Pa is above the material's tensile strength: the string would break."""
    return _positive("stress_pa", stress_pa) > _positive("tensile_strength_pa", tensile_strength_pa)


@dataclass(frozen=True)
class StringSpec:
    """One string as bought: its open note, build, gauge and materials.

    Diameters in m. ``core_diameter_m`` is None for a plain string (the wire is its
    own core) and required for a wound one, as is ``wrap_material``. A string may
    give its measured ``tension_n`` or ``linear_density_kg_m`` (one of them: the other
    follows from the pitch), and its measured ``inharmonicity``; given values win over
    the ones built from the gauge.
    """

    open_midi_note: int
    kind: StringKind
    outer_diameter_m: float
    core_diameter_m: float | None = None
    core_material: str = "music_wire"
    wrap_material: str | None = None
    tension_n: float | None = None
    linear_density_kg_m: float | None = None
    inharmonicity: float | None = None

    def __post_init__(self) -> None:
        if not isinstance(self.kind, StringKind):
            raise ValueError(f"kind = {self.kind!r}: must be StringKind.PLAIN or StringKind.WOUND")
        if isinstance(self.open_midi_note, bool) or self.open_midi_note not in range(128):
            raise ValueError(f"open_midi_note = {self.open_midi_note!r}: must be a MIDI note, a whole number 0-127")
        _positive("outer_diameter_m", self.outer_diameter_m)
        if self.kind is StringKind.PLAIN and (self.core_diameter_m is not None or self.wrap_material is not None):
            raise ValueError("core_diameter_m and wrap_material: must be None for a plain string")
        if self.kind is StringKind.WOUND:
            if self.core_diameter_m is None or self.wrap_material is None:
                raise ValueError("core_diameter_m and wrap_material: must both be given for a wound string")
            if _positive("core_diameter_m", self.core_diameter_m) >= self.outer_diameter_m:
                raise ValueError(
                    f"core_diameter_m = {self.core_diameter_m!r}: must be less than "
                    f"outer_diameter_m = {self.outer_diameter_m!r}"
                )
        if self.tension_n is not None and self.linear_density_kg_m is not None:
            raise ValueError("tension_n and linear_density_kg_m: give one of them, not both (the pitch sets the other)")
        for name in ("tension_n", "linear_density_kg_m"):
            if (value := getattr(self, name)) is not None:
                _positive(name, value)
        if self.inharmonicity is not None and not (
            isinstance(self.inharmonicity, numbers.Real) and math.isfinite(self.inharmonicity)
            and self.inharmonicity >= 0
        ):
            raise ValueError(f"inharmonicity = {self.inharmonicity!r}: must be a finite number >= 0")

    @property
    def tension_core_diameter_m(self) -> float:
        """Diameter in m of the wire that carries the tension and gives the stiffness."""
        return self.outer_diameter_m if self.core_diameter_m is None else self.core_diameter_m


@dataclass(frozen=True)
class StringPhysics:
    """What a string does on an instrument of a given scale length (SI units)."""

    f0_hz: float  # the open note's pitch, taken as the stiffness-free f0 of Mersenne's law
    linear_density_kg_m: float
    tension_n: float
    inharmonicity: float  # B, open string
    stress_pa: float  # in the wire carrying the tension (the core of a wound string)
    strength_pa: float  # tensile strength of that wire's material

    @property
    def over_strength(self) -> bool:
        """True when the string is stressed past its material's tensile strength."""
        return exceeds_strength(self.stress_pa, self.strength_pa)


def _material(name: str | None, role: str, materials: Mapping[str, Material]) -> Material:
    if name is None or name not in materials:
        raise ValueError(f"{role} = {name!r}: not a known material (known: {', '.join(sorted(materials))})")
    return materials[name]


def string_physics(
    spec: StringSpec, scale_length_m: float, a4_hz: float = 440.0, materials: Mapping[str, Material] = MATERIALS
) -> StringPhysics:
    """Pitch, mass per length, tension, stiffness and stress of ``spec`` on an open speaking
    length of ``scale_length_m``, tuned to its open note with A4 = ``a4_hz`` (12-TET,
    MIDI note 69 = A4).

    Mass per length: given, else from the tension given (mu = T / (2 L f0)^2), else
    built from gauge and materials (:func:`plain_linear_density_kg_m`,
    :func:`wound_linear_density_kg_m`). Tension: given, else Mersenne's law. B: given,
    else Fletcher's formula with the core's diameter and modulus.
    """
    length = _positive("scale_length_m", scale_length_m)
    pitch_hz = midi_note_to_hz(spec.open_midi_note, _positive("a4_hz", a4_hz))
    core = _material(spec.core_material, "core_material", materials)
    d_core = spec.tension_core_diameter_m
    if spec.linear_density_kg_m is not None:
        mu = spec.linear_density_kg_m
    elif spec.tension_n is not None:
        mu = spec.tension_n / (2.0 * length * pitch_hz) ** 2
    elif spec.core_diameter_m is None:
        mu = plain_linear_density_kg_m(spec.outer_diameter_m, core.density_kg_m3)
    else:
        wrap = _material(spec.wrap_material, "wrap_material", materials)
        mu = wound_linear_density_kg_m(spec.outer_diameter_m, d_core, core.density_kg_m3, wrap.density_kg_m3)
    tension = spec.tension_n if spec.tension_n is not None else tension_n(mu, length, pitch_hz)
    b = spec.inharmonicity
    if b is None:
        b = inharmonicity(core.youngs_modulus_pa, d_core, tension, length)
    return StringPhysics(
        f0_hz=pitch_hz, linear_density_kg_m=mu, tension_n=tension, inharmonicity=b,
        stress_pa=stress_pa(tension, d_core), strength_pa=core.tensile_strength_pa,
    )


@dataclass(frozen=True)
class StringSet:
    """A set of strings, string 1 (the highest) first, and the scale length in m it is meant for."""

    name: str
    scale_length_m: float
    strings: tuple[StringSpec, ...]


def _plain(note: int, gauge_in: float) -> StringSpec:
    return StringSpec(note, StringKind.PLAIN, gauge_in * INCH_M)


def _wound(note: int, gauge_in: float, core_m: float) -> StringSpec:
    return StringSpec(note, StringKind.WOUND, gauge_in * INCH_M, core_m, wrap_material="nickel_plated_steel")


#: A common light electric set (common practice): plain .010 .013 .017 in, wound
#: .026 .036 .046 in on steel cores under nickel-plated steel wrap, tuned E4 B3 G3 D3
#: A2 E2 (MIDI 64 59 55 50 45 40) on a 648 mm scale. Core diameters 0.33, 0.41 and
#: 0.48 mm are typical of such sets (common practice, from memory; round cores
#: standing in for the hexagonal cores many such strings have).
DEFAULT_SIX_STRING = StringSet(
    name="light six-string, 648 mm",
    scale_length_m=0.648,
    strings=(
        _plain(64, 0.010),
        _plain(59, 0.013),
        _plain(55, 0.017),
        _wound(50, 0.026, 0.33e-3),
        _wound(45, 0.036, 0.41e-3),
        _wound(40, 0.046, 0.48e-3),
    ),
)
