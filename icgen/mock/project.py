"""Sky projection of a disk galaxy: viewing geometry, instrument and their checks.

Conventions (the same in the projection and in every fit, so they cannot disagree):

- The galaxy's own frame has the disk in the x-y plane rotating towards +phi (counter-
  clockwise seen from +z), as icgen samples it.
- The line of nodes is the galaxy x axis. The observer looks along
  l = sin(i) y + cos(i) z (i = 0: face on), so the line-of-sight velocity v.l is positive
  (receding) on the +x side of a disk rotating towards +phi.
- On the sky, ``position_angle`` is the angle of the receding half of the major axis,
  measured from north through east (common practice for kinematic position angles).
  Sky offsets are (east, north); the far side of the disk lies at position angle
  PA - 90 deg.
- A point of the disk plane at radius R and azimuth theta (from the receding major axis
  towards the far side) is seen at line-of-sight velocity
  v_sys + v_rot cos(theta) sin(i) + v_exp sin(theta) sin(i) (Begeman 1987, PhD thesis,
  Groningen); v_exp > 0 is an outflow.
- Angles on the sky follow from lengths by the small-angle relation theta = l / D
  (galaxies subtend well under a degree; the error is ~theta^2/3 ~ 1e-5).
  :func:`project_particles` refuses a distance at which the tracer would reach beyond
  MAX_SKY_RADIUS_DEG from the centre, where that relation is off by more than 1 %.

All lengths are kpc, velocities km/s, angles degrees or arcsec as named.
"""
import math
from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..errors import ModelError
from ..units import parse_quantity

__all__ = ["Geometry", "Instrument", "hubble_systemic", "kpc_per_arcsec", "geometry_from_text",
           "instrument_from_text", "project_particles", "deproject",
           "beam_area_pixels", "MAX_FIT_INCLINATION"]

#: Sky position (RA, Dec in deg) put at the galaxy centre: an arbitrary point away from
#: the celestial poles and the RA = 0 wrap, so that RA---SIN/DEC--SIN axes behave plainly.
DEFAULT_CENTRE = (150.0, 30.0)
#: Above this inclination a velocity field cannot be deprojected reliably (rings collapse
#: onto the major axis); tilted-ring fits are skipped and only the major-axis curve is
#: made (common practice: tilted-ring fits are used below ~80-85 deg).
MAX_FIT_INCLINATION = 85.0
#: Gaussian FWHM / sigma = 2 sqrt(2 ln 2).
FWHM_PER_SIGMA = 2.0 * math.sqrt(2.0 * math.log(2.0))
#: Largest sky radius (deg) of the tracer's bulk: the small-angle relation theta = l / D
#: errs by ~theta^2/3 (arctan series), 1 % at 10 deg.
MAX_SKY_RADIUS_DEG = 10.0
#: Fraction of the tracer particles within that radius (the bulk that sets the field of
#: a cube, cube.FIELD_MASS_FRACTION; stray particles may lie beyond).
SKY_RADIUS_FRACTION = 0.995


def hubble_systemic(distance_mpc):
    """Hubble-flow velocity H0 D (km/s) with H0 of astropy's Planck18 (Planck
    Collaboration 2020, A&A 641, A6): the default systemic velocity of a mock."""
    from astropy.cosmology import Planck18

    return float(Planck18.H0.to_value(u.km / u.s / u.Mpc)) * distance_mpc


def kpc_per_arcsec(distance_mpc):
    """Length (kpc) that one arcsec spans at ``distance_mpc``: small-angle relation."""
    return float(u.arcsec.to(u.rad)) * distance_mpc * 1e3


def _finite(key, value, unit_text):
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating, np.integer)):
        raise ModelError(key, value, f"must be a number in {unit_text}")
    if not math.isfinite(value):
        raise ModelError(key, value, "must be finite")
    return float(value)


@dataclass(frozen=True)
class Geometry:
    """How the galaxy sits on the sky.

    Parameters
    ----------
    inclination : float
        deg, in (0, 90]; 90 is edge on.
    position_angle : float
        deg east of north of the receding major axis; stored in [0, 360).
    distance : float
        Mpc, > 0.
    systemic : float
        km/s, radio-convention velocity of the centre; line-of-sight velocities are added
        to it linearly (relativistic terms ~ v_sys/c < 1 % are neglected).
    centre : (float, float)
        RA, Dec (deg) of the galaxy centre in the written WCS.
    """

    inclination: float
    position_angle: float
    distance: float
    systemic: float = 0.0
    centre: tuple = DEFAULT_CENTRE

    def __post_init__(self):
        inc = _finite("--inclination", self.inclination, "deg")
        if not 0.0 < inc <= 90.0:
            raise ModelError("--inclination", f"{inc:g} deg",
                             "must be in (0, 90] deg (0 is face on: no rotation to see)")
        object.__setattr__(self, "inclination", inc)
        pa = _finite("--position-angle", self.position_angle, "deg")
        object.__setattr__(self, "position_angle", pa % 360.0)
        d = _finite("--distance", self.distance, "Mpc")
        if d <= 0:
            raise ModelError("--distance", f"{d:g} Mpc", "must be > 0")
        object.__setattr__(self, "distance", d)
        object.__setattr__(self, "systemic", _finite("--systemic", self.systemic, "km/s"))
        ra, dec = (float(c) for c in self.centre)
        if not (0.0 <= ra < 360.0 and -80.0 <= dec <= 80.0):
            raise ModelError("centre", self.centre, "RA in [0, 360) deg, Dec in [-80, 80] deg")

    @property
    def kpc_per_arcsec(self):
        return kpc_per_arcsec(self.distance)


