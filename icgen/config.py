"""Model file (TOML) -> validated, frozen dataclasses in internal units.

Units inside: length kpc, mass Msun, density Msun/kpc^3 (see :mod:`icgen.units`).
Every check lives in the dataclasses' ``__post_init__``, so a spec built from Python is
validated just as one read from a file; the loader adds what only a file can get wrong
(unknown keys, strings with units, missing required keys). All problems raise
:class:`~icgen.errors.ModelError` with a one-line message naming the model-file key.

Defaults not spelled out in the file: ``model.name`` is "unnamed model", ``model.seed`` is 1,
``model.cosmology`` is "Planck18" at ``model.redshift`` 0, ``model.quiet_start`` and
``model.mirror`` are false.
"""

import dataclasses
import math
import numbers
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

import astropy.units as u

from icgen.errors import MISSING, ModelError, did_you_mean
from icgen.units import check_cosmology, parse_quantity, unit_scale

__all__ = ["OutputSpec", "DiskSpec", "SpheroidSpec", "PointMassSpec", "ModelSpec",
           "load_spec", "load_dict", "spec_from_toml_text", "spec_from_dict"]  # fmt: skip

DEFAULT_MODEL_NAME = "unnamed model"
DEFAULT_SEED = 1
#: Default taper_width, in disk scale lengths (when taper_radius is given).
TAPER_WIDTH_FACTOR = 0.5
#: Default reference radius of toomre_q, in disk scale lengths; 2.5 Rd is where a
#: Milky-Way-like disk's Q is usually quoted (common practice, from memory).
TOOMRE_Q_RADIUS_FACTOR = 2.5
# TOML integers are 64-bit signed: larger ones could not be written back.
_TOML_INT_MAX = 2**63 - 1
# Component names become TOML keys and HDF5 group names: keep them plain.
_NAME_PATTERN = re.compile(r"[A-Za-z][A-Za-z0-9_-]*\Z")
_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+\Z")

SPHEROID_PROFILES = ("nfw", "hernquist", "plummer", "pseudo_isothermal", "burkert")
VERTICAL_PROFILES = ("sech2", "exponential")
VELOCITY_METHODS = ("eddington", "jeans")
KINDS = ("halo", "bulge", "disk", "gas_disk", "point_mass")

# How each key is read and written: (label, astropy unit) for dimensional keys,
# "number" for dimensionless floats, "count" for integers, "text" for strings, "flag" for
# true/false.
_LENGTH = ("kpc", u.kpc)
_MASS = ("Msun", u.Msun)
_DENSITY = ("Msun/kpc3", u.Msun / u.kpc**3)
_VALUE_KINDS = {
    "mass": _MASS, "particle_mass": _MASS, "density_scale": _DENSITY,
    "scale_length": _LENGTH, "scale_height": _LENGTH, "taper_radius": _LENGTH,
    "taper_width": _LENGTH, "toomre_q_radius": _LENGTH, "scale_radius": _LENGTH,
    "core_radius": _LENGTH, "outer_radius": _LENGTH, "truncation_width": _LENGTH,
    "anisotropy_radius": _LENGTH, "temperature": ("K", u.K),
    "sound_speed": ("km/s", u.km / u.s), "mean_molecular_weight": "number",
    "adiabatic_index": "number",
    "toomre_q": "number", "toomre_q_min": "number", "sigma_ratio": "number",
    "concentration": "number", "spin": "number", "redshift": "number",
    "particles": "count", "seed": "count", "quiet_start": "flag", "mirror": "flag",
    "name": "text", "kind": "text", "profile": "text", "vertical": "text",
    "velocities": "text", "cosmology": "text",
    "length_unit": "text", "velocity_unit": "text", "mass_unit": "text",
}  # fmt: skip

