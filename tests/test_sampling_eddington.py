"""Eddington inversion and speed tables against closed-form distribution functions."""
import numpy as np
import pytest
from scipy import integrate

from conftest import model_from_components, uncut_mass
from icgen.errors import ModelError
from icgen.samplers import eddington
from icgen.sampling import realize
from icgen.samplers import spheroid_velocities as sv
from icgen.units import G

# A far outer cut: the uncut Hernquist law holds all but 4e-4 of its mass inside 5000 a
# (Hernquist 1990, eq. 3), below every tolerance here; the default cut (72.4 a) is tested in
# test_potential_spheroids.py.
A = 1.0
M = uncut_mass("hernquist")
M_PLUMMER = uncut_mass("plummer")
HERNQUIST = {"kind": "bulge", "profile": "hernquist", "mass": "1e10 Msun",
             "scale_radius": "1 kpc", "outer_radius": "5000 kpc", "particles": 1000}
PLUMMER = {**HERNQUIST, "profile": "plummer"}


def hernquist_df(psi):
    """Hernquist (1990, ApJ 356, 359) eq. 17, isotropic f(E) with q^2 = a Psi/(G M)."""
    q = np.sqrt(psi * A / (G * M))
    vg = np.sqrt(G * M / A)
    return (M / (8 * np.sqrt(2) * np.pi**3 * A**3 * vg**3) / (1 - q * q) ** 2.5
            * (3 * np.arcsin(q) + q * np.sqrt(1 - q * q) * (1 - 2 * q * q)
               * (8 * q**4 - 8 * q * q - 3)))


def hernquist_radius_enclosing(frac):
    """Invert Hernquist (1990) eq. 3: r = a sqrt(m)/(1 - sqrt(m))."""
    return A * np.sqrt(frac) / (1 - np.sqrt(frac))


@pytest.fixture(scope="module")
def hernquist_model():
    return model_from_components({"b": HERNQUIST})


def df_on_grid(model, name, per_decade):
    comp = model.components[name]
    spec = model.spec.component(name)
    table = sv.radial_table(model.potential, 1e-6 * comp.scale, 100 * comp.extent, per_decade)
    return table, sv.SpheroidVelocities(comp, spec, table).f


def test_hernquist_df_matches_closed_form(hernquist_model):
    # Hernquist (1990) eq. 17 within 1% over the energies of the shells holding 99% of the
    # mass (0.5% to 99.5%); the product integration errs by ~h^2 ~ 5e-4 at 100 per decade.
    table, f = df_on_grid(hernquist_model, "b", 100)
    r_in, r_out = hernquist_radius_enclosing(np.array([0.005, 0.995]))
    sel = (table.r >= r_in) & (table.r <= r_out)
    np.testing.assert_allclose(f[sel], hernquist_df(table.psi[sel]), rtol=1e-2)
    # and much better than that in practice (measured 4e-4)
    assert np.max(np.abs(f[sel] / hernquist_df(table.psi[sel]) - 1)) < 2e-3


def test_hernquist_df_error_shrinks_with_grid(hernquist_model):
    # Ordering check: twice the radial resolution, a smaller error (expected ~4x).
    errs = []
    for per_decade in (25, 50):
        table, f = df_on_grid(hernquist_model, "b", per_decade)
        sel = (table.r > 0.1) & (table.r < 100)
        errs.append(np.max(np.abs(f[sel] / hernquist_df(table.psi[sel]) - 1)))
    assert errs[1] < errs[0] / 2.5


def test_plummer_df_matches_closed_form():
    # Plummer sphere: f = 24 sqrt(2)/(7 pi^3) b^2/(G^5 M^4) E^(7/2)
    # (Binney & Tremaine 2008, eq. 4.83; equation number from memory).
    model = model_from_components({"b": PLUMMER})
    table, f = df_on_grid(model, "b", 100)
    exact = 24 * np.sqrt(2) / (7 * np.pi**3) * A**2 / (G**5 * M_PLUMMER**4) * table.psi**3.5
    sel = (table.r > 0.05) & (table.r < 100)
    np.testing.assert_allclose(f[sel], exact[sel], rtol=1e-3)


