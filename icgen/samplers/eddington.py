"""Isotropic distribution functions by Eddington inversion, and speed tables drawn from them.

Eddington's formula (Binney & Tremaine 2008, eq. 4.46), for a tracer density rho(Psi) in a
relative potential Psi = -Phi (zero at infinity), relative energy E = Psi - v^2/2:

    f(E) = 1/(sqrt(8) pi^2) [ int_0^E d2rho/dPsi2 dPsi / sqrt(E - Psi)
                              + (drho/dPsi)_{Psi=0} / sqrt(E) ].

The integral is done by product integration on the radial grid: d2rho/dPsi2 is linear in
Psi on each interval and the 1/sqrt(E - Psi) kernel is integrated exactly, so the
end-point singularity costs nothing. The same code gives the Osipkov-Merritt DF f(Q)
(Osipkov 1979, Pis'ma AZh 5, 77; Merritt 1985, AJ 90, 1027) when the density passed in
is rho_Q = (1 + r^2/r_a^2) rho.

Speeds are drawn from p(v) ~ v^2 f(Psi - v^2/2), 0 <= v <= sqrt(2 Psi): one cumulative
table per radial node, in s = v/v_esc, mixed linearly between the two nodes around a
particle and inverted by bisection (numba kernel ``draw_speeds``).
"""
import math

import numpy as np
from numba import njit, prange

# Normalisation 1/(sqrt(8) pi^2) of Eddington's formula.
EDDINGTON_NORM = 1.0 / (math.sqrt(8.0) * math.pi**2)
# Cell edges of the speed tables in s = v/v_esc: s_k = S0 (exp(c k) - 1), k = 0..CELLS,
# uniform in ln(s + S0). Near a cusp sigma/v_esc -> 0 (0.05 at r = 1e-3 a in a Hernquist
# sphere, 0.007 at 1e-5 a), so uniform cells would leave the bulk of the distribution in a
# handful of cells; these are 1.4% of s + S0 wide. The inverse is exact at the edges and
# linear inside (piecewise-constant p(s)).
SPEED_CELLS = 512
SPEED_S0 = 1e-3
SPEED_EDGES = SPEED_S0 * np.expm1(np.log1p(1.0 / SPEED_S0) * np.arange(SPEED_CELLS + 1)
                                  / SPEED_CELLS)
SPEED_EDGES[-1] = 1.0
# Gauss-Legendre nodes per cell for the speed CDFs (exact for polynomials of degree 7).
_GL_X, _GL_W = np.polynomial.legendre.leggauss(4)


@njit(cache=True, error_model="numpy", inline="always")
def _piece(e, pa, pb, ga, gb):
    """int_{pb}^{pa} g / sqrt(e - Psi) dPsi for g linear from ga (at pa) to gb (at pb),
    pa >= pb, e >= pa; written without the cancellations of the textbook forms when the
    interval is short against e - pa. Psi flat to rounding (a light, small component inside
    the others' core) or rising by an ulp: such an interval spans no energy and adds
    nothing."""
    a = max(e - pa, 0.0)
    b = max(e - pb, 0.0)
    if b <= a:
        return 0.0
    sa = math.sqrt(a)
    sb = math.sqrt(b)
    d = sa + sb
    i0 = 2.0 * (b - a) / d                                   # int_a^b t^-1/2 dt
    i1 = 2.0 / 3.0 * (b - a) * (sb + 2.0 * sa) / (d * d)     # int_a^b (t-a)/(b-a) t^-1/2 dt
    return ga * i0 + (gb - ga) * i1


