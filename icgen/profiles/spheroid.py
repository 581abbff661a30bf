"""Spherical components: Hernquist, Plummer, NFW, pseudo-isothermal, Burkert, point mass.

Every spheroid has a finite extent. Its inner law rho0 * shape(r/r_s) holds inside an outer
radius r_t, and beyond it the exponential cut of Kazantzidis, Magorrian & Moore (2004, ApJ
601, 37, eq. 2) takes over,

    rho(r > r_t) = rho(r_t) (r/r_t)^eps exp(-(r - r_t)/r_d),  eps = gamma(r_t) + r_t/r_d,

with gamma = dln rho/dln r of the inner law, so that the density and its logarithmic slope are
continuous at r_t. Profiles of infinite mass (NFW, cored) need the cut; Hernquist and Plummer
get it too, so that no particle lands at absurd radii (an uncut Hernquist sphere puts 1 % of
its mass beyond 200 a) and the sampled centre of mass stays near the model centre.

Normalisation: NFW from M200 and c (or rho_s, r_s); cored profiles from the mass inside
outer_radius; Hernquist and Plummer from the component's total mass, cut included (rho0 is
solved for it, so the inner density is that of an uncut sphere of mass 1.0195 M for a
Hernquist sphere at the default cut, 1.0005 M for a Plummer sphere).

Potential: the l = 0 term of the multipole solver for every cut profile (a closed form of the
uncut law plus the cut's difference from it would leave the law's infinite tail beyond the
solver's outer edge: 0.2 % of a Hernquist sphere's mass, measured in its Keplerian fall-off);
only the point mass keeps its closed form.
Units: kpc, Msun, Msun/kpc^3.
"""
from dataclasses import dataclass

import numpy as np
from scipy import integrate, optimize

from .. import defaults
from ..spec.spheroid import (
    HERNQUIST_HALF_MASS_X,
    PLUMMER_HALF_MASS_X,
    default_outer_radius,
)
from ..units import critical_density

# Kernel code of the point mass's closed-form potential (see potential/kernels.py).
POINT_MASS = 0


@dataclass(frozen=True)
class InnerLaw:
    """An inner density law rho = rho0 * shape(x), x = r / r_s.

    ``mass(x)`` is M(<r) / (4 pi rho0 r_s^3); ``slope(x)`` and ``curvature(x)`` are the
    first two derivatives of ln rho in ln x (closed forms: the Eddington inversion needs
    d2rho/dPsi2, which finite differences would ruin in a core). Laws of finite mass give
    ``half_mass_x``, their half-mass radius in r_s.
    """

    shape: object
    mass: object
    slope: object
    curvature: object
    half_mass_x: float | None = None


# NFW: Navarro, Frenk & White (1997, ApJ 490, 493), rho ~ 1/(x (1+x)^2), eq. 2 integrated.
NFW_LAW = InnerLaw(
    shape=lambda x: 1.0 / (x * (1 + x) ** 2),
    mass=lambda x: np.log1p(x) - x / (1 + x),
    slope=lambda x: -1 - 2 * x / (1 + x),
    curvature=lambda x: -2 * x / (1 + x) ** 2)
# Pseudo-isothermal sphere rho ~ 1/(1 + x^2): M = 4 pi rho0 r_c^3 (x - arctan x).
ISO_LAW = InnerLaw(
    shape=lambda x: 1.0 / (1 + x * x),
    mass=lambda x: x - np.arctan(x),
    slope=lambda x: -2 * x * x / (1 + x * x),
    curvature=lambda x: -4 * x * x / (1 + x * x) ** 2)
# Burkert (1995, ApJ 447, L25), eq. 2; mass from eq. 3 divided by 4 pi rho0 r0^3.
BURKERT_LAW = InnerLaw(
    shape=lambda x: 1.0 / ((1 + x) * (1 + x * x)),
    mass=lambda x: 0.25 * (2 * np.log1p(x) + np.log1p(x * x) - 2 * np.arctan(x)),
    slope=lambda x: -x / (1 + x) - 2 * x * x / (1 + x * x),
    curvature=lambda x: -x / (1 + x) ** 2 - 4 * x * x / (1 + x * x) ** 2)
# Hernquist (1990, ApJ 356, 359): rho = M a/(2 pi r (r+a)^3) (eq. 2), so rho0 = M/(2 pi a^3);
# M(r) = M r^2/(r+a)^2 (eq. 3); half-mass radius (1 + sqrt 2) a (eq. 4).
HERNQUIST_LAW = InnerLaw(
    shape=lambda x: 1.0 / (x * (1 + x) ** 3),
    mass=lambda x: 0.5 * x * x / (1 + x) ** 2,
    slope=lambda x: -1 - 3 * x / (1 + x),
    curvature=lambda x: -3 * x / (1 + x) ** 2,
    half_mass_x=HERNQUIST_HALF_MASS_X)
