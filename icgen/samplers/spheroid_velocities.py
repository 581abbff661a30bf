"""Velocities of spherical components (halo, bulge) in the spherically averaged total potential.

The total potential of the model (disks included) is averaged over spheres,
<Phi>(r) = int_0^1 Phi(r sqrt(1 - mu^2), r mu) dmu (Gauss-Legendre; the model is symmetric
in z), and tabulated with its first two derivatives on a uniform ln r grid. Two methods:

- ``eddington`` (default): isotropic f(E) by Eddington inversion (Binney & Tremaine 2008,
  eq. 4.46), speeds from p(v) ~ v^2 f(Psi - v^2/2). With an anisotropy radius r_a the DF is
  the Osipkov-Merritt f(Q), Q = E - L^2/(2 r_a^2), inverted from rho_Q = (1 + r^2/r_a^2) rho
  (Osipkov 1979; Merritt 1985, AJ 90, 1027): in w = (v_r, v_t sqrt(1 + r^2/r_a^2)) the
  distribution is isotropic with p(w) ~ w^2 f(Psi - w^2/2).
- ``jeans``: the spherical Jeans equation (Binney & Tremaine 2008, eq. 4.215) with the
  Osipkov-Merritt anisotropy beta = r^2/(r^2 + r_a^2) (beta = 0 without r_a),
  rho sigma_r^2 (r^2 + r_a^2) = int_r^inf (r'^2 + r_a^2) rho dPhi/dr' dr',
  and a Maxwellian in w truncated at the local escape speed. This does not give an
  equilibrium for cuspy halos (Kazantzidis, Magorrian & Moore 2004, ApJ 601, 37); it is
  kept for comparison.

Net rotation: the v_phi of a retrograde particle is reversed with probability
``retrograde_flip_fraction``;
the DF stays a function of the integrals (E, L, sign L_z), so the model stays in
equilibrium (Lynden-Bell 1960, MNRAS 120, 204).
"""
import functools
from dataclasses import dataclass

import numpy as np
from scipy.integrate import cumulative_simpson
from scipy.special import gammainc

from ..errors import ModelError
from ..units import G
from . import eddington
from .positions import isotropic_directions

# Radial grid of the averaged potential and of the DF. The product integration of
# Eddington's formula errs by ~h^2 (h = ln 10 / points): 100 per decade meets the 1e-3
# level against Hernquist (1990) eq. 17 (measured 4e-4; 50 per decade: 1.5e-3).
RADIAL_POINTS_PER_DECADE = 100
# Grid edges: 1e-6 of the smallest spheroid scale (Hernquist mass fraction 1e-12 inside)
# to 100 times the largest extent (the density there is negligible).
TABLE_INNER_FRACTION = 1e-6
TABLE_OUTER_FACTOR = 100.0
# Gauss-Legendre nodes on mu in [0, 1] for the sphere averages. The nodes cluster at
# mu = 0, where a thin disk makes the potential vary on a scale z_d/r; 64 nodes resolve
# z_d/r down to ~3e-3 (the disk part of Phi is smooth, so this is ample).
AVERAGE_NODES = 64
# Nodes for the sphere average of the density (numpy only, cheap).
DENSITY_NODES = 256
# A DF value below -NEGATIVE_TOLERANCE times the sum of the magnitudes of its terms is
# a genuinely negative DF. Round-off is ~1e-14 of that sum; for models with a positive
# DF (Hernquist, Plummer, NFW, Burkert, pseudo-isothermal, alone or with a disk) the
# smallest ratio f/sum measured is +0.14, while the negative DFs met (cores around a point
# mass, cored halos under a bulge or disk, too sharp truncations) reach -3e-3 to -0.9.
NEGATIVE_TOLERANCE = 1e-3
# The sign of the DF is checked for orbits outside the sphere holding this fraction of the
# component's mass: deeper in, the potential solver's innermost node (a uniform core) and
# the r^2 cancellation in d2rho/dPsi2 make the values unreliable, and they concern fewer
# than one particle in 1e6. Orbits turning beyond the outer radius r_t are not checked
# either: there the exponential cut makes the density fall steeply, and for radially
# anisotropic (Osipkov-Merritt) models f(Q) dips below zero for orbits turning just beyond
# r_t (-1.6 % to -2.5 % of the cancellation scale at the first node past r_t of a Hernquist
# sphere, measured); such values are set to 0.
CHECK_MASS_FRACTION = 1e-6


@dataclass(frozen=True)
class RadialTable:
    """Spherically averaged total potential on a uniform ln r grid.

    Attributes
    ----------
    x : ndarray (n,)
        ln r (r in kpc), uniform.
    psi, psi_x, psi_xx : ndarray (n,)
        Psi = -<Phi> ((km/s)^2) and its derivatives in ln r.
    """
    x: np.ndarray
    psi: np.ndarray
    psi_x: np.ndarray
    psi_xx: np.ndarray

    @property
    def r(self):
        return np.exp(self.x)


