"""Binned profiles of a particle state and their standard errors
(icgen.diagnostics.measured_profiles).

References: the definition of a standard error (the scatter of an estimate over replicate
samples); the Hernquist (1990, ApJ 356, 359) mass profile M(<r) = M r^2/(r + a)^2, eq. 3;
the exponential disk's enclosed mass (Freeman 1970) and the sech^2 layer (Spitzer 1942).
"""
import numpy as np

from icgen.diagnostics.measured_profiles import (DISK_EDGES, SPHEROID_RADII, bin_labels,
                                                 disk_profiles, spheroid_profiles)

M_H, A_H = 1e11, 5.0         # a Hernquist sphere (Msun, kpc)


def test_standard_errors_match_replicate_scatter():
    # For independent particles the standard error is the standard deviation of the
    # estimate over replicate samples (its definition): check the binomial counts, the
    # order-statistic median error and the delta-method dispersion errors that way.
    rng = np.random.default_rng(4)
    r_d, n = 3.0, 20000
    values, errors = [], []
    for _ in range(200):
        R = r_d * rng.gamma(2.0, size=n)      # exponential disk: p(R) ~ R exp(-R/R_d)
        ph = rng.uniform(0, 2 * np.pi, n)
        pos = np.column_stack([R * np.cos(ph), R * np.sin(ph), rng.normal(0, 0.3, n)])
        v_R, v_p = rng.normal(0, 30, n), rng.normal(200, 20, n)
        vel = np.column_stack([v_R * np.cos(ph) - v_p * np.sin(ph),
                               v_R * np.sin(ph) + v_p * np.cos(ph), rng.normal(0, 15, n)])
        out = disk_profiles(pos, vel, 1.0, r_d)
        values.append(np.concatenate([out[k][0] for k in sorted(out)]))
        errors.append(np.concatenate([out[k][1] for k in sorted(out)]))
    values, errors = np.array(values), np.array(errors)
    ok = np.all(np.isfinite(values), axis=0)
    ratio = values[:, ok].std(axis=0, ddof=1) / errors[:, ok].mean(axis=0)
    # 200 replicates estimate a standard deviation to 5 % (1/sqrt(2 x 200)); the error
    # formulas are asymptotic in n (>= 400 particles per bin here): 3 x 5 % + 5 %.
    assert np.all(np.abs(ratio - 1) < 0.2), ratio


def test_spheroid_enclosed_mass_matches_hernquist_profile():
    # Closed-form inverse of M(<r)/M = r^2/(r + a)^2 (Hernquist 1990, eq. 3).
    rng = np.random.default_rng(5)
    n = 200000
    s = np.sqrt(rng.uniform(size=n))
    r = A_H * s / (1 - s)
    nhat = rng.normal(size=(n, 3))
    pos = r[:, None] * nhat / np.linalg.norm(nhat, axis=1)[:, None]
    out = spheroid_profiles(pos, np.zeros_like(pos), M_H / n, A_H)
    mass, err = out["enclosed_mass"][:2]
    f = np.asarray(SPHEROID_RADII)
    expect = M_H * f**2 / (f + 1) ** 2
    # within 4 of the reported (binomial) standard errors
    assert np.all(np.abs(mass - expect) < 4 * err)


def test_disk_profiles_match_the_exponential_sech2_disk():
    # An exponential disk, M(<R)/M = 1 - (1 + R/R_d) exp(-R/R_d) (Freeman 1970, ApJ 160,
    # 811, from memory), in a sech^2 layer, whose |z| has the CDF tanh(|z|/z_0) and so
    # the median z_0 artanh(1/2) (Spitzer 1942, ApJ 95, 329), with Gaussian velocities of
    # known moments: every binned value within 4 of its own standard errors.
    rng = np.random.default_rng(8)
    r_d, z_0, n, mass = 3.0, 0.3, 100_000, 5e10
    R = r_d * rng.gamma(2.0, size=n)          # p(R) ~ R exp(-R/R_d)
    ph = rng.uniform(0, 2 * np.pi, n)
    z = z_0 * np.arctanh(rng.uniform(-1, 1, n))
    pos = np.column_stack([R * np.cos(ph), R * np.sin(ph), z])
    v_R, v_p, v_z = rng.normal(0, 30, n), rng.normal(200, 20, n), rng.normal(0, 15, n)
    vel = np.column_stack([v_R * np.cos(ph) - v_p * np.sin(ph),
                           v_R * np.sin(ph) + v_p * np.cos(ph), v_z])
    out = disk_profiles(pos, vel, mass / n, r_d)
    x = np.asarray(DISK_EDGES)
    frac = np.diff(1 - (1 + x) * np.exp(-x))
    area = np.pi * np.diff((r_d * x) ** 2)
    expect = {"surface_density": mass * frac / area, "median_abs_z": z_0 * np.arctanh(0.5),
              "sigma_R": 30.0, "sigma_z": 15.0, "mean_v_phi": 200.0}
    assert set(out) == set(expect) == set(bin_labels("disk", r_d))
    for key, (value, error, _) in out.items():
        assert value.shape == (len(DISK_EDGES) - 1,) and np.all(error > 0), key
        assert np.all(np.abs(value - expect[key]) < 4 * error), (key, value, expect[key])