# Plummer (1911, MNRAS 71, 460): rho = 3M/(4 pi b^3) (1 + x^2)^(-5/2), M(r) = M x^3/(1+x^2)^1.5;
# half-mass radius b / sqrt(2^(2/3) - 1).
PLUMMER_LAW = InnerLaw(
    shape=lambda x: (1 + x * x) ** -2.5,
    mass=lambda x: x**3 / (3 * (1 + x * x) ** 1.5),
    slope=lambda x: -5 * x * x / (1 + x * x),
    curvature=lambda x: -10 * x * x / (1 + x * x) ** 2,
    half_mass_x=PLUMMER_HALF_MASS_X)

INNER_LAWS = {"nfw": NFW_LAW, "pseudo_isothermal": ISO_LAW, "burkert": BURKERT_LAW,
              "hernquist": HERNQUIST_LAW, "plummer": PLUMMER_LAW}

# The cut of a law of finite mass (Hernquist, Plummer) starts by default at
# default_outer_radius (icgen/spec/spheroid.py: the model-file rules of the cut need it
# too). The cut is integrated to r_t + OUTER_SPAN r_d, and the density sampled to
# r_t + EXTENT_SPAN r_d: the taper there is < 1e-13 of rho(r_t) for every law.
OUTER_SPAN = 60.0
EXTENT_SPAN = 40.0


class Spheroid:
    """A spherical density rho(r); subclasses give density, mass and (maybe) potential."""

    kind = "halo"
    lmax = 0            # a sphere: the l = 0 term of the multipole expansion

    def __init__(self, name, kind, total_mass, scale, extent):
        self.name, self.kind = name, kind
        self.total_mass = float(total_mass)   # Msun
        self.scale = float(scale)             # kpc, characteristic radius
        self.extent = float(extent)           # kpc, where the density becomes negligible

    def density(self, R, z=0.0):
        """rho (Msun/kpc^3) at cylindrical (R, z) in kpc."""
        return self.density_r(np.hypot(R, z))

    def analytic_terms(self):
        """[(code, M, a)] of closed-form potentials (potential/kernels.py), else []."""
        return []

    def multipole_density(self):
        """Density callable (R, z) for the multipole solver, or None."""
        return self.density

    def half_mass_radius(self):
        """Radius enclosing half of the total mass (kpc)."""
        f = lambda lr: self.enclosed_mass(np.exp(lr)) - 0.5 * self.total_mass
        return float(np.exp(optimize.brentq(f, np.log(self.scale) - 12,
                                            np.log(self.extent) + 3)))


class PointMass(Spheroid):
    """Central point mass (e.g. a black hole): Phi = -G M / r."""

    def __init__(self, name, mass):
        super().__init__(name, "point_mass", mass, 0.0, 0.0)

    def density_r(self, r):
        return np.zeros_like(np.asarray(r, dtype=float))

    def enclosed_mass(self, r):
        return np.full_like(np.asarray(r, dtype=float), self.total_mass)

    def analytic_terms(self):
        return [(POINT_MASS, self.total_mass, 0.0)]

    def multipole_density(self):
        return None


