"""Tests of the ring-quadrature oracle (tests/reference/ring_quadrature.py).

The oracle will judge icgen's potential solver at the 1e-3 level, so it must
itself be right to better than 1e-5; every check below uses a source outside
the project: closed-form models from the literature, elementary geometry,
Laplace's equation, or finite differences.
"""
import numpy as np
import pytest
from scipy.special import i0e, i1e, k0e, k1e

from reference.ring_quadrature import (
    G_INTERNAL, RingInputError, RingQuadratureError, gauss_legendre_panels,
    graded_edges, ring_grid, ring_kernel, ring_potential_forces, ring_sums, ring_vcirc)

# Accuracy the oracle must reach (brief: judge a solver at 1e-3 with two
# orders of magnitude to spare); measured errors are ~1e-9 or smaller.
ORACLE_RTOL = 1e-5


def _diff4(f, x, h):
    """Fourth-order centred difference f'(x) (error ~ h^4 f^(5) / 30)."""
    return (f(x - 2 * h) - 8 * f(x - h) + 8 * f(x + h) - f(x + 2 * h)) / (12 * h)


def _force_errors(got, exact):
    """Relative errors of phi and of each force component against |F|.

    Components are measured against the force magnitude because one of them
    vanishes by symmetry at some test points (F_z at z = 0, F_R at R = 0).
    """
    fmag = np.hypot(exact[1], exact[2])
    return (abs(got[0] - exact[0]) / abs(exact[0]),
            abs(got[1] - exact[1]) / fmag, abs(got[2] - exact[2]) / fmag)


# --- the ring kernel -------------------------------------------------------

# (R, z, R', z'): generic; 1e-3 from the ring (m -> 1); far off-axis point;
# near the axis with m below the 1e-3 series switch; on both sides of the switch
# (m = 1e-3 at R ~ 2.5e-4 for R' = 1, z = z'); a small ring seen from afar.
KERNEL_CASES = [
    (1.3, 0.2, 0.9, -0.4),
    (1.0, 0.0, 1.0007, 0.0007),
    (5.0, 3.0, 0.01, -1.0),
    (1e-4, 0.3, 2.0, 0.1),
    (2.4e-4, 0.0, 1.0, 0.0),
    (2.6e-4, 0.0, 1.0, 0.0),
    (40.0, -25.0, 0.5, 0.2),
]


@pytest.mark.parametrize("R, z, rp, zp", KERNEL_CASES)
def test_ring_forces_match_finite_differences(R, z, rp, zp):
    # Source: F = -grad(phi), checked by 4th-order centred differences of the
    # ring potential (independent numerics). Step h = 1e-3 of the distance s to
    # the ring: truncation ~ (h/s)^4 ~ 1e-12, roundoff ~ eps |phi| / h, at most
    # ~3e-9 of |F| for the near-axis cases where F_R ~ R is small; tolerance 1e-8.
    # phi is even in R, so the stencil may cross the axis through |R|.
    s = np.hypot(R - rp, z - zp)
    h = 1e-3 * s
    _phi, f_r, f_z = ring_kernel(R, z, rp, zp)
    fd_r = -_diff4(lambda x: ring_kernel(abs(x), z, rp, zp)[0], R, h)
    fd_z = -_diff4(lambda x: ring_kernel(R, x, rp, zp)[0], z, h)
    fmag = np.hypot(f_r, f_z)
    assert abs(f_r - fd_r) < 1e-8 * fmag
    assert abs(f_z - fd_z) < 1e-8 * fmag


def test_ring_potential_limits_and_laplace():
    rp, zp = 1.7, 0.4
    # On the axis every point of the ring is at distance sqrt(R'^2 + dz^2)
    # (elementary geometry): phi = -1/d exactly, F_z = -dz/d^3, F_R = 0.
    for z in (-2.0, 0.4, 3.0):
        d = np.hypot(rp, z - zp)
        phi, f_r, f_z = ring_kernel(0.0, z, rp, zp)
        # 1e-14: float64 rounding of a few operations.
        assert phi == pytest.approx(-1.0 / d, rel=1e-14)
        assert f_z == pytest.approx(-(z - zp) / d ** 3, rel=1e-14, abs=1e-14 / d ** 2)
        assert abs(f_r) < 1e-14 / d ** 2
    # Far away the ring is a point mass: phi = -1/r (1 + O((R'/r)^2)); at
    # r = 1e3 R' the quadrupole term is ~ 1e-6.
    R, z = 1.2e3, -1.6e3
    r = np.hypot(R, z - zp)
    phi, f_r, f_z = ring_kernel(R, z, rp, zp)
    assert phi == pytest.approx(-1.0 / r, rel=1e-5)
    assert f_r == pytest.approx(-R / r ** 3, rel=1e-5)
    assert f_z == pytest.approx(-(z - zp) / r ** 3, rel=1e-5)
    # Laplace's equation off the ring: div F = dF_R/dR + F_R/R + dF_z/dz = 0.
    # 4th-order differences with h = 1e-3 leave ~1e-10 of the terms.
    for R, z in ((0.8, 0.9), (2.5, -0.3), (1.6, 0.45)):
        h = 1e-3
        d_r = _diff4(lambda x: ring_kernel(x, z, rp, zp)[1], R, h)
        d_z = _diff4(lambda x: ring_kernel(R, x, rp, zp)[2], z, h)
        f_r = ring_kernel(R, z, rp, zp)[1]
        scale = abs(d_r) + abs(f_r / R) + abs(d_z)
        assert abs(d_r + f_r / R + d_z) < 1e-8 * scale


