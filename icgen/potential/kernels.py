"""Numba kernels that add potential and forces of one piece to output arrays.

All take float64 arrays R, z (kpc) and accumulate phi ((km/s)^2) and the force per unit mass
F_R, F_z ((km/s)^2/kpc, F = -grad Phi) in place. They never raise, print or touch units,
and never index a table with a NaN: a non-finite point gives NaN or inf, never a read out
of bounds (CombinedPotential.evaluate then returns NaN there).
"""
import math

import numpy as np
from numba import njit, prange

POINT_MASS, HERNQUIST, PLUMMER = 0, 1, 2


@njit(cache=True, error_model="numpy", inline="always")
def sphere_point(r, code, gm, a):
    """(Phi, dPhi/dr) of a closed-form sphere at radius r: point mass (-GM/r), Hernquist
    1990 eq. 5 (-GM/(r+a)), Plummer 1911 (-GM/sqrt(r^2+a^2))."""
    if code == POINT_MASS:
        return (-gm / r, gm / (r * r)) if r > 0 else (-np.inf, 0.0)
    if code == HERNQUIST:
        return -gm / (r + a), gm / ((r + a) * (r + a))
    s2 = r * r + a * a
    return -gm / math.sqrt(s2), gm * r / (s2 * math.sqrt(s2))


@njit(cache=True, error_model="numpy", inline="always")
def _add(i, piece, phi, f_r, f_z):
    """Add one point's (Phi, F_R, F_z) to the output arrays at index i."""
    phi[i] += piece[0]
    f_r[i] += piece[1]
    f_z[i] += piece[2]


@njit(cache=True, parallel=True, error_model="numpy")
def add_spherical(R, z, code, gm, a, phi, f_r, f_z):
    """Add a closed-form sphere (:func:`sphere_point`); radial force -dPhi/dr projected
    on (R, z)."""
    for i in prange(R.shape[0]):
        r = math.sqrt(R[i] * R[i] + z[i] * z[i])
        p, d = sphere_point(r, code, gm, a)
        phi[i] += p
        if r > 0:
            f_r[i] -= d * R[i] / r
            f_z[i] -= d * z[i] / r


@njit(cache=True, error_model="numpy", inline="always")
def _sigma_shape(r, r_d, r_t, w_t):
    """exp(-r/R_d) T(r) and its derivative, T = erfc((r-R_t)/w)/2 (R_t < 0: no taper)."""
    e = math.exp(-r / r_d)
    if r_t < 0:
        return e, -e / r_d
    u = (r - r_t) / w_t
    t = 0.5 * math.erfc(u)
    t1 = -math.exp(-u * u) / (math.sqrt(math.pi) * w_t)
    return e * t, -e / r_d * t + e * t1


@njit(cache=True, error_model="numpy", inline="always")
def _vertical_h(z, z_d, code):
    """H and H' of Dehnen & Binney (1998): sech^2 (code 0) or exponential (code 1)."""
    a = abs(z) / z_d
    if code == 0:
        return 0.5 * z_d * (a + math.log1p(math.exp(-2 * a)) - math.log(2.0)), 0.5 * math.tanh(z / z_d)
    e = math.exp(-a)
    return 0.5 * z_d * (e - 1 + a), 0.5 * math.copysign(1.0, z) * (1 - e)


@njit(cache=True, error_model="numpy", inline="always")
def thin_layer_point(R, z, four_pi_g_sigma0, r_d, r_t, w_t, z_d, code):
    """(Phi, F_R, F_z) of Phi_1 = 4 pi G Sigma(r) H(z), r = sqrt(R^2+z^2) (Dehnen & Binney
    1998, eq. 19), at one point."""
    r = math.sqrt(R * R + z * z)
    s, s1 = _sigma_shape(r, r_d, r_t, w_t)
    h, h1 = _vertical_h(z, z_d, code)
    if r == 0:
        return four_pi_g_sigma0 * s * h, 0.0, -four_pi_g_sigma0 * s * h1
    return (four_pi_g_sigma0 * s * h, -four_pi_g_sigma0 * s1 * R / r * h,
            -four_pi_g_sigma0 * (s1 * z / r * h + s * h1))


@njit(cache=True, parallel=True, error_model="numpy")
def add_thin_layer(R, z, four_pi_g_sigma0, r_d, r_t, w_t, z_d, code, phi, f_r, f_z):
    """Add the Dehnen & Binney thin layer (:func:`thin_layer_point`) at every point."""
    for i in prange(R.shape[0]):
        _add(i, thin_layer_point(R[i], z[i], four_pi_g_sigma0, r_d, r_t, w_t, z_d, code),
             phi, f_r, f_z)


