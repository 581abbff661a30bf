"""The table of model-file keys and the checks it drives.

``VALUE_KINDS`` holds one :class:`Field` per key: the kind of value, its internal unit
and the physical range it must lie in. :func:`validate_fields` checks every field of a
spec that has a row (text keys excepted: their choices depend on the spec). Every
problem raises :class:`~icgen.errors.ModelError` naming the model-file key and the rule.
Internal units: kpc, Msun, Msun/kpc^3, K, km/s.
"""

import dataclasses
import math
import numbers
import re
from dataclasses import dataclass

import astropy.units as u

from icgen.errors import MISSING, ModelError, did_you_mean

# TOML integers are 64-bit signed: larger ones could not be written back.
TOML_INT_MAX = 2**63 - 1
# Component names become TOML keys and HDF5 group names: keep them plain and short.
_NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_-]*\Z")
MAX_COMPONENT_NAME = 64
#: Most components in one model. A galaxy model has a handful (halo, bulge, thin and thick
#: disk, gas, black hole); each costs a potential table and a sampler.
MAX_COMPONENTS = 64


@dataclass(frozen=True)
class Field:
    """How one model-file key is read, written and checked.

    ``kind`` is "quantity" (a string with a unit, stored in internal units ``unit``),
    "number" (dimensionless float), "count" (integer), "text" or "flag" (true/false).
    Quantities, numbers and counts must lie in [lo, hi]; ``lo_open`` excludes lo itself.
    ``example`` is the value a count's message suggests.
    """

    kind: str
    unit: str | None = None
    astropy_unit: object = None
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False
    example: str | None = None

    def contains(self, x):
        if self.lo is not None and (x <= self.lo if self.lo_open else x < self.lo):
            return False
        return self.hi is None or x <= self.hi

    def rule(self):
        """'must be between 1e-06 and 1e+05 kpc', 'must be > 0 and at most 100', ..."""
        unit = f" {self.unit}" if self.unit else ""
        if self.lo_open:
            return f"must be > {_num(self.lo)} and at most {_num(self.hi)}{unit}"
        return f"must be between {_num(self.lo)} and {_num(self.hi)}{unit}"


def _num(x):
    """A limit for messages: '0.5', '100', '1e+05', '1.66667'."""
    return f"{x:g}" if x == 0 or 1e-3 <= abs(x) < 1e4 else f"{x:.3g}"


def _quantity(label, unit, lo, hi):
    return Field("quantity", label, unit, lo, hi)


# Ranges: what a galaxy model can physically mean, wide enough for any real system and
# narrow enough that no value overflows or underflows on the way (1e300 Msun used to give
# NaN velocities, 1e-320 kpc a division by zero).
_MASS = _quantity("Msun", u.Msun, 1.0, 1e16)            # a star .. above the richest galaxy
#                                                          clusters (~1e15 Msun)
_LENGTH = _quantity("kpc", u.kpc, 1e-6, 1e5)            # 1e-6 kpc (200 au) .. 100 Mpc
VALUE_KINDS = {
    "mass": _MASS,
    # a particle from a planet's mass (star-by-star models) up to a whole galaxy
    "particle_mass": _quantity("Msun", u.Msun, 1e-3, 1e16),
    # from below the cosmic mean density (~40 Msun/kpc3) to the cores of nuclear star
    # clusters (~1e6 Msun/pc3 = 1e15 Msun/kpc3); an NFW rho_s is narrowed further by the
    # concentration it implies (ModelSpec)
    "density_scale": _quantity("Msun/kpc3", u.Msun / u.kpc**3, 1.0, 1e16),
    "scale_length": _LENGTH, "scale_height": _LENGTH, "taper_radius": _LENGTH,
    "taper_width": _LENGTH, "toomre_q_radius": _LENGTH, "scale_radius": _LENGTH,
    "core_radius": _LENGTH, "outer_radius": _LENGTH, "truncation_width": _LENGTH,
    "anisotropy_radius": _LENGTH,
    # colder than any molecular cloud (~10 K) .. hotter than cluster gas (~1e8 K); whether
    # the gas makes a thin layer is checked against the potential (potential/gas_solver.py)
    "temperature": _quantity("K", u.K, 1.0, 1e9),
    # the sound speeds of those temperatures (0.06 .. 4000 km/s), rounded outwards
    "sound_speed": _quantity("km/s", u.km / u.s, 0.01, 1e4),
    # fully ionised hydrogen (0.5) .. neutral helium (4)
    "mean_molecular_weight": Field("number", lo=0.5, hi=4.0),
    # an ideal gas has 1 < gamma <= 5/3 (monatomic); 1e-6 slack for "1.6666667"
    "adiabatic_index": Field("number", lo=1.0, hi=5.0 / 3.0 * (1 + 1e-6), lo_open=True),
    # Q: any cold disk is allowed (Q < 1 is warned about, see model_warnings); stellar
    # disks have Q ~ 1-3 (common practice), 100 is far beyond any (and keeps sigma^2 finite)
    "toomre_q": Field("number", lo=0.0, hi=100.0, lo_open=True),
    "toomre_q_min": Field("number", lo=0.0, hi=100.0, lo_open=True),
    # sigma_R / sigma_z is 1-3 in observed disks (common practice, from memory)
    "sigma_ratio": Field("number", lo=0.1, hi=10.0),
    # c = r200/r_s is 3-30 for galaxy halos; > 1 keeps r_s inside r200
    "concentration": Field("number", lo=1.0, hi=1000.0, lo_open=True),
    "retrograde_flip_fraction": Field("number", lo=0.0, hi=1.0),
    # no galaxy to model beyond z ~ 20
    "redshift": Field("number", lo=0.0, hi=20.0),
    # more particles than any single-galaxy simulation uses per component (~1e9)
    "particles": Field("count", lo=1, hi=10_000_000_000, example="100_000"),
    "seed": Field("count", lo=0, hi=TOML_INT_MAX, example="12345"),
    "quiet_start": Field("flag"), "mirror": Field("flag"),
    "name": Field("text"), "kind": Field("text"), "profile": Field("text"),
    "vertical": Field("text"), "velocities": Field("text"), "cosmology": Field("text"),
    "length_unit": Field("text"), "velocity_unit": Field("text"), "mass_unit": Field("text"),
}  # fmt: skip


