"""Particle positions by exact inverse-CDF sampling of the component densities.

Each sampler maps uniform deviates u in (0, 1) to positions, one deviate per coordinate,
so that the quiet start (Sobol points) and pseudo-random draws go through the same code.

- Exponential disk, radius: M(<R)/M = 1 - (1 + R/R_d) exp(-R/R_d) (Freeman 1970, ApJ 160,
  811) inverted with the Lambert W function, branch -1: R/R_d = -1 - W_-1(-(1 - u)/e).
  With an outer taper the cumulative mass is tabulated and inverted (RadialCdf).
- Disk, height: sech^2 (Spitzer 1942, ApJ 95, 329): z = z_d artanh(2u - 1);
  exponential: z = z_d ln(2u) for u < 1/2, -z_d ln(2(1 - u)) otherwise.
- Spheroids: a tabulated M(<r) of the cut profile (profiles/spheroid.py), out to its
  ``extent`` r_t + 40 r_d, where the cut leaves < 1e-13 of rho(r_t). Directions isotropic:
  cos(theta) = 2u - 1, phi = 2 pi u.
"""
import numpy as np
from scipy.special import lambertw


# Log-radius grid of tabulated cumulative masses. Linear interpolation of ln r against
# ln M (inner half) or ln(1 - M) (outer half) errs by ~h^2/8 times the curvature of
# those curves (order 1): 200 points per decade (h = 0.0115) keeps radii within 2e-5.
CDF_POINTS_PER_DECADE = 200
# Inner edge of the tables as a fraction of the component's scale; inside it the mass
# follows the power law of the first interval.
CDF_INNER_FRACTION = 1e-6
# Below this deviate the exponential-disk radius comes from the series at u = 0: its
# error there is ~(2u)^2 relative (4e-12), the Lambert W route's ~1e-16/u (1e-10).
SERIES_BELOW = 1e-6


class RadialCdf:
    """Cumulative mass M(<r)/M(<r_hi) tabulated on a log grid, inverted by interpolation.

    Meant for densities that are negligible at r_hi (the outer half is interpolated in
    ln(1 - M), exact for power-law and exponential tails but not for a hard edge).

    Parameters
    ----------
    dmass_dlnr : callable
        dM/dln r (Msun) as a function of r (kpc) arrays; must be >= 0.
    r_lo, r_hi : float
        Grid edges (kpc); r_hi is the outer edge of the sampled distribution.
    """

    def __init__(self, dmass_dlnr, r_lo, r_hi, per_decade=CDF_POINTS_PER_DECADE):
        n = int(np.ceil(np.log10(r_hi / r_lo) * per_decade)) + 1
        x = np.linspace(np.log(r_lo), np.log(r_hi), n)
        h = x[1] - x[0]
        f0 = dmass_dlnr(np.exp(x))
        fm = dmass_dlnr(np.exp(x[:-1] + 0.5 * h))
        seg = h / 6 * (f0[:-1] + 4 * fm + f0[1:])        # Simpson's rule per interval
        # inside r_lo: dM/dlnr ~ r^p with p from the first interval, M(<r_lo) = f0/p
        p = np.log(max(f0[1], 1e-300) / max(f0[0], 1e-300)) / h
        self.p = max(p, 0.5)
        inner = np.concatenate([[f0[0] / self.p], f0[0] / self.p + np.cumsum(seg)])
        # the complement summed from outside keeps its small values accurate
        outer = np.concatenate([np.cumsum(seg[::-1])[::-1], [0.0]])
        total = inner[-1]
        self.x, self.mass = x, total
        self.cdf, self.ccdf = inner / total, outer / total

    def radius(self, u):
        """Radii (kpc) with M(<r)/M = u, for u in (0, 1)."""
        u = np.asarray(u, float)
        r = np.empty_like(u)
        lo = u <= 0.5
        x, cdf, ccdf = self.x, self.cdf, self.ccdf
        # inner half: ln r linear in ln M; below the first node the power law M ~ r^p
        ul = u[lo]
        rl = np.interp(np.log(ul), np.log(cdf), x)
        below = ul < cdf[0]
        rl[below] = x[0] + np.log(ul[below] / cdf[0]) / self.p
        r[lo] = rl
        # outer half: ln r linear in ln(1 - M); last interval linear in 1 - M (it ends at 0)
        q = 1.0 - u[~lo]
        keep = ccdf[:-1] > 0
        rq = np.interp(-np.log(q), -np.log(ccdf[:-1][keep]), x[:-1][keep])
        last = q < ccdf[-2]
        r_a, r_b = np.exp(x[-2]), np.exp(x[-1])
        ro = np.exp(rq)
        ro[last] = r_b - (r_b - r_a) * q[last] / ccdf[-2]
        r[~lo] = np.log(ro)
        return np.exp(r)