@njit(cache=True)
def eddington_sum(psi, g, h_end, k_jump, psi_jump, g_before, g_after):
    """Eddington integral at the node energies E_j = psi_j.

    Parameters
    ----------
    psi : ndarray (n,)
        Relative potential at the nodes, strictly decreasing (radius increasing).
    g : ndarray (n,)
        d2rho/dPsi2 at the nodes.
    h_end : float
        drho/dPsi at the last node (boundary term, for the density beyond the grid).
    k_jump, psi_jump, g_before, g_after :
        A jump of g inside the interval (k_jump, k_jump + 1) at Psi = psi_jump, from
        g_before (the node k side) to g_after; k_jump = -1 for none. The exponential cut
        of a spheroid keeps d ln rho/d ln r continuous at its outer radius but not the
        second derivative: integrating g as one linear piece across the jump errs by up
        to ~1 % in the density the DF gives back inside the cut (measured for NFW).

    Returns
    -------
    f : ndarray (n,)
        The DF f(E_j) (mass density per velocity-space volume); f[n-1] = 0.
    scale : ndarray (n,)
        Sum of the absolute values of the terms of f(E_j): the size of the numbers that
        cancel, used to tell a negative DF from round-off and truncation error.
    """
    n = psi.shape[0]
    f = np.zeros(n)
    scale = np.zeros(n)
    for j in range(n - 1):
        e = psi[j]
        s = 0.0
        sabs = 0.0
        for i in range(j, n - 1):
            if i == k_jump:
                term = (_piece(e, psi[i], psi_jump, g[i], g_before)
                        + _piece(e, psi_jump, psi[i + 1], g_after, g[i + 1]))
            else:
                term = _piece(e, psi[i], psi[i + 1], g[i], g[i + 1])
            s += term
            sabs += abs(term)
        tail = h_end / math.sqrt(e - psi[n - 1]) if e > psi[n - 1] else 0.0
        f[j] = EDDINGTON_NORM * (s + tail)
        scale[j] = EDDINGTON_NORM * (sabs + abs(tail))
    return f, scale


@njit(cache=True)
def _log_df(e, psi, lnf):
    """ln f at relative energy e: linear in E between the nodes, f ~ E below the last."""
    n = psi.shape[0]
    if e >= psi[0]:
        return lnf[0]
    if e <= psi[n - 1]:
        return -745.0          # below every node: orbits leaving the grid, f ~ 0
    lo, hi = 0, n - 1          # psi decreasing: find psi[lo] >= e > psi[hi], hi = lo + 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if psi[mid] >= e:
            lo = mid
        else:
            hi = mid
    w = (psi[lo] - e) / (psi[lo] - psi[hi])
    return (1.0 - w) * lnf[lo] + w * lnf[hi]


@njit(cache=True, parallel=True)
def speed_cdf_table(psi, lnf, edges, gl_x, gl_w):
    """Normalised CDFs of s = v/v_esc at each node, p(s) ~ s^2 f(Psi_j (1 - s^2)).

    Returns ndarray (n, len(edges)); row j holds the CDF at the cell edges. A row whose
    integral vanishes (no tracer at those energies) gets the uniform-in-volume law s^3.
    """
    n, ne = psi.shape[0], edges.shape[0]
    out = np.empty((n, ne))
    for j in prange(n):
        out[j, 0] = 0.0
        acc = 0.0
        for k in range(ne - 1):
            h = edges[k + 1] - edges[k]
            for q in range(gl_x.shape[0]):
                s = edges[k] + 0.5 * h * (gl_x[q] + 1.0)
                e = psi[j] * (1.0 - s * s)
                acc += 0.5 * h * gl_w[q] * s * s * math.exp(_log_df(e, psi, lnf))
            out[j, k + 1] = acc
        if acc > 0.0:
            for k in range(ne):
                out[j, k] /= acc
        else:
            for k in range(ne):
                out[j, k] = edges[k] ** 3
    return out


