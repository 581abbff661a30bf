"""Model-file spec of an exponential stellar disk (``kind = "disk"``) and its rules
between keys (taper, Toomre Q radius), each with the measurement behind its limit.

Lengths kpc, masses Msun.
"""

from dataclasses import dataclass

from icgen.errors import MISSING, ModelError

from .fields import choice, component_prefix, set_field, shown, validate_fields

VERTICAL_PROFILES = ("sech2", "exponential")
DISK_KEYS = ("kind", "profile", "mass", "scale_length", "scale_height", "vertical",
             "taper_radius", "taper_width", "toomre_q", "toomre_q_radius", "toomre_q_min",
             "sigma_ratio", "particles")  # fmt: skip

#: Default taper_width, in disk scale lengths (when taper_radius is given); never below
#: MIN_TAPER_WIDTH_FRACTION x taper_radius.
TAPER_WIDTH_FACTOR = 0.5
#: Default reference radius of toomre_q, in disk scale lengths; 2.5 Rd is where a
#: Milky-Way-like disk's Q is usually quoted (common practice, from memory).
TOOMRE_Q_RADIUS_FACTOR = 2.5

#: Smallest taper_width, as a fraction of taper_radius. The Dehnen & Binney residual of
#: the erfc taper is a shell of width ~w at r = R_t, which the multipole expansion
#: (48 radial nodes per decade, a node every 4.8 % in r) must resolve. Measured against
#: ring quadrature (tests/reference; R_d = 3 kpc, z_d = 0.3 kpc, the disk alone, points
#: |R - R_t| <= 3 w, z = 0, z_d, 3 z_d), largest relative error of F_R and of F_z:
#:   w/R_t   R_t = 4.5 kpc     R_t = 8 kpc       R_t = 20 kpc      R_t = 40 kpc
#:   0.2     1.1e-5 1.5e-4     -                 5.8e-6 1.5e-3     -
#:   0.1     6.3e-4 7.6e-4     2.8e-4 6.5e-4     2.4e-5 3.6e-3     1.1e-6 4.7e-4
#:   0.05    2.7e-2 1.2e-2     1.1e-2 6.9e-3     5.4e-4 1.1e-2     1.9e-6 3.9e-4
#:   0.025   -                 4.7e-1 1.9e-1     8.4e-3 6.6e-2     -
#:   0.005   -                 75     50         6.1    11 (F_z of the wrong sign: the
#:                                                         sampler then produced NaN)
#: (the F_z errors at R_t = 20 kpc, where F_z is small, do not depend on w). A taper holding
#: more mass (small R_t/R_d) needs the wider cut: 0.1 keeps F_R within 7e-4 in every case.
MIN_TAPER_WIDTH_FRACTION = 0.1

#: toomre_q_radius must lie within [0.1, 10] scale lengths: Q is quoted where the disk is;
#: beyond 10 R_d lies 5e-4 of its mass (and at 1e6 kpc Sigma underflowed to 0, a division
#: by zero in the sampler); inside 0.1 R_d kappa is dominated by the centre.
TOOMRE_Q_RADIUS_RANGE = (0.1, 10.0)
#: ... and within taper_radius + 3 taper_width, where the taper erfc(3)/2 = 1e-5 still leaves
#: a surface density to quote Q of (further out it underflows to 0).
TOOMRE_Q_TAPER_WIDTHS = 3.0


def check_taper(spec, p, rd):
    """taper_radius of a (validated) disk ``spec`` beyond the scale length ``rd`` (kpc);
    taper_width (default 0.5 scale lengths, at least MIN_TAPER_WIDTH_FRACTION x
    taper_radius) not too narrow for the potential. ``p`` is the key prefix."""
    taper, width = spec.taper_radius, spec.taper_width
    if taper is None:
        if width is not None:
            raise ModelError(p + "taper_width", shown(width, "kpc"), "needs taper_radius")
        return
    if taper <= rd:
        rule = f"must be larger than scale_length ({rd:.10g} kpc)"
        raise ModelError(p + "taper_radius", shown(taper, "kpc"), rule)
    least = MIN_TAPER_WIDTH_FRACTION * taper
    if width is None:
        width = max(TAPER_WIDTH_FACTOR * rd, least)
    elif width < least:
        rule = (f"must be at least {MIN_TAPER_WIDTH_FRACTION:g} x taper_radius = "
                f"{least:.4g} kpc: the potential solver does not resolve a narrower taper "
                f"(at half that width its forces near the taper are off by up to 3 %)")
        raise ModelError(p + "taper_width", shown(width, "kpc"), rule)
    set_field(spec, "taper_width", width)