@dataclass(frozen=True)
class Instrument:
    """Resolution, sampling and noise of the mock observation.

    Parameters
    ----------
    beam : float
        arcsec, FWHM of the circular Gaussian beam; at least one pixel.
    pixel : float
        arcsec, side of a square pixel.
    channel : float
        km/s, channel width (the spectral axis is sampled at that step).
    noise : float
        Per-channel rms of the noise as a fraction of the peak of the noise-free cube
        (0.1: peak signal-to-noise 10). The noise is Gaussian, smoothed by the beam (as
        in an interferometer's cleaned cube) and rescaled to exactly this rms.
    clip : float
        Moments use voxels where the beam-smoothed, 3-channel-averaged cube exceeds
        ``clip`` times its own rms (the smooth-and-clip mask of Serra, Jurek & Floer
        2012, PASA 29, 296).
    field : float or None
        arcsec, side of the square field; None: the disk's extent plus margins.
    line_width : float or None
        km/s, one Gaussian sigma given to every particle's line; None: the tracer's own
        (0 for stars, whose particles sample their velocity spread; the sound speed for
        gas).
    """

    beam: float = 12.0
    pixel: float = 4.0
    channel: float = 5.0
    noise: float = 0.0
    clip: float = 3.0
    field: float | None = None
    line_width: float | None = None

    def __post_init__(self):
        for key, unit in (("beam", "arcsec"), ("pixel", "arcsec"), ("channel", "km/s")):
            x = _finite(f"--{key}", getattr(self, key), unit)
            if x <= 0:
                raise ModelError(f"--{key}", f"{x:g} {unit}", "must be > 0")
            object.__setattr__(self, key, x)
        if self.beam < self.pixel:
            raise ModelError("--beam", f"{self.beam:g} arcsec",
                             f"must be at least one pixel (--pixel {self.pixel:g} arcsec); "
                             f"common practice is 3 or more pixels per beam")
        noise = _finite("--noise", self.noise, "units of the peak")
        if noise < 0:
            raise ModelError("--noise", noise, "must be >= 0 (rms as a fraction of the peak)")
        object.__setattr__(self, "noise", noise)
        clip = _finite("--clip", self.clip, "units of the rms")
        if clip <= 0:
            raise ModelError("--clip", clip, "must be > 0 (threshold in units of the rms)")
        object.__setattr__(self, "clip", clip)
        if self.field is not None:
            f = _finite("--field", self.field, "arcsec")
            if f < 4 * self.beam:
                raise ModelError("--field", f"{f:g} arcsec",
                                 f"must span at least 4 beams ({4 * self.beam:g} arcsec)")
            object.__setattr__(self, "field", f)
        if self.line_width is not None:
            w = _finite("--line-width", self.line_width, "km/s")
            if w < 0:
                raise ModelError("--line-width", f"{w:g} km/s", "must be >= 0")
            object.__setattr__(self, "line_width", w)

    @property
    def beam_sigma_pixels(self):
        """Gaussian sigma of the beam in pixels."""
        return self.beam / FWHM_PER_SIGMA / self.pixel


def _number_text(key, text, rule):
    """A plain number given as text (CLI), or ModelError naming the option."""
    try:
        value = float(text)
    except (TypeError, ValueError):
        raise ModelError(key, text, rule) from None
    if not math.isfinite(value):
        raise ModelError(key, text, rule)
    return value


def geometry_from_text(inclination, position_angle, distance, systemic=None):
    """Geometry from strings with units ("60 deg", "35 deg", "12 Mpc", "900 km/s");
    systemic None: the Hubble flow :func:`hubble_systemic`."""
    d = parse_quantity(distance, "--distance", u.Mpc)
    v = hubble_systemic(d) if systemic is None else parse_quantity(systemic, "--systemic", u.km / u.s)
    return Geometry(parse_quantity(inclination, "--inclination", u.deg),
                    parse_quantity(position_angle, "--position-angle", u.deg), d, v)