# --- Plummer sphere ----------------------------------------------------------

PLUMMER_POINTS = [(0.5, 0.0), (1.0, 0.7), (3.0, -2.0), (0.0, 1.0), (0.2, 5.0)]


def _plummer(mass, b):
    """Plummer (1911, MNRAS 71, 460) density and exact phi, F_R, F_z."""
    def rho(R, z):
        return 3 * mass / (4 * np.pi * b ** 3) * (1 + (R * R + z * z) / b ** 2) ** -2.5

    def exact(R, z):
        r2b2 = R * R + z * z + b * b
        return np.array([-G_INTERNAL * mass / np.sqrt(r2b2),
                         -G_INTERNAL * mass * R / r2b2 ** 1.5,
                         -G_INTERNAL * mass * z / r2b2 ** 1.5])
    return rho, exact


@pytest.mark.parametrize("R, z", PLUMMER_POINTS)
def test_plummer_sphere(R, z):
    # Source: Plummer (1911, MNRAS 71, 460), phi = -GM / sqrt(r^2 + b^2).
    # Invented model: M = 1e10 Msun, b = 1 kpc. Extents 1e4 b: the mass outside
    # a sphere of that radius, M b^2/L^2 ~ 1e-8 M, shifts phi by at most
    # G M b^2 / L^3 = 1e-12 of GM/b and exerts no net force (shell theorem).
    rho, exact = _plummer(1e10, 1.0)
    got = ring_potential_forces(rho, R, z, 1e4, 1e4)
    for err in _force_errors(got, exact(R, z)):
        assert err < ORACLE_RTOL


def test_plummer_vcirc():
    # Source: Plummer (1911): v_c^2 = G M R^2 / (R^2 + b^2)^(3/2). v_c carries
    # half the relative error of F_R, so the oracle tolerance applies as is.
    rho, _exact = _plummer(1e10, 1.0)
    for R in (0.3, 1.0, 4.0):
        v_exact = np.sqrt(G_INTERNAL * 1e10 * R * R / (R * R + 1.0) ** 1.5)
        assert ring_vcirc(rho, R, 1e4, 1e4) == pytest.approx(v_exact, rel=ORACLE_RTOL)


def test_quadrature_refinement_and_error_estimate():
    # Refining the Gauss-Legendre order must shrink the error against the exact
    # Plummer (1911) forces, and the reported error estimate (difference of the
    # last two orders) must bound the true error: it is the evidence epsrel rests on.
    rho, exact = _plummer(1e10, 1.0)
    R, z = 1.0, 0.7
    ex = exact(R, z)
    errs = []
    for order in (6, 8, 12):
        sums, _abs = ring_sums(rho, R, z, *ring_grid(R, z, 1e4, 1e4, order))
        errs.append(max(_force_errors(G_INTERNAL * sums, ex)))
    assert errs[0] > errs[1] > errs[2]
    *got, info = ring_potential_forces(rho, R, z, 1e4, 1e4, full_output=True)
    fmag = np.hypot(ex[1], ex[2])
    assert np.hypot(got[1] - ex[1], got[2] - ex[2]) <= info["error_force"]
    assert info["error_force"] <= 1e-7 * fmag  # the default epsrel was met


# --- Miyamoto-Nagai flattened model --------------------------------------------

MN_POINTS = [(0.5, 0.0), (2.0, 0.0), (1.0, 0.05), (1.0, 0.3), (3.0, 2.0), (0.0, 0.5)]


