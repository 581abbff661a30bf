"""Position sampling: inverse CDFs against published cumulative masses and scipy."""
import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from conftest import model_from_components
from icgen import sampling
from icgen.samplers.positions import (RadialCdf, exponential_disk_radius,
                                      isotropic_directions, vertical_offset, SpheroidPositions)

# Deviates that include the extremes the block generator can produce (2^-54, 1 - 2^-54).
U_EDGES = np.array([2.0**-54, 1e-12, 1e-6, 0.01, 0.3, 0.5, 0.7, 0.99, 1 - 1e-9, 1 - 2.0**-53])


def disk_mass_fraction(x):
    """Freeman (1970, ApJ 160, 811): M(<R)/M = 1 - (1 + x) exp(-x), x = R/R_d."""
    return -np.expm1(-x) - x * np.exp(-x)


def test_lambert_w_radius_inverts_the_exponential_disk_mass():
    # Independent numerics: brentq root of ln(1 + x) - x = ln(1 - u), the mass law in a
    # form that keeps its digits at both ends (for u < 1e-6 the sampler switches to the
    # series at u = 0). Tolerance: the oracle's own log1p(s) - s cancels to ~1e-16/s^2.
    u = U_EDGES[1:]
    x = exponential_disk_radius(u, 1.0)
    roots = [optimize.brentq(lambda s: np.log1p(s) - s - np.log1p(-ui), 1e-12, 80, xtol=1e-14)
             for ui in u]
    np.testing.assert_allclose(x, roots, rtol=1e-8)
    assert np.all(np.isfinite(exponential_disk_radius(U_EDGES, 3.0)))


@pytest.mark.parametrize("code, cdf", [
    # sech^2: CDF = (1 + tanh(z/z_d))/2 (Spitzer 1942, ApJ 95, 329, integrated)
    (0, lambda t: 0.5 * (1 + np.tanh(t))),
    # exponential: CDF = exp(t)/2 below the plane, 1 - exp(-t)/2 above
    (1, lambda t: np.where(t < 0, 0.5 * np.exp(t), 1 - 0.5 * np.exp(-t))),
])
def test_vertical_inverse_cdfs(code, cdf):
    u = U_EDGES[2:-2]
    z = vertical_offset(u, 0.3, code)
    # closed forms; round-off only: 1 + tanh(t) cancels to ~1e-16/u relative at u = 1e-6
    np.testing.assert_allclose(cdf(z / 0.3), u, rtol=1e-9)
    assert np.all(np.isfinite(vertical_offset(U_EDGES, 0.3, code)))


def hernquist_mass(r):
    """Hernquist (1990, ApJ 356, 359) eq. 3 with M = a = 1."""
    return r**2 / (1 + r) ** 2


def test_radial_cdf_inverts_hernquist_mass_profile():
    # The table inverts M(<r) (Hernquist 1990 eq. 3, renormalised to the table's outer
    # edge 1e6 a) to its interpolation bound (~2e-5 in ln r, so ~4e-5 in M).
    table = RadialCdf(lambda r: 2 * r**2 / (1 + r) ** 3, 1e-6, 1e6)
    u = np.array([1e-12, 1e-6, 1e-3, 0.2, 0.5, 0.8, 0.99, 1 - 1e-5])
    r = table.radius(u)
    np.testing.assert_allclose(hernquist_mass(r) / hernquist_mass(1e6), u, rtol=1e-4)
    # total by Simpson's rule at 200 points per decade: error ~h^4, below 1e-8
    assert table.mass / hernquist_mass(1e6) == pytest.approx(1, rel=1e-8)


def test_radial_cdf_refinement_reduces_the_error():
    # Ordering check: a finer table inverts better (interpolation error ~ h^2).
    u = np.linspace(0.01, 0.99, 99)
    errs = []
    for per_decade in (25, 100):
        r = RadialCdf(lambda r: 2 * r**2 / (1 + r) ** 3, 1e-6, 1e6, per_decade).radius(u)
        errs.append(np.max(np.abs(hernquist_mass(r) / hernquist_mass(1e6) - u)))
    assert errs[1] < errs[0] / 8


def test_truncated_nfw_radii_match_the_profile_enclosed_mass():
    # The model's truncated NFW: sampled radii quantiles vs the profile's own M(<r)
    # (closed form inside r_t, scipy quad of the exponential cut outside).
    model = model_from_components({"h": {"kind": "halo", "profile": "nfw",
                                         "mass": "1e12 Msun", "concentration": 10,
                                         "particles": 1000}})
    halo = model.components["h"]
    pos = SpheroidPositions(halo)
    u = np.array([1e-6, 0.01, 0.3, 0.7, 0.95, 0.999])
    m = halo.enclosed_mass(pos.radius(u)) / halo.enclosed_mass(halo.extent)
    np.testing.assert_allclose(m, u, rtol=1e-4)


