"""The known truth behind a mock observation, on the rings of its rotation curve.

For each ring (galaxy-plane radii, kpc): the model's midplane circular speed in total and
per component (``potential.circular_speed``), and, from the tracer's particles in the
ring (cylindrical radius, all heights), the mass-weighted mean v_phi, its standard error
and the velocity dispersions. v_circ_ring - v_phi_mean is the asymmetric drift
(Binney & Tremaine 2008, eq. 4.228) that a rotation curve measured from a warm tracer
carries. For a stellar disk the model's own Jeans prediction of the midplane mean v_phi
(icgen.samplers.disk_velocities) is given as well.
"""
import numpy as np
from astropy.table import QTable
import astropy.units as u

from ..diagnostics.measure import cylindrical

__all__ = ["truth_table"]


# v_c at particle radii from a log-spaced table: linear interpolation errs by ~h^2/8 times
# the curvature of v_c in ln R (order 1), so 400 points per decade (h = 0.0058) keep it
# near 1e-5, against ~1 s for a million exact evaluations.
VC_POINTS_PER_DECADE = 400


def _circular_speed_at(model, R):
    """Total midplane v_c (km/s) at radii R (kpc), through a log-spaced table."""
    if R.size == 0:
        return R.copy()
    lo, hi = max(float(R.min()), 1e-6 * float(R.max()), 1e-9), max(float(R.max()), 1e-9)
    n = max(int(np.ceil(np.log10(hi / lo) * VC_POINTS_PER_DECADE)), 1) + 1
    table = np.geomspace(lo, hi, n)
    return np.interp(np.log(np.maximum(R, lo)), np.log(table), model.circular_speed(table))


def _weighted_stats(ring, n_rings, weights, values):
    """Per ring: (sum w, mean, standard deviation) of ``values`` with weights."""
    sw = np.bincount(ring, weights, minlength=n_rings)[:n_rings]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.bincount(ring, weights * values, minlength=n_rings)[:n_rings] / sw
        second = np.bincount(ring, weights * values**2, minlength=n_rings)[:n_rings] / sw
    return sw, mean, np.sqrt(np.clip(second - mean**2, 0.0, None))


def truth_table(model, tracer, particles, edges, beam_kpc, moments=None):
    """Truth on rings of galaxy-plane radius.

    Parameters
    ----------
    model : MassModel
    tracer : str
        Name of the observed component.
    particles : dict
        "position" (n, 3) kpc, "velocity" (n, 3) km/s, "mass" (n,) Msun of the tracer.
    edges : ndarray (m + 1,)
        Ring edges, kpc.
    beam_kpc : float
        Beam FWHM at the galaxy's distance, kpc.
    moments : disk kinematics, optional
        ``model.kinematics(tracer)`` of a stellar disk (its ``moments(R, z)``).
        For the model's Jeans prediction of the mean v_phi (stellar disks).

    Returns
    -------
    QTable, one row per ring.
    """
    R, _, v_R, v_phi, v_z = cylindrical(particles["position"], particles["velocity"])
    mass = np.asarray(particles["mass"], float)
    m = edges.size - 1
    ring = np.searchsorted(edges, R, side="right") - 1
    inside = (ring >= 0) & (ring < m)
    ring, mass, R = ring[inside], mass[inside], R[inside]
    v_R, v_phi, v_z = v_R[inside], v_phi[inside], v_z[inside]
    count = np.bincount(ring, minlength=m)[:m]
    _, vphi_mean, sig_phi = _weighted_stats(ring, m, mass, v_phi)
    _, _, sig_R = _weighted_stats(ring, m, mass, v_R)
    _, _, sig_z = _weighted_stats(ring, m, mass, v_z)
    _, vc_ring, _ = _weighted_stats(ring, m, mass, _circular_speed_at(model, R))
    mid = 0.5 * (edges[1:] + edges[:-1])
    kms = u.km / u.s
    t = QTable()
    t["radius"] = mid * u.kpc
    t["r_in"] = edges[:-1] * u.kpc
    t["r_out"] = edges[1:] * u.kpc
    t["v_circ_total"] = model.circular_speed(mid) * kms
    for name in model.components:
        t[f"v_circ_{name}"] = model.circular_speed(mid, name) * kms
    t["v_circ_ring"] = vc_ring * kms
    t["v_phi_mean"] = vphi_mean * kms
    with np.errstate(invalid="ignore", divide="ignore"):
        t["v_phi_err"] = sig_phi / np.sqrt(count) * kms
    t["asymmetric_drift"] = (vc_ring - vphi_mean) * kms
    t["sigma_R"] = sig_R * kms
    t["sigma_phi"] = sig_phi * kms
    t["sigma_z"] = sig_z * kms
    if moments is not None:
        mom = moments.moments(mid, np.zeros_like(mid))
        t["v_phi_jeans"] = np.sqrt(np.clip(mom["vphi2"], 0.0, None)) * kms
    t["n_particles"] = count
    t["beam"] = np.full(m, beam_kpc) * u.kpc
    t.meta["tracer"] = tracer
    t.meta["model"] = model.name
    return t
