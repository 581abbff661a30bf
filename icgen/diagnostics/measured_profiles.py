"""Binned profiles of a particle state, each value with its standard error.

The measurements a run compares over time (``icgen drift`` today; any run that follows a
model in time can use the same): per disk, in annuli of its scale length, surface
density, median |z|, sigma_R, sigma_z and mean v_phi; per halo or bulge, the mass inside
fixed fractions of its scale radius and sigma_r in shells.

**Noise** of each value at one time: binomial for counts and masses (the particle number
is fixed), the order-statistic rank spread sqrt(n)/2 for medians, (mu4 - mu2^2)/n for
variances by the delta method, s/sqrt(n) for means (:mod:`icgen.diagnostics.measure`).

Units: kpc, km/s, Msun.
"""
import math
from typing import NamedTuple

import numpy as np

from ..kinds import kind_of
from . import measure

__all__ = ["DISK_EDGES", "SPHEROID_RADII", "SPHEROID_SHELLS", "MIN_COUNT", "DISK_QUANTITIES",
           "Group", "binned_median_abs", "disk_profiles", "spheroid_profiles",
           "measure_state", "bin_labels"]

#: Bin edges of disk measurements, in scale lengths (2.2 R_d lies in the 2-2.5 bin).
DISK_EDGES = (0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0)
#: Radii (in scale radii) of the enclosed-mass measurements of halos and bulges; the
#: innermost see the cusp flattening of Kazantzidis et al. (2004).
SPHEROID_RADII = (0.05, 0.1, 0.2, 0.5, 1.0, 2.0)
#: Shells (in scale radii) of the sigma_r measurements.
SPHEROID_SHELLS = (0.0, 0.5, 1.0, 2.0)
#: Fewest particles for a binned value; below it the bin is reported empty.
MIN_COUNT = 10
#: Quantities of each kind of component, in the order they are measured.
DISK_QUANTITIES = ("surface_density", "median_abs_z", "sigma_R", "sigma_z", "mean_v_phi")


class Group(NamedTuple):
    """One component's particles in a state: rows ``rows`` of the (N, 3) arrays, each of
    mass ``particle_mass`` (Msun); a disk of ``kind`` (icgen.kinds: flattened) is measured
    in annuli of ``scale`` = R_d (kpc), a spheroid in radii of ``scale`` = its scale
    radius (kpc)."""
    name: str
    kind: str
    rows: slice
    particle_mass: float
    scale: float


def binned_median_abs(values, idx, nbins):
    """(median, standard error) of |values| per bin (NaN below MIN_COUNT particles).

    The error is half the spread of the order statistics at ranks n/2 -+ sqrt(n)/2: the
    rank of the sample median is binomial(n, 1/2), standard deviation sqrt(n)/2 (David &
    Nagaraja 2003, Order Statistics; distribution-free; from memory).
    """
    med, err = np.full(nbins, np.nan), np.full(nbins, np.nan)
    for b in range(nbins):
        a = np.sort(np.abs(values[idx == b]))
        n = a.size
        if n < MIN_COUNT:
            continue
        med[b] = np.median(a)
        half = 0.5 * math.sqrt(n)
        lo, hi = max(int(math.floor(0.5 * n - half)), 0), min(int(math.ceil(0.5 * n + half)), n - 1)
        err[b] = 0.5 * (a[hi] - a[lo])
    return med, err


def _count_error(n, total):
    """Standard error of bin counts ``n`` out of a fixed ``total``: binomial,
    sqrt(n (1 - n/N))."""
    return np.sqrt(n * (1.0 - n / max(total, 1)))


def disk_profiles(pos, vel, particle_mass, r_d):
    """Disk measurements in annuli of R_d: dict name -> (values, errors, unit), each
    (len(DISK_EDGES) - 1,), NaN in bins of fewer than MIN_COUNT particles."""
    R, z, v_R, v_phi, v_z = measure.cylindrical(pos, vel)
    edges = r_d * np.asarray(DISK_EDGES)
    nb = edges.size - 1
    idx = measure.bin_index(R, edges)
    n = measure.counts(idx, nb)
    area = np.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
    few = n < MIN_COUNT
    se_n = _count_error(n, R.size)
    out = {"surface_density": (n * particle_mass / area, se_n * particle_mass / area,
                               "Msun/kpc2"),
           "median_abs_z": (*binned_median_abs(z, idx, nb), "kpc"),
           "sigma_R": (*measure.binned_dispersion(v_R, idx, nb), "km/s"),
           "sigma_z": (*measure.binned_dispersion(v_z, idx, nb), "km/s"),
           "mean_v_phi": (*measure.binned_mean(v_phi, idx, nb), "km/s")}
    return {k: (np.where(few, np.nan, v), np.where(few, np.nan, e), unit)
            for k, (v, e, unit) in out.items()}


def spheroid_profiles(pos, vel, particle_mass, scale):
    """Halo/bulge measurements: "enclosed_mass" inside SPHEROID_RADII x ``scale`` and
    "sigma_r" in SPHEROID_SHELLS x ``scale``: dict name -> (values, errors, unit)."""
    r, v_r, _, _ = measure.spherical(pos, vel)
    n_in = np.array([np.count_nonzero(r < f * scale) for f in SPHEROID_RADII], float)
    shells = scale * np.asarray(SPHEROID_SHELLS)
    idx = measure.bin_index(r, shells)
    sig, err = measure.binned_dispersion(v_r, idx, shells.size - 1)
    few = measure.counts(idx, shells.size - 1) < MIN_COUNT
    se_n = _count_error(n_in, r.size)
    return {"enclosed_mass": (np.where(n_in < MIN_COUNT, np.nan, n_in * particle_mass),
                              np.where(n_in < MIN_COUNT, np.nan, se_n * particle_mass),
                              "Msun"),
            "sigma_r": (np.where(few, np.nan, sig), np.where(few, np.nan, err), "km/s")}


def measure_state(groups, pos, vel):
    """All measurements of one state (``pos``, ``vel`` (N, 3), kpc and km/s, about the
    galaxy's centre): dict (component, quantity) -> (values, errors, unit), for each
    :class:`Group` of ``groups``."""
    out = {}
    for name, kind, rows, pm, scale in groups:
        fn = disk_profiles if kind_of(kind).flattened else spheroid_profiles
        for q, val in fn(pos[rows], vel[rows], pm, scale).items():
            out[(name, q)] = val
    return out


def bin_labels(kind, scale):
    """(lo, hi) in kpc of each bin of a component's measurements, per quantity (enclosed
    masses: (0, radius))."""
    if kind_of(kind).flattened:
        e = scale * np.asarray(DISK_EDGES)
        return {q: list(zip(e[:-1], e[1:])) for q in DISK_QUANTITIES}
    shells = scale * np.asarray(SPHEROID_SHELLS)
    return {"enclosed_mass": [(0.0, f * scale) for f in SPHEROID_RADII],
            "sigma_r": list(zip(shells[:-1], shells[1:]))}