def exponential_disk_radius(u, r_d):
    """R (kpc) with M(<R)/M = u for an untapered exponential disk (Lambert W, branch -1).

    Near u = 0 the argument of W sits at the branch point -1/e, where 1 - u rounds
    (relative error ~1e-16/u); there the series of the inverse, with s = sqrt(2u),
    x = s + s^2/3 + 11 s^3/72 + 43 s^4/540 (error ~s^5), is used instead.
    """
    u = np.asarray(u, float)
    w = lambertw(-(1.0 - u) / np.e, k=-1).real
    s = np.sqrt(2.0 * u)
    series = s * (1.0 + s * (1.0 / 3.0 + s * (11.0 / 72.0 + s * 43.0 / 540.0)))
    return r_d * np.where(u < SERIES_BELOW, series, -1.0 - w)


def vertical_offset(u, z_d, code):
    """z (kpc) for deviates u: sech^2 (code 0) or exponential (code 1) profile of scale z_d."""
    u = np.asarray(u, float)
    if code == 0:
        return z_d * np.arctanh(2.0 * u - 1.0)
    return np.where(u < 0.5, z_d * np.log(2.0 * u), -z_d * np.log(2.0 * (1.0 - u)))


def isotropic_directions(u_mu, u_phi):
    """Unit vectors, shape (n, 3), uniform on the sphere."""
    mu = 2.0 * np.asarray(u_mu) - 1.0
    phi = 2.0 * np.pi * np.asarray(u_phi)
    s = np.sqrt(np.maximum(1.0 - mu * mu, 0.0))
    return np.column_stack([s * np.cos(phi), s * np.sin(phi), mu])


class DiskPositions:
    """Positions of an ExponentialDisk (profiles.disk) from three deviates per particle."""

    def __init__(self, disk):
        self.disk = disk
        self.r_max = disk.extent
        self.cdf = None
        if np.isfinite(disk.R_t):
            self.cdf = RadialCdf(lambda R: 2 * np.pi * R * R * disk.surface_density(R),
                                 CDF_INNER_FRACTION * disk.R_d, disk.extent)

    def sample(self, u):
        """(R, z, phi) in kpc, kpc, rad from deviates u of shape (n, >= 3)."""
        if self.cdf is None:
            R = exponential_disk_radius(u[:, 0], self.disk.R_d)
        else:
            R = self.cdf.radius(u[:, 0])
        z = vertical_offset(u[:, 1], self.disk.z_d, self.disk.vertical)
        return R, z, 2.0 * np.pi * u[:, 2]


class SpheroidPositions:
    """Radii and directions of a spherical component, sampled out to its extent."""

    def __init__(self, comp):
        self.comp = comp
        self.r_max = comp.extent
        self.cdf = RadialCdf(lambda r: 4 * np.pi * r**3 * comp.density_r(r),
                             CDF_INNER_FRACTION * comp.scale, comp.extent)

    def radius(self, u):
        """r (kpc) for deviates u in (0, 1)."""
        return self.cdf.radius(u)

    def sample(self, u):
        """(r, unit vectors (n, 3)) from deviates u of shape (n, >= 3)."""
        return self.radius(u[:, 0]), isotropic_directions(u[:, 1], u[:, 2])