def unit_label(key):
    """'kpc', 'Msun', ... for a dimensional key; None for the others."""
    return VALUE_KINDS[key].unit


def shown(value, unit):
    """A dimensional value as the user would write it ('5 kpc'), for messages."""
    if unit and isinstance(value, float):
        return f"{value:.10g} {unit}"
    return value


def _number(key, value, unit=None):
    """Return ``value`` as a finite float; ``unit`` (a label) is for messages only."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        what = f"a number in {unit}" if unit else "a number (no unit)"
        raise ModelError(key, value, f"must be {what}")
    try:
        x = float(value)
    except (OverflowError, ValueError, TypeError):
        raise ModelError(key, value, "must be a finite number") from None
    if not math.isfinite(x):
        raise ModelError(key, value, "must be finite")
    return x


def _count(key, value, field):
    """Return ``value`` as an int in [field.lo, field.hi]."""
    if field.hi == TOML_INT_MAX:
        rule = f"must be a whole number >= {field.lo}, below 2**63 (e.g. {field.example})"
    else:
        rule = f"must be a whole number from {field.lo} to {field.hi:.0e} (e.g. {field.example})"
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ModelError(key, value, rule)
    if not field.lo <= int(value) <= field.hi:
        raise ModelError(key, value, rule)
    return int(value)


def check_value(prefix, key, value):
    """``value`` of the model-file key ``prefix + key`` checked against its row of
    ``VALUE_KINDS``: a float (quantity, number) or an int (count) in its range, a bool
    (flag)."""
    field = VALUE_KINDS[key]
    if field.kind == "flag":
        if not isinstance(value, bool):
            raise ModelError(prefix + key, value, "must be true or false")
        return value
    if field.kind == "count":
        return _count(prefix + key, value, field)
    x = _number(prefix + key, value, field.unit)
    if not field.contains(x):
        raise ModelError(prefix + key, shown(x, field.unit), field.rule())
    return x


def set_field(spec, name, value):
    object.__setattr__(spec, name, value)  # frozen dataclass: only __post_init__ may set


def validate_fields(spec, prefix):
    """Check every field of the dataclass ``spec`` that has a non-text row in
    ``VALUE_KINDS`` (in field order) and store it converted (float, int or bool).

    A field whose default is None may be None (not given); the others are always checked.
    """
    for field in dataclasses.fields(spec):
        row = VALUE_KINDS.get(field.name)
        value = getattr(spec, field.name)
        if row is None or row.kind == "text" or (value is None and field.default is None):
            continue
        set_field(spec, field.name, check_value(prefix, field.name, value))


def choice(key, value, choices):
    """Raise unless ``value`` is one of the strings ``choices``."""
    if isinstance(value, str) and value in choices:
        return value
    hint = did_you_mean(value, choices)
    raise ModelError(key, value, f"must be one of {', '.join(choices)}" + (f"; {hint}" if hint else ""))


def check_component_name(name):
    if not isinstance(name, str) or not _NAME_PATTERN.match(name):
        rule = "a component name starts with a letter and uses only letters, digits, '_' and '-'"
        raise ModelError("components", name, rule)
    if len(name) > MAX_COMPONENT_NAME:
        rule = f"a component name has at most {MAX_COMPONENT_NAME} characters (got {len(name)})"
        raise ModelError("components", name, rule)


def component_prefix(spec, kinds, profiles=None):
    """Check the name, kind and (given ``profiles``) profile of a component spec; return
    the prefix 'components.<name>.' of its model-file keys."""
    check_component_name(spec.name)
    p = f"components.{spec.name}."
    choice(p + "kind", spec.kind, kinds)
    if profiles is not None:
        choice(p + "profile", spec.profile, profiles)
    return p


def check_component_count(n):
    if n > MAX_COMPONENTS:
        rule = f"the model has {n} components; at most {MAX_COMPONENTS} are allowed"
        raise ModelError("components", MISSING, rule)
