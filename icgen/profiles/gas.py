"""Isothermal gas disk in vertical hydrostatic equilibrium in the total potential.

rho_g(R, z) = rho_g(R, 0) exp(-[Phi(R, z) - Phi(R, 0)] / c_s^2), normalised at every R so that
int rho_g dz = Sigma_g(R) (exponential, optional taper). The vertical structure is tabulated
on a grid uniform in asinh(R/s_R), asinh(z/s_z).

Potential: the split of Dehnen & Binney (1998, MNRAS 294, 429) generalised to a
non-separable layer. With F(R', z) = int_0^z (z - z') rho_g(R', z') dz' (so F_zz = rho_g),
Phi_1 = 4 pi G F(r, z), r = sqrt(R^2 + z^2), is evaluated from a bicubic spline of F, and
the residual rho_g - lap(Phi_1)/(4 pi G), with
    lap F(r, z) = F_zz + F_rr + 2 F_r / r + 2 (z/r) F_rz     (derivatives at (R' = r, z)),
is smooth in angle and goes to the multipole expansion. For rho = Sigma(R) zeta(z) this
is exactly the stellar-disk split (F = Sigma H).
"""
import numpy as np
from scipy import integrate
from scipy.integrate import cumulative_trapezoid, trapezoid
from scipy.interpolate import CubicSpline, RectBivariateSpline

from .. import defaults
from .disk import ExponentialSurface