@functools.lru_cache(maxsize=4)
def _gauss_legendre_01(n):
    """Gauss-Legendre nodes and weights on [0, 1] (cached: numpy solves an n x n
    eigenproblem for them)."""
    t, w = np.polynomial.legendre.leggauss(n)
    return 0.5 * (t + 1.0), 0.5 * w


def spherical_average(potential, r, n_mu=AVERAGE_NODES):
    """(<Phi>, <F_r>, <rho>) over spheres of radii r (kpc): (km/s)^2, (km/s)^2/kpc and
    Msun/kpc^3 (total density, on DENSITY_NODES nodes: it is cheap and, for a thin disk,
    far narrower in mu than the potential)."""
    mu, w = _gauss_legendre_01(n_mu)
    sin = np.sqrt(1.0 - mu * mu)
    phi, f_R, f_z = potential.evaluate(np.outer(r, sin), np.outer(r, mu))
    mu_d, w_d = _gauss_legendre_01(DENSITY_NODES)
    rho = potential.density(np.outer(r, np.sqrt(1.0 - mu_d**2)), np.outer(r, mu_d))
    return phi @ w, (f_R * sin + f_z * mu) @ w, rho @ w_d


def radial_table(potential, r_lo, r_hi, per_decade=RADIAL_POINTS_PER_DECADE):
    """RadialTable of the averaged potential from r_lo to r_hi (kpc).

    Psi_x = r <F_r>; Psi_xx from Poisson's equation for the spherical average,
    d/dlnr (r^2 dPhi/dr) = 4 pi G r^3 <rho>, i.e. Psi_xx = -Psi_x - 4 pi G r^2 <rho>
    (agrees with a centred difference of the solver's force to ~1e-5 outside its
    innermost node, at a third of the cost)."""
    n = int(np.ceil(np.log10(r_hi / r_lo) * per_decade)) + 1
    x = np.linspace(np.log(r_lo), np.log(r_hi), n)
    r = np.exp(x)
    phi, f_r, rho = spherical_average(potential, r)
    psi_x = r * f_r
    return RadialTable(x, -phi, psi_x, -psi_x - 4 * np.pi * G * r * r * rho)


def log_slopes(comp, r, step=1e-3):
    """(dln rho/dln r, d2ln rho/dln r^2) of a spherical component at radii r (kpc).

    Closed forms where the profile has them (``comp.log_slopes``): the second derivative of
    rho(Psi) cancels to relative order r^2 in a core, so finite differences (round-off
    ~1e-16/step^2) would ruin the DF at high energies. Otherwise centred differences of
    ln rho.
    """
    if hasattr(comp, "log_slopes"):
        return comp.log_slopes(r)
    with np.errstate(divide="ignore"):
        lp, l0, lm = (np.log(comp.density_r(r * np.exp(k * step))) for k in (1, 0, -1))
    return (lp - lm) / (2 * step), (lp - 2 * l0 + lm) / step**2


def jeans_sigma_r2(table, density, r_a=np.inf):
    """sigma_r^2 ((km/s)^2) at the nodes from the spherical Jeans equation with
    Osipkov-Merritt anisotropy (isotropic for r_a = inf); integral by Simpson's rule in ln r."""
    r = table.r
    weight = 1.0 + (r / r_a) ** 2
    rho = density(r)
    integrand = weight * rho * (-table.psi_x)     # (r^2 + r_a^2) rho dPhi/dlnr / r_a^2
    outer = cumulative_simpson(integrand[::-1], dx=table.x[1] - table.x[0],
                               initial=0.0)[::-1]
    with np.errstate(divide="ignore", invalid="ignore"):
        s2 = outer / (weight * rho)
    return np.where(rho > 0, s2, 0.0)


def maxwellian_table(table, sigma2):
    """Speed CDFs at eddington.SPEED_EDGES (s = v/v_esc) of a Maxwellian of dispersion
    sigma truncated at v_esc: CDF(v) ~ P(3/2, v^2 / (2 sigma^2)) (regularised incomplete
    gamma function)."""
    s = eddington.SPEED_EDGES
    lam2 = 2.0 * table.psi / np.maximum(sigma2, 1e-300)        # (v_esc / sigma)^2
    num = gammainc(1.5, 0.5 * lam2[:, None] * s[None, :] ** 2)
    den = num[:, -1:]
    return np.where(den > 0, num / np.where(den > 0, den, 1.0), s[None, :] ** 3)


