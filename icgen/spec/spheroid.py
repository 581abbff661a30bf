"""Model-file spec of a spherical halo or bulge (``kind = "halo"`` or ``"bulge"``) and the
rules of its outer cut (Kazantzidis, Magorrian & Moore 2004, ApJ 601, 37), with the
measured limit tables behind them.

Lengths kpc, masses Msun, densities Msun/kpc^3.
"""

import math
from dataclasses import dataclass

import numpy as np

from icgen import defaults
from icgen.errors import MISSING, ModelError
from icgen.units import critical_density

from .fields import VALUE_KINDS, choice, component_prefix, shown, unit_label, validate_fields

SPHEROID_PROFILES = ("nfw", "hernquist", "plummer", "pseudo_isothermal", "burkert")
VELOCITY_METHODS = ("eddington", "jeans")
SPHEROID_COMMON_KEYS = ("kind", "profile", "particles", "velocities", "anisotropy_radius",
                        "retrograde_flip_fraction")  # fmt: skip
PROFILE_KEYS = {
    "nfw": ("mass", "concentration", "density_scale", "scale_radius", "outer_radius",
            "truncation_width"),
    "hernquist": ("mass", "scale_radius", "outer_radius", "truncation_width"),
    "plummer": ("mass", "scale_radius", "outer_radius", "truncation_width"),
    "pseudo_isothermal": ("mass", "core_radius", "outer_radius", "truncation_width"),
    "burkert": ("mass", "core_radius", "outer_radius", "truncation_width"),
}  # fmt: skip
SPHEROID_SHAPE_FIELDS = ("mass", "scale_radius", "concentration", "density_scale",
                         "core_radius", "outer_radius", "truncation_width")  # fmt: skip

# Half-mass radii of the uncut laws of finite mass, in scale radii: (1 + sqrt 2) a for
# Hernquist (1990, ApJ 356, 359, eq. 4); b / sqrt(2^(2/3) - 1) for Plummer (1911, MNRAS
# 71, 460), from M(r) = M x^3/(1+x^2)^1.5.
HERNQUIST_HALF_MASS_X = 1 + np.sqrt(2.0)
PLUMMER_HALF_MASS_X = 1.0 / np.sqrt(2.0 ** (2.0 / 3.0) - 1.0)
_HALF_MASS_X = {"hernquist": HERNQUIST_HALF_MASS_X, "plummer": PLUMMER_HALF_MASS_X}
# The cut of a law of finite mass (Hernquist, Plummer) starts, by default, at this many
# half-mass radii of the uncut law: 72.4 a for Hernquist (which holds 97.3 % of its mass
# inside; the cut adds back 0.7 %, so rho0 is 1.95 % above that of an uncut sphere of the
# same mass), 39.1 b for Plummer (99.90 %). With the decay length r_d = 0.1 r_t the
# farthest of N particles then lies at 80 (N = 1e6) to 100 (N = 1e8) median radii for
# Hernquist, 62 to 82 for Plummer (the 1 - 1/N quantile of the sampled CDF, measured); an
# uncut Hernquist sphere of 5e4 particles put its farthest at 3400 median radii.
DEFAULT_CUT_HALF_MASS_RADII = 30.0

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
CUT_MARGIN = 1.1
#: For a profile without measured limits (Hernquist, Plummer): the default decay fraction, 0.1,
#: above every measured limit but the pseudo-isothermal one at outer_radius < 2 r_c.
_CUT_FALLBACK = defaults.TRUNCATION_DECAY_FRACTION


