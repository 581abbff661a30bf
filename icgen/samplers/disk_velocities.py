"""Disk velocities from Jeans moments in the total potential.

Moments (Hernquist 1993, ApJS 86, 389, sec. 2.2; Binney & Tremaine 2008, ch. 4):

- vertical: sigma_z^2(R, z) = (1/rho) int_z^inf rho dPhi/dz' dz' (one-dimensional Jeans
  equation at fixed R), with the disk's own rho and the total Phi; tabulated on an
  (ln R, |z|/z_d) grid and interpolated bilinearly in ln sigma_z^2;
- radial, one of (DiskSpec):
  ``toomre_q`` at ``toomre_q_radius`` with sigma_R^2 proportional to Sigma, so that
  sigma_R ~ exp(-R/2R_d); ``toomre_q_min``: the same law scaled so that min_R Q equals the
  value; ``sigma_ratio``: sigma_R = ratio * sigma_z(R, z). Toomre (1964, ApJ 139, 1217):
  Q = sigma_R kappa / (3.36 G Sigma);
- azimuthal: sigma_phi^2 = sigma_R^2 kappa^2 / (4 Omega^2) (epicycle approximation,
  Binney & Tremaine 2008, eq. 3.100);
- mean rotation (asymmetric drift, Binney & Tremaine 2008, eq. 4.228, with v_R v_z = 0):
  vbar_phi^2 = v_c^2 + sigma_R^2 - sigma_phi^2 + (R/rho) d(rho sigma_R^2)/dR,
  v_c^2 = R dPhi/dR at the particle's (R, z). Where vbar_phi^2 < 0 the disk is too hot to
  rotate there: it is set to 0 and the particles are counted.

Velocities are Gaussian with these moments.
"""

import numpy as np
from numba import njit, prange
from scipy.special import ndtri
from scipy.optimize import minimize_scalar

from ..units import G

# Radial nodes of the sigma_z table: ln sigma_z^2 falls like -R/R_d, whose curvature in
# ln R grows with R; 64 per decade keeps the bilinear error below 1e-3 out to 10 R_d.
RADIAL_POINTS_PER_DECADE = 64
# Table edges: 1e-3 R_d (mass fraction inside ~5e-7) to the disk's extent.
INNER_FRACTION = 1e-3
# Vertical step in z_d. Each interval is integrated by Simpson's rule (error ~1e-7 for
# the e^-2t integrand) and ln sigma_z^2 is interpolated linearly: a smooth function of
# t on scales ~1, so a step of 0.1 errs by ~1e-3.
VERTICAL_STEP = 0.1
# Table height in z_d, beyond the largest |z| the deviates can give (artanh at
# 1 - 2^-53: 18.7 z_d for sech^2; ln(2^-53): 36.7 z_d for the exponential profile).
VERTICAL_EXTENT = {0: 20.0, 1: 40.0}
# Decay length of zeta(z) far from the plane, in z_d (for the integral beyond the table).
TAIL_LENGTH = {0: 0.5, 1: 1.0}
# Toomre's constant for a stellar disk (Toomre 1964): 3.36 = 2 pi * 0.535...
TOOMRE_CONSTANT = 3.36


@njit(cache=True, parallel=True)
def bilinear(x, y, x0, dx, y0, dy, table):
    """Bilinear interpolation on a uniform grid, clamped at the edges.

    x, y : ndarray (n,); table : ndarray (nx, ny) with table[i, k] at (x0 + i dx, y0 + k dy).
    """
    nx, ny = table.shape
    out = np.empty(x.shape[0])
    for p in prange(x.shape[0]):
        tx = min(max((x[p] - x0) / dx, 0.0), nx - 1.0)
        ty = min(max((y[p] - y0) / dy, 0.0), ny - 1.0)
        i = min(int(tx), nx - 2)
        k = min(int(ty), ny - 2)
        a = tx - i
        b = ty - k
        out[p] = ((1 - a) * (1 - b) * table[i, k] + a * (1 - b) * table[i + 1, k]
                  + (1 - a) * b * table[i, k + 1] + a * b * table[i + 1, k + 1])
    return out


