"""Exponential disk with sech^2 or exponential vertical profile and optional outer taper.

Surface density (Freeman 1970, ApJ 160, 811): Sigma(R) = Sigma0 exp(-R/R_d) T(R), with the
optional taper T(R) = erfc((R - R_t)/w)/2 so that no particle sits at 30 R_d.
Vertical profile zeta(z), normalised to int zeta dz = 1:
  sech2:       zeta = sech^2(z/z_d) / (2 z_d)     (isothermal sheet, Spitzer 1942, ApJ 95, 329)
  exponential: zeta = exp(-|z|/z_d) / (2 z_d)
For the potential we use the split of Dehnen & Binney (1998, MNRAS 294, 429, sec. 2.3):
with H'' = zeta and H(0) = H'(0) = 0, Phi_1 = 4 pi G Sigma(r) H(z), r = sqrt(R^2 + z^2), is
analytic; the residual rho - lap(Phi_1)/(4 pi G) is smooth and expanded in multipoles.
"""
import numpy as np
from scipy import integrate, special

SECH2, EXPONENTIAL = 0, 1
VERTICAL_CODES = {"sech2": SECH2, "exponential": EXPONENTIAL}


def vertical_profile(z, z_d, code):
    """zeta(z) (1/kpc), unit-normalised vertical density profile."""
    a = np.abs(z) / z_d
    if code == SECH2:
        return 0.5 / z_d / np.cosh(np.minimum(a, 300.0)) ** 2
    return 0.5 / z_d * np.exp(-a)


def log_cosh(x):
    """ln cosh(x), finite for large |x|."""
    a = np.abs(x)
    return a + np.log1p(np.exp(-2 * a)) - np.log(2.0)


def vertical_mass_fraction(z, z_d, code):
    """Fraction of the column within |z'| < z: tanh(z/z_d) (sech^2) or 1 - exp(-z/z_d)."""
    a = np.abs(z) / z_d
    return np.tanh(a) if code == SECH2 else -np.expm1(-a)


def vertical_h(z, z_d, code):
    """(H, H') with H'' = zeta, H(0) = H'(0) = 0 (Dehnen & Binney 1998, eq. 20 and 21)."""
    a = np.abs(z) / z_d
    s = np.sign(z)
    if code == SECH2:
        # ln cosh(a) written to stay finite for large a
        h = 0.5 * z_d * log_cosh(a)
        return h, 0.5 * np.tanh(z / z_d)
    e = np.exp(-a)
    return 0.5 * z_d * (e - 1 + a), 0.5 * s * (1 - e)


class ExponentialSurface:
    """Sigma(R) = Sigma0 exp(-R/R_d) T(R) of mass ``mass`` (Msun), scale length ``R_d``
    (kpc) and the optional erfc taper at ``taper_radius`` over ``taper_width`` (default
    0.5 R_d): the surface density of a stellar or a gas disk. Sampled out to ``extent``."""

    def __init__(self, mass, R_d, taper_radius=None, taper_width=None):
        self.total_mass = float(mass)
        self.R_d = float(R_d)
        self.R_t = float(taper_radius) if taper_radius else np.inf
        self.w_t = float(taper_width) if taper_width else 0.5 * self.R_d
        if np.isfinite(self.R_t):
            norm, _ = integrate.quad(lambda R: 2 * np.pi * R * self._shape(R)[0],
                                     0, self.R_t + 20 * self.w_t, limit=200)
        else:
            norm = 2 * np.pi * self.R_d**2
        self.sigma0 = self.total_mass / norm   # Msun/kpc^2
        self.extent = min(40 * self.R_d, self.R_t + 12 * self.w_t)

    def _shape(self, R):
        """exp(-R/R_d) T(R) and its first two derivatives in R."""
        R = np.asarray(R, dtype=float)
        e = np.exp(-R / self.R_d)
        e1, e2 = -e / self.R_d, e / self.R_d**2
        if not np.isfinite(self.R_t):
            return e, e1, e2
        u = (R - self.R_t) / self.w_t
        g = np.exp(-u * u) / (np.sqrt(np.pi) * self.w_t)
        t, t1, t2 = 0.5 * special.erfc(u), -g, 2 * u * g / self.w_t
        return e * t, e1 * t + e * t1, e2 * t + 2 * e1 * t1 + e * t2

    def surface_density(self, R):
        """Sigma(R) in Msun/kpc^2."""
        return self.sigma0 * self._shape(R)[0]

    def surface_density_derivs(self, R):
        """(Sigma, dSigma/dR, d2Sigma/dR2) in Msun/kpc^2 per kpc^n."""
        s, s1, s2 = self._shape(R)
        return self.sigma0 * s, self.sigma0 * s1, self.sigma0 * s2



class ExponentialDisk(ExponentialSurface):
    """An exponential stellar disk built from a DiskSpec (units kpc, Msun): the surface
    density times the vertical law zeta(z) of scale height z_d."""

    kind = "disk"

    def __init__(self, spec):
        super().__init__(spec.mass, spec.scale_length, spec.taper_radius, spec.taper_width)
        self.name, self.spec = spec.name, spec
        self.z_d = float(spec.scale_height)
        self.vertical = VERTICAL_CODES[spec.vertical]
        self.scale = self.z_d

    def density(self, R, z):
        """rho(R, z) = Sigma(R) zeta(z) in Msun/kpc^3."""
        return self.surface_density(R) * vertical_profile(z, self.z_d, self.vertical)

    def analytic_terms(self):
        return []

    def residual_density(self, R, z):
        """rho - lap(Phi_1)/(4 pi G) for Phi_1 = 4 pi G Sigma(r) H(z) (Dehnen & Binney 1998):
        [Sigma(R) - Sigma(r)] zeta - H [Sigma''(r) + 2 Sigma'(r)/r] - 2 Sigma'(r) H' z/r."""
        R, z = np.broadcast_arrays(np.asarray(R, float), np.asarray(z, float))
        r = np.hypot(R, z)
        s_R = self.surface_density(R)
        s, s1, s2 = self.surface_density_derivs(r)
        zeta = vertical_profile(z, self.z_d, self.vertical)
        h, h1 = vertical_h(z, self.z_d, self.vertical)
        with np.errstate(divide="ignore", invalid="ignore"):
            res = (s_R - s) * zeta - h * (s2 + 2 * s1 / r) - 2 * s1 * h1 * z / r
        return np.where(r > 0, res, 0.0)

    def enclosed_mass(self, r):
        """Mass (Msun) inside spheres of radius r (kpc):
        int_0^r 2 pi R Sigma(R) F(sqrt(r^2 - R^2)) dR, F the vertical mass fraction."""
        out = []
        for ri in np.atleast_1d(np.asarray(r, float)):
            f = lambda R: 2 * np.pi * R * self.surface_density(R) * vertical_mass_fraction(
                np.sqrt(max(ri * ri - R * R, 0.0)), self.z_d, self.vertical)
            top = min(ri, self.extent)
            val, _ = integrate.quad(f, 0, top, points=[min(self.R_d, top)], limit=200,
                                    epsrel=1e-10)
            out.append(val)
        return np.array(out)

    def multipole_density(self):
        return self.residual_density

    def thin_layer_params(self):
        """Parameters of Phi_1 for the numba kernel: (sigma0, R_d, R_t, w_t, z_d, code)."""
        R_t = self.R_t if np.isfinite(self.R_t) else -1.0
        return (self.sigma0, self.R_d, R_t, self.w_t, self.z_d, float(self.vertical))