def _mass_radius(comp, fraction):
    """Radius (kpc) enclosing ``fraction`` (<< 1) of the component's mass."""
    # inside the scale radius only: every profile holds more than 1e-6 of its mass there,
    # and the quadrature of outer cuts is avoided
    r = np.geomspace(1e-8 * comp.scale, comp.scale, 1000)
    m = comp.enclosed_mass(r) / comp.total_mass
    return float(np.interp(fraction, m, r))


class SpheroidVelocities:
    """Velocity sampler of one spherical component.

    Parameters
    ----------
    comp : profiles.spheroid.Spheroid
    spec : SpheroidSpec
        Reads ``velocities``, ``anisotropy_radius`` and ``retrograde_flip_fraction``.
    table : RadialTable
        Averaged total potential covering the component.
    """

    def __init__(self, comp, spec, table):
        self.name, self.table = comp.name, table
        self.method = getattr(spec, "velocities", None) or "eddington"
        r_a = getattr(spec, "anisotropy_radius", None)
        self.r_a = float(r_a) if r_a else np.inf
        self.flip_fraction = float(getattr(spec, "retrograde_flip_fraction", None) or 0.0)
        r = table.r
        if self.method == "jeans":
            self.sigma2 = jeans_sigma_r2(table, comp.density_r, self.r_a)
            self.cdf = maxwellian_table(table, self.sigma2)
            self.f = None
            return
        rho_x, rho_xx = self._tracer_derivatives(comp.density_r(r), *log_slopes(comp, r), r)
        jump = None
        if hasattr(comp, "slope_jump"):
            r_j, s1, s2_in, s2_out = comp.slope_jump()
            rho_j = float(comp.density_r(r_j))
            rx, rxx_in = self._tracer_derivatives(rho_j, s1, s2_in, r_j)
            _, rxx_out = self._tracer_derivatives(rho_j, s1, s2_out, r_j)
            jump = (np.log(r_j), rx, rxx_in, rxx_out)
        f, scale = eddington.eddington_df(table.x, table.psi, table.psi_x, table.psi_xx,
                                          rho_x, rho_xx, jump)
        checked = (r >= _mass_radius(comp, CHECK_MASS_FRACTION)) & (r <= comp.r_t)
        self._check(f, scale, checked)
        self.f = np.maximum(f, 0.0)
        self.cdf = eddington.speed_table(table.psi, self.f)

    def _tracer_derivatives(self, rho, s1, s2, r):
        """(d rho/d ln r, d2 rho/d ln r^2) of the density the DF inverts, from ln rho's
        slopes s1, s2: rho itself, or with an anisotropy radius the Osipkov-Merritt
        rho_Q = (1 + r^2/r_a^2) rho."""
        if np.isfinite(self.r_a):
            y = (r / self.r_a) ** 2
            s1, s2 = s1 + 2 * y / (1 + y), s2 + 4 * y / (1 + y) ** 2
            rho = rho * (1 + y)
        return rho * s1, rho * (s2 + s1 * s1)

    def _check(self, f, scale, inside):
        bad = inside & (f < -NEGATIVE_TOLERANCE * scale)
        if not bad.any():
            return
        r_bad = float(self.table.r[np.flatnonzero(bad)].max())
        if np.isfinite(self.r_a):
            raise ModelError(f"components.{self.name}.anisotropy_radius", self.r_a,
                             f"no Osipkov-Merritt equilibrium: f(Q) < 0 for orbits inside "
                             f"r = {r_bad:.3g} kpc; use a larger anisotropy radius")
        raise ModelError(f"components.{self.name}.velocities", self.method,
                         f"no isotropic equilibrium: the Eddington distribution function "
                         f"is negative for orbits inside r = {r_bad:.3g} kpc in the total "
                         f"potential; change the profiles or use velocities = 'jeans'")

    def sample(self, r, nhat, u):
        """Velocities (n, 3) in km/s for particles at radii r (kpc), unit vectors nhat
        (n, 3), from deviates u (n, 4): speed, two for the direction, one for the flip."""
        t = self.table
        w = eddington.draw_speeds(np.log(r), np.ascontiguousarray(u[:, 0]), t.x[0],
                                  t.x[1] - t.x[0], eddington.SPEED_EDGES, self.cdf, t.psi)
        v = isotropic_directions(u[:, 1], u[:, 2]) * w[:, None]
        if np.isfinite(self.r_a):
            # w -> v: the tangential part shrinks by sqrt(1 + r^2/r_a^2) (Merritt 1985)
            w_r = np.einsum("ij,ij->i", v, nhat)
            v_t = v - w_r[:, None] * nhat
            v = w_r[:, None] * nhat + v_t / np.sqrt(1.0 + (r / self.r_a) ** 2)[:, None]
        if self.flip_fraction > 0:
            v = _flip_retrograde(r[:, None] * nhat, v, u[:, 3] < self.flip_fraction)
        return v