def test_df_reproduces_the_nfw_density_in_a_composite_potential():
    # Defining property of Eddington's inversion (Binney & Tremaine 2008, eq. 4.43):
    # rho(r) = 4 pi int_0^sqrt(2 Psi) f(Psi - v^2/2) v^2 dv, checked by Simpson's rule on
    # the tabulated f (log-linear in E between nodes) for an NFW halo with a disk and bulge.
    model = model_from_components({
        "halo": {"kind": "halo", "profile": "nfw", "mass": "1e12 Msun",
                 "concentration": 10, "particles": 1000},
        "disk": {"kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
                 "scale_height": "0.3 kpc", "toomre_q": 1.5, "particles": 1000},
        "bulge": {**HERNQUIST, "scale_radius": "0.5 kpc"}})
    vel = realize.samplers(model)["halo"].velocities
    t = vel.table
    lnf = np.log(np.maximum(vel.f, 1e-300))
    for r in (0.3, 3.0, 30.0, 150.0):
        psi = float(np.interp(np.log(r), t.x, t.psi))
        v = np.linspace(0, np.sqrt(2 * psi), 200_001)
        e = psi - 0.5 * v * v
        f = np.where(e > t.psi[-1], np.exp(np.interp(e, t.psi[::-1], lnf[::-1])), 0.0)
        rho = 4 * np.pi * integrate.simpson(f * v * v, x=v)
        # interpolation of Psi and f between nodes (h = 0.023 in ln r): ~1e-3; the
        # quadrature (2e5 points over an integrand with kinks at the nodes) ~1e-6
        assert rho == pytest.approx(model.components["halo"].density_r(r), rel=3e-3)


def test_negative_df_raises_model_error_naming_the_component():
    # A cored density in a potential dominated by a central point mass has no isotropic
    # DF (Tremaine et al. 1994, AJ 107, 634: cusps shallower than r^-1/2 around a black
    # hole give f < 0; from memory). A Hernquist cusp (r^-1) with the same hole is fine.
    bh = {"kind": "point_mass", "mass": "1e9 Msun"}
    with pytest.raises(ModelError, match=r"components\.b\.velocities.*no isotropic equilibrium"):
        realize.samplers(model_from_components({"b": PLUMMER, "bh": bh}))
    realize.samplers(model_from_components({"b": HERNQUIST, "bh": bh}))


def test_osipkov_merritt_limit_for_hernquist():
    # Osipkov-Merritt Hernquist models need r_a >~ 0.2 a for f(Q) >= 0
    # (Baes & Dejonghe 2002, A&A 393, 485, threshold 0.2021 a; from memory).
    with pytest.raises(ModelError, match=r"components\.b\.anisotropy_radius"):
        realize.samplers(model_from_components({"b": {**HERNQUIST,
                                                      "anisotropy_radius": "0.15 kpc"}}))
    realize.samplers(model_from_components({"b": {**HERNQUIST, "anisotropy_radius": "0.25 kpc"}}))


@pytest.mark.parametrize("r", [0.01, 0.7, 10.0])
def test_draw_speeds_against_brute_force_inversion(hernquist_model, r):
    # Oracle: the numba kernel vs a plain numpy inversion of p(v) ~ v^2 f(Psi - v^2/2)
    # with the closed-form f (Hernquist 1990 eq. 17), by cumulative trapezoid on a
    # 20001-point grid (error ~1e-8). r = 0.01 a: the cusp, where sigma << v_esc.
    vel = realize.samplers(hernquist_model)["b"].velocities
    t = vel.table
    psi = float(np.interp(np.log(r), t.x, t.psi))
    v = np.linspace(0, np.sqrt(2 * psi), 20001)
    f = hernquist_df(np.maximum(psi - 0.5 * v * v, 1e-30))
    cdf = integrate.cumulative_trapezoid(v * v * f, v, initial=0)
    u = np.linspace(0.001, 0.999, 999)
    expect = np.interp(u, cdf / cdf[-1], v)
    got = eddington.draw_speeds(np.full(u.size, np.log(r)), u, t.x[0], t.x[1] - t.x[0],
                                eddington.SPEED_EDGES, vel.cdf, t.psi)
    # cells 1.4% wide in ln(s + 1e-3) with piecewise-constant density inside, and rows
    # mixed between radial nodes: measured <= 8e-4
    np.testing.assert_allclose(got, expect, rtol=2e-3)
