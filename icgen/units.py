"""Internal unit system and the conversion of user unit strings at the edge.

Internal units: length kpc, velocity km/s, mass Msun. Then G is about
4.300917e-6 kpc (km/s)^2 / Msun and the time unit kpc/(km/s) is about 0.9778 Gyr.
Everything past the model-file layer works with plain floats in these units.
"""

import math
import numbers

import astropy.constants as const
import astropy.units as u

from icgen.errors import ModelError, did_you_mean

__all__ = [
    "G",
    "TIME_UNIT_GYR",
    "INTERNAL_UNITS",
    "COSMOLOGIES",
    "parse_quantity",
    "critical_density",
    "unit_scale",
]

#: Gravitational constant in kpc (km/s)^2 / Msun (CODATA value through astropy.constants).
G = float(const.G.to_value(u.kpc * (u.km / u.s) ** 2 / u.Msun))

#: The internal time unit kpc/(km/s), in Gyr.
TIME_UNIT_GYR = float((u.kpc / (u.km / u.s)).to(u.Gyr))

#: Internal unit of each physical type an output unit may be asked for.
INTERNAL_UNITS = {
    "length": u.kpc,
    "velocity": u.km / u.s,
    "mass": u.Msun,
    "time": u.kpc / (u.km / u.s),
    "density": u.Msun / u.kpc**3,
}

#: Cosmology realizations of astropy.cosmology that a model file may name.
COSMOLOGIES = ("Planck18", "Planck15", "Planck13", "WMAP9", "WMAP7", "WMAP5", "WMAP3", "WMAP1")

# Example text for error messages, per internal unit (astropy spells Msun 'solMass').
_EXAMPLES = {
    u.kpc: ("a length", "'3 kpc'"),
    u.km / u.s: ("a velocity", "'200 km/s'"),
    u.Msun: ("a mass", "'5e10 Msun'"),
    u.Msun / u.kpc**3: ("a mass density", "'1e7 Msun/kpc3'"),
    u.K: ("a temperature", "'1e4 K'"),
    u.deg: ("an angle", "'30 deg'"),
}

_UNIT_EXAMPLES = {"length": "kpc", "velocity": "km/s", "mass": "1e10 Msun", "time": "Gyr"}

# Longest unit or quantity string read: "1.23456789e+10 Msun/kpc3" has 24 characters; a
# longer text is no number with a unit (and astropy's parser is slow on megabytes).
MAX_QUANTITY_TEXT = 100
# Output units scale the written numbers: within 1e40 of the internal unit (kg is 2e30
# Msun, cm 3e21 kpc) no value of a model (masses up to 1e16 Msun) can overflow a double.
UNIT_SCALE_RANGE = (1e-40, 1e40)

# What astropy's parser raises for bad text: ValueError and TypeError in practice (seen
# by fuzzing astropy 8); UnitsError and ArithmeticError for safety.
_PARSE_ERRORS = (ValueError, TypeError, ArithmeticError, u.UnitsError)


def _describe(unit):
    """Return (physical type phrase, example string) for an internal unit."""
    for known, text in _EXAMPLES.items():
        if unit == known:
            return text
    kind = str(unit.physical_type)
    article = "an" if kind[:1] in "aeiou" else "a"
    return f"{article} {kind}", f"'1 {unit.to_string()}'"


def _first_sentence_of(exc):
    """Astropy's parse message, cut before its advice on defining custom units."""
    text = " ".join(str(exc).split())
    return text.split(" If this is meant to be a custom unit")[0]


