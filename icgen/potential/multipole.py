"""Axisymmetric multipole expansion (even l) of a density on a logarithmic radial grid.

rho(r, mu) = sum_l rho_l(r) P_l(mu),  rho_l = (2l+1) int_0^1 rho P_l dmu  (z-symmetric),
Phi_l(r) = -4 pi G/(2l+1) [ r^-(l+1) int_0^r rho_l a^(l+2) da + r^l int_r^inf rho_l a^(1-l) da ]
(Binney & Tremaine 2008, eq. 2.95). The two integrals are accumulated as scaled
recurrences (no r^l overflow), each interval by Simpson's rule in ln r.
"""
from dataclasses import dataclass

import numpy as np
from scipy.special import eval_legendre


@dataclass(frozen=True)
class MultipoleTable:
    """Phi_l, dPhi_l/dr, d2Phi_l/dr2 at radii ``r`` (kpc) for l = 0, 2, ..., shape (L, n)."""
    r: np.ndarray
    phi: np.ndarray
    dphi: np.ndarray
    d2phi: np.ndarray

    @property
    def lnr0(self):
        return float(np.log(self.r[0]))

    @property
    def h(self):
        return float(np.log(self.r[1] / self.r[0]))

    def kernel_arrays(self):
        """(phi, dphi, d2phi) transposed to (n, L) C-contiguous arrays for the kernels."""
        if not hasattr(self, "_kernel"):
            object.__setattr__(self, "_kernel", tuple(np.ascontiguousarray(a.T) for a in
                                                      (self.phi, self.dphi, self.d2phi)))
        return self._kernel

    def padded(self, n_harm):
        """Same table with zero rows up to n_harm harmonics."""
        pad = lambda a: np.vstack([a, np.zeros((n_harm - a.shape[0], a.shape[1]))])
        return MultipoleTable(self.r, pad(self.phi), pad(self.dphi), pad(self.d2phi))

    def __add__(self, other):
        n = max(self.phi.shape[0], other.phi.shape[0])
        a, b = self.padded(n), other.padded(n)
        return MultipoleTable(self.r, a.phi + b.phi, a.dphi + b.dphi, a.d2phi + b.d2phi)


def radial_grid(r_min, r_max, per_decade):
    """Log-spaced radii (kpc) from r_min to at least r_max."""
    n = int(np.ceil(np.log10(r_max / r_min) * per_decade)) + 1
    return r_min * np.exp(np.arange(n) * np.log(10.0) / per_decade)


def project(density, r, lmax, n_mu):
    """rho_l(r) for l = 0, 2, ..., lmax, shape (lmax//2 + 1, len(r)), by Gauss-Legendre in mu."""
    x, w = np.polynomial.legendre.leggauss(n_mu)
    mu, w = 0.5 * (x + 1), 0.5 * w          # nodes on [0, 1]
    rr, mm = np.meshgrid(r, mu, indexing="ij")
    rho = density(rr * np.sqrt(1 - mm * mm), rr * mm)
    ls = np.arange(0, lmax + 1, 2)
    pl = eval_legendre(ls[:, None], mu[None, :])            # (L, n_mu)
    return (2 * ls[:, None] + 1) * ((rho * w) @ pl.T).T       # (L, n_r)


def solve(density, r, lmax, n_mu, G):
    """Multipole table of ``density(R, z)`` on nodes ``r`` (uniform in ln r)."""
    h = np.log(r[1] / r[0])
    r_mid = r[:-1] * np.exp(0.5 * h)
    rho_n = project(density, r, lmax, n_mu)
    rho_m = project(density, r_mid, lmax, n_mu)
    n, n_harm = r.size, rho_n.shape[0]
    ls = np.arange(0, lmax + 1, 2)[:, None].astype(float)
    q = np.exp(-h)
    a_in = np.empty((n_harm, n))
    b_out = np.empty((n_harm, n))
    # inner integral scaled by r^-(l+1); inside the first node rho_l ~ r^gamma with the
    # slope of the l = 0 term there (gamma = -1 for an NFW or Hernquist cusp, 0 for a core)
    gamma = np.clip(np.log(rho_m[0, 0] / rho_n[0, 0]) / (0.5 * h), -2.5, 0.0) \
        if rho_n[0, 0] > 0 and rho_m[0, 0] > 0 else 0.0
    a_in[:, 0] = rho_n[:, 0] * r[0] ** 2 / (ls[:, 0] + 3 + gamma)
    for i in range(1, n):
        f0 = rho_n[:, i - 1] * q ** (ls[:, 0] + 1) * r[i - 1] ** 2
        fm = rho_m[:, i - 1] * np.exp(-0.5 * h * (ls[:, 0] + 1)) * r_mid[i - 1] ** 2
        f1 = rho_n[:, i] * r[i] ** 2
        a_in[:, i] = a_in[:, i - 1] * q ** (ls[:, 0] + 1) + h / 6 * (f0 + 4 * fm + f1)
    # outer integral scaled by r^l; the grid extends past all mass
    b_out[:, -1] = 0.0
    for i in range(n - 2, -1, -1):
        f0 = rho_n[:, i] * r[i] ** 2
        fm = rho_m[:, i] * np.exp(-0.5 * h * ls[:, 0]) * r_mid[i] ** 2
        f1 = rho_n[:, i + 1] * q ** ls[:, 0] * r[i + 1] ** 2
        b_out[:, i] = b_out[:, i + 1] * q ** ls[:, 0] + h / 6 * (f0 + 4 * fm + f1)
    c = -4 * np.pi * G / (2 * ls + 1)
    phi = c * (a_in + b_out)
    dphi = c * (-(ls + 1) * a_in + ls * b_out) / r
    d2phi = 4 * np.pi * G * rho_n + ls * (ls + 1) * phi / r**2 - 2 * dphi / r
    return MultipoleTable(r, phi, dphi, d2phi)
