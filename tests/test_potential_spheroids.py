"""Spherical components against their published closed forms."""
import numpy as np
import pytest
from astropy import units as u
from astropy.cosmology import Planck18

from conftest import model_from_components
from icgen.units import G

NFW = {"halo": {"kind": "halo", "profile": "nfw", "mass": "1e12 Msun", "concentration": 10,
                "particles": 1000}}


def nfw_mass(r, rho_s, r_s):
    """Navarro, Frenk & White (1997, ApJ 490, 493): M(r) = 4 pi rho_s r_s^3 [ln(1+x) - x/(1+x)]."""
    x = r / r_s
    return 4 * np.pi * rho_s * r_s**3 * (np.log1p(x) - x / (1 + x))


@pytest.fixture(scope="module")
def nfw_model():
    return model_from_components(NFW)


def test_r200_matches_definition_with_astropy_critical_density(nfw_model):
    # r200: mean density inside r200 is 200 rho_crit(z=0) of Planck18 (astropy.cosmology).
    halo = nfw_model.components["halo"]
    rho_c = Planck18.critical_density(0).to(u.Msun / u.kpc**3).value
    mean = 1e12 / (4 / 3 * np.pi * halo.r200**3)
    assert mean / (200 * rho_c) == pytest.approx(1, rel=1e-10)
    # enclosed mass at r200 is M200 (the cut starts at r200, so exact inside)
    assert nfw_model.enclosed_mass(halo.r200)[0] == pytest.approx(1e12, rel=1e-10)


def test_nfw_circular_speed_and_potential_closed_form(nfw_model):
    halo = nfw_model.components["halo"]
    r = np.geomspace(0.05, 0.95 * halo.r200, 40)
    v = nfw_model.circular_speed(r)
    # v^2 = G M(<r)/r with NFW M(r); multipole l=0 quadrature error is ~1e-8 (Simpson, 48/decade)
    np.testing.assert_allclose(v**2, G * nfw_mass(r, halo.rho0, halo.r_s) / r, rtol=1e-6)
    # potential differences inside r_t: Phi_NFW = -4 pi G rho_s r_s^3 ln(1+x)/r (NFW 1997);
    # the outer cut only adds a constant inside r_t
    phi = nfw_model.potential_at(r, 0 * r)
    closed = -4 * np.pi * G * halo.rho0 * halo.r_s**3 * np.log1p(r / halo.r_s) / r
    np.testing.assert_allclose(phi - phi[-1], closed - closed[-1], rtol=1e-6,
                               atol=1e-6 * abs(closed[0]))


def test_nfw_vmax_at_x_2163(nfw_model):
    # NFW v_max sits at x = r/r_s = 2.163 (Navarro, Frenk & White 1997; root of
    # ln(1+x) = x(1+2x)/(1+x)^2, common practice); the grid search resolves 1e-3.
    halo = nfw_model.components["halo"]
    x = np.linspace(1.5, 3.0, 3001)
    v = nfw_model.circular_speed(x * halo.r_s, "halo")
    assert x[np.argmax(v)] == pytest.approx(2.163, abs=2e-3)


def test_nfw_from_density_scale_agrees_with_mass_and_concentration(nfw_model):
    halo = nfw_model.components["halo"]
    other = model_from_components({"halo": {
        "kind": "halo", "profile": "nfw", "particles": 10,
        "density_scale": f"{halo.rho0!r} Msun/kpc3", "scale_radius": f"{halo.r_s!r} kpc"}})
    h2 = other.components["halo"]
    assert h2.r200 == pytest.approx(halo.r200, rel=1e-8)
    assert h2.m200 == pytest.approx(1e12, rel=1e-8)


def test_hernquist_closed_forms_inside_the_cut():
    # Hernquist (1990, ApJ 356, 359): Phi = -GM/(r+a) (eq. 5), M(r) = M r^2/(r+a)^2 (eq. 3),
    # with M = 2 pi rho0 a^3 the uncut law's mass (eq. 2); inside r_t the cut only adds a
    # constant to Phi. The l = 0 multipole quadrature errs by ~1e-8 (as for NFW above).
    m = model_from_components({"b": {"kind": "bulge", "profile": "hernquist", "mass": "2e10 Msun",
                                     "scale_radius": "0.8 kpc", "particles": 10}})
    b = m.components["b"]
    m_full = 2 * np.pi * b.rho0 * 0.8**3
    r = np.geomspace(0.01, 0.9 * b.r_t, 30)
    phi = m.potential_at(r, 0 * r)
    closed = -G * m_full / (r + 0.8)
    np.testing.assert_allclose(phi - phi[-1], closed - closed[-1], rtol=1e-6,
                               atol=1e-6 * abs(closed[0]))
    np.testing.assert_allclose(m.enclosed_mass(r), m_full * r**2 / (r + 0.8) ** 2, rtol=1e-12)
    np.testing.assert_allclose(m.circular_speed(r) ** 2, G * m_full * r / (r + 0.8) ** 2,
                               rtol=1e-6)
    # forces against a centred finite difference of the potential (independent of the kernel)
    h = 1e-5
    R, z = np.array([0.3, 2.0, 7.0]), np.array([0.4, -1.0, 3.0])
    f_r, f_z = m.forces(R, z)
    fd_r = -(m.potential_at(R + h, z) - m.potential_at(R - h, z)) / (2 * h)
    fd_z = -(m.potential_at(R, z + h) - m.potential_at(R, z - h)) / (2 * h)
    np.testing.assert_allclose(f_r, fd_r, rtol=1e-6)
    np.testing.assert_allclose(f_z, fd_z, rtol=1e-6)