def _flip_retrograde(x, v, chosen):
    """Reverse v_phi of the chosen particles that have L_z < 0."""
    R2 = x[:, 0] ** 2 + x[:, 1] ** 2
    lz = x[:, 0] * v[:, 1] - x[:, 1] * v[:, 0]
    flip = chosen & (lz < 0) & (R2 > 0)
    # v_phi phi_hat = (L_z / R^2) (-y, x, 0); subtracting it twice reverses v_phi
    c = np.where(flip, 2.0 * lz / np.where(R2 > 0, R2, 1.0), 0.0)
    out = v.copy()
    out[:, 0] += c * x[:, 1]
    out[:, 1] -= c * x[:, 0]
    return out


# Radii per decade and Gauss-Legendre nodes per interval of the independent Jeans integral
# (SpheroidKinematics), sigma_r^2 linear in ln r between the radii; against the sampler's
# Simpson table (100 per decade) inside the cut of the default model's halo and bulge:
# median 3e-6, at most 1.5e-4 near the cut (40 per decade: 1e-3 there; measured).
KINEMATICS_PER_DECADE = 80
KINEMATICS_NODES = 6


class SpheroidKinematics:
    """Velocity moments of a halo or bulge, computed independently of its sampler: sigma_r^2
    from the spherical Jeans equation with Osipkov-Merritt anisotropy in the spherically
    averaged total potential (Binney & Tremaine 2008, eq. 4.215),

        rho sigma_r^2 (r^2 + r_a^2) = int_r^inf (r'^2 + r_a^2) rho <dPhi/dr'> dr',

    the second moment of the Eddington or Osipkov-Merritt DF the sampler inverts (and what
    its Jeans option draws), by Gauss-Legendre quadrature in ln r on radii of its own (not
    the sampler's Simpson table); sigma_t^2 = sigma_r^2 (1 - beta), beta = r^2/(r^2 + r_a^2)
    (Merritt 1985, AJ 90, 1027); the mean rotation f |v_phi| e_phi of the flip fraction f
    (Lynden-Bell 1960, MNRAS 120, 204).

    Parameters: comp (profiles.spheroid), spec (SpheroidSpec), potential, and the radii
    (kpc) between which sigma_r^2 is tabulated.
    """

    def __init__(self, comp, spec, potential, r_lo, r_hi):
        self.r_a = float(spec.anisotropy_radius) if spec.anisotropy_radius else np.inf
        self.flip = float(spec.retrograde_flip_fraction)
        n = int(np.ceil(np.log10(r_hi / r_lo) * KINEMATICS_PER_DECADE)) + 1
        self.x = np.linspace(np.log(r_lo), np.log(r_hi), n)
        t, w = np.polynomial.legendre.leggauss(KINEMATICS_NODES)
        h = self.x[1] - self.x[0]
        xq = (self.x[:-1, None] + 0.5 * h * (t[None, :] + 1)).ravel()
        rq = np.exp(xq)
        weight = lambda r: 1.0 + (r / self.r_a) ** 2
        _, f_r, _ = spherical_average(potential, rq)
        # (1 + r^2/r_a^2) rho dPhi/dr r, the integrand in ln r
        integrand = (weight(rq) * comp.density_r(rq) * (-f_r) * rq).reshape(n - 1, -1)
        seg = 0.5 * h * integrand @ w
        upper = np.concatenate([np.cumsum(seg[::-1])[::-1], [0.0]])
        r = np.exp(self.x)
        rho = weight(r) * comp.density_r(r)
        with np.errstate(divide="ignore", invalid="ignore"):
            self.s2 = np.where(rho > 0, upper / rho, 0.0)

    def sigma2(self, r):
        """(sigma_r^2, sigma_t^2) in (km/s)^2 at radii r (kpc); sigma_t^2 is the dispersion
        of each tangential component."""
        r = np.asarray(r, float)
        s2r = np.interp(np.log(r), self.x, self.s2)
        return s2r, s2r * (1.0 - r**2 / (r**2 + self.r_a**2))

    def mean_velocity(self, position, velocity):
        """Expected velocity (n, 3) given |v_phi|: f |v_phi| e_phi (flipping retrograde
        orbits with probability f makes E[v_phi | |v_phi|] = f |v_phi|)."""
        x, y = position[:, 0], position[:, 1]
        R = np.hypot(x, y)
        safe = np.where(R > 0, R, 1.0)
        e_phi = np.column_stack([-y / safe, x / safe, np.zeros_like(R)])
        v_phi = np.einsum("ij,ij->i", velocity, e_phi)
        return (self.flip * np.abs(v_phi))[:, None] * e_phi
