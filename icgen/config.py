"""Model file (TOML) -> validated, frozen dataclasses in internal units.

Units inside: length kpc, mass Msun, density Msun/kpc^3 (see :mod:`icgen.units`).
Every check lives in the dataclasses' ``__post_init__`` (and, for rules that need the
cosmology, in ``ModelSpec``), so a spec built from Python is validated just as one read
from a file; the loader adds what only a file can get wrong (size, unknown keys, strings
with units, missing required keys). All problems raise :class:`~icgen.errors.ModelError`
with a one-line message naming the model-file key and the rule.

How each key is read and the range it must lie in come from one table, ``_VALUE_KINDS``;
rules between keys (a taper width against its radius, a truncation width against the
outer radius) follow the specs, each with the measurement behind its limit.

Defaults not spelled out in the file: ``model.name`` is "unnamed model", ``model.seed`` is 1,
``model.cosmology`` is "Planck18" at ``model.redshift`` 0, ``model.quiet_start`` and
``model.mirror`` are false.
"""

import dataclasses
import math
import numbers
import os
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u
import numpy as np

from icgen import defaults
from icgen.errors import MISSING, ModelError, did_you_mean
from icgen.units import check_cosmology, critical_density, parse_quantity, unit_scale

__all__ = ["OutputSpec", "DiskSpec", "SpheroidSpec", "PointMassSpec", "ModelSpec",
           "load_spec", "load_dict", "spec_from_toml_text", "spec_from_dict",
           "model_warnings"]  # fmt: skip

DEFAULT_MODEL_NAME = "unnamed model"
DEFAULT_SEED = 1
#: Default taper_width, in disk scale lengths (when taper_radius is given); never below
#: MIN_TAPER_WIDTH_FRACTION x taper_radius.
TAPER_WIDTH_FACTOR = 0.5
#: Default reference radius of toomre_q, in disk scale lengths; 2.5 Rd is where a
#: Milky-Way-like disk's Q is usually quoted (common practice, from memory).
TOOMRE_Q_RADIUS_FACTOR = 2.5
# TOML integers are 64-bit signed: larger ones could not be written back.
_TOML_INT_MAX = 2**63 - 1
# Component names become TOML keys and HDF5 group names: keep them plain and short.
_NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_-]*\Z")
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+\Z")
MAX_COMPONENT_NAME = 64
#: Longest model name (characters): it is stored in the snapshot and printed.
MAX_MODEL_NAME = 200
#: Largest model file (bytes) or text (characters). The commented starter file is ~5 kB
#: and a model of MAX_COMPONENTS fully commented components stays under ~100 kB; the
#: limit keeps a runaway file (4e6 keys took 66 s and 730 MB to parse) from being read.
MAX_MODEL_BYTES = 1_000_000
#: Most components in one model. A galaxy model has a handful (halo, bulge, thin and thick
#: disk, gas, black hole); each costs a potential table and a sampler.
MAX_COMPONENTS = 64

SPHEROID_PROFILES = ("nfw", "hernquist", "plummer", "pseudo_isothermal", "burkert")
VERTICAL_PROFILES = ("sech2", "exponential")
VELOCITY_METHODS = ("eddington", "jeans")
KINDS = ("halo", "bulge", "disk", "gas_disk", "point_mass")


@dataclass(frozen=True)
class Field:
    """How one model-file key is read, written and checked.

    ``kind`` is "quantity" (a string with a unit, stored in internal units ``unit``),
    "number" (dimensionless float), "count" (integer), "text" or "flag" (true/false).
    Quantities, numbers and counts must lie in [lo, hi]; ``lo_open`` excludes lo itself.
    """

    kind: str
    unit: str | None = None
    astropy_unit: object = None
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False

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
_VALUE_KINDS = {
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
    "particles": Field("count", lo=1, hi=10_000_000_000),
    "seed": Field("count", lo=0, hi=_TOML_INT_MAX),
    "quiet_start": Field("flag"), "mirror": Field("flag"),
    "name": Field("text"), "kind": Field("text"), "profile": Field("text"),
    "vertical": Field("text"), "velocities": Field("text"), "cosmology": Field("text"),
    "length_unit": Field("text"), "velocity_unit": Field("text"), "mass_unit": Field("text"),
}  # fmt: skip

# Keys renamed since they were first used: the old name gives an error naming the new one.
_RENAMED = {
    "spin": ("retrograde_flip_fraction",
             "'spin' reads as the spin parameter lambda; this key is the fraction of "
             "retrograde orbits whose rotation is reversed"),
}

_TOP_KEYS = ("model", "output", "components")
_MODEL_KEYS = ("name", "seed", "cosmology", "redshift", "particle_mass", "quiet_start", "mirror")
_OUTPUT_KEYS = ("length_unit", "velocity_unit", "mass_unit")
_DISK_KEYS = ("kind", "profile", "mass", "scale_length", "scale_height", "vertical",
              "taper_radius", "taper_width", "toomre_q", "toomre_q_radius", "toomre_q_min",
              "sigma_ratio", "particles")  # fmt: skip
_POINT_MASS_KEYS = ("kind", "mass", "particles")
_SPHEROID_COMMON_KEYS = ("kind", "profile", "particles", "velocities", "anisotropy_radius",
                         "retrograde_flip_fraction")  # fmt: skip
