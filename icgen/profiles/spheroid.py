"""Spherical components: Hernquist, Plummer, NFW, pseudo-isothermal, Burkert, point mass.

Profiles with a closed-form potential (Hernquist, Plummer, point mass) are evaluated
analytically; profiles with infinite mass (NFW, cored) are cut beyond an outer radius r_t
with the exponential taper of Kazantzidis, Magorrian & Moore (2004, ApJ 601, 37, eq. 2),

    rho(r > r_t) = rho(r_t) (r/r_t)^eps exp(-(r - r_t)/r_d),  eps = gamma(r_t) + r_t/r_d,

where gamma = dln rho/dln r of the inner law, so the logarithmic slope is continuous at
r_t; their potential comes from the l = 0 term of the multipole solver.
Units: kpc, Msun, Msun/kpc^3.
"""
import numpy as np
from scipy import integrate, optimize

from .. import defaults
from ..units import critical_density

# Codes for the analytic potential kernels (see potential/kernels.py).
POINT_MASS, HERNQUIST, PLUMMER = 0, 1, 2


class Spheroid:
    """A spherical density rho(r); subclasses give density, mass and (maybe) potential."""

    kind = "halo"
    analytic_code = None   # kernel code when the potential has a closed form

    def __init__(self, name, kind, total_mass, scale, extent):
        self.name, self.kind = name, kind
        self.total_mass = float(total_mass)   # Msun
        self.scale = float(scale)             # kpc, characteristic radius
        self.extent = float(extent)           # kpc, where the density becomes negligible

    def density(self, R, z=0.0):
        """rho (Msun/kpc^3) at cylindrical (R, z) in kpc."""
        return self.density_r(np.hypot(R, z))

    def analytic_terms(self):
        """[(code, G*M, a)] for closed-form potentials, else []."""
        if self.analytic_code is None:
            return []
        return [(self.analytic_code, self.total_mass, self.scale)]

    def multipole_density(self):
        """Density callable (R, z) to expand in multipoles, or None if analytic."""
        return None if self.analytic_code is not None else self.density

    def half_mass_radius(self):
        """Radius enclosing half of the total mass (kpc)."""
        f = lambda lr: self.enclosed_mass(np.exp(lr)) - 0.5 * self.total_mass
        return float(np.exp(optimize.brentq(f, np.log(self.scale) - 12,
                                            np.log(self.extent) + 3)))


class PointMass(Spheroid):
    """Central point mass (e.g. a black hole): Phi = -G M / r."""

    analytic_code = POINT_MASS

    def __init__(self, name, mass):
        super().__init__(name, "point_mass", mass, 0.0, 0.0)

    def density_r(self, r):
        return np.zeros_like(np.asarray(r, dtype=float))

    def enclosed_mass(self, r):
        return np.full_like(np.asarray(r, dtype=float), self.total_mass)


class Hernquist(Spheroid):
    """Hernquist (1990, ApJ 356, 359) sphere: rho = M a / (2 pi r (r+a)^3), eq. 2;
    M(r) = M r^2/(r+a)^2, eq. 3; Phi = -G M/(r+a), eq. 5."""

    analytic_code = HERNQUIST

    def __init__(self, name, kind, mass, a):
        super().__init__(name, kind, mass, a, 1e4 * a)

    def density_r(self, r):
        r = np.asarray(r, dtype=float)
        a = self.scale
        with np.errstate(divide="ignore"):
            return self.total_mass * a / (2 * np.pi * r * (r + a) ** 3)

    def enclosed_mass(self, r):
        r = np.asarray(r, dtype=float)
        return self.total_mass * r**2 / (r + self.scale) ** 2


class Plummer(Spheroid):
    """Plummer (1911, MNRAS 71, 460) sphere: rho = 3M/(4 pi b^3) (1 + r^2/b^2)^(-5/2),
    M(r) = M r^3/(r^2+b^2)^(3/2), Phi = -G M / sqrt(r^2 + b^2)."""

    analytic_code = PLUMMER

    def __init__(self, name, kind, mass, b):
        super().__init__(name, kind, mass, b, 1e3 * b)

    def density_r(self, r):
        r = np.asarray(r, dtype=float)
        b = self.scale
        return 3 * self.total_mass / (4 * np.pi * b**3) * (1 + (r / b) ** 2) ** -2.5

    def enclosed_mass(self, r):
        r = np.asarray(r, dtype=float)
        return self.total_mass * r**3 / (r**2 + self.scale**2) ** 1.5


# Inner laws of truncated profiles, in x = r / r_s with rho = rho0 * shape(x):
# (shape, dimensionless mass m(x) = M(<r) / (4 pi rho0 r_s^3), log slope gamma(x)).
def _nfw_shape(x):
    return 1.0 / (x * (1 + x) ** 2)


def _nfw_mass(x):
    # Navarro, Frenk & White (1997, ApJ 490, 493), eq. 2 integrated.
    return np.log1p(x) - x / (1 + x)


def _nfw_slope(x):
    return -1 - 2 * x / (1 + x)


def _iso_shape(x):
    return 1.0 / (1 + x * x)


def _iso_mass(x):
    # pseudo-isothermal sphere: M(r) = 4 pi rho0 r_c^3 (x - arctan x)
    return x - np.arctan(x)


def _iso_slope(x):
    return -2 * x * x / (1 + x * x)


def _burkert_shape(x):
    # Burkert (1995, ApJ 447, L25), eq. 2
    return 1.0 / ((1 + x) * (1 + x * x))