@pytest.mark.parametrize("profile,inside", [
    # fraction of the uncut law's mass inside 30 half-mass radii: Hernquist (1990) eq. 3 at
    # r = 30 (1 + sqrt 2) a; Plummer (1911) M x^3/(1 + x^2)^1.5 at x = 30/sqrt(2^(2/3) - 1)
    ("hernquist", (30 * (1 + np.sqrt(2)) / (1 + 30 * (1 + np.sqrt(2)))) ** 2),
    ("plummer", (lambda x: x**3 / (1 + x * x) ** 1.5)(30 / np.sqrt(2 ** (2 / 3) - 1))),
])
def test_finite_laws_have_an_outer_cut_and_the_requested_mass(profile, inside):
    m = model_from_components({"b": {"kind": "bulge", "profile": profile, "mass": "1e10 Msun",
                                     "scale_radius": "1 kpc", "particles": 10}})
    b = m.components["b"]
    # the uncut law's mass: 2 pi rho0 a^3 (Hernquist 1990, eq. 2), 4 pi rho0 b^3 / 3 (Plummer)
    m_full = {"hernquist": 2 * np.pi, "plummer": 4 * np.pi / 3}[profile] * b.rho0
    # default cut at 30 half-mass radii of the uncut law, decay length 0.1 r_t
    # (Kazantzidis, Magorrian & Moore 2004, eq. 2; 0.1 is common practice)
    half = {"hernquist": 1 + np.sqrt(2), "plummer": 1 / np.sqrt(2 ** (2 / 3) - 1)}[profile]
    assert b.r_t == pytest.approx(30 * half)
    assert b.r_d == pytest.approx(0.1 * b.r_t)
    # the component holds the requested mass; the uncut law's mass is larger by what the cut
    # removes beyond r_t minus what it adds back (a fraction of the removed tail)
    assert b.total_mass == pytest.approx(1e10, rel=1e-10)
    assert m.enclosed_mass(1e3 * b.r_t)[0] == pytest.approx(1e10, rel=1e-8)
    assert 1 < m_full / 1e10 < 1 / inside
    # density and log slope continuous at r_t (Kazantzidis et al. 2004), nothing beyond extent
    r = b.r_t * np.array([1 - 1e-9, 1 + 1e-9])
    assert b.density_r(r[0]) == pytest.approx(b.density_r(r[1]), rel=1e-7)
    s_in, s_out = (b.log_slopes(x)[0] for x in r)
    assert s_in == pytest.approx(s_out, rel=1e-6)
    assert b.density_r(b.extent) < 1e-12 * b.density_r(b.r_t)
    # Keplerian outside everything: v_c^2 r / G is the total mass
    R = np.array([20 * b.extent])
    assert (m.circular_speed(R) ** 2 * R / G)[0] == pytest.approx(1e10, rel=1e-6)


@pytest.mark.parametrize("profile,mass_law", [
    # Burkert (1995, ApJ 447, L25) eq. 3: M = pi rho0 r0^3 [2 ln(1+x) + ln(1+x^2) - 2 arctan x]
    ("burkert", lambda x: np.pi * (2 * np.log1p(x) + np.log1p(x * x) - 2 * np.arctan(x))),
    # pseudo-isothermal sphere: M = 4 pi rho0 rc^3 (x - arctan x) (from memory, integral of
    # rho0/(1+x^2) over the sphere)
    ("pseudo_isothermal", lambda x: 4 * np.pi * (x - np.arctan(x))),
])
def test_cored_halo_masses(profile, mass_law):
    m = model_from_components({"h": {"kind": "halo", "profile": profile, "mass": "5e10 Msun",
                                     "core_radius": "2 kpc", "outer_radius": "60 kpc",
                                     "particles": 10}})
    halo = m.components["h"]
    assert m.enclosed_mass(60.0)[0] == pytest.approx(5e10, rel=1e-10)
    r = np.geomspace(0.1, 55, 25)
    expect = halo.rho0 * 2.0**3 * mass_law(r / 2.0)
    np.testing.assert_allclose(m.circular_speed(r) ** 2, G * expect / r, rtol=1e-6)


def test_plummer_and_point_mass():
    # Plummer (1911, MNRAS 71, 460): Phi = -GM/sqrt(r^2+b^2), v_c^2 = G M r^2/(r^2+b^2)^1.5
    # with M the uncut law's mass inside the cut; point mass: v^2 = GM/r
    m = model_from_components({
        "p": {"kind": "bulge", "profile": "plummer", "mass": "1e9 Msun", "scale_radius": "0.3 kpc",
              "particles": 10},
        "bh": {"kind": "point_mass", "mass": "4e6 Msun"}})
    m_full = 4 * np.pi / 3 * m.components["p"].rho0 * 0.3**3
    r = np.geomspace(0.01, 10, 20)
    v2 = G * m_full * r**2 / (r**2 + 0.09) ** 1.5 + G * 4e6 / r
    # l = 0 multipole quadrature ~1e-8 relative (the point mass is a closed form)
    np.testing.assert_allclose(m.circular_speed(r) ** 2, v2, rtol=1e-6)


def test_keplerian_far_outside_all_mass(default_model):
    # Far outside all mass v_c^2 = G M_total / r (Newton's shell theorem, exterior l=0 term);
    # higher multipoles of the disk fall as r^-(l+1), negligible at 20x the halo cut-off.
    m = default_model
    total = sum(c.total_mass for c in m.components.values())
    r_far = 20 * max(c.extent for c in m.components.values())
    r = np.array([r_far, 2 * r_far])
    v = m.circular_speed(r)
    np.testing.assert_allclose(v**2 * r / G, total, rtol=1e-3)
    # and the fall-off is Keplerian: v ~ r^-1/2
    assert v[0] / v[1] == pytest.approx(np.sqrt(2), rel=1e-3)