def _miyamoto_nagai(mass, a, b):
    """Miyamoto & Nagai (1975, PASJ 27, 533) density and exact phi, F_R, F_z.

    phi = -GM / sqrt(R^2 + (a + s)^2), s = sqrt(z^2 + b^2), and
    rho = (b^2 M / 4 pi) [a R^2 + (a + 3 s)(a + s)^2] / (s^3 [R^2 + (a + s)^2]^(5/2)),
    as also given in Binney & Tremaine (2008, Galactic Dynamics, sec. 2.3; from
    memory). The density is checked against the Laplacian of phi below.
    """
    def rho(R, z):
        s = np.sqrt(z * z + b * b)
        return (b * b * mass / (4 * np.pi) * (a * R * R + (a + 3 * s) * (a + s) ** 2)
                / (s ** 3 * (R * R + (a + s) ** 2) ** 2.5))

    def exact(R, z):
        s = np.sqrt(z * z + b * b)
        d = np.sqrt(R * R + (a + s) ** 2)
        gm = G_INTERNAL * mass
        return np.array([-gm / d, -gm * R / d ** 3, -gm * z * (a + s) / (s * d ** 3)])
    return rho, exact


@pytest.mark.parametrize("b_over_a", [0.1, 1.0])
def test_miyamoto_nagai_density_is_laplacian_of_potential(b_over_a):
    # Source: Poisson's equation, rho = div(grad phi) / (4 pi G), by 4th-order
    # differences of the Miyamoto & Nagai potential: guards the transcription of
    # the density formula the next test relies on. Step 1e-3 b: truncation
    # ~ (h/b)^4 ~ 1e-12, roundoff ~ eps (b/h)^2 ~ 1e-10; tolerance 1e-7.
    a, b = 3.0, 3.0 * b_over_a
    rho, exact = _miyamoto_nagai(5e10, a, b)
    h = 1e-3 * b
    for R, z in ((0.5 * a, 0.0), (a, 0.5 * b), (2 * a, 2 * a)):
        d_r = _diff4(lambda x: exact(x, z)[1], R, h)
        d_z = _diff4(lambda x: exact(R, x)[2], z, h)
        lap = -(d_r + exact(R, z)[1] / R + d_z)
        assert lap / (4 * np.pi * G_INTERNAL) == pytest.approx(rho(R, z), rel=1e-7)


@pytest.mark.parametrize("b_over_a", [0.1, 1.0])
def test_miyamoto_nagai_flattened(b_over_a):
    # Source: Miyamoto & Nagai (1975, PASJ 27, 533), closed-form phi and forces.
    # Invented model: M = 5e10 Msun, a = 3 kpc; points in units of a.
    # Extents 1e5 a: the density falls only as a power law (surface density
    # ~ a M / (2 pi R^3) far out, like Kuzmin's disk), so the dropped mass is
    # ~ a M / L = 1e-5 M; compared directly because its potential inside is
    # ~ G M a / L^2 = 1e-10 of GM/a and its tidal force ~ 1e-15 of the force.
    a = 3.0
    rho, exact = _miyamoto_nagai(5e10, a, a * b_over_a)
    for R, z in MN_POINTS:
        got = ring_potential_forces(rho, R * a, z * a, 1e5 * a, 1e5 * a)
        for err in _force_errors(got, exact(R * a, z * a)):
            assert err < ORACLE_RTOL


# --- razor-thin limit: Freeman exponential disk ----------------------------------

def _freeman_vcirc(mass, rd, R):
    """Razor-thin exponential disk (Freeman 1970, ApJ 160, 811):
    v_c^2 = 4 pi G Sigma0 Rd y^2 [I0 K0 - I1 K1](y), y = R / (2 Rd)."""
    y = R / (2 * rd)
    sigma0 = mass / (2 * np.pi * rd ** 2)
    bessel = i0e(y) * k0e(y) - i1e(y) * k1e(y)  # scaled forms: exp factors cancel
    return np.sqrt(4 * np.pi * G_INTERNAL * sigma0 * rd * y * y * bessel)


def _sech2_disk(mass, rd, zd):
    """Exponential disk with the isothermal-sheet sech^2 vertical profile
    (Spitzer 1942, ApJ 95, 329): rho = Sigma(R) sech^2(z/zd) / (2 zd)."""
    sigma0 = mass / (2 * np.pi * rd ** 2)
    return lambda R, z: sigma0 * np.exp(-R / rd) / np.cosh(z / zd) ** 2 / (2 * zd)