_PROFILE_KEYS = {
    "nfw": ("mass", "concentration", "density_scale", "scale_radius", "outer_radius",
            "truncation_width"),
    "hernquist": ("mass", "scale_radius", "outer_radius", "truncation_width"),
    "plummer": ("mass", "scale_radius", "outer_radius", "truncation_width"),
    "pseudo_isothermal": ("mass", "core_radius", "outer_radius", "truncation_width"),
    "burkert": ("mass", "core_radius", "outer_radius", "truncation_width"),
}  # fmt: skip
_SPHEROID_SHAPE_FIELDS = ("mass", "scale_radius", "concentration", "density_scale",
                          "core_radius", "outer_radius", "truncation_width")  # fmt: skip

# ---------------------------------------------------------------- relational limits

#: Smallest taper_width, as a fraction of taper_radius. The Dehnen & Binney residual of
#: the erfc taper is a shell of width ~w at r = R_t, which the multipole expansion
#: (48 radial nodes per decade, a node every 4.8 % in r) must resolve. Measured against
#: ring quadrature (tests/reference; R_d = 3 kpc, z_d = 0.3 kpc, the disk alone, points
#: |R - R_t| <= 3 w, z = 0, z_d, 3 z_d), largest relative error of F_R and of F_z:
#:   w/R_t   R_t = 4.5 kpc     R_t = 8 kpc       R_t = 20 kpc      R_t = 40 kpc
#:   0.2     1.1e-5 1.5e-4     -                 5.8e-6 1.5e-3     -
#:   0.1     6.3e-4 7.6e-4     2.8e-4 6.5e-4     2.4e-5 3.6e-3     1.1e-6 4.7e-4
#:   0.05    2.7e-2 1.2e-2     1.1e-2 6.9e-3     5.4e-4 1.1e-2     1.9e-6 3.9e-4
#:   0.025   -                 4.7e-1 1.9e-1     8.4e-3 6.6e-2     -
#:   0.005   -                 75     50         6.1    11 (F_z of the wrong sign: the
#:                                                         sampler then produced NaN)
#: (the F_z errors at R_t = 20 kpc, where F_z is small, do not depend on w). A taper holding
#: more mass (small R_t/R_d) needs the wider cut: 0.1 keeps F_R within 7e-4 in every case.
MIN_TAPER_WIDTH_FRACTION = 0.1

#: Smallest truncation_width / outer_radius of the exponential cut of Kazantzidis,
#: Magorrian & Moore (2004, ApJ 601, 37), by profile, against outer_radius / scale radius
#: (r_s of nfw, core radius of the cored profiles). Below it the isotropic distribution
#: function of the halo is negative for orbits just outside the cut: d2rho/dPsi2 < 0
#: there, as the density falls on r_d while Psi changes on r_t. Measured (f(E) by
#: Eddington's formula on a grid of 4000 nodes across the cut, halo in its own potential;
#: doubling the grid moved the limits by < 1 %; tests/test_model_limits.py checks them
#: again with the independent oracle tests/reference/eddington_cut.py):
_MIN_CUT_RATIO = (1.05, 1.2, 1.5, 2.0, 3.0, 5.0, 10.0, 30.0, 100.0, 300.0)
_MIN_CUT_FRACTION = {
    "nfw": (0.0721, 0.0684, 0.0630, 0.0572, 0.0512, 0.0462, 0.0425, 0.0402, 0.0397, 0.0398),
    "burkert": (0.1018, 0.0872, 0.0701, 0.0571, 0.0477, 0.0427, 0.0403, 0.0395, 0.0395, 0.0397),
    "pseudo_isothermal": (0.1841, 0.1554, 0.1234, 0.1002, 0.0852, 0.0788, 0.0772, 0.0778,
                          0.0783, 0.0785),
}  # fmt: skip
#: Safety margin on the measured limits (the disk and bulge change Psi near the cut a little).
_CUT_MARGIN = 1.1
#: For a profile without measured limits (Hernquist, Plummer): the default decay fraction, 0.1,
#: above every measured limit but the pseudo-isothermal one at outer_radius < 2 r_c.
_CUT_FALLBACK = defaults.TRUNCATION_DECAY_FRACTION

#: toomre_q_radius must lie within [0.1, 10] scale lengths: Q is quoted where the disk is;
#: beyond 10 R_d lies 5e-4 of its mass (and at 1e6 kpc Sigma underflowed to 0, a division
#: by zero in the sampler); inside 0.1 R_d kappa is dominated by the centre.
TOOMRE_Q_RADIUS_RANGE = (0.1, 10.0)
#: ... and within taper_radius + 3 taper_width, where the taper erfc(3)/2 = 1e-5 still leaves
#: a surface density to quote Q of (further out it underflows to 0).
TOOMRE_Q_TAPER_WIDTHS = 3.0


# ---------------------------------------------------------------- value checks


def _unit_label(key):
    """'kpc', 'Msun', ... for a dimensional key; None for the others."""
    return _VALUE_KINDS[key].unit


def _shown(value, unit):
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


def _count(key, value, minimum, maximum=_TOML_INT_MAX, example="100_000"):
    """Return ``value`` as an int in [minimum, maximum]."""
    if maximum == _TOML_INT_MAX:
        rule = f"must be a whole number >= {minimum}, below 2**63 (e.g. {example})"
    else:
        rule = f"must be a whole number from {minimum} to {maximum:.0e} (e.g. {example})"
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ModelError(key, value, rule)
    if not minimum <= int(value) <= maximum:
        raise ModelError(key, value, rule)
    return int(value)


