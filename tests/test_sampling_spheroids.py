"""Sampled halos and bulges against published velocity-dispersion profiles."""
import numpy as np
import pytest
from scipy import stats
from scipy.special import spence

from conftest import model_from_components, uncut_mass
from icgen import sampling
from icgen.sampling import realize
from icgen.samplers.spheroid_velocities import jeans_sigma_r2
from icgen.units import G

# A far outer cut: the uncut Hernquist law holds all but 4e-4 of its mass inside 5000 a
# (Hernquist 1990, eq. 3), below every tolerance here; the default cut (72.4 a) is tested in
# test_potential_spheroids.py.
A = 1.0
M = uncut_mass("hernquist")
HERNQUIST = {"kind": "bulge", "profile": "hernquist", "mass": "1e10 Msun",
             "scale_radius": "1 kpc", "outer_radius": "5000 kpc", "particles": 200_000}


def hernquist_sigma2(r):
    """Hernquist (1990, ApJ 356, 359) eq. 10: isotropic sigma_r^2 of the sphere."""
    x = r / A
    return G * M / (12 * A) * (12 * x * (1 + x) ** 3 * np.log((1 + x) / x)
                               - x / (1 + x) * (25 + 52 * x + 42 * x**2 + 12 * x**3))


def lokas_mamon_sigma2(r, rho_s, r_s):
    """Lokas & Mamon (2001, MNRAS 321, 155) eq. 14 with beta = 0, written in x = r/r_s:
    sigma_r^2 = 2 pi G rho_s r_s^2 x (1+x)^2 [pi^2 - ln x - 1/x - 1/(1+x)^2 - 6/(1+x)
    + (1 + 1/x^2 - 4/x - 2/(1+x)) ln(1+x) + 3 ln^2(1+x) + 6 Li2(-x)], Li2(-x) = spence(1+x)."""
    x = r / r_s
    l = np.log1p(x)
    bracket = (np.pi**2 - np.log(x) - 1 / x - 1 / (1 + x) ** 2 - 6 / (1 + x)
               + (1 + 1 / x**2 - 4 / x - 2 / (1 + x)) * l + 3 * l * l + 6 * spence(1 + x))
    return 2 * np.pi * G * rho_s * r_s**2 * x * (1 + x) ** 2 * bracket


def radial_tangential(chunk):
    x, v = chunk.position, chunk.velocity
    r = np.linalg.norm(x, axis=1)
    vr = np.einsum("ij,ij->i", x, v) / r
    return r, vr, np.einsum("ij,ij->i", v, v) - vr * vr


def assert_matches_in_bins(r, v2, predicted, edges):
    """mean(v2) / mean(predicted at each particle) = 1 in each bin, within the noise
    std(v2)/sqrt(n) measured in the bin: every bin within 4 sigma, and the chi-square of
    all bins with p > 1e-3."""
    idx = np.digitize(r, edges) - 1
    z = []
    for i in range(len(edges) - 1):
        s = idx == i
        dev = v2[s].mean() / predicted[s].mean() - 1
        z.append(dev / (v2[s].std() / np.sqrt(s.sum()) / predicted[s].mean()))
    z = np.array(z)
    assert np.all(np.abs(z) < 4), z
    assert stats.chi2.sf(np.sum(z * z), z.size) > 1e-3, z


@pytest.fixture(scope="module")
def hernquist():
    model = model_from_components({"b": HERNQUIST})
    return model, sampling.particles(model, "b", 0, HERNQUIST["particles"])


def test_hernquist_dispersions_match_eq10(hernquist):
    # Isotropic Eddington DF: sigma_r^2 and sigma_t^2/2 both follow Hernquist (1990) eq. 10.
    _, chunk = hernquist
    r, vr, vt2 = radial_tangential(chunk)
    edges = np.geomspace(0.1 * A, 10 * A, 11)
    assert_matches_in_bins(r, vr * vr, hernquist_sigma2(r), edges)
    assert_matches_in_bins(r, 0.5 * vt2, hernquist_sigma2(r), edges)


