"""Measurements on particles: midplane rotation curve by direct summation, binned
densities and velocity moments, each with its standard error.

Standard errors treat the particles as independent draws from the model (what the
sampler makes; a quiet start or mirrored pairs are less noisy or correlated, so the errors
are then only approximate). Errors of smooth functions of bin means come from the
linearised estimator (the delta method): for a ratio of sums A/B the variance is
sum_i (a_i - (A/B) b_i)^2 / B^2 (the ratio estimator; Cochran 1977, Sampling
Techniques, ch. 6, from memory).

Units are the caller's; icgen passes kpc, km/s, Msun.
"""
import math

import numpy as np
from numba import njit, prange

from ..units import G


# ------------------------------------------------------------------ direct summation


# fastmath lets numba vectorise the azimuth loop (SIMD sqrt and division): 2 ns instead of
# 9 ns per source-test point pair, measured; it only reorders sums (round-off). Each ring
# is summed by one thread, so results do not depend on the thread count.
@njit(cache=True, parallel=True, fastmath=True)
def ring_force_sums(radii, cos_az, sin_az, x, y, z, m, eps2, s1, s2):
    """Ring-averaged outward separation terms of every source, summed per ring.

    For ring k (radius R_k, test points at z = 0 and azimuths with cosines ``cos_az``,
    sines ``sin_az``) and source i, g_ik is the mean over the azimuths of
    (p - x_i).e_R / (|p - x_i|^2 + eps^2)^(3/2) (Plummer softening). Then
    v_c^2(R_k) = G R_k s1[k] with s1[k] = sum_i m_i g_ik; s2[k] = sum_i (m_i g_ik)^2 gives
    the noise. Shapes: radii (K,), cos_az, sin_az (A,), x, y, z, m (N,), s1, s2 (K,) out.
    """
    n_az = cos_az.shape[0]
    for k in prange(radii.shape[0]):
        rk = radii[k]
        acc1 = 0.0
        acc2 = 0.0
        for i in range(x.shape[0]):
            g = 0.0
            zz = z[i] * z[i] + eps2
            for a in range(n_az):
                dx = rk * cos_az[a] - x[i]
                dy = rk * sin_az[a] - y[i]
                d2 = dx * dx + dy * dy + zz
                g += (dx * cos_az[a] + dy * sin_az[a]) / (d2 * math.sqrt(d2))
            mg = m[i] * g / n_az
            acc1 += mg
            acc2 += mg * mg
        s1[k] = acc1
        s2[k] = acc2


def subsample(mass, max_sources, rng):
    """Indices of at most ``max_sources`` particles drawn without replacement, and the
    factor that scales their masses up to the total: (index (n,), factor)."""
    n = mass.shape[0]
    if max_sources is None or n <= max_sources:
        return np.arange(n), 1.0
    idx = np.sort(rng.choice(n, size=int(max_sources), replace=False))
    return idx, float(mass.sum() / mass[idx].sum())


def midplane_v2(position, mass, radii, softening, n_azimuth=16, max_sources=None, rng=None):
    """Midplane v_c^2 = -R F_R from the particles' own gravity, and its standard error.

    Parameters
    ----------
    position : ndarray (N, 3)
        kpc, centred on the galaxy.
    mass : ndarray (N,)
        Msun.
    radii : ndarray (K,)
        Ring radii, kpc; test points at z = 0 and ``n_azimuth`` equally spaced azimuths.
    softening : float
        Plummer softening length, kpc.
    max_sources : int, optional
        Use a random subsample of this many sources, masses scaled up to the total.
    rng : numpy.random.Generator, optional
        For the subsample (default: seeded with 0, so repeated runs agree).

    Returns
    -------
    v2, v2_err : ndarray (K,)
        (km/s)^2. The error is that of a sum of independent terms,
        sqrt(sum_i (m_i g_i)^2 - (sum_i m_i g_i)^2 / n), g_i the ring-averaged term of
        source i: averaging over azimuths first makes it account for the correlation
        between the test points of one ring, and a subsample is itself an independent
        sample, so its larger noise is included.
    """
    rng = np.random.default_rng(0) if rng is None else rng
    idx, factor = subsample(mass, max_sources, rng)
    pos = np.ascontiguousarray(position[idx], dtype=np.float64)
    m = np.ascontiguousarray(mass[idx], dtype=np.float64) * factor
    phi = 2 * np.pi * (np.arange(n_azimuth) + 0.5) / n_azimuth
    radii = np.ascontiguousarray(radii, dtype=np.float64)
    s1, s2 = np.zeros(radii.size), np.zeros(radii.size)
    ring_force_sums(radii, np.cos(phi), np.sin(phi), np.ascontiguousarray(pos[:, 0]),
                    np.ascontiguousarray(pos[:, 1]), np.ascontiguousarray(pos[:, 2]), m,
                    float(softening) ** 2, s1, s2)
    n = max(idx.size, 1)
    var = np.maximum(s2 - s1 * s1 / n, 0.0)
    return G * radii * s1, G * radii * np.sqrt(var)


# ------------------------------------------------------------------ coordinates

def cylindrical(position, velocity):
    """(R, z, v_R, v_phi, v_z) of particles (km/s, kpc); v_R = v_phi = 0 on the axis."""
    x, y, z = position.T
    R = np.hypot(x, y)
    safe = np.where(R > 0, R, 1.0)
    v_R = np.where(R > 0, (x * velocity[:, 0] + y * velocity[:, 1]) / safe, 0.0)
    v_phi = np.where(R > 0, (x * velocity[:, 1] - y * velocity[:, 0]) / safe, 0.0)
    return R, z, v_R, v_phi, velocity[:, 2]