@njit(cache=True, error_model="numpy", inline="always")
def _radial(r, k, j, b0, b1, b2, b3, h, rnodes, phi_t, dphi_t, d2phi_t):
    """Phi_l(r) and dPhi_l/dr for harmonic index k (l = 2k). Inside the grid: cubic
    Hermite in ln r with basis weights b0..b3 (shared by all l); j = -1 inside the first
    node (uniform core for l = 0, r^l otherwise), j = n-1 outside (r^-(l+1))."""
    n = rnodes.shape[0]
    l = 2 * k
    if j < 0:
        r0 = rnodes[0]
        if l == 0:
            c = dphi_t[0, 0] / r0
            return phi_t[0, 0] + 0.5 * c * (r * r - r0 * r0), c * r
        p = phi_t[0, k] * (r / r0) ** (l - 1)
        return p * r / r0, l * p / r0
    if j >= n - 1:
        p = phi_t[n - 1, k] * (rnodes[n - 1] / r) ** (l + 1)
        return p, -(l + 1) * p / r
    s0, s1 = rnodes[j] * h, rnodes[j + 1] * h
    p = (b0 * phi_t[j, k] + b1 * s0 * dphi_t[j, k]
         + b2 * phi_t[j + 1, k] + b3 * s1 * dphi_t[j + 1, k])
    d = (b0 * dphi_t[j, k] + b1 * s0 * d2phi_t[j, k]
         + b2 * dphi_t[j + 1, k] + b3 * s1 * d2phi_t[j + 1, k])
    return p, d


@njit(cache=True, error_model="numpy", inline="always")
def _locate(r, lnr0, h, rnodes):
    """Interval index j and fraction t of r on the ln r grid (-1 / n-1 outside). A NaN r
    counts as outside (n-1: the outer power law, which returns NaN): int(NaN) would index
    anywhere."""
    n = rnodes.shape[0]
    if r <= rnodes[0]:
        return -1, 0.0
    u = (math.log(r) - lnr0) / h
    if not u < n - 1:
        return n - 1, 0.0
    j = int(u)
    return j, u - j


@njit(cache=True, error_model="numpy", inline="always")
def _hermite(t):
    """Cubic Hermite basis h00, h10, h01, h11 at fraction t."""
    t2 = t * t
    t3 = t2 * t
    return 2 * t3 - 3 * t2 + 1, t3 - 2 * t2 + t, 3 * t2 - 2 * t3, t3 - t2


@njit(cache=True, error_model="numpy", inline="always")
def multipole_point(R, z, lnr0, h, rnodes, phi_t, dphi_t, d2phi_t):
    """(Phi, F_R, F_z) of sum_l Phi_l(r) P_l(mu) over even l, mu = z/r, at one point.
    Tables are (n_radii, n_harmonics), so all harmonics of one radius are adjacent.

    Legendre values by the Bonnet recurrence, derivatives by P'_{n+1} = P'_{n-1} + (2n+1) P_n
    (no division by 1 - mu^2, so points on the axis are safe)."""
    lmax = 2 * (phi_t.shape[1] - 1)
    r = math.sqrt(R * R + z * z)
    mu = z / r if r > 0 else 0.0
    p_prev, p_cur = 0.0, 1.0          # P_{-1}, P_0
    dp_prev, dp_cur = 0.0, 0.0        # P'_{-1}, P'_0
    sp, sdr, sdmu = 0.0, 0.0, 0.0
    j, t = _locate(r, lnr0, h, rnodes)
    b0, b1, b2, b3 = _hermite(t)
    for l in range(lmax + 1):
        if l % 2 == 0:
            pl, dl = _radial(r, l // 2, j, b0, b1, b2, b3, h, rnodes, phi_t, dphi_t, d2phi_t)
            sp += pl * p_cur
            sdr += dl * p_cur
            sdmu += pl * dp_cur
        p_next = ((2 * l + 1) * mu * p_cur - l * p_prev) / (l + 1)
        dp_next = dp_prev + (2 * l + 1) * p_cur
        p_prev, p_cur = p_cur, p_next
        dp_prev, dp_cur = dp_cur, dp_next
    if r == 0:
        return sp, 0.0, 0.0
    # chain rule: dr/dR = R/r, dr/dz = z/r, dmu/dR = -z R/r^3, dmu/dz = R^2/r^3
    r3 = r * r * r
    return sp, -(sdr * R / r - sdmu * z * R / r3), -(sdr * z / r + sdmu * R * R / r3)


@njit(cache=True, parallel=True, error_model="numpy")
def add_multipole(R, z, lnr0, h, rnodes, phi_t, dphi_t, d2phi_t, phi, f_r, f_z):
    """Add the multipole expansion (:func:`multipole_point`) at every point."""
    for i in prange(R.shape[0]):
        _add(i, multipole_point(R[i], z[i], lnr0, h, rnodes, phi_t, dphi_t, d2phi_t),
             phi, f_r, f_z)
