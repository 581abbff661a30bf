"""Gas particles: positions from the tabulated rho_g(R, z), pressure-supported rotation.

Radius by inverse CDF of Sigma_g (RadialCdf), height from the vertical column CDF of the
node column on either side of R, chosen with probability given by the linear interpolation
weight (so the sampled density is the R-linear interpolation of the columns). Velocities:
v_R = v_z = 0 and v_phi^2 = R dPhi/dR + (R/rho) dP/dR with P = c_s^2 rho (isothermal;
Binney & Tremaine 2008, eq. 4.222 with the pressure term in place of the velocity
dispersion); where it is negative, v_phi is clamped to 0 and counted.
"""
import numpy as np

from .positions import RadialCdf


def gas_rotation(gas, potential, R, z):
    """(v_phi km/s, clamped bool) of the gas at (R, z) kpc in ``potential``."""
    f_r = potential.evaluate(R, z)[1]
    dlnrho_dR = gas.log_density_gradient(R, z)[0]
    v2 = -R * f_r + R * gas.cs**2 * dlnrho_dR
    return np.sqrt(np.maximum(v2, 0.0)), v2 < 0


class GasSampler:
    """Draw gas particles from uniform deviates u (n, >= 7): u[:,0] radius, u[:,1] height,
    u[:,2] azimuth, u[:,6] column choice."""

    def __init__(self, gas, potential):
        self.gas, self.potential = gas, potential
        self.radial = RadialCdf(lambda R: 2 * np.pi * R * R * gas.surface_density(R),
                                1e-6 * gas.R_d, gas.extent)
        self.cum = gas.column_cdf
        self.internal_energy = gas.cs**2 / (gas.gamma - 1)   # (km/s)^2

    def heights(self, R, u_z, u_col):
        """|z| from the column CDFs, signed by u_z."""
        g = self.gas
        x = np.arcsinh(R / g.s_R)
        k = np.clip(np.searchsorted(g.x, x) - 1, 0, g.x.size - 2)
        t = (x - g.x[k]) / (g.x[k + 1] - g.x[k])
        col = np.where(u_col < t, k + 1, k)
        a = np.abs(2 * u_z - 1)
        z = np.empty_like(a)
        for c in np.unique(col):
            sel = col == c
            z[sel] = np.interp(a[sel], self.cum[c], g.z_nodes)
        return np.where(u_z < 0.5, -z, z)

    def draw(self, u):
        R = self.radial.radius(u[:, 0])
        z = self.heights(R, u[:, 1], u[:, 6])
        phi = 2 * np.pi * u[:, 2]
        v_phi, clamped = gas_rotation(self.gas, self.potential, R, z)
        c, s = np.cos(phi), np.sin(phi)
        pos = np.column_stack([R * c, R * s, z])
        vel = np.column_stack([-v_phi * s, v_phi * c, np.zeros_like(R)])
        return pos, vel, clamped


# Relative step of the centred difference of ln rho_g in ln R (error ~ step^2 times the
# third derivative of the layer's spline; round-off ~ 1e-16/step).
LOG_STEP = 1e-4


class GasKinematics:
    """Mean rotation and internal energy of an isothermal gas disk, computed independently
    of its sampler: v_phi^2 = R dPhi/dR + c_s^2 dln rho/dln R (Binney & Tremaine 2008,
    eq. 4.222 with the pressure P = c_s^2 rho), the log slope by centred differences of the
    layer's density (the sampler uses the spline's analytic derivative); u = c_s^2/(gamma
    - 1). Units: kpc, km/s."""

    def __init__(self, gas, potential):
        self.gas, self.potential = gas, potential
        self.internal_energy = gas.cs**2 / (gas.gamma - 1)

    def mean_vphi(self, R, z):
        """Mean v_phi (km/s) at (R, z) kpc; 0 where the pressure term exceeds v_c^2."""
        R, z = np.asarray(R, float), np.asarray(z, float)
        shift = np.exp(LOG_STEP)
        with np.errstate(divide="ignore"):
            dln = (np.log(self.gas.density(R * shift, z))
                   - np.log(self.gas.density(R / shift, z))) / (2 * LOG_STEP)
        v2 = -R * self.potential.evaluate(R, z)[1] + self.gas.cs**2 * dln
        return np.sqrt(np.maximum(np.where(np.isfinite(v2), v2, 0.0), 0.0))

    def mean_velocity(self, position, velocity):
        """Expected velocity (n, 3): the mean rotation along e_phi."""
        x, y = position[:, 0], position[:, 1]
        R = np.hypot(x, y)
        v = self.mean_vphi(R, position[:, 2])
        safe = np.where(R > 0, R, 1.0)
        return np.column_stack([-v * y / safe, v * x / safe, np.zeros_like(R)])