def _value(prefix, key, value, example="100_000"):
    """``value`` of the model-file key ``prefix + key`` checked against its row of
    ``_VALUE_KINDS``: a float (quantity, number) or an int (count) in its range."""
    field = _VALUE_KINDS[key]
    if field.kind == "count":
        return _count(prefix + key, value, field.lo, field.hi, example)
    x = _number(prefix + key, value, field.unit)
    if not field.contains(x):
        raise ModelError(prefix + key, _shown(x, field.unit), field.rule())
    return x


def _optional(prefix, key, value):
    return None if value is None else _value(prefix, key, value)


def _choice(key, value, choices):
    """Raise unless ``value`` is one of the strings ``choices``."""
    if isinstance(value, str) and value in choices:
        return value
    hint = did_you_mean(value, choices)
    raise ModelError(key, value, f"must be one of {', '.join(choices)}" + (f"; {hint}" if hint else ""))


def _check_component_name(name):
    if not isinstance(name, str) or not _NAME_PATTERN.match(name):
        rule = "a component name starts with a letter and uses only letters, digits, '_' and '-'"
        raise ModelError("components", name, rule)
    if len(name) > MAX_COMPONENT_NAME:
        rule = f"a component name has at most {MAX_COMPONENT_NAME} characters (got {len(name)})"
        raise ModelError("components", name, rule)


def _set(spec, field, value):
    object.__setattr__(spec, field, value)  # frozen dataclass: only __post_init__ may set


# ---------------------------------------------------------------- specs


@dataclass(frozen=True)
class OutputSpec:
    """Units of the written snapshot: strings astropy can parse, possibly scaled."""

    length_unit: str = "kpc"
    velocity_unit: str = "km/s"
    mass_unit: str = "1e10 Msun"

    def __post_init__(self):
        unit_scale(self.length_unit, "length", "output.length_unit")
        unit_scale(self.velocity_unit, "velocity", "output.velocity_unit")
        unit_scale(self.mass_unit, "mass", "output.mass_unit")


@dataclass(frozen=True)
class DiskSpec:
    """Exponential disk (Freeman 1970, ApJ 160, 811); masses Msun, lengths kpc.

    Exactly one of ``toomre_q`` (Toomre 1964, ApJ 139, 1217; at ``toomre_q_radius``,
    default 2.5 scale lengths), ``toomre_q_min`` (minimum over the disk) or
    ``sigma_ratio`` (sigma_R / sigma_z) sets the radial velocity dispersion.
    """

    name: str
    mass: float
    scale_length: float
    scale_height: float
    kind: str = "disk"
    profile: str = "exponential"
    vertical: str = "sech2"
    taper_radius: float | None = None
    taper_width: float | None = None
    toomre_q: float | None = None
    toomre_q_radius: float | None = None
    toomre_q_min: float | None = None
    sigma_ratio: float | None = None
    particles: int | None = None

    def __post_init__(self):
        _check_component_name(self.name)
        p = f"components.{self.name}."
        _choice(p + "kind", self.kind, ("disk",))
        _choice(p + "profile", self.profile, ("exponential",))
        _choice(p + "vertical", self.vertical, VERTICAL_PROFILES)
        _set(self, "mass", _value(p, "mass", self.mass))
        rd = _value(p, "scale_length", self.scale_length)
        _set(self, "scale_length", rd)
        zd = _value(p, "scale_height", self.scale_height)
        _set(self, "scale_height", zd)
        if zd >= rd:
            rule = f"must be smaller than scale_length ({rd:.10g} kpc)"
            raise ModelError(p + "scale_height", _shown(zd, "kpc"), rule)
        self._check_taper(p, rd)
        self._check_dispersion(p, rd)
        if self.particles is not None:
            _set(self, "particles", _value(p, "particles", self.particles))

    def _check_taper(self, p, rd):
        """taper_radius beyond the scale length; taper_width (default 0.5 scale lengths,
        at least MIN_TAPER_WIDTH_FRACTION x taper_radius) not too narrow for the potential."""
        taper = _optional(p, "taper_radius", self.taper_radius)
        width = _optional(p, "taper_width", self.taper_width)
        if taper is None:
            if width is not None:
                raise ModelError(p + "taper_width", _shown(width, "kpc"), "needs taper_radius")
            return
        if taper <= rd:
            rule = f"must be larger than scale_length ({rd:.10g} kpc)"
            raise ModelError(p + "taper_radius", _shown(taper, "kpc"), rule)
        least = MIN_TAPER_WIDTH_FRACTION * taper
        if width is None:
            width = max(TAPER_WIDTH_FACTOR * rd, least)
        elif width < least:
            rule = (f"must be at least {MIN_TAPER_WIDTH_FRACTION:g} x taper_radius = "
                    f"{least:.4g} kpc: the potential solver does not resolve a narrower taper "
                    f"(at half that width its forces near the taper are off by up to 3 %)")
            raise ModelError(p + "taper_width", _shown(width, "kpc"), rule)
        _set(self, "taper_radius", taper)
        _set(self, "taper_width", width)

    def _check_dispersion(self, p, rd):
        given = [k for k in ("toomre_q", "toomre_q_min", "sigma_ratio") if getattr(self, k) is not None]
        choices = "toomre_q, toomre_q_min or sigma_ratio"
        if not given:
            raise ModelError(p + "toomre_q", MISSING, f"missing: give one of {choices}")
        if len(given) > 1:
            rule = f"give only one of {choices} (also got {given[0]})"
            raise ModelError(p + given[1], getattr(self, given[1]), rule)
        _set(self, given[0], _value(p, given[0], getattr(self, given[0])))
        radius = _optional(p, "toomre_q_radius", self.toomre_q_radius)
        if self.toomre_q is None:
            if radius is not None:
                raise ModelError(p + "toomre_q_radius", _shown(radius, "kpc"), "needs toomre_q")
            return
        lo, hi = (f * rd for f in TOOMRE_Q_RADIUS_RANGE)
        if self.taper_radius is not None:
            hi = min(hi, self.taper_radius + TOOMRE_Q_TAPER_WIDTHS * self.taper_width)
        where = (f" and within taper_radius + {TOOMRE_Q_TAPER_WIDTHS:g} taper_width"
                 if hi < TOOMRE_Q_RADIUS_RANGE[1] * rd else "")
        span = (f"between {lo:.4g} and {hi:.4g} kpc ({TOOMRE_Q_RADIUS_RANGE[0]:g} to "
                f"{TOOMRE_Q_RADIUS_RANGE[1]:g} scale lengths{where}), where the disk is")
        if radius is None:
            radius = TOOMRE_Q_RADIUS_FACTOR * rd
            if radius > hi:
                raise ModelError(p + "toomre_q_radius", MISSING,
                                 f"the default {TOOMRE_Q_RADIUS_FACTOR:g} x scale_length = "
                                 f"{radius:.4g} kpc lies beyond the taper; give one {span}")
        elif not lo <= radius <= hi:
            raise ModelError(p + "toomre_q_radius", _shown(radius, "kpc"), f"must be {span}")
        _set(self, "toomre_q_radius", radius)