_TOP_KEYS = ("model", "output", "components")
_MODEL_KEYS = ("name", "seed", "cosmology", "redshift", "particle_mass", "quiet_start", "mirror")
_OUTPUT_KEYS = ("length_unit", "velocity_unit", "mass_unit")
_DISK_KEYS = ("kind", "profile", "mass", "scale_length", "scale_height", "vertical",
              "taper_radius", "taper_width", "toomre_q", "toomre_q_radius", "toomre_q_min",
              "sigma_ratio", "particles")  # fmt: skip
_POINT_MASS_KEYS = ("kind", "mass", "particles")
_SPHEROID_COMMON_KEYS = ("kind", "profile", "particles", "velocities", "anisotropy_radius", "spin")
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


# ---------------------------------------------------------------- value checks


def _unit_label(key):
    """'kpc', 'Msun', ... for a dimensional key; None for the others."""
    kind = _VALUE_KINDS[key]
    return kind[0] if isinstance(kind, tuple) else None


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


def _positive(key, value, unit=None):
    x = _number(key, value, unit)
    if x <= 0:
        raise ModelError(key, _shown(x, unit), "must be > 0")
    return x


def _optional_positive(key, value, unit=None):
    return None if value is None else _positive(key, value, unit)


def _count(key, value, minimum, example="100_000"):
    """Return ``value`` as an int in [minimum, 2**63 - 1]."""
    rule = f"must be a whole number >= {minimum} (e.g. {example})"
    if isinstance(value, bool) or not isinstance(value, numbers.Integral):
        raise ModelError(key, value, rule)
    n = int(value)
    if not minimum <= n <= _TOML_INT_MAX:
        raise ModelError(key, value, f"{rule}, below 2**63")
    return n


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
        _set(self, "mass", _positive(p + "mass", self.mass, "Msun"))
        rd = _positive(p + "scale_length", self.scale_length, "kpc")
        _set(self, "scale_length", rd)
        zd = _positive(p + "scale_height", self.scale_height, "kpc")
        _set(self, "scale_height", zd)
        if zd >= rd:
            rule = f"must be smaller than scale_length ({rd:.10g} kpc)"
            raise ModelError(p + "scale_height", _shown(zd, "kpc"), rule)
        self._check_taper(p, rd)
        self._check_dispersion(p, rd)
        if self.particles is not None:
            _set(self, "particles", _count(p + "particles", self.particles, 1))

    def _check_taper(self, p, rd):
        taper = _optional_positive(p + "taper_radius", self.taper_radius, "kpc")
        width = _optional_positive(p + "taper_width", self.taper_width, "kpc")
        if taper is None:
            if width is not None:
                raise ModelError(p + "taper_width", _shown(width, "kpc"), "needs taper_radius")
            return
        if taper <= rd:
            rule = f"must be larger than scale_length ({rd:.10g} kpc)"
            raise ModelError(p + "taper_radius", _shown(taper, "kpc"), rule)
        _set(self, "taper_radius", taper)
        _set(self, "taper_width", TAPER_WIDTH_FACTOR * rd if width is None else width)

    def _check_dispersion(self, p, rd):
        given = [k for k in ("toomre_q", "toomre_q_min", "sigma_ratio") if getattr(self, k) is not None]
        choices = "toomre_q, toomre_q_min or sigma_ratio"
        if not given:
            raise ModelError(p + "toomre_q", MISSING, f"missing: give one of {choices}")
        if len(given) > 1:
            rule = f"give only one of {choices} (also got {given[0]})"
            raise ModelError(p + given[1], getattr(self, given[1]), rule)
        _set(self, given[0], _positive(p + given[0], getattr(self, given[0])))
        radius = _optional_positive(p + "toomre_q_radius", self.toomre_q_radius, "kpc")
        if self.toomre_q is None:
            if radius is not None:
                raise ModelError(p + "toomre_q_radius", _shown(radius, "kpc"), "needs toomre_q")
            return
        if radius is None:
            radius = TOOMRE_Q_RADIUS_FACTOR * rd
            if not math.isfinite(radius):
                raise ModelError(p + "scale_length", _shown(rd, "kpc"), "too large")
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
    unless given (the profile code picks its default).
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
    spin: float = 0.0

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
            _set(self, field, _optional_positive(p + field, value, label))
        if self.profile == "nfw":
            self._check_nfw(p)
        else:
            self._check_required(p)
        _choice(p + "velocities", self.velocities, VELOCITY_METHODS)
        _set(self, "anisotropy_radius",
             _optional_positive(p + "anisotropy_radius", self.anisotropy_radius, "kpc"))  # fmt: skip
        spin = _number(p + "spin", self.spin)
        if not 0.0 <= spin <= 1.0:
            raise ModelError(p + "spin", spin, "must be between 0 and 1 (fraction of orbits flipped)")
        _set(self, "spin", spin)
        if self.particles is not None:
            _set(self, "particles", _count(p + "particles", self.particles, 1))

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
        if self.concentration is not None and self.concentration <= 1:
            raise ModelError(p + "concentration", self.concentration, "must be > 1")

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
        _set(self, "mass", _positive(p + "mass", self.mass, "Msun"))
        # One particle: several at the same point would have no meaningful forces.
        if isinstance(self.particles, bool) or self.particles != 1:
            raise ModelError(p + "particles", self.particles, "a point mass is one particle: must be 1")
        _set(self, "particles", 1)


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
        _set(self, "seed", _count("model.seed", self.seed, 0, example="12345"))
        check_cosmology(self.cosmology)
        redshift = _number("model.redshift", self.redshift)
        if redshift < 0:
            raise ModelError("model.redshift", redshift, "must be >= 0")
        _set(self, "redshift", redshift)
        _set(self, "particle_mass",
             _optional_positive("model.particle_mass", self.particle_mass, "Msun"))  # fmt: skip
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