class TruncatedSpheroid(Spheroid):
    """Inner law rho0 * shape(r/r_s) inside r_t, exponential cut outside (Kazantzidis,
    Magorrian & Moore 2004, eq. 2).

    Attributes: ``law`` (key of INNER_LAWS), ``rho0``, ``r_s``, ``r_t``, ``r_d``, ``eps``,
    ``inner_mass`` (inside r_t), ``outer_mass`` (of the cut), ``total_mass``.
    """

    def __init__(self, name, kind, law, rho0, r_s, r_t, r_d):
        self.law, self.inner = law, INNER_LAWS[law]
        self.rho0, self.r_s, self.r_t, self.r_d = map(float, (rho0, r_s, r_t, r_d))
        x_t = r_t / r_s
        self.rho_t = rho0 * self.inner.shape(x_t)
        self.eps = self.inner.slope(x_t) + r_t / r_d
        self.inner_mass = 4 * np.pi * rho0 * r_s**3 * self.inner.mass(x_t)
        self.outer_mass = self._cut_mass(r_t + OUTER_SPAN * r_d)
        super().__init__(name, kind, self.inner_mass + self.outer_mass, r_s,
                         r_t + EXTENT_SPAN * r_d)

    def _outer(self, r):
        return self.rho_t * (r / self.r_t) ** self.eps * np.exp(-(r - self.r_t) / self.r_d)

    def _cut_mass(self, r):
        """Mass (Msun) of the cut between r_t and r."""
        value, _ = integrate.quad(lambda s: 4 * np.pi * s * s * self._outer(s), self.r_t,
                                  min(r, self.r_t + OUTER_SPAN * self.r_d), limit=200)
        return value

    def density_r(self, r):
        r = np.asarray(r, dtype=float)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            inner = self.rho0 * self.inner.shape(r / self.r_s)
            outer = self._outer(np.maximum(r, self.r_t))
        return np.where(r <= self.r_t, inner, outer)

    def log_slopes(self, r):
        """(dln rho/dln r, d2ln rho/dln r^2) at radii r (kpc): the law's closed forms inside
        r_t; ln rho = eps ln r - r/r_d + const in the cut."""
        r = np.asarray(r, dtype=float)
        x = r / self.r_s
        outside = r > self.r_t
        return (np.where(outside, self.eps - r / self.r_d, self.inner.slope(x)),
                np.where(outside, -r / self.r_d, self.inner.curvature(x)))

    def slope_jump(self):
        """The cut keeps dln rho/dln r continuous at r_t but not the second derivative:
        (r_t, slope, curvature inside, curvature outside)."""
        x_t = self.r_t / self.r_s
        return (self.r_t, float(self.inner.slope(x_t)), float(self.inner.curvature(x_t)),
                -self.r_t / self.r_d)

    def enclosed_mass(self, r):
        """M(<r) in Msun: closed form inside r_t, quadrature of the cut outside."""
        r = np.atleast_1d(np.asarray(r, dtype=float))
        out = 4 * np.pi * self.rho0 * self.r_s**3 * self.inner.mass(np.minimum(r, self.r_t) / self.r_s)
        for i in np.flatnonzero(r > self.r_t):
            out[i] += self._cut_mass(r[i])
        return out


def nfw_r200(m200, rho_crit):
    """r200 (kpc) with mean density 200 rho_crit: r200 = (3 M200/(800 pi rho_crit))^(1/3)."""
    return (3 * m200 / (800 * np.pi * rho_crit)) ** (1.0 / 3.0)


def nfw_from_density(rho_s, r_s, rho_crit):
    """(M200, c) of an NFW halo given rho_s (Msun/kpc^3), r_s (kpc): solves
    3 rho_s m(c)/c^3 = 200 rho_crit for the concentration c."""
    m = NFW_LAW.mass
    f = lambda lc: 3 * rho_s * m(np.exp(lc)) / np.exp(3 * lc) - 200 * rho_crit
    c = float(np.exp(optimize.brentq(f, np.log(1e-3), np.log(1e4))))
    return 4 * np.pi * rho_s * r_s**3 * m(c), c


def _decay_length(spec, r_t):
    return spec.truncation_width or defaults.TRUNCATION_DECAY_FRACTION * r_t


def finite_law(spec):
    """Hernquist or Plummer component of total mass ``spec.mass`` (cut included)."""
    a = spec.scale_radius
    r_t = spec.outer_radius or default_outer_radius(spec.profile, a)
    r_d = _decay_length(spec, r_t)
    unit = TruncatedSpheroid(spec.name, spec.kind, spec.profile, 1.0, a, r_t, r_d)
    return TruncatedSpheroid(spec.name, spec.kind, spec.profile, spec.mass / unit.total_mass,
                             a, r_t, r_d)


def make_spheroid(spec, cosmology="Planck18", redshift=0.0):
    """Build the component for a SpheroidSpec (halo or bulge)."""
    p = spec.profile
    if p in ("hernquist", "plummer"):
        return finite_law(spec)
    if p == "nfw":
        rho_c = critical_density(cosmology, redshift)
        if spec.mass is not None:
            r200 = nfw_r200(spec.mass, rho_c)
            r_s = r200 / spec.concentration
            rho_s = spec.mass / (4 * np.pi * r_s**3 * NFW_LAW.mass(spec.concentration))
        else:
            r_s, rho_s = spec.scale_radius, spec.density_scale
            m200, c = nfw_from_density(rho_s, r_s, rho_c)
            r200 = c * r_s
        r_t = spec.outer_radius or r200
        halo = TruncatedSpheroid(spec.name, spec.kind, "nfw", rho_s, r_s, r_t,
                                 _decay_length(spec, r_t))
        halo.r200 = r200
        halo.m200 = 4 * np.pi * rho_s * r_s**3 * NFW_LAW.mass(r200 / r_s)
        return halo
    if p in ("pseudo_isothermal", "burkert"):
        r_c, r_t = spec.core_radius, spec.outer_radius
        rho0 = spec.mass / (4 * np.pi * r_c**3 * INNER_LAWS[p].mass(r_t / r_c))
        return TruncatedSpheroid(spec.name, spec.kind, p, rho0, r_c, r_t, _decay_length(spec, r_t))
    raise ValueError(f"components.{spec.name}.profile: unknown profile {p!r}")