@dataclass(frozen=True)
class DiskSpec:
    """Exponential disk (Freeman 1970, ApJ 160, 811); masses Msun, lengths kpc.

    Exactly one of ``toomre_q`` (Toomre 1964, ApJ 139, 1217; at ``toomre_q_radius``,
    default 2.5 scale lengths), ``toomre_q_min`` (minimum over the disk) or
    ``sigma_ratio`` (sigma_R / sigma_z) sets the radial velocity dispersion.
    """

    name: str
    mass: float
    scale_length: float
    scale_height: float
    kind: str = "disk"
    profile: str = "exponential"
    vertical: str = "sech2"
    taper_radius: float | None = None
    taper_width: float | None = None
    toomre_q: float | None = None
    toomre_q_radius: float | None = None
    toomre_q_min: float | None = None
    sigma_ratio: float | None = None
    particles: int | None = None

    @classmethod
    def table_keys(cls, prefix, table):
        """(allowed, required) keys of a disk's model-file table."""
        return DISK_KEYS, ("mass", "scale_length", "scale_height")

    def __post_init__(self):
        p = component_prefix(self, ("disk",), ("exponential",))
        choice(p + "vertical", self.vertical, VERTICAL_PROFILES)
        given = [k for k in ("toomre_q", "toomre_q_min", "sigma_ratio") if getattr(self, k) is not None]
        choices = "toomre_q, toomre_q_min or sigma_ratio"
        if not given:
            raise ModelError(p + "toomre_q", MISSING, f"missing: give one of {choices}")
        if len(given) > 1:
            rule = f"give only one of {choices} (also got {given[0]})"
            raise ModelError(p + given[1], getattr(self, given[1]), rule)
        validate_fields(self, p)
        rd, zd = self.scale_length, self.scale_height
        if zd >= rd:
            rule = f"must be smaller than scale_length ({rd:.10g} kpc)"
            raise ModelError(p + "scale_height", shown(zd, "kpc"), rule)
        check_taper(self, p, rd)
        self._check_q_radius(p, rd)

    def _check_q_radius(self, p, rd):
        """toomre_q_radius (default 2.5 scale lengths ``rd``) only with toomre_q, where
        the disk is."""
        radius = self.toomre_q_radius
        if self.toomre_q is None:
            if radius is not None:
                raise ModelError(p + "toomre_q_radius", shown(radius, "kpc"), "needs toomre_q")
            return
        lo, hi = (f * rd for f in TOOMRE_Q_RADIUS_RANGE)
        if self.taper_radius is not None:
            hi = min(hi, self.taper_radius + TOOMRE_Q_TAPER_WIDTHS * self.taper_width)
        where = (f" and within taper_radius + {TOOMRE_Q_TAPER_WIDTHS:g} taper_width"
                 if hi < TOOMRE_Q_RADIUS_RANGE[1] * rd else "")
        span = (f"between {lo:.4g} and {hi:.4g} kpc ({TOOMRE_Q_RADIUS_RANGE[0]:g} to "
                f"{TOOMRE_Q_RADIUS_RANGE[1]:g} scale lengths{where}), where the disk is")
        if radius is None:
            radius = TOOMRE_Q_RADIUS_FACTOR * rd
            if radius > hi:
                raise ModelError(p + "toomre_q_radius", MISSING,
                                 f"the default {TOOMRE_Q_RADIUS_FACTOR:g} x scale_length = "
                                 f"{radius:.4g} kpc lies beyond the taper; give one {span}")
        elif not lo <= radius <= hi:
            raise ModelError(p + "toomre_q_radius", shown(radius, "kpc"), f"must be {span}")
        set_field(self, "toomre_q_radius", radius)
