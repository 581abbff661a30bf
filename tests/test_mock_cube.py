"""Spectral cube: binning kernel against a slow oracle, flux, beam, noise, moments."""
import math

import numba
import numpy as np
import pytest
from scipy import ndimage, special

from icgen.mock import cube as C
from icgen.mock.project import FWHM_PER_SIGMA, Geometry, Instrument, beam_area_pixels


def grid(n=24, nv=30, pixel=4.0, v_start=-75.0, channel=5.0):
    return C.SkyGrid(n, n, nv, pixel, v_start, channel, nv // 2, (150.0, 30.0))


def slow_binning(g, east, north, v, sigma, mass):
    """Obvious numpy oracle: every particle, every channel, scipy.special.erf."""
    out = np.zeros((g.ny, g.nx, g.nv))
    ix, iy = g.pixel_index(east, north)
    edges = g.v_start - 0.5 * g.channel + g.channel * np.arange(g.nv + 1)
    for p in range(east.size):
        if not (0 <= ix[p] < g.nx and 0 <= iy[p] < g.ny):
            continue
        if sigma[p] == 0:
            k = int(np.searchsorted(edges, v[p], side="right") - 1)
            if 0 <= k < g.nv:
                out[iy[p], ix[p], k] += mass[p]
            continue
        cdf = 0.5 * (1 + special.erf((edges - v[p]) / (math.sqrt(2) * sigma[p])))
        out[iy[p], ix[p]] += mass[p] * np.diff(cdf)
    return out


def random_particles(n, rng, sigma_max=12.0):
    east, north = rng.uniform(-60, 60, size=(2, n))
    v = rng.uniform(-60, 60, n)
    sigma = rng.uniform(0, sigma_max, n)
    sigma[::7] = 0.0            # delta lines too
    return east, north, v, sigma, rng.uniform(0.5, 2.0, n)


def test_binning_kernel_matches_slow_oracle():
    # oracle with the same erf-difference integral; differences: the +-6 sigma cut
    # (2e-9 of a line) and rounding
    rng = np.random.default_rng(0)
    g = grid()
    parts = random_particles(3000, rng)
    fast = C.bin_particles(g, *parts)
    slow = slow_binning(g, *parts)
    np.testing.assert_allclose(fast, slow, atol=1e-8 * parts[-1].max())


def test_zero_width_lines_equal_histogramdd():
    # independent reference: numpy's histogramdd on the same pixel and channel edges
    rng = np.random.default_rng(1)
    g = grid()
    east, north, v, _, mass = random_particles(5000, rng)
    fast = C.bin_particles(g, east, north, v, np.zeros_like(v), mass)
    x_edges = (np.arange(g.nx + 1) - 0.5 - g.cx) * g.pixel        # in -east
    y_edges = (np.arange(g.ny + 1) - 0.5 - g.cy) * g.pixel
    v_edges = g.v_start - 0.5 * g.channel + g.channel * np.arange(g.nv + 1)
    hist, _ = np.histogramdd(np.column_stack([north, -east, v]), bins=(y_edges, x_edges, v_edges),
                             weights=mass)
    np.testing.assert_allclose(fast, hist, atol=1e-12)


def test_binning_same_bits_for_any_thread_count():
    # rows are independent tasks, summed in a fixed order: identical results
    rng = np.random.default_rng(2)
    g = grid(n=40)
    parts = random_particles(20000, rng)
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = C.bin_particles(g, *parts)
        numba.set_num_threads(max(before, 2))
        two = C.bin_particles(g, *parts)
    finally:
        numba.set_num_threads(before)
    assert np.array_equal(one, two)


def test_cube_conserves_flux_and_beam_has_its_width():
    # Msun / beam / (km/s): sum * channel / (beam area in pixels) = mass; beam: second
    # moment of a point source = (FWHM / 2.3548)^2 (Gaussian), minus the 4-sigma cut
    # (variance of a Gaussian truncated at 4 sigma is 0.9989 sigma^2)
    ins = Instrument(beam=16.0, pixel=4.0, channel=5.0)
    g = grid(n=40)
    data, rms = C.make_cube(g, np.array([0.0]), np.array([0.0]), np.array([1.0]),
                            np.array([8.0]), np.array([3.0]), ins, np.random.default_rng(0))
    assert rms == 0.0
    total = data.sum() * ins.channel / beam_area_pixels(ins.beam, ins.pixel)
    assert total == pytest.approx(3.0, rel=1e-8)      # the +-6 sigma line cut: 2e-9
    image = data.sum(axis=2)
    y, x = np.indices(image.shape)
    var_x = (image * (x - g.cx) ** 2).sum() / image.sum()
    sigma = ins.beam / FWHM_PER_SIGMA / ins.pixel
    assert var_x == pytest.approx(0.9989 * sigma**2, rel=2e-3)


def test_beam_noise_has_the_requested_rms_and_is_seeded():
    # rms per voxel: 1e6 voxels with ~10-pixel correlation areas give ~1e5 independent
    # values, so the measured rms is within ~0.3 % (3 sigma) of the target
    ins = Instrument(beam=12.0, pixel=4.0)
    shape = (128, 128, 64)
    a = C.beam_noise(shape, ins.beam_sigma_pixels, 0.7, np.random.default_rng(4))
    assert a.std() == pytest.approx(0.7, rel=6e-3)
    b = C.beam_noise(shape, ins.beam_sigma_pixels, 0.7, np.random.default_rng(4))
    assert np.array_equal(a, b)
    # the negative-half estimator: for zero-mean Gaussian noise it is the rms
    assert C.noise_rms(a) == pytest.approx(a.std(), rel=1e-2)
    # neighbouring pixels are correlated (smoothed by the beam), channels are not
    r_pix = np.corrcoef(a[:, :-1].ravel(), a[:, 1:].ravel())[0, 1]
    r_chan = np.corrcoef(a[..., :-1].ravel(), a[..., 1:].ravel())[0, 1]
    # a Gaussian of sigma s smoothed once correlates at lag 1 as exp(-1/(4 s^2))
    assert r_pix == pytest.approx(math.exp(-1 / (4 * ins.beam_sigma_pixels**2)), abs=0.01)
    assert abs(r_chan) < 0.01


def test_noise_islands_are_dropped():
    # a pure-noise cube leaves an empty mask after the island filter (the measured
    # claim behind MIN_ISLAND_BEAMS), while clipping alone keeps hundreds of islands
    ins = Instrument(beam=12.0, pixel=4.0, channel=5.0)
    g = grid(n=120, nv=100)
    noise = C.beam_noise((120, 120, 100), ins.beam_sigma_pixels, 1.0, np.random.default_rng(0))
    mom0, mom1, mask, rms = C.moment_maps(noise, g, ins)
    assert rms == pytest.approx(1.0, rel=0.02)
    assert not mask.any() and np.isnan(mom1).all()
    smooth = ndimage.uniform_filter1d(C.beam_smooth(noise, ins.beam_sigma_pixels), 3, axis=2)
    _, islands = ndimage.label(smooth > ins.clip * C.noise_rms(smooth))
    assert islands > 100


def test_moments_of_a_single_line():
    # one Gaussian line: moment 1 is its centre (symmetric line, all channels kept);
    # moment 0 times the pixel/beam ratio is its mass
    ins = Instrument(beam=8.0, pixel=4.0, channel=5.0)
    g = grid(n=32, nv=60, v_start=-150.0)
    data, _ = C.make_cube(g, np.array([0.0]), np.array([0.0]), np.array([13.3]),
                          np.array([9.0]), np.array([2.0]), ins, np.random.default_rng(0))
    mom0, mom1, mask, rms = C.moment_maps(data, g, ins)
    assert rms == 0.0
    assert mom1[g.cy, g.cx] == pytest.approx(13.3, abs=1e-6)
    # the +-6 sigma cut of each line loses erfc(6/sqrt 2) = 2e-9
    assert np.nansum(mom0) / beam_area_pixels(ins.beam, ins.pixel) == pytest.approx(2.0, rel=1e-8)


def test_fits_hdus_round_trip(tmp_path):
    from astropy.io import fits
    ins = Instrument(beam=8.0, pixel=4.0, channel=5.0)
    g = grid(n=16, nv=12)
    geo = Geometry(60.0, 35.0, 10.0)
    data = np.random.default_rng(0).random((16, 16, 12))
    C.cube_hdu(data, g, geo, ins, 0.1).writeto(tmp_path / "c.fits")
    with fits.open(tmp_path / "c.fits") as hdul:
        h, d = hdul[0].header, hdul[0].data
        assert d.shape == (12, 16, 16)            # (nv, ny, nx)
        np.testing.assert_allclose(d, np.transpose(data, (2, 0, 1)), rtol=1e-7)   # float32
        assert h["BMAJ"] == pytest.approx(8.0 / 3600) and h["MOCKINC"] == 60.0
        import astropy.units as u
        assert u.Unit(h["BUNIT"], format="fits") == u.Msun / u.beam / (u.km / u.s)