def test_isotropic_directions_moments():
    # <n_i> = 0 and <n_i n_j> = delta_ij / 3 for uniform directions; noise 1/sqrt(3N)
    rng = np.random.default_rng(3)
    n = isotropic_directions(rng.random(200_000), rng.random(200_000))
    np.testing.assert_allclose(np.linalg.norm(n, axis=1), 1.0, rtol=1e-14)
    tol = 5 / np.sqrt(3 * 200_000)
    np.testing.assert_allclose(n.mean(axis=0), 0.0, atol=tol)
    np.testing.assert_allclose(n.T @ n / 200_000, np.eye(3) / 3, atol=tol)


@pytest.fixture(scope="module")
def disk_particles():
    model = model_from_components({"disk": {
        "kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
        "scale_height": "0.3 kpc", "vertical": "exponential", "toomre_q": 1.5,
        "particles": 100_000}})
    return model, sampling.particles(model, "disk", 0, 100_000)


def test_disk_surface_density_and_vertical_profile_ks(disk_particles):
    # scipy.stats.kstest against the model CDFs (Freeman 1970; exponential vertical law)
    _, chunk = disk_particles
    x = chunk.position
    R = np.hypot(x[:, 0], x[:, 1])
    assert stats.kstest(R / 3.0, disk_mass_fraction).pvalue > 1e-3
    z = x[:, 2] / 0.3
    cdf = lambda t: np.where(t < 0, 0.5 * np.exp(t), 1 - 0.5 * np.exp(-t))
    assert stats.kstest(z, cdf).pvalue > 1e-3
    phi = np.arctan2(x[:, 1], x[:, 0])
    assert stats.kstest(phi, stats.uniform(-np.pi, 2 * np.pi).cdf).pvalue > 1e-3


def test_tapered_disk_radii_follow_the_tapered_surface_density():
    # Sigma ~ exp(-R/R_d) erfc((R - R_t)/w)/2: the model CDF by scipy quad, then KS
    model = model_from_components({"disk": {
        "kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
        "scale_height": "0.3 kpc", "taper_radius": "6 kpc", "taper_width": "1 kpc",
        "toomre_q": 1.5, "particles": 50_000}})
    R = np.hypot(*sampling.particles(model, "disk", 0, 50_000).position[:, :2].T)
    sigma = lambda s: np.exp(-s / 3) * special.erfc((s - 6) / 1.0)
    total = integrate.quad(lambda s: s * sigma(s), 0, 60)[0]
    grid = np.linspace(0, 25, 2001)
    cum = integrate.cumulative_trapezoid(grid * sigma(grid), grid, initial=0) / total
    cdf = lambda s: np.interp(s, grid, cum)   # trapezoid with 2000 steps: error ~1e-6
    assert stats.kstest(R, cdf).pvalue > 1e-3
    assert R.max() < 6 + 12 * 1.0                 # nothing beyond the profile's extent


def test_hernquist_density_profile_chi_square():
    # Counts in radial shells vs Hernquist (1990, ApJ 356, 359) eq. 3, M(<r) = M r^2/(r+a)^2,
    # with M the uncut law's mass, inside the outer cut; the last bin holds the rest (the
    # cut); chi-square with multinomial errors.
    model = model_from_components({"b": {
        "kind": "bulge", "profile": "hernquist", "mass": "1e10 Msun",
        "scale_radius": "1 kpc", "particles": 100_000}})
    b = model.components["b"]
    m_full = 2 * np.pi * b.rho0       # Hernquist (1990) eq. 2 with a = 1 kpc
    r = np.linalg.norm(sampling.particles(model, "b", 0, 100_000).position, axis=1)
    edges = np.concatenate([[0], np.geomspace(0.01, b.r_t, 25)])
    frac = np.diff(edges**2 / (edges + 1) ** 2) * m_full / b.total_mass
    frac = np.append(frac, 1 - frac.sum())
    counts = np.histogram(r, np.append(edges, np.inf))[0]
    assert stats.chisquare(counts, frac * r.size).pvalue > 1e-3
    # sampled out to the profile extent only, and never beyond 100 median radii
    assert r.max() <= b.extent
    assert r.max() < 100 * np.median(r)


def test_default_model_particle_masses_follow_the_heating_rule():
    # Common practice (Ludlow et al. 2019, MNRAS 488, L123): halo particles at most ~5x
    # heavier than disk particles, or the halo heats the disk numerically.
    from icgen import load_model, sampling
    plans = {p.kind: p.particle_mass for p in sampling.plan(load_model())}
    assert plans["halo"] <= 5 * plans["disk"]
