"""Spectral data cube of a projected tracer: binning, beam, noise, moments, FITS with WCS.

Layout inside icgen: ``(ny, nx, nv)`` float64, each spectrum contiguous (the binning
kernel writes a particle's line along it and the moments sum over it); FITS files hold
``(nv, ny, nx)`` as the standard asks (NAXIS1 = RA fastest).

Intensity unit: Msun / beam / (km/s), i.e. tracer mass per beam solid angle per unit
velocity, so that sum(cube) * channel / (beam area in pixels) is the tracer mass in the
field and moment 0 is in Msun / beam.

World coordinates (FITS WCS paper II, Calabretta & Greisen 2002, A&A 395, 1077): RA---SIN
and DEC--SIN with the galaxy centre at the centre of pixel (nx // 2, ny // 2) (0-based),
RA increasing to the east (CDELT1 < 0); VRAD in m/s with the systemic velocity at the
centre of a channel. Channel k (0-based) is at CRVAL3 + (k + 1 - CRPIX3) CDELT3.
"""
import math
from dataclasses import dataclass

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS
from numba import njit, prange
from scipy import ndimage

from ..errors import ModelError
from .project import beam_area_pixels

__all__ = ["SkyGrid", "make_grid", "bin_particles", "beam_smooth", "beam_noise",
           "make_cube", "noise_rms", "moment_maps", "cube_hdu", "map_hdu", "CUBE_UNIT"]

CUBE_UNIT = "solMass beam-1 km-1 s"     # FITS spelling of Msun / beam / (km/s)
# A line is spread over +-LINE_CUT sigma: the lost fraction, erfc(6/sqrt 2) = 2e-9, is far
# below any noise level.
LINE_CUT = 6.0
# Below this width (in channels) a line is put in one channel: the flux that a Gaussian
# of 1e-3 channel sigma would spill into a neighbour is under 1e-200 unless it sits
# within 0.006 channel of an edge.
NARROW_CHANNELS = 1e-3
# scipy.ndimage truncates Gaussian kernels at 4 sigma (its default) and renormalises
# them, so flux is conserved; the beam's shape misses the wings beyond 4 sigma, where a
# Gaussian has 3e-4 of its flux.
BEAM_TRUNCATE = 4.0
# Noise islands of the smooth-and-clip mask are small: in pure-noise cubes of
# 256 x 256 x 128 voxels clipped at 3 sigma (~2000-4000 islands each), the largest held
# 5.6-7.3 beam areas of voxels (measured for 2 and 3 pixels per beam FWHM, three seeds
# each); the galaxy's island holds thousands. Islands below this many beam areas (in
# voxels) are dropped, a minimum-size filter as in source finders (Serra, Jurek & Floer
# 2012); twice the largest noise island seen, for larger cubes or lower clips.
MIN_ISLAND_BEAMS = 15.0
# Line-free channels kept at each end of the spectral axis: no line touches a band edge.
PAD_CHANNELS = 3
# Field margin beyond the disk's extent, in beams.
MARGIN_BEAMS = 2.0
# Fraction of the tracer mass whose projected radius sets the default field.
FIELD_MASS_FRACTION = 0.995
# Size limits. A run holds about five float64 arrays of the cube's size at its peak
# (cube, smoothed copy, noise, mask, masked copy): 1.5e8 voxels (1.2 GB each) keep it
# near 6 GB, well inside a 24 GB machine.
MAX_PIXELS = 2048
MAX_CHANNELS = 1024
MAX_VOXELS = 150_000_000
SQRT2 = math.sqrt(2.0)


