"""Exponential-disk potential (Dehnen & Binney 1998 split + multipoles) against outside
references: the razor-thin Freeman (1970) curve, brute-force ring quadrature, Poisson."""
import numpy as np
import pytest
from scipy import integrate
from scipy.special import i0, i1, k0, k1

from conftest import model_from_components
from icgen.potential import CombinedPotential
from icgen.units import G
from reference.ring_quadrature import ring_potential_forces

MASS, R_D = 5e10, 3.0


def disk_model(z_d, vertical="sech2", **extra):
    comp = {"kind": "disk", "mass": f"{MASS} Msun", "scale_length": f"{R_D} kpc",
            "scale_height": f"{z_d} kpc", "vertical": vertical, "sigma_ratio": 1.0,
            "particles": 10, **extra}
    return model_from_components({"disk": comp})


def freeman_vc(R):
    """Razor-thin exponential disk, Freeman (1970, ApJ 160, 811), eq. 10:
    v^2 = 4 pi G Sigma0 R_d y^2 [I0 K0 - I1 K1](y), y = R/(2 R_d)."""
    y = R / (2 * R_D)
    sigma0 = MASS / (2 * np.pi * R_D**2)
    return np.sqrt(4 * np.pi * G * sigma0 * R_D * y**2 * (i0(y) * k0(y) - i1(y) * k1(y)))


def test_thin_limit_matches_freeman():
    # z_d = 1e-4 R_d: the thickness correction to v_c is ~ z_d/R (measured 2.4e-3 at
    # R = 0.1 R_d for z_d = 1e-3 R_d, linear in z_d), so the 1e-3 bar tests the solver.
    m = disk_model(1e-4 * R_D)
    R = np.geomspace(0.1, 10, 60) * R_D
    np.testing.assert_allclose(m.circular_speed(R), freeman_vc(R), rtol=1e-3)
    # peak at R = 2.15 R_d with v = 0.6221 sqrt(G M/R_d) (Freeman 1970; Binney & Tremaine
    # 2008 fig. 2.17, values from memory to 3-4 digits)
    x = np.linspace(1.9, 2.4, 501) * R_D
    v = m.circular_speed(x)
    assert x[np.argmax(v)] / R_D == pytest.approx(2.15, abs=0.01)
    assert v.max() / np.sqrt(G * MASS / R_D) == pytest.approx(0.6221, rel=1e-3)


def _reference(m, R, z):
    d = m.components["disk"]
    return ring_potential_forces(d.density, R, z, r_extent=30 * R_D, z_extent=40 * d.z_d,
                                 epsrel=1e-6)


def _compare(m, points):
    """Largest relative errors of v_c^2 (i.e. F_R) and of F_z against ring quadrature."""
    err_r, err_z = 0.0, 0.0
    for R, z in points:
        _, fr_ref, fz_ref = _reference(m, R, z)
        fr, fz = (f[0] for f in m.forces(np.array([R]), np.array([z])))
        err_r = max(err_r, abs(fr / fr_ref - 1))
        if z > 0:
            err_z = max(err_z, abs(fz / fz_ref - 1))
    return err_r, err_z


def _points(z_d, radii, heights):
    return [(x * R_D, h * z_d) for x in radii for h in heights]


def test_thick_disk_against_ring_quadrature_fast():
    # Independent brute-force quadrature over rings with complete elliptic integrals
    # (tests/reference, checked there against Plummer and Miyamoto & Nagai 1975).
    # Bar from the design: v_c and F_z within 1e-3.
    m = disk_model(0.1 * R_D)
    err_r, err_z = _compare(m, _points(0.3, [0.2, 1.0, 2.2, 5.0], [0.0, 1.0, 3.0]))
    assert err_r < 1e-3 and err_z < 1e-3, (err_r, err_z)


@pytest.mark.slow
@pytest.mark.parametrize("ratio", [0.1, 0.3])
@pytest.mark.parametrize("vertical", ["sech2", "exponential"])
def test_thick_disk_against_ring_quadrature_full(ratio, vertical):
    m = disk_model(ratio * R_D, vertical)
    pts = _points(ratio * R_D, [0.2, 0.5, 1, 2, 3, 5, 10], [0, 0.5, 1, 2, 3])
    err_r, err_z = _compare(m, pts)
    print(f"{vertical} z_d/R_d={ratio}: max |dF_R/F_R| = {err_r:.2e}, |dF_z/F_z| = {err_z:.2e}")
    assert err_r < 1e-3 and err_z < 1e-3


def test_more_harmonics_reduce_the_error():
    # Ordering (STYLE): l_max = 8 must be worse than the default against ring quadrature.
    m = disk_model(0.1 * R_D)
    pts = _points(0.3, [0.5, 2.0], [1.0, 2.0])
    coarse = CombinedPotential(list(m.components.values()), lmax=8)
    err_fine = _compare(m, pts)
    m.potential = coarse
    err_coarse = _compare(m, pts)
    assert max(err_fine) < 0.2 * max(err_coarse)


def _laplacian(m, R, z, h):
    p = lambda R, z: m.potential_at(np.array([R]), np.array([z]))[0]
    c = p(R, z)
    d2r = (p(R + h, z) - 2 * c + p(R - h, z)) / h**2
    d1r = (p(R + h, z) - p(R - h, z)) / (2 * h)
    d2z = (p(R, z + h) - 2 * c + p(R, z - h)) / h**2
    return d2r + d1r / R + d2z


@pytest.mark.parametrize("vertical", ["sech2", "exponential"])
def test_poisson_equation(vertical, default_model):
    # lap Phi = 4 pi G rho where rho is not tiny: |z| <= 2 z_d (rho >= 7% of the midplane
    # value for sech^2). Step h = z_d/30: truncation error (h/z_d)^2/12 ~ 1e-4.
    m = disk_model(0.3, vertical)
    z_d = 0.3
    h = z_d / 30
    worst = 0.0
    for R in np.array([0.2, 0.5, 1, 2, 3, 5, 8]) * R_D:
        for z in np.array([0.1, 0.5, 1.0, 1.5, 2.0]) * z_d:
            if vertical == "exponential" and z < 2 * h:
                continue   # kink of exp(-|z|/z_d) at z = 0 breaks the finite difference
            rho = m.density(R, z)
            worst = max(worst, abs(_laplacian(m, R, z, h) / (4 * np.pi * G * rho) - 1))
    assert worst < 0.01, worst


def test_poisson_full_default_model(default_model):
    # All components together (NFW halo, Hernquist bulge, disk) inside the disk layer.
    m = default_model
    z_d = m.disks[0].z_d
    for R, z in [(1.0, 0.1), (4.0, 0.2), (8.0, 0.3), (12.0, 0.5)]:
        lap = _laplacian(m, R, z, z_d / 30)
        assert lap / (4 * np.pi * G * m.density(R, z)) == pytest.approx(1, rel=0.01)


def test_taper_normalisation_and_shape():
    m = disk_model(0.3, taper_radius="20 kpc", taper_width="2 kpc")
    d = m.components["disk"]
    total, _ = integrate.quad(lambda R: 2 * np.pi * R * d.surface_density(R), 0, 80, limit=200)
    assert total == pytest.approx(MASS, rel=1e-8)
    # inside the taper the profile is exponential (erfc((R-R_t)/w)/2 -> 1 for R << R_t)
    ratio = d.surface_density(np.array([3.0, 6.0]))
    assert ratio[0] / ratio[1] == pytest.approx(np.exp(1.0), rel=1e-6)
    assert d.surface_density(30.0) < 1e-6 * d.surface_density(20.0)