def vertical_table(disk, potential):
    """ln sigma_z^2 on the (ln R, t = |z|/z_d) grid, with the grid description.

    Returns
    -------
    lnR : ndarray (nR,); t : ndarray (nt,); ln_s2 : ndarray (nR, nt) in ln (km/s)^2.
    """
    from ..profiles.disk import vertical_profile

    R_lo, R_hi = INNER_FRACTION * disk.R_d, disk.extent
    n_R = int(np.ceil(np.log10(R_hi / R_lo) * RADIAL_POINTS_PER_DECADE)) + 1
    lnR = np.linspace(np.log(R_lo), np.log(R_hi), n_R)
    code, z_d = disk.vertical, disk.z_d
    t = np.arange(0.0, VERTICAL_EXTENT[code] + 0.5 * VERTICAL_STEP, VERTICAL_STEP)
    t_all = np.concatenate([t, t[:-1] + 0.5 * VERTICAL_STEP])     # nodes, then midpoints
    R2, Z2 = np.meshgrid(np.exp(lnR), z_d * t_all, indexing="ij")
    _, _, f_z = potential.evaluate(R2, Z2)
    q = vertical_profile(Z2, z_d, code) * (-f_z)                   # zeta dPhi/dz
    nt = t.size
    q_node, q_mid = q[:, :nt], q[:, nt:]
    seg = VERTICAL_STEP * z_d / 6 * (q_node[:, :-1] + 4 * q_mid + q_node[:, 1:])
    tail = q_node[:, -1] * TAIL_LENGTH[code] * z_d
    upper = np.concatenate([np.cumsum(seg[:, ::-1], axis=1)[:, ::-1],
                            np.zeros((n_R, 1))], axis=1) + tail[:, None]
    zeta = vertical_profile(z_d * t, z_d, code)
    return lnR, t, np.log(upper / zeta[None, :])


class DiskVelocities:
    """Velocity sampler of one exponential disk.

    Parameters
    ----------
    disk : profiles.disk.ExponentialDisk
    spec : DiskSpec
        Reads toomre_q / toomre_q_radius, toomre_q_min or sigma_ratio.
    potential : CombinedPotential
        The total potential.
    """

    def __init__(self, disk, spec, potential):
        self.disk, self.potential = disk, potential
        self.lnR, self.t, self.ln_s2 = vertical_table(disk, potential)
        self.dx = self.lnR[1] - self.lnR[0]
        self.dln_s2 = np.gradient(self.ln_s2, self.dx, axis=0)      # d ln sigma_z^2 / d ln R
        self.ratio = spec.sigma_ratio
        self.amp2 = None                                          # sigma_R^2 / Sigma
        if spec.toomre_q_min is not None:
            self.amp2 = self._amplitude_for_min_q(spec.toomre_q_min) ** 2
        elif spec.toomre_q is not None:
            R0 = spec.toomre_q_radius
            s0 = float(disk.surface_density(R0))
            sigma_r0 = spec.toomre_q * TOOMRE_CONSTANT * G * s0 / float(potential.kappa(R0))
            self.amp2 = sigma_r0**2 / s0

    def _amplitude_for_min_q(self, q_min):
        """A with sigma_R = A sqrt(Sigma) and min_R Q = q_min; Q = A kappa/(3.36 G sqrt(Sigma))."""
        R = np.geomspace(1e-2 * self.disk.R_d, self.disk.extent, 4000)
        y = self.potential.kappa(R) / np.sqrt(self.disk.surface_density(R))
        i = int(np.argmin(y))
        lo, hi = R[max(i - 1, 0)], R[min(i + 1, R.size - 1)]
        res = minimize_scalar(lambda s: float(self.potential.kappa(s)
                                              / np.sqrt(self.disk.surface_density(s))),
                              bounds=(lo, hi), method="bounded", options={"xatol": 1e-8 * hi})
        self.q_min_radius = float(res.x)
        return q_min * TOOMRE_CONSTANT * G / min(float(res.fun), float(y[i]))

    def moments(self, R, z):
        """Jeans moments at particle positions (kpc).

        Returns
        -------
        dict of ndarray (n,): sigma_R2, sigma_z2, sigma_phi2, vphi2 (unclamped mean v_phi
        squared) in (km/s)^2.
        """
        disk, pot = self.disk, self.potential
        lnR, ta = np.log(R), np.abs(z) / disk.z_d
        ln_s2 = bilinear(lnR, ta, self.lnR[0], self.dx, 0.0, VERTICAL_STEP, self.ln_s2)
        sz2 = np.exp(ln_s2)
        sig, dsig, _ = disk.surface_density_derivs(R)
        dln_sigma = R * dsig / sig
        if self.amp2 is None:
            sR2 = self.ratio**2 * sz2
            dln_sR2 = bilinear(lnR, ta, self.lnR[0], self.dx, 0.0, VERTICAL_STEP, self.dln_s2)
        else:
            sR2, dln_sR2 = self.amp2 * sig, dln_sigma
        # kappa^2/(4 Omega^2) lies between 1/4 (Kepler) and 1 (uniform core) whenever
        # M(<R) grows and Omega falls outward; the clip only guards the midplane splines'
        # extrapolation to the few particles inside their first node
        epi = np.clip(pot.kappa(R) ** 2 / (4 * pot.omega(R) ** 2), 0.25, 1.0)
        sphi2 = sR2 * epi
        _, f_R, _ = pot.evaluate(R, z)
        vc2 = -R * f_R
        # (R/rho) d(rho sigma_R^2)/dR = sigma_R^2 (dln Sigma/dln R + dln sigma_R^2/dln R)
        vphi2 = vc2 + sR2 - sphi2 + sR2 * (dln_sigma + dln_sR2)
        return {"sigma_R2": sR2, "sigma_z2": sz2, "sigma_phi2": sphi2, "vphi2": vphi2}

    def sample(self, R, z, u):
        """Cylindrical velocities (v_R, v_z, v_phi) in km/s and the clamped mask.

        u : ndarray (n, 3) of deviates in (0, 1), turned into normal deviates."""
        m = self.moments(R, z)
        g = ndtri(u)
        clamped = m["vphi2"] < 0
        vbar = np.sqrt(np.maximum(m["vphi2"], 0.0))
        v_R = np.sqrt(m["sigma_R2"]) * g[:, 0]
        v_z = np.sqrt(m["sigma_z2"]) * g[:, 1]
        v_phi = vbar + np.sqrt(m["sigma_phi2"]) * g[:, 2]
        return v_R, v_z, v_phi, clamped

    def toomre_q(self, R):
        """Toomre (1964) Q(R) of the sampled law in the midplane, for radii R (kpc)."""
        R = np.atleast_1d(np.asarray(R, float))
        sig = self.disk.surface_density(R)
        if self.amp2 is None:
            ln_s2 = bilinear(np.log(R), np.zeros(R.size), self.lnR[0], self.dx, 0.0,
                             VERTICAL_STEP, self.ln_s2)
            s2 = self.ratio**2 * np.exp(ln_s2)
        else:
            s2 = self.amp2 * sig
        return np.sqrt(s2) * self.potential.kappa(R) / (TOOMRE_CONSTANT * G * sig)


