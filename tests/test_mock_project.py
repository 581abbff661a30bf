"""Sky geometry of mock observations: projection, small-angle scale, FITS WCS, refusals."""
import math

import astropy.units as u
import numpy as np
import pytest
from astropy.coordinates import SkyCoord
from astropy.wcs import WCS
from scipy.spatial.transform import Rotation

from icgen.errors import ModelError
from icgen.mock.cube import SkyGrid, make_grid
from icgen.mock.project import (Geometry, Instrument, deproject, geometry_from_text,
                                instrument_from_text, kpc_per_arcsec, project_particles)


def sky_matrix(inc, pa):
    """Independent construction of the galaxy -> sky rotation with scipy: columns are the
    east, north and line-of-sight unit vectors in the galaxy frame. The disk is tilted by
    -i about the line of nodes (x), then turned by PA - 90 deg about the line of sight so
    that the receding node points to PA east of north."""
    return Rotation.from_euler("XZ", [-inc, pa - 90.0], degrees=True).as_matrix()


def test_small_angle_scale_matches_astropy():
    # small-angle relation, astropy units: length = angle [rad] * D
    for d_mpc in (0.8, 12.0, 95.0):
        expected = (1 * u.arcsec).to_value(u.rad) * (d_mpc * u.Mpc).to_value(u.kpc)
        assert kpc_per_arcsec(d_mpc) == pytest.approx(expected, rel=1e-14)
    # 1 arcsec at 10 Mpc is 48.48 pc (fact of the trade: 1 arcsec = 4.848e-6 rad)
    assert kpc_per_arcsec(10.0) == pytest.approx(0.048481, rel=1e-4)


@pytest.mark.parametrize("inc, pa", [(60.0, 35.0), (30.0, 200.0), (85.0, 310.0), (90.0, 0.0)])
def test_projection_matches_rotation_matrix(inc, pa):
    # independent numerics: scipy's rotation (built from Euler angles) must give the same
    # sky offsets and line-of-sight velocity; rounding only (1e-12 relative)
    rng = np.random.default_rng(3)
    pos = rng.normal(size=(500, 3)) * [5.0, 5.0, 0.5]
    vel = rng.normal(size=(500, 3)) * 100.0
    east, north, vlos = project_particles(pos, vel, Geometry(inc, pa, 10.0, systemic=700.0))
    M = sky_matrix(inc, pa)
    sky = pos @ M
    np.testing.assert_allclose(east, sky[:, 0], atol=1e-12 * 50)
    np.testing.assert_allclose(north, sky[:, 1], atol=1e-12 * 50)
    np.testing.assert_allclose(vlos, 700.0 + vel @ M[:, 2], atol=1e-9)


def test_receding_side_at_position_angle():
    # convention (common practice): PA of the receding half of the major axis, E of N.
    # A particle on +x moving towards +phi (+y) recedes and sits at PA on the sky.
    g = Geometry(60.0, 35.0, 10.0, systemic=0.0)
    east, north, v = project_particles(np.array([[4.0, 0, 0]]), np.array([[0, 200.0, 0]]), g)
    assert math.degrees(math.atan2(east[0], north[0])) == pytest.approx(35.0, abs=1e-12)
    assert v[0] == pytest.approx(200.0 * math.sin(math.radians(60.0)), rel=1e-12)
    # a point on the minor axis is foreshortened by cos i
    east, north, _ = project_particles(np.array([[0, 4.0, 0]]), np.zeros((1, 3)), g)
    assert math.hypot(east[0], north[0]) == pytest.approx(4.0 * 0.5, rel=1e-12)


def test_deproject_inverts_projection():
    # round trip: disk-plane radius and azimuth of midplane particles come back
    rng = np.random.default_rng(5)
    R = rng.uniform(0.1, 20.0, 1000)
    phi = rng.uniform(0, 2 * np.pi, 1000)
    pos = np.column_stack([R * np.cos(phi), R * np.sin(phi), np.zeros_like(R)])
    for inc, pa in ((45.0, 10.0), (75.0, 250.0)):
        east, north, _ = project_particles(pos, np.zeros_like(pos), Geometry(inc, pa, 5.0))
        radius, c, s = deproject(east, north, pa, inc)
        np.testing.assert_allclose(radius, R, rtol=1e-12)
        np.testing.assert_allclose(c, np.cos(phi), atol=1e-12)
        np.testing.assert_allclose(s, np.sin(phi), atol=1e-12)


def small_grid(nx=64, nv=40):
    return SkyGrid(nx, nx, nv, 4.0, 800.0, 5.0, 17, (150.0, 30.0))