def default_outer_radius(profile, scale_radius):
    """Default outer radius (kpc) of a law of finite mass ("hernquist" or "plummer";
    ``scale_radius`` in kpc): DEFAULT_CUT_HALF_MASS_RADII half-mass radii of the uncut law."""
    return DEFAULT_CUT_HALF_MASS_RADII * _HALF_MASS_X[profile] * scale_radius


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
    knows the cosmology that sets an NFW halo's r200 (:func:`check_cut`).
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

    @classmethod
    def table_keys(cls, prefix, table):
        """(allowed, required) keys of a halo's or bulge's model-file ``table``: those of
        its profile (ModelError for a missing or unknown profile, or a key of another)."""
        profile = table.get("profile", MISSING)
        if profile is MISSING:
            rule = f"missing; one of {', '.join(SPHEROID_PROFILES)}"
            raise ModelError(prefix + "profile", MISSING, rule)
        choice(prefix + "profile", profile, SPHEROID_PROFILES)
        allowed = SPHEROID_COMMON_KEYS + PROFILE_KEYS[profile]
        for key, value in table.items():
            if key in SPHEROID_SHAPE_FIELDS and key not in allowed:
                raise ModelError(prefix + key, value, not_for_profile(profile))
        return allowed, ()

    def __post_init__(self):
        p = component_prefix(self, ("halo", "bulge"), SPHEROID_PROFILES)
        allowed = PROFILE_KEYS[self.profile]
        for field in SPHEROID_SHAPE_FIELDS:
            value = getattr(self, field)
            if value is not None and field not in allowed:
                rule = not_for_profile(self.profile)
                raise ModelError(p + field, shown(value, unit_label(field)), rule)
        validate_fields(self, p)
        if self.profile == "nfw":
            self._check_nfw(p)
        else:
            self._check_required(p)
        choice(p + "velocities", self.velocities, VELOCITY_METHODS)

    def _check_nfw(self, p):
        by_mass = [k for k in ("mass", "concentration") if getattr(self, k) is not None]
        by_density = [k for k in ("density_scale", "scale_radius") if getattr(self, k) is not None]
        rule = "nfw takes either mass and concentration, or density_scale and scale_radius"
        if by_mass and by_density:
            key = by_density[0]
            raise ModelError(p + key, shown(getattr(self, key), unit_label(key)), rule + ", not both")
        if not by_mass and not by_density:
            raise ModelError(p + "mass", MISSING, f"missing: {rule}")
        pair = ("mass", "concentration") if by_mass else ("density_scale", "scale_radius")
        for key in pair:
            if getattr(self, key) is None:
                raise ModelError(p + key, MISSING, f"missing: {rule}")

    def _check_required(self, p):
        finite = self.profile in ("hernquist", "plummer")      # the cut is optional
        optional = ("truncation_width",) + (("outer_radius",) if finite else ())
        needed = [k for k in PROFILE_KEYS[self.profile] if k not in optional]
        for key in needed:
            if getattr(self, key) is None:
                rule = f"required for profile '{self.profile}' (it needs {', '.join(needed)})"
                raise ModelError(p + key, MISSING, rule)
        inner, name = ((self.core_radius, "core_radius") if self.core_radius
                       else (self.scale_radius, "scale_radius"))
        if self.outer_radius is not None and self.outer_radius <= inner:
            rule = f"must be larger than {name} ({inner:.10g} kpc)"
            raise ModelError(p + "outer_radius", shown(self.outer_radius, "kpc"), rule)


def not_for_profile(profile):
    takes = ", ".join(PROFILE_KEYS[profile] + SPHEROID_COMMON_KEYS)
    return f"does not apply to profile '{profile}' (it takes: {takes})"


class CriticalDensity:
    """rho_crit (Msun/kpc^3) of the model's cosmology, computed on first use only (the
    astropy.cosmology import takes seconds, and most models never need it here)."""

    def __init__(self, cosmology, redshift):
        self.args, self.value = (cosmology, redshift), None

    def __call__(self):
        if self.value is None:
            self.value = critical_density(*self.args)
        return self.value


def nfw_m(c):
    """m(c) = ln(1 + c) - c/(1 + c), the NFW mass inside c r_s in units of 4 pi rho_s r_s^3
    (Navarro, Frenk & White 1997, ApJ 490, 493, eq. 2 integrated)."""
    return math.log1p(c) - c / (1 + c)


def _nfw_density_for(c, rho_crit):
    """rho_s (Msun/kpc^3) of the NFW halo of concentration c: the mean density inside
    r200 = c r_s is 200 rho_crit, i.e. 3 rho_s m(c) / c^3 = 200 rho_crit."""
    return 200 * rho_crit * c**3 / (3 * nfw_m(c))