@dataclass(frozen=True)
class SpheroidSpec:
    """Spherical halo or bulge; masses Msun, lengths kpc, density Msun/kpc^3.

    Profiles: ``nfw`` (Navarro, Frenk & White 1997, ApJ 490, 493) from mass (M200) and
    concentration, or from density_scale (rho_s) and scale_radius; ``hernquist``
    (Hernquist 1990, ApJ 356, 359) and ``plummer`` (Plummer 1911, MNRAS 71, 460) from total
    mass and scale_radius, with an optional outer_radius (default: 30 half-mass radii) where
    their exponential cut starts; ``pseudo_isothermal`` and ``burkert`` (Burkert 1995, ApJ 447,
    L25) from the mass inside outer_radius and core_radius. ``truncation_width`` stays None
    unless given (the profile code picks its default). ``retrograde_flip_fraction`` is the
    probability that an orbit with L_z < 0 has its rotation reversed (net rotation).
    The exponential cut (outer_radius, truncation_width) is checked by ModelSpec, which
    knows the cosmology that sets an NFW halo's r200.
    """

    name: str
    kind: str
    profile: str
    mass: float | None = None
    scale_radius: float | None = None
    concentration: float | None = None
    density_scale: float | None = None
    core_radius: float | None = None
    outer_radius: float | None = None
    truncation_width: float | None = None
    particles: int | None = None
    velocities: str = "eddington"
    anisotropy_radius: float | None = None
    retrograde_flip_fraction: float = 0.0

    def __post_init__(self):
        _check_component_name(self.name)
        p = f"components.{self.name}."
        _choice(p + "kind", self.kind, ("halo", "bulge"))
        _choice(p + "profile", self.profile, SPHEROID_PROFILES)
        allowed = _PROFILE_KEYS[self.profile]
        for field in _SPHEROID_SHAPE_FIELDS:
            value = getattr(self, field)
            label = _unit_label(field)
            if value is not None and field not in allowed:
                raise ModelError(p + field, _shown(value, label), _not_for_profile(self.profile))
            _set(self, field, _optional(p, field, value))
        if self.profile == "nfw":
            self._check_nfw(p)
        else:
            self._check_required(p)
        _choice(p + "velocities", self.velocities, VELOCITY_METHODS)
        _set(self, "anisotropy_radius", _optional(p, "anisotropy_radius", self.anisotropy_radius))
        _set(self, "retrograde_flip_fraction",
             _value(p, "retrograde_flip_fraction", self.retrograde_flip_fraction))
        if self.particles is not None:
            _set(self, "particles", _value(p, "particles", self.particles))

    def _check_nfw(self, p):
        by_mass = [k for k in ("mass", "concentration") if getattr(self, k) is not None]
        by_density = [k for k in ("density_scale", "scale_radius") if getattr(self, k) is not None]
        rule = "nfw takes either mass and concentration, or density_scale and scale_radius"
        if by_mass and by_density:
            key = by_density[0]
            raise ModelError(p + key, _shown(getattr(self, key), _unit_label(key)), rule + ", not both")
        if not by_mass and not by_density:
            raise ModelError(p + "mass", MISSING, f"missing: {rule}")
        pair = ("mass", "concentration") if by_mass else ("density_scale", "scale_radius")
        for key in pair:
            if getattr(self, key) is None:
                raise ModelError(p + key, MISSING, f"missing: {rule}")

    def _check_required(self, p):
        finite = self.profile in ("hernquist", "plummer")      # the cut is optional
        optional = ("truncation_width",) + (("outer_radius",) if finite else ())
        needed = [k for k in _PROFILE_KEYS[self.profile] if k not in optional]
        for key in needed:
            if getattr(self, key) is None:
                rule = f"required for profile '{self.profile}' (it needs {', '.join(needed)})"
                raise ModelError(p + key, MISSING, rule)
        inner, name = ((self.core_radius, "core_radius") if self.core_radius
                       else (self.scale_radius, "scale_radius"))
        if self.outer_radius is not None and self.outer_radius <= inner:
            rule = f"must be larger than {name} ({inner:.10g} kpc)"
            raise ModelError(p + "outer_radius", _shown(self.outer_radius, "kpc"), rule)