# Gauss-Laguerre nodes of the independent vertical Jeans integral (JeansDiskKinematics): its
# integrand, e^s zeta(z + z_d s/k)/zeta(z) F_z, is smooth and bounded in s (k = 2 for sech^2,
# 1 for the exponential law); against adaptive quadrature (scipy quad, 1e-11) at 40 points
# of the default disk: 9e-6 with 12 nodes, 7e-7 with 16, 9e-9 with 24 (measured).
LAGUERRE_NODES = 16
# Relative step of the centred differences in ln R (error ~ step^2 ~ 1e-8, round-off
# ~ 1e-16 / step ~ 1e-12).
LOG_STEP = 1e-4
# Log-spaced radii of kappa and v_c^2 across the particles' range: linear interpolation in
# ln R errs by ~h^2/8 times their curvature, below 1e-5 for 3000 nodes over 5 decades.
EPICYCLE_NODES = 3000


class JeansDiskKinematics:
    """The Jeans moments a disk's velocities are drawn with, computed again from their
    definitions, independently of :class:`DiskVelocities`' tables: sigma_z^2 by
    Gauss-Laguerre quadrature of the vertical Jeans integral at each point (not the Simpson
    table and its bilinear interpolation in ln sigma_z^2); kappa, Omega and every radial
    derivative by centred differences of the exact potential and of the profile (not the
    midplane splines). These are what ``icgen check`` compares the particles with: a wrong
    moment in the sampler's tables would show there.

    Parameters as :class:`DiskVelocities`. Units: kpc, km/s.
    """

    def __init__(self, disk, spec, potential):
        self.disk, self.potential = disk, potential
        self.ratio = spec.sigma_ratio
        self.amp2 = None                                          # sigma_R^2 / Sigma
        if spec.toomre_q_min is not None:
            R = np.geomspace(1e-2 * disk.R_d, disk.extent, 4000)
            y = lambda R: np.sqrt(self.epicycle(R)[0] / disk.surface_density(R))
            i = int(np.argmin(y(R)))
            res = minimize_scalar(lambda s: float(y(np.array([s]))[0]),
                                  bounds=(R[max(i - 1, 0)], R[min(i + 1, R.size - 1)]),
                                  method="bounded", options={"xatol": 1e-8 * R[-1]})
            self.amp2 = (spec.toomre_q_min * TOOMRE_CONSTANT * G / float(res.fun)) ** 2
        elif spec.toomre_q is not None:
            R0 = np.array([spec.toomre_q_radius])
            s0 = float(disk.surface_density(R0)[0])
            kappa0 = float(np.sqrt(self.epicycle(R0)[0][0]))
            self.amp2 = (spec.toomre_q * TOOMRE_CONSTANT * G * s0 / kappa0) ** 2 / s0
        self._s, self._w = np.polynomial.laguerre.laggauss(LAGUERRE_NODES)

    def epicycle(self, R):
        """(kappa^2, Omega^2) in (km/s/kpc)^2 at midplane radii R (kpc): Omega^2 = v_c^2/R^2
        and kappa^2 = Omega^2 (2 + dln v_c^2/dln R) (Binney & Tremaine 2008, eq. 3.80),
        v_c^2 = -R F_R(R, 0) of the exact potential, the slope by centred differences; on
        EPICYCLE_NODES log-spaced radii spanning R, linear in ln R between them."""
        R = np.asarray(R, float)
        lo, hi = float(R.min()), float(R.max())
        nodes = np.geomspace(lo, hi, EPICYCLE_NODES) if hi > lo else np.array([lo])
        v2 = lambda x: -x * self.potential.evaluate(x, np.zeros_like(x), exact=True)[1]
        up, mid, down = v2(nodes * np.exp(LOG_STEP)), v2(nodes), v2(nodes * np.exp(-LOG_STEP))
        k2 = mid / nodes**2 * (2 + (np.log(up) - np.log(down)) / (2 * LOG_STEP))
        if nodes.size == 1:
            return np.full_like(R, k2[0]), np.full_like(R, mid[0] / lo**2)
        at = lambda table: np.interp(np.log(R), np.log(nodes), table)
        return at(k2), at(mid) / R**2

    def sigma_z2(self, R, z):
        """(1/zeta(z)) int_|z|^inf zeta(z') (-F_z(R, z')) dz' (km/s)^2, the vertical Jeans
        integral, by Gauss-Laguerre quadrature in s, z' = |z| + z_d s/k."""
        from ..profiles.disk import SECH2, vertical_profile
        d = self.disk
        k = 2.0 if d.vertical == SECH2 else 1.0
        R, az = np.asarray(R, float)[:, None], np.abs(np.asarray(z, float))[:, None]
        zp = az + d.z_d * self._s[None, :] / k
        ratio = vertical_profile(zp, d.z_d, d.vertical) / vertical_profile(az, d.z_d, d.vertical)
        f_z = self.potential.evaluate(np.broadcast_to(R, zp.shape), zp)[2]
        integrand = np.exp(self._s)[None, :] * ratio * (-f_z) * d.z_d / k
        return integrand @ self._w

    def moments(self, R, z):
        """Jeans moments at positions (kpc): dict of (n,) arrays sigma_R2, sigma_z2,
        sigma_phi2 and vphi2 (the unclamped mean v_phi squared), (km/s)^2; the formulas of
        the module docstring."""
        R, z = np.asarray(R, float), np.asarray(z, float)
        sz2 = self.sigma_z2(R, z)
        ln_sigma = lambda x: np.log(self.disk.surface_density(x))
        shift = np.exp(LOG_STEP)
        dln_sigma = (ln_sigma(R * shift) - ln_sigma(R / shift)) / (2 * LOG_STEP)
        if self.amp2 is None:
            sR2 = self.ratio**2 * sz2
            dln_sR2 = (np.log(self.sigma_z2(R * shift, z))
                       - np.log(self.sigma_z2(R / shift, z))) / (2 * LOG_STEP)
        else:
            sR2, dln_sR2 = self.amp2 * self.disk.surface_density(R), dln_sigma
        kappa2, omega2 = self.epicycle(R)
        sphi2 = sR2 * kappa2 / (4 * omega2)
        vc2 = -R * self.potential.evaluate(R, z)[1]
        vphi2 = vc2 + sR2 - sphi2 + sR2 * (dln_sigma + dln_sR2)
        return {"sigma_R2": sR2, "sigma_z2": sz2, "sigma_phi2": sphi2, "vphi2": vphi2}

    def toomre_q(self, R):
        """Toomre (1964) Q(R) in the midplane (radii R in kpc)."""
        R = np.atleast_1d(np.asarray(R, float))
        sig = self.disk.surface_density(R)
        s2 = (self.ratio**2 * self.sigma_z2(R, np.zeros_like(R)) if self.amp2 is None
              else self.amp2 * sig)
        return np.sqrt(s2 * self.epicycle(R)[0]) / (TOOMRE_CONSTANT * G * sig)

    def mean_velocity(self, position, velocity):
        """Expected velocity (n, 3) km/s of particles at ``position`` (n, 3) kpc: the mean
        rotation sqrt(max(vphi2, 0)) along e_phi (``velocity`` is not used)."""
        x, y = position[:, 0], position[:, 1]
        R = np.hypot(x, y)
        vbar = np.sqrt(np.maximum(self.moments(R, position[:, 2])["vphi2"], 0.0))
        safe = np.where(R > 0, R, 1.0)
        return np.column_stack([-vbar * y / safe, vbar * x / safe, np.zeros_like(R)])