def instrument_from_text(beam="12 arcsec", pixel="4 arcsec", channel="5 km/s", noise="0",
                         clip="3", field=None, line_width=None):
    """Instrument from strings with units (beam, pixel, field in an angle unit; channel and
    line width in a velocity unit); noise and clip plain numbers."""
    return Instrument(
        beam=parse_quantity(beam, "--beam", u.arcsec),
        pixel=parse_quantity(pixel, "--pixel", u.arcsec),
        channel=parse_quantity(channel, "--channel", u.km / u.s),
        noise=_number_text("--noise", noise, "must be a number >= 0: the per-channel rms as "
                                             "a fraction of the noise-free cube's peak"),
        clip=_number_text("--clip", clip, "must be a number > 0 (units of the rms)"),
        field=None if field is None else parse_quantity(field, "--field", u.arcsec),
        line_width=None if line_width is None else parse_quantity(line_width, "--line-width",
                                                                   u.km / u.s))


def beam_area_pixels(beam, pixel):
    """Solid angle of a Gaussian beam in pixels: pi FWHM^2 / (4 ln 2) / pixel^2."""
    return math.pi * beam * beam / (4.0 * math.log(2.0)) / (pixel * pixel)


def project_particles(position, velocity, geometry):
    """Sky offsets and line-of-sight velocities of particles.

    Parameters
    ----------
    position : ndarray (n, 3)
        kpc, galaxy frame (disk in the x-y plane).
    velocity : ndarray (n, 3)
        km/s.
    geometry : Geometry

    Returns
    -------
    east, north : ndarray (n,)
        kpc, offsets on the sky plane from the centre (divide by
        ``geometry.kpc_per_arcsec`` for arcsec).
    v_los : ndarray (n,)
        km/s, including the systemic velocity.
    """
    inc = math.radians(geometry.inclination)
    pa = math.radians(geometry.position_angle)
    x, y, z = position[:, 0], position[:, 1], position[:, 2]
    along = x                                           # major axis (receding side +)
    across = y * math.cos(inc) - z * math.sin(inc)      # minor axis, towards the far side
    v_los = velocity[:, 1] * math.sin(inc) + velocity[:, 2] * math.cos(inc)
    # the major axis points to (sin PA, cos PA) in (east, north); the far side 90 deg
    # clockwise of it, (-cos PA, sin PA): (major, minor, line of sight) stays right-handed
    east = along * math.sin(pa) - across * math.cos(pa)
    north = along * math.cos(pa) + across * math.sin(pa)
    _check_small_angle(east, north, geometry)
    return east, north, v_los + geometry.systemic


def _check_small_angle(east, north, geometry):
    """ModelError naming --distance when the tracer's bulk (SKY_RADIUS_FRACTION of its
    particles) reaches beyond MAX_SKY_RADIUS_DEG: the small-angle projection fails there
    (and any grid of pixels would be absurd, which is not the pixels' fault)."""
    if np.size(east) == 0:
        return
    extent = float(np.quantile(np.hypot(east, north), SKY_RADIUS_FRACTION))   # kpc
    radius_deg = math.degrees(extent / (geometry.distance * 1e3))
    if radius_deg > MAX_SKY_RADIUS_DEG:
        nearest = extent / math.radians(MAX_SKY_RADIUS_DEG) / 1e3
        raise ModelError("--distance", f"{geometry.distance:.4g} Mpc",
                         f"{100 * SKY_RADIUS_FRACTION:g} % of the tracer lies within "
                         f"{extent:.3g} kpc of the centre, {radius_deg:.3g} deg at this "
                         f"distance by the small-angle relation the projection uses, which "
                         f"holds to 1 % up to {MAX_SKY_RADIUS_DEG:g} deg: use at least "
                         f"{nearest:.3g} Mpc")


def deproject(east, north, position_angle, inclination, centre=(0.0, 0.0)):
    """Radius and azimuth in the disk plane of points seen at sky offsets.

    Parameters
    ----------
    east, north : ndarray
        Sky offsets (any length unit; the radius comes out in the same unit).
    position_angle, inclination : float
        deg; inclination below 90.
    centre : (float, float)
        Offsets (east, north) of the disk centre.

    Returns
    -------
    radius, cos_theta, sin_theta : ndarray
        theta is the azimuth from the receding major axis towards the far side
        (cos_theta = 1, sin_theta = 0 at the centre itself).
    """
    pa = np.radians(position_angle)
    de = np.asarray(east) - centre[0]
    dn = np.asarray(north) - centre[1]
    along = de * np.sin(pa) + dn * np.cos(pa)
    across = (-de * np.cos(pa) + dn * np.sin(pa)) / np.cos(np.radians(inclination))
    radius = np.hypot(along, across)
    safe = np.where(radius > 0, radius, 1.0)
    return radius, np.where(radius > 0, along / safe, 1.0), across / safe