def _not_for_profile(profile):
    takes = ", ".join(_PROFILE_KEYS[profile] + _SPHEROID_COMMON_KEYS)
    return f"does not apply to profile '{profile}' (it takes: {takes})"


@dataclass(frozen=True)
class PointMassSpec:
    """A single particle of ``mass`` Msun at the centre (e.g. a central black hole)."""

    name: str
    mass: float
    kind: str = "point_mass"
    particles: int = 1

    def __post_init__(self):
        _check_component_name(self.name)
        p = f"components.{self.name}."
        _choice(p + "kind", self.kind, ("point_mass",))
        _set(self, "mass", _value(p, "mass", self.mass))
        # One particle: several at the same point would have no meaningful forces.
        if isinstance(self.particles, bool) or self.particles != 1:
            raise ModelError(p + "particles", self.particles, "a point mass is one particle: must be 1")
        _set(self, "particles", 1)


def _check_component_count(n):
    if n > MAX_COMPONENTS:
        rule = f"the model has {n} components; at most {MAX_COMPONENTS} are allowed"
        raise ModelError("components", MISSING, rule)


class _CriticalDensity:
    """rho_crit (Msun/kpc^3) of the model's cosmology, computed on first use only (the
    astropy.cosmology import takes seconds, and most models never need it here)."""

    def __init__(self, cosmology, redshift):
        self.args, self.value = (cosmology, redshift), None

    def __call__(self):
        if self.value is None:
            self.value = critical_density(*self.args)
        return self.value


def _nfw_m(c):
    """m(c) = ln(1 + c) - c/(1 + c), the NFW mass inside c r_s in units of 4 pi rho_s r_s^3
    (Navarro, Frenk & White 1997, ApJ 490, 493, eq. 2 integrated)."""
    return math.log1p(c) - c / (1 + c)


def _nfw_density_for(c, rho_crit):
    """rho_s (Msun/kpc^3) of the NFW halo of concentration c: the mean density inside
    r200 = c r_s is 200 rho_crit, i.e. 3 rho_s m(c) / c^3 = 200 rho_crit."""
    return 200 * rho_crit * c**3 / (3 * _nfw_m(c))


def _nfw_concentration(rho_s, rho_crit, p):
    """Concentration of the NFW halo of density scale rho_s (Msun/kpc^3); ModelError unless
    it lies in the range of the ``concentration`` key. rho_s(c) rises monotonically
    (c^3/m(c) does), so the range of c is a range of rho_s, and bisection in ln c finds c."""
    field = _VALUE_KINDS["concentration"]
    lo, hi = _nfw_density_for(field.lo, rho_crit), _nfw_density_for(field.hi, rho_crit)
    if not lo < rho_s <= hi:
        rule = (f"must be > {lo:.4g} and at most {hi:.4g} Msun/kpc3 for this cosmology and "
                f"redshift (rho_crit = {rho_crit:.4g} Msun/kpc3): it sets the concentration "
                f"r200/r_s, which {field.rule()}")
        raise ModelError(p + "density_scale", _shown(rho_s, "Msun/kpc3"), rule)
    a, b = math.log(field.lo), math.log(field.hi)
    for _ in range(80):        # 80 halvings of ln(1000) reach float precision
        mid = 0.5 * (a + b)
        a, b = (mid, b) if _nfw_density_for(math.exp(mid), rho_crit) < rho_s else (a, mid)
    return math.exp(0.5 * (a + b))


def _min_cut_fraction(profile, ratio):
    """Smallest truncation_width / outer_radius for ``profile`` cut at ``ratio`` = outer
    radius / scale radius: the measured limit (linear in ln ratio, extended linearly below
    the first point, flat beyond the last) times _CUT_MARGIN."""
    if profile not in _MIN_CUT_FRACTION:
        return _CUT_FALLBACK
    x, y = np.log(_MIN_CUT_RATIO), np.asarray(_MIN_CUT_FRACTION[profile])
    t = math.log(ratio)
    if t < x[0]:
        value = y[0] + (y[1] - y[0]) / (x[1] - x[0]) * (t - x[0])
    else:
        value = float(np.interp(t, x, y))
    return _CUT_MARGIN * value