@dataclass(frozen=True)
class SkyGrid:
    """Pixel and channel grid of a cube.

    ``pixel`` in arcsec; ``v_start`` (km/s) is the centre of channel 0 and ``channel``
    (km/s) the step; ``centre`` (RA, Dec deg) sits at pixel (nx // 2, ny // 2);
    ``k_sys`` is the channel of the systemic velocity.
    """

    nx: int
    ny: int
    nv: int
    pixel: float
    v_start: float
    channel: float
    k_sys: int
    centre: tuple

    @property
    def cx(self):
        return self.nx // 2

    @property
    def cy(self):
        return self.ny // 2

    def pixel_offsets(self):
        """(east, north) offsets in arcsec of the pixel centres, each (ny, nx)."""
        i = np.arange(self.nx)
        j = np.arange(self.ny)
        east = -(i - self.cx) * self.pixel          # RA grows to the east, to lower i
        north = (j - self.cy) * self.pixel
        return np.broadcast_to(east, (self.ny, self.nx)), \
            np.broadcast_to(north[:, None], (self.ny, self.nx))

    def pixel_index(self, east, north):
        """Nearest pixel (ix, iy) of sky offsets in arcsec (may fall outside the grid)."""
        ix = np.floor(self.cx - east / self.pixel + 0.5).astype(np.int64)
        iy = np.floor(self.cy + north / self.pixel + 0.5).astype(np.int64)
        return ix, iy

    def channel_velocities(self):
        """Channel centres in km/s, shape (nv,)."""
        return self.v_start + self.channel * np.arange(self.nv)

    def header(self, spectral=True):
        """FITS header of the celestial (and spectral) axes."""
        h = fits.Header()
        h["CTYPE1"], h["CUNIT1"] = "RA---SIN", "deg"
        h["CRVAL1"], h["CRPIX1"], h["CDELT1"] = self.centre[0], self.cx + 1.0, -self.pixel / 3600.0
        h["CTYPE2"], h["CUNIT2"] = "DEC--SIN", "deg"
        h["CRVAL2"], h["CRPIX2"], h["CDELT2"] = self.centre[1], self.cy + 1.0, self.pixel / 3600.0
        if spectral:
            h["CTYPE3"], h["CUNIT3"] = "VRAD", "m/s"
            v_sys = self.v_start + self.k_sys * self.channel
            h["CRVAL3"], h["CRPIX3"], h["CDELT3"] = v_sys * 1e3, self.k_sys + 1.0, self.channel * 1e3
            h["SPECSYS"] = ("BARYCENT", "velocities in the galaxy's barycentric frame")
        h["RADESYS"], h["EQUINOX"] = "ICRS", 2000.0
        return h

    def wcs(self, spectral=True):
        """astropy.wcs.WCS of :meth:`header`."""
        return WCS(self.header(spectral))


def make_grid(east, north, v_lo, v_hi, geometry, instrument):
    """Grid covering the tracer: field from its projected extent, channels from its lines.

    Parameters
    ----------
    east, north : ndarray (n,)
        arcsec sky offsets of the particles.
    v_lo, v_hi : float
        km/s, lowest and highest velocity the lines reach.
    geometry : Geometry
    instrument : Instrument
    """
    pix, dv = instrument.pixel, instrument.channel
    if instrument.field is not None:
        field = instrument.field
    else:
        r = np.hypot(east, north)
        extent = float(np.quantile(r, FIELD_MASS_FRACTION)) if r.size else 0.0
        field = 2.0 * (extent + MARGIN_BEAMS * instrument.beam)
    n = int(math.ceil(field / pix))
    n += n % 2                                   # even: the centre is pixel n/2
    if n > MAX_PIXELS:
        raise ModelError("--pixel", f"{pix:g} arcsec", f"gives {n} pixels across the "
                         f"{field:.0f} arcsec field (limit {MAX_PIXELS}); use larger pixels "
                         f"or a smaller --field")
    v_sys = geometry.systemic
    below = int(math.ceil((v_sys - v_lo) / dv)) + PAD_CHANNELS
    above = int(math.ceil((v_hi - v_sys) / dv)) + PAD_CHANNELS
    nv = below + above + 1
    if nv > MAX_CHANNELS or n * n * nv > MAX_VOXELS:
        raise ModelError("--channel", f"{dv:g} km/s", f"gives {nv} channels over the "
                         f"{v_hi - v_lo:.0f} km/s of the lines, {n} x {n} x {nv} voxels "
                         f"(limits {MAX_CHANNELS} channels, {MAX_VOXELS:.1e} voxels); use "
                         f"wider channels or larger pixels")
    return SkyGrid(n, n, nv, pix, v_sys - below * dv, dv, below, tuple(geometry.centre))