def parse_quantity(value, key, unit):
    """Convert a model-file string such as ``"3.2 kpc"`` to a float in ``unit``.

    Parameters
    ----------
    value : str
        A number followed by a unit astropy can parse, e.g. ``"5e10 Msun"``.
    key : str
        Model-file key, named in any error.
    unit : astropy.units.UnitBase
        Internal unit to convert to (u.kpc, u.km/u.s, u.Msun, u.Msun/u.kpc**3, u.K, u.deg).

    Returns
    -------
    float
        The value in ``unit``; finite.

    Raises
    ------
    ModelError
        For a bare number, a bool, a non-string, text astropy cannot parse (or longer than
        MAX_QUANTITY_TEXT), a unit of the wrong physical type, a non-finite value, or a
        temperature below absolute zero.

    Temperatures may be given in kelvin or degrees Celsius ("-10 deg_C" is 263.15 K),
    converted with astropy's temperature equivalency.
    """
    kind, example = _describe(unit)
    hint = f"give a string with a unit, e.g. {example}"
    if not isinstance(value, str):
        raise ModelError(key, value, f"must be {kind}; {hint}")
    if len(value) > MAX_QUANTITY_TEXT:
        raise ModelError(key, value, f"too long for a number with a unit "
                                     f"({len(value)} characters); {hint}")
    try:
        quantity = u.Quantity(value)
    except _PARSE_ERRORS as exc:
        raise ModelError(key, value, f"not a number with a unit ({_first_sentence_of(exc)}); {hint}")
    # Celsius converts to kelvin only through the temperature equivalency (an offset).
    equivalencies = u.temperature() if unit == u.K else []
    # Function units (dex, mag) convert non-linearly: not what a model file means.
    if not isinstance(quantity.unit, u.UnitBase) \
            or not quantity.unit.is_equivalent(unit, equivalencies=equivalencies):
        wrong = quantity.unit.physical_type if isinstance(quantity.unit, u.UnitBase) \
            else quantity.unit
        raise ModelError(key, value, f"must be {kind}, not {wrong}; {hint}")
    number = float(quantity.to_value(unit, equivalencies=equivalencies))
    if not math.isfinite(number):
        raise ModelError(key, value, f"must be finite; {hint}")
    if unit == u.K and number < 0:
        raise ModelError(key, value, f"is below absolute zero ({number:.6g} K); a temperature "
                                     f"is positive in kelvin, e.g. {example}")
    return number


def check_cosmology(name, key="model.cosmology"):
    """Raise ModelError unless ``name`` is one of :data:`COSMOLOGIES`."""
    if isinstance(name, str) and name in COSMOLOGIES:
        return
    hint = did_you_mean(name, COSMOLOGIES)
    raise ModelError(key, name, f"must be one of {', '.join(COSMOLOGIES)}" + (f"; {hint}" if hint else ""))


def critical_density(cosmology_name="Planck18", redshift=0.0):
    """Critical density of the universe, 3 H(z)^2 / (8 pi G), in Msun/kpc^3.

    Parameters
    ----------
    cosmology_name : str
        Name of an astropy.cosmology realization, one of :data:`COSMOLOGIES`.
    redshift : float
        Redshift z >= 0.

    Returns
    -------
    float
        rho_crit(z) in Msun/kpc^3 (about 127.05 for Planck18 at z = 0).
    """
    check_cosmology(cosmology_name)
    if isinstance(redshift, bool) or not isinstance(redshift, numbers.Real):
        raise ModelError("model.redshift", redshift, "must be a number >= 0")
    if not (math.isfinite(redshift) and redshift >= 0):
        raise ModelError("model.redshift", redshift, "must be a finite number >= 0")
    from astropy import cosmology

    cosmo = getattr(cosmology, cosmology_name)
    return float(cosmo.critical_density(redshift).to_value(u.Msun / u.kpc**3))


def unit_scale(unit_string, physical_type, key):
    """Factor that converts an internal value to the output unit ``unit_string``.

    Parameters
    ----------
    unit_string : str
        A unit astropy can parse, possibly scaled, e.g. ``"1e10 Msun"``.
    physical_type : str
        One of the keys of :data:`INTERNAL_UNITS` ("length", "velocity", "mass", ...).
    key : str
        Model-file key, named in any error.

    Returns
    -------
    float
        ``x_out = x_internal * factor``; e.g. 1e-10 for ``"1e10 Msun"``.
    """
    if physical_type not in INTERNAL_UNITS:
        raise ValueError(f"physical_type must be one of {', '.join(INTERNAL_UNITS)}, got {physical_type!r}")
    internal = INTERNAL_UNITS[physical_type]
    example = _UNIT_EXAMPLES.get(physical_type, internal.to_string())
    rule = f"must be a {physical_type} unit astropy can parse, e.g. '{example}'"
    if not isinstance(unit_string, str) or not unit_string.isprintable() \
            or len(unit_string) > MAX_QUANTITY_TEXT:
        raise ModelError(key, unit_string, rule)
    try:
        unit = u.Unit(unit_string)
    except _PARSE_ERRORS as exc:
        raise ModelError(key, unit_string, f"{rule} ({_first_sentence_of(exc)})")
    if not isinstance(unit, u.UnitBase) or not unit.is_equivalent(internal):
        raise ModelError(key, unit_string, rule)
    factor = float(internal.to(unit))
    lo, hi = UNIT_SCALE_RANGE
    if not (math.isfinite(factor) and lo <= factor <= hi):
        raise ModelError(key, unit_string, f"{rule}, between {lo:g} and {hi:g} times "
                                           f"{internal.to_string()}")
    return factor