def _check_cut(spec, rho_crit):
    """Outer cut of a spheroid (Kazantzidis, Magorrian & Moore 2004): outer radius r_t
    beyond the scale radius, decay length r_d (default 0.1 r_t) at least the measured
    _min_cut_fraction of r_t. ``rho_crit()`` gives the critical density (NFW r200)."""
    p = f"components.{spec.name}."
    default = defaults.TRUNCATION_DECAY_FRACTION
    if spec.profile == "nfw":
        if spec.density_scale is not None:
            c = _nfw_concentration(spec.density_scale, rho_crit(), p)
            r_s, r200 = spec.scale_radius, c * spec.scale_radius
        elif spec.outer_radius is None and spec.truncation_width is None:
            r_s, r200 = 1.0, spec.concentration      # only the ratios matter here
        else:
            r200 = (3 * spec.mass / (800 * math.pi * rho_crit())) ** (1.0 / 3.0)
            r_s = r200 / spec.concentration
        if spec.outer_radius is not None and spec.outer_radius <= r_s:
            rule = f"must be larger than the NFW scale radius r_s = r200/c = {r_s:.4g} kpc"
            raise ModelError(p + "outer_radius", _shown(spec.outer_radius, "kpc"), rule)
        r_t, name = spec.outer_radius or r200, "scale radii"
        r_t_is = "outer_radius" if spec.outer_radius else "r200"
    elif spec.profile in ("pseudo_isothermal", "burkert"):
        r_s, r_t, name = spec.core_radius, spec.outer_radius, "core radii"
        r_t_is = "outer_radius"
    elif spec.profile in ("hernquist", "plummer"):
        from icgen.profiles.spheroid import default_outer_radius
        r_s, name = spec.scale_radius, "scale radii"
        r_t = spec.outer_radius or default_outer_radius(spec.profile, r_s)
        r_t_is = "outer_radius" if spec.outer_radius else "the default outer radius"
    else:
        return
    least = _min_cut_fraction(spec.profile, r_t / r_s)
    width = spec.truncation_width
    if (default if width is None else width / r_t) >= least:
        return
    measured = "limit measured" if spec.profile in _MIN_CUT_FRACTION else "not measured: the default"
    why = (f"for the {spec.profile} profile cut at {r_t / r_s:.3g} {name}: a faster decay makes "
           f"the isotropic distribution function negative just outside the cut ({measured})")
    if width is None:
        rule = (f"the default {default:g} x {r_t_is} ({r_t:.4g} kpc) is too short {why}; give "
                f"truncation_width >= {least * r_t:.4g} kpc")
        raise ModelError(p + "truncation_width", MISSING, rule)
    rule = (f"must be at least {least:.3g} x {r_t_is} ({r_t:.4g} kpc) = {least * r_t:.4g} kpc "
            f"{why}")
    raise ModelError(p + "truncation_width", _shown(width, "kpc"), rule)


def _spec_types():
    from icgen.gas_spec import GasDiskSpec
    return (DiskSpec, SpheroidSpec, PointMassSpec, GasDiskSpec)


@dataclass(frozen=True)
class ModelSpec:
    """A whole model: components in file order plus model-wide settings.

    ``particle_mass`` (Msun) is the common particle mass used for components that give no
    ``particles``; the sampler turns it into counts.
    """

    name: str
    seed: int
    components: tuple
    cosmology: str = "Planck18"
    redshift: float = 0.0
    particle_mass: float | None = None
    output: OutputSpec = OutputSpec()
    quiet_start: bool = False
    mirror: bool = False

    def __post_init__(self):
        if not isinstance(self.name, str) or not self.name.strip() or not self.name.isprintable():
            raise ModelError("model.name", self.name, "must be a non-empty line of text")
        if len(self.name) > MAX_MODEL_NAME:
            rule = f"must be at most {MAX_MODEL_NAME} characters long (got {len(self.name)})"
            raise ModelError("model.name", self.name, rule)
        _set(self, "seed", _value("model.", "seed", self.seed, example="12345"))
        check_cosmology(self.cosmology)
        _set(self, "redshift", _value("model.", "redshift", self.redshift))
        _set(self, "particle_mass", _optional("model.", "particle_mass", self.particle_mass))
        if not isinstance(self.output, OutputSpec):
            raise ModelError("output", self.output, "must be an OutputSpec")
        for key in ("quiet_start", "mirror"):
            if not isinstance(getattr(self, key), bool):
                raise ModelError(f"model.{key}", getattr(self, key), "must be true or false")
        self._check_components()

    def _check_components(self):
        if not isinstance(self.components, (tuple, list)) or not self.components:
            rule = "the model needs at least one component, e.g. [components.halo] with kind = 'halo'"
            raise ModelError("components", MISSING, rule)
        _check_component_count(len(self.components))
        _set(self, "components", tuple(self.components))
        names = set()
        for spec in self.components:
            if not isinstance(spec, _spec_types()):
                raise ModelError("components", spec, "each must be a DiskSpec, SpheroidSpec or PointMassSpec")
            if spec.name in names:
                raise ModelError("components", spec.name, "component names must be unique")
            names.add(spec.name)
            if spec.particles is None and self.particle_mass is None:
                rule = ("required unless [model] sets particle_mass; give a whole number, "
                        "e.g. 100_000, or model.particle_mass = '1e5 Msun'")  # fmt: skip
                raise ModelError(f"components.{spec.name}.particles", MISSING, rule)
        rho_crit = _CriticalDensity(self.cosmology, self.redshift)
        for spec in self.components:
            if isinstance(spec, SpheroidSpec):
                _check_cut(spec, rho_crit)
            if spec.particles is None:
                self._check_count_from_particle_mass(spec, rho_crit)

    def _check_count_from_particle_mass(self, spec, rho_crit):
        """The count mass / particle_mass of a component without ``particles`` must obey
        the rule of ``particles`` (mass: M200 for an NFW halo, before its outer cut)."""
        mass = spec.mass
        if mass is None:   # nfw from density_scale and scale_radius
            c = _nfw_concentration(spec.density_scale, rho_crit(), f"components.{spec.name}.")
            mass = 4 * math.pi * spec.density_scale * spec.scale_radius**3 * _nfw_m(c)
        field = _VALUE_KINDS["particles"]
        if mass / self.particle_mass > field.hi:
            rule = (f"gives component {spec.name!r} ({mass:.3g} Msun) "
                    f"{mass / self.particle_mass:.3g} particles; at most {field.hi:.0e}")
            raise ModelError("model.particle_mass", _shown(self.particle_mass, "Msun"), rule)

    def component(self, name):
        """Return the component spec called ``name`` (ModelError if there is none)."""
        for spec in self.components:
            if spec.name == name:
                return spec
        names = [spec.name for spec in self.components]
        hint = did_you_mean(name, names)
        rule = f"no such component (have: {', '.join(names)})" + (f"; {hint}" if hint else "")
        raise ModelError("components", name, rule)

    def to_toml(self):
        """The fully resolved model as TOML text; loading it gives back an equal spec.

        Dimensional values are written in internal units with repr-exact floats.
        """
        lines = ["[model]", f"name = {_toml_string(self.name)}", f"seed = {self.seed}",
                 f"cosmology = {_toml_string(self.cosmology)}", f"redshift = {self.redshift!r}"]  # fmt: skip
        if self.particle_mass is not None:
            lines.append(f"particle_mass = {_toml_value('particle_mass', self.particle_mass)}")
        lines += [f"{k} = true" for k in ("quiet_start", "mirror") if getattr(self, k)]
        lines += ["", "[output]"]
        lines += [f"{k} = {_toml_string(getattr(self.output, k))}" for k in _OUTPUT_KEYS]
        for spec in self.components:
            lines += ["", f"[components.{spec.name}]", f"kind = {_toml_string(spec.kind)}"]
            for field in dataclasses.fields(spec):
                value = getattr(spec, field.name)
                if field.name not in ("name", "kind") and value is not None:
                    lines.append(f"{field.name} = {_toml_value(field.name, value)}")
        return "\n".join(lines) + "\n"