def _burkert_mass(x):
    # Burkert (1995), eq. 3 divided by 4 pi rho0 r0^3
    return 0.25 * (2 * np.log1p(x) + np.log1p(x * x) - 2 * np.arctan(x))


def _burkert_slope(x):
    return -x / (1 + x) - 2 * x * x / (1 + x * x)


INNER_LAWS = {
    "nfw": (_nfw_shape, _nfw_mass, _nfw_slope),
    "pseudo_isothermal": (_iso_shape, _iso_mass, _iso_slope),
    "burkert": (_burkert_shape, _burkert_mass, _burkert_slope),
}


class TruncatedSpheroid(Spheroid):
    """Inner law rho0 * shape(r/r_s) inside r_t, exponential cut outside
    (Kazantzidis, Magorrian & Moore 2004, eq. 2). Mass and potential numerical."""

    def __init__(self, name, kind, law, rho0, r_s, r_t, r_d):
        self.law = law
        self.rho0, self.r_s, self.r_t, self.r_d = map(float, (rho0, r_s, r_t, r_d))
        shape, mass, slope = INNER_LAWS[law]
        self._shape, self._mass = shape, mass
        self.rho_t = rho0 * shape(r_t / r_s)
        self.eps = slope(r_t / r_s) + r_t / r_d
        self.inner_mass = 4 * np.pi * rho0 * r_s**3 * mass(r_t / r_s)
        outer, _ = integrate.quad(lambda r: 4 * np.pi * r * r * self._outer(r),
                                  r_t, r_t + 60 * r_d, limit=200)
        self.outer_mass = outer
        super().__init__(name, kind, self.inner_mass + outer, r_s, r_t + 40 * r_d)

    def _outer(self, r):
        return self.rho_t * (r / self.r_t) ** self.eps * np.exp(-(r - self.r_t) / self.r_d)

    def density_r(self, r):
        r = np.asarray(r, dtype=float)
        with np.errstate(divide="ignore", over="ignore", invalid="ignore"):
            inner = self.rho0 * self._shape(r / self.r_s)
            outer = self._outer(np.maximum(r, self.r_t))
        return np.where(r <= self.r_t, inner, outer)

    def enclosed_mass(self, r):
        """M(<r) in Msun: closed form inside r_t, quadrature of the cut outside."""
        r = np.atleast_1d(np.asarray(r, dtype=float))
        out = 4 * np.pi * self.rho0 * self.r_s**3 * self._mass(np.minimum(r, self.r_t) / self.r_s)
        for i in np.flatnonzero(r > self.r_t):
            extra, _ = integrate.quad(lambda s: 4 * np.pi * s * s * self._outer(s),
                                      self.r_t, min(r[i], self.r_t + 60 * self.r_d), limit=200)
            out[i] += extra
        return out


def nfw_r200(m200, rho_crit):
    """r200 (kpc) with mean density 200 rho_crit: r200 = (3 M200/(800 pi rho_crit))^(1/3)."""
    return (3 * m200 / (800 * np.pi * rho_crit)) ** (1.0 / 3.0)


def nfw_from_density(rho_s, r_s, rho_crit):
    """(M200, c) of an NFW halo given rho_s (Msun/kpc^3), r_s (kpc): solves
    3 rho_s m(c)/c^3 = 200 rho_crit for the concentration c."""
    f = lambda lc: 3 * rho_s * _nfw_mass(np.exp(lc)) / np.exp(3 * lc) - 200 * rho_crit
    c = float(np.exp(optimize.brentq(f, np.log(1e-3), np.log(1e4))))
    return 4 * np.pi * rho_s * r_s**3 * _nfw_mass(c), c


def make_spheroid(spec, cosmology="Planck18", redshift=0.0):
    """Build the component for a SpheroidSpec (halo or bulge)."""
    p = spec.profile
    if p == "hernquist":
        return Hernquist(spec.name, spec.kind, spec.mass, spec.scale_radius)
    if p == "plummer":
        return Plummer(spec.name, spec.kind, spec.mass, spec.scale_radius)
    if p == "nfw":
        rho_c = critical_density(cosmology, redshift)
        if spec.mass is not None:
            r200 = nfw_r200(spec.mass, rho_c)
            r_s = r200 / spec.concentration
            rho_s = spec.mass / (4 * np.pi * r_s**3 * _nfw_mass(spec.concentration))
        else:
            r_s, rho_s = spec.scale_radius, spec.density_scale
            m200, c = nfw_from_density(rho_s, r_s, rho_c)
            r200 = c * r_s
        r_t = spec.outer_radius or r200
        r_d = spec.truncation_width or defaults.TRUNCATION_DECAY_FRACTION * r_t
        halo = TruncatedSpheroid(spec.name, spec.kind, "nfw", rho_s, r_s, r_t, r_d)
        halo.r200 = r200
        halo.m200 = 4 * np.pi * rho_s * r_s**3 * _nfw_mass(r200 / r_s)
        return halo
    if p in ("pseudo_isothermal", "burkert"):
        r_c, r_t = spec.core_radius, spec.outer_radius
        rho0 = spec.mass / (4 * np.pi * r_c**3 * INNER_LAWS[p][1](r_t / r_c))
        r_d = spec.truncation_width or defaults.TRUNCATION_DECAY_FRACTION * r_t
        return TruncatedSpheroid(spec.name, spec.kind, p, rho0, r_c, r_t, r_d)
    raise ValueError(f"components.{spec.name}.profile: unknown profile {p!r}")