def nfw_concentration(rho_s, rho_crit, p):
    """Concentration of the NFW halo of density scale rho_s (Msun/kpc^3); ModelError unless
    it lies in the range of the ``concentration`` key. rho_s(c) rises monotonically
    (c^3/m(c) does), so the range of c is a range of rho_s, and bisection in ln c finds c."""
    field = VALUE_KINDS["concentration"]
    lo, hi = _nfw_density_for(field.lo, rho_crit), _nfw_density_for(field.hi, rho_crit)
    if not lo < rho_s <= hi:
        rule = (f"must be > {lo:.4g} and at most {hi:.4g} Msun/kpc3 for this cosmology and "
                f"redshift (rho_crit = {rho_crit:.4g} Msun/kpc3): it sets the concentration "
                f"r200/r_s, which {field.rule()}")
        raise ModelError(p + "density_scale", shown(rho_s, "Msun/kpc3"), rule)
    a, b = math.log(field.lo), math.log(field.hi)
    for _ in range(80):        # 80 halvings of ln(1000) reach float precision
        mid = 0.5 * (a + b)
        a, b = (mid, b) if _nfw_density_for(math.exp(mid), rho_crit) < rho_s else (a, mid)
    return math.exp(0.5 * (a + b))


def min_cut_fraction(profile, ratio):
    """Smallest truncation_width / outer_radius for ``profile`` cut at ``ratio`` = outer
    radius / scale radius: the measured limit (linear in ln ratio, extended linearly below
    the first point, flat beyond the last) times CUT_MARGIN."""
    if profile not in _MIN_CUT_FRACTION:
        return _CUT_FALLBACK
    x, y = np.log(_MIN_CUT_RATIO), np.asarray(_MIN_CUT_FRACTION[profile])
    t = math.log(ratio)
    if t < x[0]:
        value = y[0] + (y[1] - y[0]) / (x[1] - x[0]) * (t - x[0])
    else:
        value = float(np.interp(t, x, y))
    return CUT_MARGIN * value


def _cut_radii(spec, rho_crit, p):
    """(r_s, r_t, what r_s is called, what r_t is) of the cut of a spheroid (kpc)."""
    if spec.profile == "nfw":
        if spec.density_scale is not None:
            c = nfw_concentration(spec.density_scale, rho_crit(), p)
            r_s, r200 = spec.scale_radius, c * spec.scale_radius
        elif spec.outer_radius is None and spec.truncation_width is None:
            r_s, r200 = 1.0, spec.concentration      # only the ratios matter here
        else:
            r200 = (3 * spec.mass / (800 * math.pi * rho_crit())) ** (1.0 / 3.0)
            r_s = r200 / spec.concentration
        if spec.outer_radius is not None and spec.outer_radius <= r_s:
            rule = f"must be larger than the NFW scale radius r_s = r200/c = {r_s:.4g} kpc"
            raise ModelError(p + "outer_radius", shown(spec.outer_radius, "kpc"), rule)
        r_t_is = "outer_radius" if spec.outer_radius else "r200"
        return r_s, spec.outer_radius or r200, "scale radii", r_t_is
    if spec.profile in ("pseudo_isothermal", "burkert"):
        return spec.core_radius, spec.outer_radius, "core radii", "outer_radius"
    r_s = spec.scale_radius
    r_t = spec.outer_radius or default_outer_radius(spec.profile, r_s)
    r_t_is = "outer_radius" if spec.outer_radius else "the default outer radius"
    return r_s, r_t, "scale radii", r_t_is


def check_cut(spec, rho_crit):
    """Outer cut of a SpheroidSpec (Kazantzidis, Magorrian & Moore 2004): outer radius r_t
    beyond the scale radius, decay length r_d (default 0.1 r_t) at least the measured
    min_cut_fraction of r_t. ``rho_crit()`` gives the critical density (NFW r200)."""
    p = f"components.{spec.name}."
    default = defaults.TRUNCATION_DECAY_FRACTION
    r_s, r_t, name, r_t_is = _cut_radii(spec, rho_crit, p)
    least = min_cut_fraction(spec.profile, r_t / r_s)
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
    raise ModelError(p + "truncation_width", shown(width, "kpc"), rule)