def test_hernquist_virial_ratio(hernquist):
    # Virial theorem 2T + W = 0 (Binney & Tremaine 2008, eq. 4.249), W = sum m x.F with the
    # model forces; 1% (noise ~0.3% for 2e5 particles, measured over seeds).
    model, chunk = hernquist
    x, v, m = chunk.position, chunk.velocity, chunk.mass
    R = np.hypot(x[:, 0], x[:, 1])
    _, f_R, f_z = model.potential.evaluate(R, x[:, 2])
    w = np.sum(m * (R * f_R + x[:, 2] * f_z))
    vc = v - (m @ v) / m.sum()
    t = 0.5 * np.sum(m * np.einsum("ij,ij->i", vc, vc))
    assert 2 * t / abs(w) == pytest.approx(1.0, abs=0.01)


def test_nfw_dispersion_matches_lokas_mamon():
    # Truncation moved out to ~5 r200 so that the outer cut changes sigma_r inside 0.5 r200
    # by < 0.1% (the missing pressure at r_t over the pressure there, ~1/700 in rho).
    model = model_from_components({"h": {"kind": "halo", "profile": "nfw", "mass": "1e12 Msun",
                                         "concentration": 10, "outer_radius": "1000 kpc",
                                         "particles": 200_000}})
    halo = model.components["h"]
    r, vr, _ = radial_tangential(sampling.particles(model, "h", 0, 200_000))
    edges = np.geomspace(0.1 * halo.r_s, 0.5 * halo.r200, 9)
    assert_matches_in_bins(r, vr * vr, lokas_mamon_sigma2(r, halo.rho0, halo.r_s), edges)


def test_jeans_table_matches_eq10():
    # Independent numerics: the Jeans integral (Simpson in ln r) vs the closed form of
    # Hernquist (1990) eq. 10; quadrature error ~h^4, so 1e-4.
    model = model_from_components({"b": {**HERNQUIST, "velocities": "jeans"}})
    table = realize.samplers(model)["b"].velocities.table
    s2 = jeans_sigma_r2(table, model.components["b"].density_r)
    sel = (table.r > 0.01) & (table.r < 100)
    np.testing.assert_allclose(s2[sel], hernquist_sigma2(table.r[sel]), rtol=1e-4)


def test_osipkov_merritt_anisotropy_profile():
    # The Osipkov-Merritt DF has beta(r) = r^2/(r^2 + r_a^2) (Merritt 1985, AJ 90, 1027),
    # i.e. sigma_t^2 (1 + r^2/r_a^2) = 2 sigma_r^2 at every r. Ratio of bin sums with its
    # noise by linearisation; 4 sigma per bin. Without the scaling the ratio is far off.
    r_a = 1.0
    model = model_from_components({"b": {**HERNQUIST, "anisotropy_radius": "1 kpc"}})
    r, vr, vt2 = radial_tangential(sampling.particles(model, "b", 0, 200_000))
    edges = np.geomspace(0.1, 10, 9)
    idx = np.digitize(r, edges) - 1
    for i in range(len(edges) - 1):
        s = idx == i
        a, b = 0.5 * vt2[s] * (1 + (r[s] / r_a) ** 2), vr[s] ** 2
        ratio = a.sum() / b.sum()
        noise = np.std(a - ratio * b) / b.mean() / np.sqrt(s.sum())
        assert abs(ratio - 1) < 4 * noise
    outer = r > 3
    assert np.mean(vt2[outer]) / (2 * np.mean(vr[outer] ** 2)) < 0.3   # radial orbits outside


def test_retrograde_flip_reverses_only_retrograde_azimuthal_velocities():
    # Flipping v_phi keeps |v| and positions (same deviates); a fraction (1 + f)/2 of the
    # particles then have L_z > 0 (binomial noise, 5 sigma); mean v_phi > 0.
    base = model_from_components({"b": {**HERNQUIST, "particles": 50_000}})
    spun = model_from_components({"b": {**HERNQUIST, "particles": 50_000,
                                        "retrograde_flip_fraction": 0.5}})
    c0 = sampling.particles(base, "b", 0, 50_000)
    c1 = sampling.particles(spun, "b", 0, 50_000)
    np.testing.assert_array_equal(c0.position, c1.position)
    np.testing.assert_allclose(np.linalg.norm(c1.velocity, axis=1),
                               np.linalg.norm(c0.velocity, axis=1), rtol=1e-12)
    x, v = c1.position, c1.velocity
    lz = x[:, 0] * v[:, 1] - x[:, 1] * v[:, 0]
    n = lz.size
    assert np.mean(lz > 0) == pytest.approx(0.75, abs=5 * np.sqrt(0.75 * 0.25 / n))
    assert np.all(np.abs(v[:, 2] - c0.velocity[:, 2]) == 0)   # v_z untouched