def spherical(position, velocity):
    """(r, v_r, v_theta, v_phi); theta from the +z axis (Binney & Tremaine convention)."""
    R, z, v_R, v_phi, v_z = cylindrical(position, velocity)
    r = np.hypot(R, z)
    safe = np.where(r > 0, r, 1.0)
    v_r = np.where(r > 0, (R * v_R + z * v_z) / safe, 0.0)
    v_theta = np.where(r > 0, (z * v_R - R * v_z) / safe, 0.0)
    return r, v_r, v_theta, v_phi


# ------------------------------------------------------------------ binned statistics


def bin_index(values, edges):
    """Bin of each value (0 .. len(edges) - 2), -1 outside [edges[0], edges[-1])."""
    i = np.searchsorted(edges, values, side="right") - 1
    return np.where((i >= 0) & (i < len(edges) - 1), i, -1)


def binned_sum(idx, weights, nbins):
    """Sum of ``weights`` per bin (counts if None); bins with index -1 are skipped."""
    # shifting by one sends the outsiders (-1) to slot 0: no boolean copy of the data
    return np.bincount(idx + 1, weights=weights, minlength=nbins + 1)[1:nbins + 1].astype(float)


def counts(idx, nbins):
    """Particles per bin."""
    return binned_sum(idx, None, nbins)


def binned_average(values, idx, nbins):
    """Plain mean of ``values`` per bin (NaN for empty bins); no error."""
    n = counts(idx, nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        return binned_sum(idx, values, nbins) / n


def binned_mean(values, idx, nbins):
    """(mean, standard error) per bin; NaN where a bin holds fewer than 2 particles."""
    n = counts(idx, nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = binned_sum(idx, values, nbins) / n
        d = values - mean[np.maximum(idx, 0)]
        var = binned_sum(idx, d * d, nbins) / (n - 1)
        return np.where(n > 1, mean, np.nan), np.where(n > 1, np.sqrt(var / n), np.nan)


def binned_dispersion(values, idx, nbins, about_zero=False):
    """(sigma, standard error) per bin: sigma^2 the variance about the bin mean (or the
    mean square when ``about_zero``); error of sigma^2 from the spread of the squared
    deviations, sqrt(var(d^2)/n), divided by 2 sigma (delta method)."""
    n = counts(idx, nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.zeros(nbins) if about_zero else binned_sum(idx, values, nbins) / n
        d2 = (values - mean[np.maximum(idx, 0)]) ** 2
        s2 = binned_sum(idx, d2, nbins) / n
        spread = binned_sum(idx, (d2 - s2[np.maximum(idx, 0)]) ** 2, nbins) / n
        sigma = np.sqrt(s2)
        err = np.sqrt(spread / n) / (2 * sigma)
    bad = n < 2
    return np.where(bad, np.nan, sigma), np.where(bad, np.nan, err)


def binned_ratio(a, b, idx, nbins):
    """(sum a / sum b, standard error) per bin, linearised ratio estimator."""
    sa, sb = binned_sum(idx, a, nbins), binned_sum(idx, b, nbins)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = sa / sb
        resid = a - ratio[np.maximum(idx, 0)] * b
        err = np.sqrt(binned_sum(idx, resid * resid, nbins)) / np.abs(sb)
    return ratio, err


def ratio_of_sums(a, b):
    """(sum a / sum b, standard error) over all particles (linearised estimator)."""
    idx = np.zeros(a.shape[0], dtype=np.int64)
    ratio, err = binned_ratio(a, b, idx, 1)
    return float(ratio[0]), float(err[0])


def total_with_error(values, expected=None):
    """(sum of ``values``, its standard error) for independent terms: the error is
    sqrt(sum (values - expected)^2), ``expected`` the per-term expectation (default 0)."""
    d = values if expected is None else values - expected
    return float(values.sum()), float(np.sqrt(np.sum(d * d)))


# ------------------------------------------------------------------ whole-sample sums


def weighted_mean(values, mass):
    """Mass-weighted mean (k,) of ``values`` (N, k) and its standard error for
    independent particles: sqrt(sum m^2 (x - mean)^2) / sum m."""
    M = mass.sum()
    mean = mass @ values / M
    err = np.sqrt(((mass[:, None] * (values - mean)) ** 2).sum(axis=0)) / M
    return mean, err


def phi_unit_vectors(position):
    """Unit vectors e_phi (N, 3) at the particles (zero on the z axis)."""
    x, y = position[:, 0], position[:, 1]
    R = np.hypot(x, y)
    safe = np.where(R > 0, R, 1.0)
    return np.column_stack([np.where(R > 0, -y / safe, 0.0), np.where(R > 0, x / safe, 0.0),
                            np.zeros_like(R)])


def angular_momentum_sums(position, velocity, mass, expected_velocity):
    """(L, L_expected, variance) (3,) each: L = sum m x cross v, L_expected the same with
    each particle's expected velocity, variance = sum (m x cross (v - <v>))^2."""
    ell = mass[:, None] * np.cross(position, velocity)
    ell_pred = mass[:, None] * np.cross(position, expected_velocity)
    return ell.sum(axis=0), ell_pred.sum(axis=0), ((ell - ell_pred) ** 2).sum(axis=0)


def virial_terms(position, velocity, mass, f_R, f_z):
    """Per-particle (m v^2, -m x.F) (each (N,)) for the Clausius virial ratio 2T/|W|;
    f_R, f_z: force per unit mass in cylindrical components at the particles."""
    R = np.hypot(position[:, 0], position[:, 1])
    a = mass * np.einsum("ij,ij->i", velocity, velocity)
    return a, -mass * (R * f_R + position[:, 2] * f_z)