@njit(cache=True, parallel=True)
def draw_speeds(lnr, u, x0, dx, edges, cdf, psi):
    """Speeds (km/s) of particles at ln r from deviates u, by inverting the node CDFs.

    Parameters
    ----------
    lnr, u : ndarray (m,)
        ln of the particle radii (kpc) and uniform deviates in (0, 1).
    x0, dx : float
        First node and spacing of the uniform ln r grid.
    edges : ndarray (cells + 1,)
        Cell edges in s = v/v_esc, from 0 to 1.
    cdf : ndarray (n, cells + 1)
        Speed CDFs in s = v/v_esc (``speed_cdf_table`` or a Maxwellian table).
    psi : ndarray (n,)
        Relative potential at the nodes, (km/s)^2; v_esc = sqrt(2 Psi).
    """
    m = lnr.shape[0]
    n, ncol = cdf.shape
    cells = ncol - 1
    out = np.empty(m)
    for p in prange(m):
        t = (lnr[p] - x0) / dx
        j = min(max(int(math.floor(t)), 0), n - 2)
        w = min(max(t - j, 0.0), 1.0)
        lo, hi = 0, cells
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if (1.0 - w) * cdf[j, mid] + w * cdf[j + 1, mid] <= u[p]:
                lo = mid
            else:
                hi = mid
        c0 = (1.0 - w) * cdf[j, lo] + w * cdf[j + 1, lo]
        c1 = (1.0 - w) * cdf[j, hi] + w * cdf[j + 1, hi]
        frac = (u[p] - c0) / (c1 - c0) if c1 > c0 else 0.5
        s = edges[lo] + min(max(frac, 0.0), 1.0) * (edges[hi] - edges[lo])
        out[p] = s * math.sqrt(2.0 * ((1.0 - w) * psi[j] + w * psi[j + 1]))
    return out


def _d2rho_dpsi2(psi_x, psi_xx, rho_x, rho_xx):
    """d2rho/dPsi2 = (rho_xx psi_x - rho_x psi_xx) / psi_x^3 from derivatives in ln r."""
    return (rho_xx * psi_x - rho_x * psi_xx) / psi_x**3


def eddington_df(x, psi, psi_x, psi_xx, rho_x, rho_xx, jump=None):
    """f(E) at E = psi_j from quantities tabulated on a uniform ln r grid.

    Parameters
    ----------
    x : ndarray (n,)
        ln r of the nodes (r in kpc).
    psi, psi_x, psi_xx : ndarray (n,)
        Relative potential and its first two derivatives in ln r.
    rho_x, rho_xx : ndarray (n,)
        Tracer density derivatives in ln r (Msun/kpc^3).
    jump : (x_j, rho_x, rho_xx_before, rho_xx_after), optional
        Where rho_xx jumps (the outer radius of a cut profile): its ln r, the continuous
        rho_x there and rho_xx on either side; the integral then treats d2rho/dPsi2 as
        linear on each side of the jump.

    Returns
    -------
    f, scale : ndarray (n,)
        The DF and the cancellation scale of each value (see ``eddington_sum``).
    """
    g = _d2rho_dpsi2(psi_x, psi_xx, rho_x, rho_xx)
    h_end = rho_x[-1] / psi_x[-1]
    k, psi_j, g_before, g_after = -1, 0.0, 0.0, 0.0
    if jump is not None and x[0] < jump[0] < x[-1]:
        x_j, rx, rxx_before, rxx_after = jump
        k = int(np.searchsorted(x, x_j) - 1)
        psi_j, px, pxx = (float(np.interp(x_j, x, a)) for a in (psi, psi_x, psi_xx))
        g_before = float(_d2rho_dpsi2(px, pxx, rx, rxx_before))
        g_after = float(_d2rho_dpsi2(px, pxx, rx, rxx_after))
    return eddington_sum(psi, g, h_end, k, psi_j, g_before, g_after)


def speed_table(psi, f):
    """Speed CDF table (n, SPEED_CELLS + 1) at SPEED_EDGES from a DF tabulated at the
    node energies."""
    lnf = np.log(np.maximum(f, 1e-300))
    return speed_cdf_table(psi, lnf, SPEED_EDGES, _GL_X, _GL_W)