# ---------------------------------------------------------------- TOML writing


# TOML basic-string escapes; control characters too, so a string stays on one line.
_TOML_ESCAPES = {ord('"'): '\\"', ord("\\"): "\\\\", 0x7F: "\\u007F"}
_TOML_ESCAPES.update({code: f"\\u{code:04X}" for code in range(0x20)})


def _toml_string(text):
    """``text`` as a TOML basic string."""
    return '"' + text.translate(_TOML_ESCAPES) + '"'


def _toml_value(key, value):
    kind = _VALUE_KINDS[key]
    if kind == "text":
        return _toml_string(value)
    if kind == "count":
        return str(int(value))
    if kind == "flag":
        return "true" if value else "false"
    if kind == "number":
        return repr(float(value))
    return _toml_string(f"{float(value)!r} {kind[0]}")


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
    for key, value in table.items():
        if key in allowed:
            continue
        hint = did_you_mean(key, allowed) or f"allowed: {', '.join(allowed)}"
        full = _key(*prefix, key)
        raise ModelError(full, value, f"unknown key {where}; {hint}")


def _table(parent, key, example):
    value = parent.get(key, {})
    if not isinstance(value, dict):
        raise ModelError(key, value, f"must be a table, e.g. {example}")
    return value


def _convert(full_key, key, value):
    """File value -> spec value: dimensional strings to internal floats, rest as is."""
    kind = _VALUE_KINDS[key]
    if isinstance(kind, tuple):
        return parse_quantity(value, full_key, kind[1])
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
    specs = tuple(_component_from_table(name, table) for name, table in components.items())
    settings = {key: _convert(_key("model", key), key, value) for key, value in model.items()}
    settings.setdefault("name", DEFAULT_MODEL_NAME)
    settings.setdefault("seed", DEFAULT_SEED)
    return ModelSpec(components=specs, output=OutputSpec(**output), **settings)


_TOML_LINE = re.compile(r"at line (\d+)")


def _parse_toml(text, source):
    """TOML text -> dict; every failure becomes a ModelError naming ``source``."""
    if not isinstance(text, str):
        raise ModelError(source, text, "must be TOML text (a str)")
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
        # Bytes, not text mode: text mode would turn a lone CR into a newline.
        text = Path(path).read_bytes().decode("utf-8")
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