def test_header_builds_valid_wcs_and_channel_formula():
    grid = small_grid()
    header = grid.header(spectral=True)
    w = WCS(header)            # raises on an invalid header
    assert w.wcs.ctype[0] == "RA---SIN" and w.wcs.ctype[1] == "DEC--SIN"
    assert w.wcs.ctype[2] == "VRAD" and w.wcs.cunit[2] == u.m / u.s
    k = np.arange(grid.nv)
    # the FITS linear axis (Greisen & Calabretta 2002, A&A 395, 1061):
    # value of pixel p (1-based) = CRVAL + (p - CRPIX) CDELT
    formula = header["CRVAL3"] + (k + 1 - header["CRPIX3"]) * header["CDELT3"]
    np.testing.assert_allclose(formula / 1e3, grid.channel_velocities(), rtol=1e-14)
    world = w.spectral.pixel_to_world(k)
    np.testing.assert_allclose(world.to_value(u.m / u.s), formula, rtol=1e-12)
    # the systemic channel is CRPIX3 and holds CRVAL3
    assert grid.channel_velocities()[grid.k_sys] * 1e3 == pytest.approx(header["CRVAL3"])
    assert WCS(grid.header(spectral=False)).naxis == 2


def test_pixels_land_where_the_wcs_says():
    # a particle placed at a known sky offset falls in the pixel whose WCS position lies
    # at that separation and position angle from the centre (astropy.coordinates); within
    # half a pixel diagonal (nearest-pixel binning)
    grid = small_grid()
    w = WCS(grid.header(spectral=False))
    centre = SkyCoord(*grid.centre, unit="deg")
    assert centre.separation(w.pixel_to_world(grid.cx, grid.cy)).arcsec < 1e-6
    rng = np.random.default_rng(11)
    east = rng.uniform(-100, 100, 50)
    north = rng.uniform(-100, 100, 50)
    ix, iy = grid.pixel_index(east, north)
    there = w.pixel_to_world(ix, iy)
    sep = centre.separation(there).arcsec
    ang = centre.position_angle(there).rad
    got_e, got_n = sep * np.sin(ang), sep * np.cos(ang)
    assert np.all(np.hypot(got_e - east, got_n - north) <= 0.5 * math.sqrt(2) * grid.pixel + 1e-3)


def test_default_grid_covers_the_lines():
    g = Geometry(60.0, 35.0, 10.0, systemic=600.0)
    ins = Instrument(beam=12.0, pixel=4.0, channel=5.0)
    rng = np.random.default_rng(2)
    east, north = rng.normal(size=(2, 1000)) * 60
    grid = make_grid(east, north, 450.0, 760.0, g, ins)
    v = grid.channel_velocities()
    assert v[0] < 450.0 and v[-1] > 760.0
    assert v[grid.k_sys] == pytest.approx(600.0, abs=1e-9)
    assert grid.nx % 2 == 0 and grid.nx * grid.pixel > 2 * np.quantile(np.hypot(east, north), 0.99)


@pytest.mark.parametrize("kwargs, key", [
    (dict(inclination=0.0), "--inclination"),
    (dict(inclination=95.0), "--inclination"),
    (dict(inclination=-10.0), "--inclination"),
    (dict(distance=0.0), "--distance"),
])
def test_geometry_refusals(kwargs, key):
    base = dict(inclination=60.0, position_angle=35.0, distance=10.0)
    with pytest.raises(ModelError, match=key):
        Geometry(**{**base, **kwargs})


def test_instrument_refusals_and_text():
    with pytest.raises(ModelError, match="--beam.*at least one pixel"):
        Instrument(beam=3.0, pixel=4.0)
    with pytest.raises(ModelError, match="--noise"):
        instrument_from_text(noise="loud")
    with pytest.raises(ModelError, match="--channel"):
        instrument_from_text(channel="5 arcsec")
    ins = instrument_from_text("0.2 arcmin", "4 arcsec", "2000 m/s", "0.1")
    assert ins.beam == pytest.approx(12.0) and ins.channel == pytest.approx(2.0)
    g = geometry_from_text("1.0471975511965976 rad", "35 deg", "12000 kpc", "900 km/s")
    assert g.inclination == pytest.approx(60.0) and g.distance == pytest.approx(12.0)
    assert Geometry(60, -20, 10).position_angle == pytest.approx(340.0)


def test_hubble_flow_default_systemic():
    # default v_sys = H0 D with astropy's Planck18 H0 (67.66 km/s/Mpc, Planck 2018)
    from astropy.cosmology import Planck18
    g = geometry_from_text("60 deg", "35 deg", "12 Mpc")
    assert g.systemic == pytest.approx(Planck18.H0.value * 12.0, rel=1e-12)