@pytest.mark.parametrize("r_over_rd", [2.0, 5.0])
def test_thick_disk_tends_to_freeman_razor_thin(r_over_rd):
    # Invented disk: M = 5e10 Msun, Rd = 3 kpc; extents 40 Rd (dropped mass
    # 41 exp(-40) ~ 2e-16) and 30 zd (sech^2 tail ~ exp(-60)).
    mass, rd = 5e10, 3.0
    R = r_over_rd * rd
    v_thin = _freeman_vcirc(mass, rd, R)
    dev = {}
    for zd_over_rd in (0.05, 0.01, 0.005):
        zd = zd_over_rd * rd
        v = ring_vcirc(_sech2_disk(mass, rd, zd), R, 40 * rd, 30 * zd)
        dev[zd_over_rd] = v / v_thin - 1.0
    # Thickness correction, first order in zd (derived here, not published):
    # phi_thick(R, 0) = int zeta(z') phi_thin(R, z') dz' and
    # phi_thin(R, z') = phi_thin(R, 0) + 2 pi G Sigma(R) |z'| + O(z'^2), so
    # v_c^2 drops by 2 pi G R Sigma(R) <|z|> / Rd, <|z|> = zd ln 2 for sech^2.
    # It is 2.4e-3 of v_c at 2 Rd and 4.9e-4 at 5 Rd for zd/Rd = 0.01: above
    # the brief's 2e-3 at 2 Rd, which is physics, not quadrature error.
    sigma = mass / (2 * np.pi * rd ** 2) * np.exp(-R / rd)
    first_order = -np.pi * G_INTERNAL * R * sigma * 0.01 * rd * np.log(2) / (rd * v_thin ** 2)
    # 5%: the O(zd^2) remainder, measured at 0.1% of the correction here.
    assert dev[0.01] == pytest.approx(first_order, rel=0.05)
    assert abs(dev[0.01]) < 3e-3
    # The disagreement shrinks as the disk thins (brief: ordering 0.05 vs 0.01).
    assert abs(dev[0.05]) > abs(dev[0.01]) > abs(dev[0.005])
    # Linear (Richardson) extrapolation to zd -> 0 cancels the first-order term
    # and must land on Freeman's razor-thin curve; the O(zd^2) remainder is
    # ~2e-6 (measured), quadrature error ~1e-9, tolerance 2e-5.
    assert abs(2 * dev[0.005] - dev[0.01]) < 2e-5


# --- building blocks and failure modes ------------------------------------------

def test_graded_edges_are_symmetric_about_the_field_point():
    # The first panels on both sides of a centre must have equal widths so that
    # the odd 1/s part of the force kernel cancels between mirror panels (the
    # design rule in graded_edges; without it errors grow with the extent).
    edges = graded_edges(0.0, 1e6, [0.0, 0.5])
    i = np.searchsorted(edges, 0.5)
    assert edges[i] == 0.5
    assert edges[i + 1] - 0.5 == pytest.approx(0.5 - edges[i - 1], rel=1e-6)
    assert np.all(np.diff(edges) > 0)
    # Gauss-Legendre on the panels integrates a polynomial of degree 2n-1
    # exactly (Gauss 1814; common practice): int_0^1e6 x^3 dx = 0.25e24.
    x, w = gauss_legendre_panels(edges, 2)
    assert np.sum(w * x ** 3) == pytest.approx(0.25e24, rel=1e-12)


def test_unresolved_density_jump_raises_and_breakpoints_fix_it():
    # A uniform cylinder whose edges are not grading centres converges only
    # algebraically: the oracle must refuse rather than return a poor number,
    # and converge once the edges are given as breakpoints.
    def rho(R, z):
        return np.where((R < 1.2345) & (np.abs(z) < 0.3), 1e9, 0.0)
    with pytest.raises(RingQuadratureError):
        ring_potential_forces(rho, 2.0, 0.1, 3.0, 1.0)
    *_got, info = ring_potential_forces(rho, 2.0, 0.1, 3.0, 1.0, r_points=[1.2345],
                                        z_points=[-0.3, 0.3], full_output=True)
    assert info["order"] <= 16


@pytest.mark.parametrize("kwargs", [
    {"R": -1.0}, {"r_extent": 0.0}, {"z_extent": -2.0}, {"epsrel": float("nan")},
    {"z": float("inf")}, {"G": 0.0}])
def test_bad_arguments_raise_value_error(kwargs):
    args = {"R": 1.0, "z": 0.0, "r_extent": 10.0, "z_extent": 1.0}
    args.update(kwargs)
    rho, _exact = _plummer(1e10, 1.0)
    with pytest.raises(RingInputError) as err:
        ring_potential_forces(rho, **args)
    assert isinstance(err.value, ValueError)
    assert next(iter(kwargs)) in str(err.value)