class GasDisk(ExponentialSurface):
    """Gas disk component; ``z_ref`` (kpc) sets the vertical grid scale (s_z = 0.05 z_ref)
    and is its vertical scale ``z_d`` for the potential's grid and the diagnostics."""

    kind = "gas_disk"
    lmax = defaults.GAS_LMAX

    def __init__(self, spec, z_ref):
        super().__init__(spec.mass, spec.scale_length, spec.taper_radius, spec.taper_width)
        self.name, self.spec = spec.name, spec
        self.z_d = self.scale = float(z_ref)
        self.cs = spec.cs
        self.gamma = spec.adiabatic_index
        n_r, n_z = defaults.GAS_GRID_R, defaults.GAS_GRID_Z
        self.s_R, self.s_z = 0.05 * self.R_d, 0.05 * z_ref
        self.x = np.linspace(0, np.arcsinh(self.extent / self.s_R), n_r)
        self.y = np.linspace(0, np.arcsinh(self.extent / self.s_z), n_z)
        self.R_nodes = self.s_R * np.sinh(self.x)
        self.z_nodes = self.s_z * np.sinh(self.y)
        self.set_vertical(np.zeros((n_r, n_z)))

    def set_vertical(self, q):
        """Install q = (Phi(R,z) - Phi(R,0))/c_s^2 on the node grid (shape (n_R, n_z))."""
        self.q_nodes = q
        w = np.exp(-q)
        col = 2 * trapezoid(w, self.z_nodes, axis=1)          # int exp(-q) dz, all z
        self._q = RectBivariateSpline(self.x, self.y, q, kx=3, ky=3)
        self._lncol = CubicSpline(self.x, np.log(col))
        self.midplane = self.surface_density(self.R_nodes) / col    # rho_g(R, 0)
        cum = cumulative_trapezoid(w, self.z_nodes, axis=1, initial=0)
        self.column_cdf = cum / cum[:, -1:]     # fraction of each node column below |z|
        rho = self.midplane[:, None] * w
        f_z = cumulative_trapezoid(rho, self.z_nodes, axis=1, initial=0)
        f = cumulative_trapezoid(f_z, self.z_nodes, axis=1, initial=0)
        self._F = RectBivariateSpline(self.x, self.y, f, kx=3, ky=3)

    def analytic_terms(self):
        return []

    def multipole_density(self):
        return self.residual_density

    def column_fraction(self, R, z):
        """Fraction of the column at R (kpc) within |z'| < |z| (kpc): the node columns'
        fractions, linear in asinh(R/s_R) between them."""
        x = np.arcsinh(np.minimum(R, self.extent) / self.s_R)
        k = int(np.clip(np.searchsorted(self.x, x) - 1, 0, self.x.size - 2))
        t = (x - self.x[k]) / (self.x[k + 1] - self.x[k])
        at = lambda c: np.interp(np.abs(z), self.z_nodes, self.column_cdf[c], right=1.0)
        return (1 - t) * at(k) + t * at(k + 1)

    def enclosed_mass(self, r):
        """Mass (Msun) inside spheres of radius r (kpc): int_0^r 2 pi R Sigma(R)
        F_R(sqrt(r^2 - R^2)) dR, F_R the column fraction of the hydrostatic layer."""
        out = []
        for ri in np.atleast_1d(np.asarray(r, float)):
            f = lambda R: 2 * np.pi * R * self.surface_density(R) * self.column_fraction(
                R, np.sqrt(max(ri * ri - R * R, 0.0)))
            top = min(ri, self.extent)
            out.append(integrate.quad(f, 0, top, points=[min(self.R_d, top)], limit=200,
                                      epsrel=1e-8)[0])
        return np.array(out)

    def _coords(self, R, z):
        R, z = np.broadcast_arrays(np.asarray(R, float), np.asarray(z, float))
        x = np.arcsinh(np.minimum(R, self.extent) / self.s_R)
        y = np.arcsinh(np.minimum(np.abs(z), self.extent) / self.s_z)
        return R, z, x, y

    def density(self, R, z):
        """rho_g (Msun/kpc^3) = Sigma_g(R) exp(-q) / int exp(-q) dz."""
        R, z, x, y = self._coords(R, z)
        rho = self.surface_density(R) * np.exp(-self._q.ev(x, y) - self._lncol(x))
        return np.where((R > self.extent) | (np.abs(z) > self.extent), 0.0, rho)

    def log_density_gradient(self, R, z):
        """(d ln rho/dR, d ln rho/dz) in 1/kpc, from the splines and Sigma_g'/Sigma_g."""
        R, z, x, y = self._coords(R, z)
        dx_dR = 1 / np.sqrt(self.s_R**2 + R**2)
        dy_dz = np.sign(z) / np.sqrt(self.s_z**2 + z**2)
        s, s1, _ = self.surface_density_derivs(R)
        with np.errstate(divide="ignore", invalid="ignore"):
            dR = s1 / s - (self._q.ev(x, y, dx=1) + self._lncol(x, 1)) * dx_dR
        return dR, -self._q.ev(x, y, dy=1) * dy_dz

    def _layer_derivs(self, Rp, z):
        """F and its derivatives in (R', z) at R' = Rp >= 0 (z of either sign)."""
        Rp, z, x, y = self._coords(Rp, z)
        a, b = self.s_R, self.s_z
        x1, x2 = 1 / np.sqrt(a * a + Rp * Rp), -Rp / (a * a + Rp * Rp) ** 1.5
        az = np.abs(z)
        y1, y2 = 1 / np.sqrt(b * b + az * az), -az / (b * b + az * az) ** 1.5
        ev = self._F.ev
        f, fx, fy = ev(x, y), ev(x, y, dx=1), ev(x, y, dy=1)
        fxx, fyy, fxy = ev(x, y, dx=2), ev(x, y, dy=2), ev(x, y, dx=1, dy=1)
        sgn = np.sign(z)
        return (f, fx * x1, sgn * fy * y1, fxx * x1 * x1 + fx * x2,
                fyy * y1 * y1 + fy * y2, sgn * fxy * x1 * y1)

    def add_layer(self, R, z, G, phi, f_r, f_z):
        """Add Phi_1 = 4 pi G F(r, z) and its forces to the arrays (in place)."""
        r = np.hypot(R, z)
        f, f_rp, f_zp, _, _, _ = self._layer_derivs(r, z)
        c = 4 * np.pi * G
        with np.errstate(divide="ignore", invalid="ignore"):
            phi += c * f
            f_r -= np.where(r > 0, c * f_rp * R / r, 0.0)
            f_z -= c * (np.where(r > 0, f_rp * z / r, 0.0) + f_zp)

    def residual_density(self, R, z):
        """rho_g - lap(Phi_1)/(4 pi G), lap F = F_zz + F_rr + 2 F_r/r + 2 (z/r) F_rz."""
        R, z = np.broadcast_arrays(np.asarray(R, float), np.asarray(z, float))
        r = np.hypot(R, z)
        _, f_r, _, f_rr, f_zz, f_rz = self._layer_derivs(r, z)
        with np.errstate(divide="ignore", invalid="ignore"):
            lap = f_zz + f_rr + np.where(r > 0, 2 * f_r / r + 2 * z / r * f_rz, 0.0)
        return self.density(R, z) - lap