def model_warnings(spec):
    """Messages for legal values that keep a model from staying in equilibrium once
    simulated (``icgen build`` prints them with the sampler's warnings).

    A disk with toomre_q or toomre_q_min below 1 is locally unstable to axisymmetric
    perturbations (Toomre 1964, ApJ 139, 1217): it fragments or heats within a few
    rotations. Not an error: cold and unstable disks are studied on purpose.
    """
    out = []
    for c in spec.components:
        for key in ("toomre_q", "toomre_q_min"):
            q = getattr(c, key, None) if isinstance(c, DiskSpec) else None
            if q is not None and q < 1:
                out.append(f"disk {c.name!r}: {key} = {q:g} is below 1: locally unstable to "
                           f"axisymmetric perturbations (Toomre 1964, ApJ 139, 1217), it will "
                           f"fragment or heat within a few rotations")
    return out


# ---------------------------------------------------------------- TOML writing


# TOML basic-string escapes; control characters too, so a string stays on one line.
_TOML_ESCAPES = {ord('"'): '\\"', ord("\\"): "\\\\", 0x7F: "\\u007F"}
_TOML_ESCAPES.update({code: f"\\u{code:04X}" for code in range(0x20)})


def _toml_string(text):
    """``text`` as a TOML basic string."""
    return '"' + text.translate(_TOML_ESCAPES) + '"'


def _toml_value(key, value):
    field = _VALUE_KINDS[key]
    if field.kind == "text":
        return _toml_string(value)
    if field.kind == "count":
        return str(int(value))
    if field.kind == "flag":
        return "true" if value else "false"
    if field.kind == "number":
        return repr(float(value))
    return _toml_string(f"{float(value)!r} {field.unit}")


# ---------------------------------------------------------------- loading


def _key(*parts):
    """Dotted key for messages; parts that are not bare TOML keys are quoted."""
    shown = []
    for part in parts:
        if isinstance(part, str):
            shown.append(part if _BARE_KEY.match(part) else _toml_string(part))
        else:
            shown.append(f"<{type(part).__name__}>")
    return ".".join(shown)


def _reject_unknown(table, allowed, prefix, where):
    """ModelError for the first key of ``table`` not in ``allowed`` (nothing else is read)."""
    for key, value in table.items():
        if key in allowed:
            continue
        full = _key(*prefix, key)
        if key in _RENAMED and _RENAMED[key][0] in allowed:
            new, why = _RENAMED[key]
            raise ModelError(full, value, f"renamed: use {new} ({why})")
        hint = did_you_mean(key, allowed) or f"allowed: {', '.join(allowed)}"
        raise ModelError(full, value, f"unknown key {where}; {hint}")


def _table(parent, key, example):
    value = parent.get(key, {})
    if not isinstance(value, dict):
        raise ModelError(key, value, f"must be a table, e.g. {example}")
    return value


def _convert(full_key, key, value):
    """File value -> spec value: dimensional strings to internal floats, rest as is."""
    field = _VALUE_KINDS[key]
    if field.kind == "quantity":
        return parse_quantity(value, full_key, field.astropy_unit)
    return value