@njit(cache=True, parallel=True)
def _bin_lines(row_start, ix, x, s, w, cube):
    """Add Gaussian lines into cube (ny, nx, nv), one row of pixels per task.

    Particles are sorted by row: row_start[j]:row_start[j + 1] fall in row j, pixel
    column ix; line centre x and sigma s are in channel units (channel k spans
    [k, k + 1)); w is the weight. The flux in channel k is
    w/2 [erf((k + 1 - x)/(s sqrt2)) - erf((k - x)/(s sqrt2))].
    Rows are independent, so threads never share a voxel and the sum order is fixed.
    """
    ny, nx, nv = cube.shape
    for j in prange(ny):
        for p in range(row_start[j], row_start[j + 1]):
            i = ix[p]
            if s[p] < NARROW_CHANNELS:
                k = int(math.floor(x[p]))
                if 0 <= k < nv:
                    cube[j, i, k] += w[p]
                continue
            k0 = max(int(math.floor(x[p] - LINE_CUT * s[p])), 0)
            k1 = min(int(math.floor(x[p] + LINE_CUT * s[p])), nv - 1)
            if k1 < k0:
                continue
            scale = 1.0 / (s[p] * SQRT2)
            lower = math.erf((k0 - x[p]) * scale)
            for k in range(k0, k1 + 1):
                upper = math.erf((k + 1 - x[p]) * scale)
                cube[j, i, k] += 0.5 * w[p] * (upper - lower)
                lower = upper


def bin_particles(grid, east, north, v_los, sigma, mass):
    """Tracer mass per pixel and channel (Msun), shape (ny, nx, nv).

    Parameters
    ----------
    grid : SkyGrid
    east, north : ndarray (n,)
        arcsec sky offsets.
    v_los, sigma : ndarray (n,)
        km/s, line centre and Gaussian sigma (>= 0) of each particle's line.
    mass : ndarray (n,)
        Msun.
    """
    ix, iy = grid.pixel_index(np.asarray(east, float), np.asarray(north, float))
    inside = np.flatnonzero((ix >= 0) & (ix < grid.nx) & (iy >= 0) & (iy < grid.ny))
    order = inside[np.argsort(iy[inside], kind="stable")]
    row_start = np.searchsorted(iy[order], np.arange(grid.ny + 1)).astype(np.int64)
    # gathered in row order once, so that the kernel reads memory in sequence
    # channel units: channel k spans [k, k + 1), its centre at k + 1/2
    x = (np.asarray(v_los, float)[order] - grid.v_start) / grid.channel + 0.5
    s = np.asarray(sigma, float)[order] / grid.channel
    cube = np.zeros((grid.ny, grid.nx, grid.nv))
    _bin_lines(row_start, ix[order], x, s, np.asarray(mass, float)[order], cube)
    return cube


def beam_smooth(cube, sigma_pixels):
    """Convolve each channel with a unit-sum circular Gaussian (sigma in pixels); the sky
    beyond the field is empty (mode 'constant')."""
    return ndimage.gaussian_filter(cube, (sigma_pixels, sigma_pixels, 0.0), mode="constant",
                                   truncate=BEAM_TRUNCATE)


def _smoothed_noise_std(sigma_pixels):
    """Standard deviation of unit white noise after :func:`beam_smooth`: the root of the
    sum of the squared kernel weights (separable: product over the two axes)."""
    n = 2 * int(BEAM_TRUNCATE * sigma_pixels + 0.5) + 1
    delta = np.zeros(n)
    delta[n // 2] = 1.0
    k = ndimage.gaussian_filter1d(delta, sigma_pixels, mode="constant", truncate=BEAM_TRUNCATE)
    return float(np.sum(k * k))


def beam_noise(shape, sigma_pixels, rms, rng):
    """Gaussian noise smoothed by the beam in each channel, rescaled to ``rms`` per voxel.

    Channels are independent; neighbouring pixels are correlated over a beam, as in a
    cleaned interferometer cube.
    """
    white = rng.standard_normal(shape)
    # periodic edges: every pixel gets the full kernel, so the rms is the same everywhere
    # (zero padding would lower it within a beam of the field's edge)
    smooth = ndimage.gaussian_filter(white, (sigma_pixels, sigma_pixels, 0.0), mode="wrap",
                                     truncate=BEAM_TRUNCATE)
    return smooth * (rms / _smoothed_noise_std(sigma_pixels))


def make_cube(grid, east, north, v_los, sigma, mass, instrument, rng):
    """Observed cube (Msun / beam / (km/s), shape (ny, nx, nv)) and the noise rms added.

    Binning with per-particle Gaussian lines, then the beam, then noise of rms
    ``instrument.noise`` times the peak of the noise-free cube.
    """
    binned = bin_particles(grid, east, north, v_los, sigma, mass)
    binned *= beam_area_pixels(instrument.beam, instrument.pixel) / instrument.channel
    cube = beam_smooth(binned, instrument.beam_sigma_pixels)
    rms = instrument.noise * float(cube.max()) if cube.size else 0.0
    if rms > 0:
        cube += beam_noise(cube.shape, instrument.beam_sigma_pixels, rms, rng)
    return cube, rms


def noise_rms(values):
    """Noise rms from the negative values only, sqrt(mean(x^2 | x < 0)): emission is
    positive, so for symmetric noise the negative half measures the noise alone (common
    practice in radio source finding). 0 for a cube with no negative value."""
    neg = values[values < 0]
    return float(np.sqrt(np.mean(neg * neg))) if neg.size else 0.0


def _drop_small_islands(mask, min_voxels):
    """Mask without its connected 3D islands (face neighbours) of fewer than min_voxels."""
    labels, count = ndimage.label(mask)
    if count == 0:
        return mask
    sizes = np.bincount(labels.ravel())
    keep = sizes >= min_voxels
    keep[0] = False
    return keep[labels]


def moment_maps(cube, grid, instrument):
    """Moment 0 (Msun/beam) and moment 1 (km/s) inside a smooth-and-clip mask.

    The mask keeps voxels where the cube, smoothed by the beam once more and averaged over
    3 channels, exceeds ``instrument.clip`` times that smoothed cube's rms (Serra, Jurek &
    Floer 2012, PASA 29, 296), less islands smaller than MIN_ISLAND_BEAMS beam areas of
    voxels (noise peaks). Moment 1 is NaN where moment 0 is not above ``clip`` times
    its own noise, rms channel sqrt(n masked channels).

    Returns
    -------
    mom0, mom1 : ndarray (ny, nx)
    mask : ndarray (ny, nx, nv) bool, the voxels used
    rms : float
        Noise rms of the cube (negative-half estimate).
    """
    smooth = ndimage.uniform_filter1d(beam_smooth(cube, instrument.beam_sigma_pixels), 3,
                                      axis=2, mode="constant")
    rms_smooth = noise_rms(smooth)
    mask = smooth > instrument.clip * rms_smooth
    del smooth
    if rms_smooth > 0:
        mask = _drop_small_islands(mask, MIN_ISLAND_BEAMS
                                   * beam_area_pixels(instrument.beam, instrument.pixel))
    rms = noise_rms(cube)
    dv = grid.channel
    held = np.where(mask, cube, 0.0)
    mom0 = held.sum(axis=2) * dv
    first = (held * grid.channel_velocities()).sum(axis=2) * dv
    nmask = mask.sum(axis=2)
    floor = instrument.clip * rms * dv * np.sqrt(nmask)
    good = (mom0 > floor) & (nmask > 0)
    mom1 = np.full(mom0.shape, np.nan)
    mom1[good] = first[good] / mom0[good]
    return mom0, mom1, mask, rms


def _beam_cards(h, instrument):
    beam_deg = instrument.beam / 3600.0
    h["BMAJ"], h["BMIN"], h["BPA"] = beam_deg, beam_deg, 0.0


def _mock_cards(h, geometry, instrument, rms):
    h["MOCKINC"] = (geometry.inclination, "[deg] true inclination")
    h["MOCKPA"] = (geometry.position_angle, "[deg] true PA, receding side, E of N")
    h["MOCKDIST"] = (geometry.distance, "[Mpc] true distance")
    h["MOCKVSYS"] = (geometry.systemic, "[km/s] true systemic velocity")
    h["MOCKRMS"] = (rms, "noise rms per channel, cube units")


def cube_hdu(cube, grid, geometry, instrument, rms):
    """PrimaryHDU of the cube, float32, axes (nv, ny, nx), with WCS and beam cards."""
    h = grid.header(spectral=True)
    _beam_cards(h, instrument)
    h["BUNIT"] = CUBE_UNIT
    _mock_cards(h, geometry, instrument, rms)
    data = np.ascontiguousarray(np.transpose(cube, (2, 0, 1)), dtype=np.float32)
    return fits.PrimaryHDU(data, header=h)


def map_hdu(image, grid, geometry, instrument, rms, bunit):
    """PrimaryHDU of a (ny, nx) map with the celestial WCS."""
    h = grid.header(spectral=False)
    _beam_cards(h, instrument)
    h["BUNIT"] = bunit
    _mock_cards(h, geometry, instrument, rms)
    return fits.PrimaryHDU(np.asarray(image, dtype=np.float32), header=h)