def _component_from_table(name, table):
    _check_component_name(name)
    if not isinstance(table, dict):
        raise ModelError(_key("components", name), table, "must be a table with a kind, e.g. kind = 'disk'")
    kind = table.get("kind", MISSING)
    if kind is MISSING:
        raise ModelError(_key("components", name, "kind"), MISSING, f"missing; one of {', '.join(KINDS)}")
    _choice(_key("components", name, "kind"), kind, KINDS)
    if kind == "gas_disk":
        from icgen.gas_spec import GAS_KEYS, GasDiskSpec
        cls, allowed, required = GasDiskSpec, GAS_KEYS, ("mass", "scale_length")
    elif kind == "disk":
        cls, allowed, required = DiskSpec, _DISK_KEYS, ("mass", "scale_length", "scale_height")
    elif kind == "point_mass":
        cls, allowed, required = PointMassSpec, _POINT_MASS_KEYS, ("mass",)
    else:
        profile = table.get("profile", MISSING)
        if profile is MISSING:
            rule = f"missing; one of {', '.join(SPHEROID_PROFILES)}"
            raise ModelError(_key("components", name, "profile"), MISSING, rule)
        _choice(_key("components", name, "profile"), profile, SPHEROID_PROFILES)
        cls, allowed, required = SpheroidSpec, _SPHEROID_COMMON_KEYS + _PROFILE_KEYS[profile], ()
        for key, value in table.items():
            if key in _SPHEROID_SHAPE_FIELDS and key not in allowed:
                raise ModelError(_key("components", name, key), value, _not_for_profile(profile))
    _reject_unknown(table, allowed, ("components", name), f"for a {kind}")
    kwargs = {key: _convert(_key("components", name, key), key, value) for key, value in table.items()}
    for key in required:
        if key not in kwargs:
            example = {"mass": "5e10 Msun", "scale_length": "3 kpc", "scale_height": "0.3 kpc"}[key]
            rule = f"required for a {kind}; give a string with a unit, e.g. '{example}'"
            raise ModelError(_key("components", name, key), MISSING, rule)
    return cls(name=name, **kwargs)


def spec_from_dict(data):
    """Build a :class:`ModelSpec` from a dict shaped like the TOML model file.

    Raises ModelError (and nothing else) for any bad input.
    """
    if not isinstance(data, dict):
        raise ModelError("<model>", data, "must be a table holding [model], [output] and [components.<name>]")
    _reject_unknown(data, _TOP_KEYS, (), "at the top level")
    model = _table(data, "model", "[model] with name = '...'")
    output = _table(data, "output", "[output] with length_unit = 'kpc'")
    components = _table(data, "components", "[components.disk] with kind = 'disk'")
    _reject_unknown(model, _MODEL_KEYS, ("model",), "in [model]")
    _reject_unknown(output, _OUTPUT_KEYS, ("output",), "in [output]")
    _check_component_count(len(components))
    specs = tuple(_component_from_table(name, table) for name, table in components.items())
    settings = {key: _convert(_key("model", key), key, value) for key, value in model.items()}
    settings.setdefault("name", DEFAULT_MODEL_NAME)
    settings.setdefault("seed", DEFAULT_SEED)
    return ModelSpec(components=specs, output=OutputSpec(**output), **settings)


_TOML_LINE = re.compile(r"at line (\d+)")


def _too_large(source, size, what):
    rule = (f"{what} is {size / 1e6:.3g} MB; a model file may hold at most "
            f"{MAX_MODEL_BYTES / 1e6:g} MB (a model of {MAX_COMPONENTS} commented components "
            f"needs ~0.1 MB)")
    return ModelError(source, MISSING, rule)


def _parse_toml(text, source):
    """TOML text -> dict; every failure becomes a ModelError naming ``source``."""
    if not isinstance(text, str):
        raise ModelError(source, text, "must be TOML text (a str)")
    if len(text) > MAX_MODEL_BYTES:
        raise _too_large(source, len(text), "the text")
    try:
        return tomllib.loads(text)
    except ValueError as exc:  # TOMLDecodeError, or an integer literal too long to convert
        found = _TOML_LINE.search(str(exc))
        lines = text.splitlines()
        line = lines[int(found.group(1)) - 1] if found and int(found.group(1)) <= len(lines) else MISSING
        raise ModelError(source, line, f"not valid TOML: {exc}") from None
    except RecursionError:
        raise ModelError(source, MISSING, "not valid TOML: arrays or tables nested too deeply") from None


def spec_from_toml_text(text, source="<string>"):
    """Parse TOML text and build a :class:`ModelSpec`; ``source`` names it in errors."""
    return spec_from_dict(_parse_toml(text, source))


def load_dict(path=None):
    """Read a TOML model file (str or PathLike, UTF-8; ``None``: the built-in default)
    into a plain, not yet validated dict for :func:`spec_from_dict`."""
    if path is None:
        from icgen.default_model import DEFAULT_MODEL_TOML

        return _parse_toml(DEFAULT_MODEL_TOML, "<default model>")
    try:
        # Bytes, not text mode: text mode would turn a lone CR into a newline. At most
        # one byte more than the limit is read (a device or pipe may never end).
        with open(Path(path), "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            if size > MAX_MODEL_BYTES:
                raise _too_large(str(path), size, "the file")
            data = fh.read(MAX_MODEL_BYTES + 1)
        if len(data) > MAX_MODEL_BYTES:
            raise _too_large(str(path), len(data), "the file")
        text = data.decode("utf-8")
    except TypeError:
        raise ModelError("<file>", path, "must be the path of a TOML model file") from None
    except FileNotFoundError:
        raise ModelError(str(path), MISSING, "no such file") from None
    except OSError as exc:
        raise ModelError(str(path), MISSING, f"cannot read: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise ModelError(str(path), MISSING, f"not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    return _parse_toml(text, str(path))


def load_spec(path=None):
    """Load a TOML model file (str or PathLike; ``None``: the default) as a :class:`ModelSpec`."""
    return spec_from_dict(load_dict(path))
