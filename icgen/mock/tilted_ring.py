"""Rotation curves derived as an observer would: tilted rings and a major-axis slit.

Tilted rings (Begeman 1987, PhD thesis, Groningen; Begeman 1989, A&A 223, 47): the velocity
field is cut into concentric rings of the disk plane, one beam wide, and in each ring

    v_los = v_sys + v_rot cos(theta) sin(i) + v_exp sin(theta) sin(i)

is fitted by least squares (scipy.optimize.least_squares) to the pixels of that ring, with
the weight |cos(theta)| and a wedge of +-``exclude`` deg about the minor axis left out,
as in Begeman's procedure. Three ways to treat the geometry:

- ``fixed``: position angle, inclination, centre and v_sys as given; per ring v_rot
  (and v_exp).
- ``global``: PA, i (and any of v_sys, centre) common to all rings, fitted together with
  every ring's v_rot (and v_exp).
- ``rings``: PA, i (and any of v_sys, centre) free in every ring, as in a warp search.

Pixels are assigned to rings with the current geometry; the fit and the assignment are
iterated until the assignment no longer changes.

Uncertainties: the covariance (J^T J)^-1 of the fit, scaled by the weighted residual
variance s^2 = sum(r^2)/(m - p) and by the number of pixels per beam, because the m
pixels of a ring hold only m / (pixels per beam) independent measurements (neighbouring
pixels share the beam).

Major-axis curve: the masked cube is sampled along the major axis (a one-pixel slit
through the centre) at the ring radii on both sides; the velocity of each spectrum is its
peak (parabola through the highest channel and its neighbours) or its intensity-weighted
mean; v_rot = |v - v_sys| / sin(i), averaged over both sides.
"""
import math

import numpy as np
from astropy.table import QTable
import astropy.units as u
from scipy import ndimage, sparse
from scipy.optimize import least_squares

from ..errors import ModelError
from .project import MAX_FIT_INCLINATION, beam_area_pixels, deproject

__all__ = ["GEOMETRY_MODES", "GEOMETRY_PARAMETERS", "ring_edges", "fit_tilted_rings",
           "major_axis_curve"]

GEOMETRY_MODES = ("fixed", "global", "rings")
GEOMETRY_PARAMETERS = ("pa", "inc", "vsys", "xc", "yc")
#: Half-opening (deg) of the wedge about the minor axis left out of the fits: there
#: cos(theta) -> 0 and the pixels carry little rotation (common practice: 15-30 deg).
EXCLUDE_DEG = 20.0
# Reassigning pixels to rings with the updated geometry converges in 2-3 rounds for any
# sane start (measured); 8 is a safe ceiling.
MAX_ROUNDS = 8
# Inclination bounds of the fit (deg): sin(i) and 1/cos(i) stay well-conditioned.
INC_BOUNDS = (5.0, 88.0)


def ring_edges(beam, r_max):
    """Ring edges (arcsec) from 0 in steps of one beam out to at least ``r_max``."""
    n = max(int(math.ceil(r_max / beam)), 1)
    return beam * np.arange(n + 1)


def _start_geometry(geometry, initial):
    g = {"pa": geometry.position_angle, "inc": geometry.inclination,
         "vsys": geometry.systemic, "xc": 0.0, "yc": 0.0}
    for key, value in (initial or {}).items():
        if key not in g:
            raise ModelError("initial", key, f"must be one of {', '.join(g)}")
        g[key] = float(value)
    return g


def _assign(e, n, g, edges, exclude):
    """Ring index of each pixel (-1: outside, in the wedge or beyond the last ring) and
    the weights |cos theta|, for geometry g."""
    R, c, _ = deproject(e, n, g["pa"], g["inc"], (g["xc"], g["yc"]))
    ring = np.searchsorted(edges, R, side="right") - 1
    keep = (ring >= 0) & (ring < edges.size - 1) & (np.abs(c) >= math.sin(math.radians(exclude)))
    return np.where(keep, ring, -1), np.abs(c)


def _unpack(p, free, fixed, n_rings, expansion):
    g = dict(fixed)
    g.update(zip(free, p[:len(free)]))
    rest = p[len(free):]
    v_rot = rest[:n_rings]
    v_exp = rest[n_rings:] if expansion else np.zeros(n_rings)
    return g, v_rot, v_exp


def _residuals(p, free, fixed, e, n, v, ring, sqrt_w, n_rings, expansion):
    g, v_rot, v_exp = _unpack(p, free, fixed, n_rings, expansion)
    _, c, s = deproject(e, n, g["pa"], g["inc"], (g["xc"], g["yc"]))
    model = g["vsys"] + (v_rot[ring] * c + v_exp[ring] * s) * math.sin(math.radians(g["inc"]))
    return sqrt_w * (v - model)


def _jacobian(p, free, fixed, e, n, v, ring, sqrt_w, n_rings, expansion):
    """Analytic d(residual)/d(parameter): scipy.sparse matrix of shape (m, len(p)).

    With a, b the disk-plane coordinates along and across the major axis, R = |(a, b)|,
    c = a/R, s = b/R and D = (b da - a db)/R^2: dc = s D, ds = -c D.
    """
    g, v_rot, v_exp = _unpack(p, free, fixed, n_rings, expansion)
    pa, inc = math.radians(g["pa"]), math.radians(g["inc"])
    sin_i, cos_i = math.sin(inc), math.cos(inc)
    R, c, s = deproject(e, n, g["pa"], g["inc"], (g["xc"], g["yc"]))
    a, b = R * c, R * s
    V, X = v_rot[ring], v_exp[ring]
    deg = math.pi / 180.0
    # (da/dq, db/dq) per geometry parameter q (angles per degree, centre per arcsec)
    partial = {"pa": (-b * cos_i * deg, a / cos_i * deg),
               "inc": (0.0, b * math.tan(inc) * deg),
               "xc": (-math.sin(pa), math.cos(pa) / cos_i),
               "yc": (-math.cos(pa), -math.sin(pa) / cos_i)}
    R2 = np.where(R > 0, R * R, 1.0)
    m, k0 = e.size, len(free)
    cols = [np.full(m, j) for j in range(k0)] + [k0 + ring]
    vals = []
    for key in free:
        if key == "vsys":
            vals.append(np.ones(m))
            continue
        da, db = partial[key]
        D = (b * da - a * db) / R2
        d = sin_i * (V * s - X * c) * D
        if key == "inc":
            d = d + cos_i * deg * (V * c + X * s)
        vals.append(d)
    vals.append(sin_i * c)
    if expansion:
        cols.append(k0 + n_rings + ring)
        vals.append(sin_i * s)
    rows = np.tile(np.arange(m), len(cols))
    data = -np.concatenate(vals) * np.tile(sqrt_w, len(cols))
    # sparse: each pixel touches the geometry and its own ring only
    return sparse.csr_matrix((data, (rows, np.concatenate(cols))), shape=(m, p.size))


def _ring_velocities(g, e, n, v, ring, weight, n_rings, expansion):
    """v_rot (and v_exp) of every ring at geometry g: weighted linear least squares in
    closed form (normal equations per ring, summed with bincount)."""
    _, c, s = deproject(e, n, g["pa"], g["inc"], (g["xc"], g["yc"]))
    sin_i = math.sin(math.radians(g["inc"]))
    y = v - g["vsys"]
    a, b = sin_i * c, sin_i * s

    def total(q):
        return np.bincount(ring, weight * q, minlength=n_rings)

    saa, say = total(a * a), total(a * y)
    if not expansion:
        return say / saa, np.zeros(n_rings)
    sab, sbb, sby = total(a * b), total(b * b), total(b * y)
    det = saa * sbb - sab * sab
    return (sbb * say - sab * sby) / det, (saa * sby - sab * say) / det


def _projected(q, free, fixed, e, n, v, ring, weight, n_rings, expansion):
    """Residuals as a function of the geometry alone, the ring velocities solved exactly
    for each trial geometry (separable least squares, Golub & Pereyra 1973, SIAM J.
    Numer. Anal. 10, 413): a 5-parameter search instead of one over every ring."""
    g = dict(fixed)
    g.update(zip(free, q))
    v_rot, v_exp = _ring_velocities(g, e, n, v, ring, weight, n_rings, expansion)
    p = np.concatenate([q, v_rot, v_exp if expansion else []])
    return _residuals(p, free, fixed, e, n, v, ring, np.sqrt(weight), n_rings, expansion)


def _solve(e, n, v, ring, weight, n_rings, free, g, expansion):
    """One weighted least-squares fit at a fixed pixel assignment: (geometry, v_rot, v_exp)."""
    fixed = {k: g[k] for k in GEOMETRY_PARAMETERS if k not in free}
    q = np.array([g[k] for k in free], dtype=float)
    args = (tuple(free), fixed, e, n, v, ring, weight, n_rings, expansion)
    if free:
        lo = np.full(q.size, -np.inf)
        hi = np.full(q.size, np.inf)
        if "inc" in free:
            j = free.index("inc")
            lo[j], hi[j] = INC_BOUNDS
            q[j] = min(max(q[j], INC_BOUNDS[0] + 1e-6), INC_BOUNDS[1] - 1e-6)
        q = least_squares(_projected, q, bounds=(lo, hi), x_scale="jac", args=args).x
    g_new = dict(fixed)
    g_new.update(zip(free, q))
    v_rot, v_exp = _ring_velocities(g_new, e, n, v, ring, weight, n_rings, expansion)
    return g_new, v_rot, v_exp


def _errors(g, v_rot, v_exp, free, e, n, v, ring, weight, expansion, per_beam):
    """1-sigma errors of (free geometry, v_rot, v_exp): the covariance (J^T J)^-1 times
    the weighted residual variance and the pixels per beam; NaN when undetermined."""
    fixed = {k: g[k] for k in GEOMETRY_PARAMETERS if k not in free}
    p = np.concatenate([[g[k] for k in free], v_rot, v_exp if expansion else []])
    args = (tuple(free), fixed, e, n, v, ring, np.sqrt(weight), v_rot.size, expansion)
    r = _residuals(p, *args)
    dof = r.size - p.size
    if dof <= 0:
        return np.full(p.size, np.nan)
    jac = _jacobian(p, *args)
    jtj = (jac.T @ jac).toarray()
    if np.linalg.matrix_rank(jtj) < p.size:
        return np.full(p.size, np.nan)
    s2 = float(r @ r) / dof
    return np.sqrt(np.clip(np.diag(np.linalg.inv(jtj)), 0, None) * s2 * per_beam)


def _settled(g, last):
    """True when no geometry parameter moved by more than 1e-4 (deg, km/s or arcsec)
    in the last round: pixels that still swap rings then sit on a ring edge."""
    return all(abs(g[k] - last[k]) < 1e-4 for k in GEOMETRY_PARAMETERS)


def _fit(e, n, v, edges, rings, free, g, expansion, exclude, per_beam, min_pixels):
    """Fit the rings listed in ``rings`` together, iterating the pixel assignment.

    Returns a dict with the geometry, per-ring v_rot, v_exp, their errors and pixel counts
    (NaN for rings with too few pixels).
    """
    n_all = len(rings)
    out = last = previous = None
    for _ in range(MAX_ROUNDS):
        ring_all, weight = _assign(e, n, g, edges, exclude)
        # local index of each pixel among the fitted rings, -1 for the others
        local = np.full(ring_all.shape, -1)
        count = np.zeros(n_all, dtype=int)
        for k, r in enumerate(rings):
            hit = ring_all == r
            count[k] = int(hit.sum())
            local[hit] = k
        usable = count >= min_pixels
        if not usable.any():
            return None
        remap = np.full(n_all, -1)
        remap[usable] = np.arange(int(usable.sum()))
        take = (local >= 0) & usable[np.maximum(local, 0)]
        if previous is not None and np.array_equal(take, previous):
            break
        if out is not None and _settled(out["geometry"], last):
            break
        previous = take
        last = dict(g)
        sel = (e[take], n[take], v[take], remap[local[take]], weight[take])
        g, v_rot, v_exp = _solve(*sel, int(usable.sum()), free, g, expansion)
        out = {"geometry": g, "count": count, "usable": usable, "v_rot": v_rot, "v_exp": v_exp}
    nu, k0 = out["v_rot"].size, len(free)
    err = _errors(out["geometry"], out["v_rot"], out["v_exp"], free, *sel, expansion, per_beam)
    out["geometry_err"] = dict(zip(free, err[:k0]))
    out["v_rot_err"] = err[k0:k0 + nu]
    out["v_exp_err"] = err[k0 + nu:] if expansion else np.full(nu, np.nan)
    return out


def check_geometry_options(mode, free):
    """Validated tuple of free geometry parameters for ``mode`` (empty for "fixed")."""
    if mode not in GEOMETRY_MODES:
        raise ModelError("--fit-geometry", mode, f"must be one of {', '.join(GEOMETRY_MODES)}")
    for key in free:
        if key not in GEOMETRY_PARAMETERS:
            raise ModelError("--fit-params", key, f"must be among {', '.join(GEOMETRY_PARAMETERS)}")
    return () if mode == "fixed" else tuple(k for k in GEOMETRY_PARAMETERS if k in free)


def fit_tilted_rings(vfield, grid, geometry, instrument, mode="fixed", free=("pa", "inc"),
                     expansion=False, initial=None, r_max=None, exclude=EXCLUDE_DEG):
    """Tilted-ring rotation curve of a velocity field.

    Parameters
    ----------
    vfield : ndarray (ny, nx)
        km/s, NaN where there is no measurement (moment 1).
    grid : SkyGrid
    geometry : Geometry
        Starting (or, for mode "fixed", final) PA, inclination and v_sys; centre at the
        grid centre.
    instrument : Instrument
        Beam (ring width, independent pixels) and pixel size.
    mode : {"fixed", "global", "rings"}
    free : sequence of {"pa", "inc", "vsys", "xc", "yc"}
        Geometry parameters fitted in modes "global" and "rings" (xc, yc: centre offsets
        east and north, arcsec).
    expansion : bool
        Also fit a radial velocity v_exp per ring.
    initial : dict, optional
        Starting values replacing those of ``geometry`` (same keys as ``free``).
    r_max : float, optional
        arcsec, outer edge of the last ring (default: the farthest valid pixel).
    exclude : float
        deg, half-opening of the wedge about the minor axis left out.

    Returns
    -------
    astropy.table.QTable
        One row per ring: radius (arcsec and kpc), v_rot, v_rot_err, v_exp, v_exp_err,
        pa, inc, vsys, xc, yc, n_pixels, n_beams, coverage (fraction of a full ring's
        pixels outside the wedges that were measured); ``meta`` holds the mode, the fitted
        geometry and its errors.
    """
    free = check_geometry_options(mode, free)
    east, north = grid.pixel_offsets()
    ok = np.isfinite(vfield)
    e, n, v = east[ok], north[ok], np.asarray(vfield)[ok]
    g0 = _start_geometry(geometry, initial)
    if r_max is None:
        # the farthest measured point on the sky: rings beyond it would be seen only
        # near the minor axis, where they carry no rotation
        r_max = float(np.max(np.hypot(e - g0["xc"], n - g0["yc"]), initial=instrument.beam))
    edges = ring_edges(instrument.beam, r_max)
    per_beam = max(beam_area_pixels(instrument.beam, instrument.pixel), 1.0)
    # twice the parameters a ring carries (its geometry too in mode "rings"), and at
    # least one beam's worth of pixels (one independent measurement)
    min_pixels = max(2 * (1 + int(expansion) + (len(free) if mode == "rings" else 0)),
                     int(math.ceil(per_beam)))
    rows = _empty_rows(edges, g0)
    meta = {"mode": mode, "fitted": list(free), "expansion": expansion, "exclude_deg": exclude,
            "pixels_per_beam": per_beam, "pixel": instrument.pixel}
    if geometry.inclination > MAX_FIT_INCLINATION:
        meta["note"] = (f"inclination {geometry.inclination:g} deg above "
                        f"{MAX_FIT_INCLINATION:g}: no tilted-ring fit; see the major-axis curve")
        return _table(rows, edges, geometry, meta)
    if mode in ("fixed", "rings"):
        # ring by ring: each ring's error comes from its own residual scatter
        for k in range(edges.size - 1):
            res = _fit(e, n, v, edges, [k], free, dict(g0), expansion, exclude, per_beam,
                       min_pixels)
            _store(rows, [k], res)
    else:
        res = _fit(e, n, v, edges, list(range(edges.size - 1)), free, dict(g0), expansion,
                   exclude, per_beam, min_pixels)
        _store(rows, list(range(edges.size - 1)), res)
        if res is not None:
            meta["geometry"] = {k: float(x) for k, x in res["geometry"].items()}
            meta["geometry_err"] = {k: float(x) for k, x in res["geometry_err"].items()}
    return _table(*_trim(rows, edges), geometry, meta)


def _trim(rows, edges):
    """Rows and edges without the rings past the last fitted one (they hold no data)."""
    fitted = np.flatnonzero(np.isfinite(rows["v_rot"]))
    if not fitted.size:
        return rows, edges
    last = fitted[-1] + 1
    return {k: x[:last] for k, x in rows.items()}, edges[:last + 1]


def _empty_rows(edges, g0):
    m = edges.size - 1
    rows = {k: np.full(m, np.nan) for k in ("v_rot", "v_rot_err", "v_exp", "v_exp_err",
                                            "pa", "pa_err", "inc", "inc_err", "vsys",
                                            "vsys_err", "xc", "yc")}
    rows["n_pixels"] = np.zeros(m, dtype=int)
    return rows


def _store(rows, rings, res):
    if res is None:
        return
    rings = np.asarray(rings)
    rows["n_pixels"][rings] = res["count"]
    use = rings[res["usable"]]
    rows["v_rot"][use] = res["v_rot"]
    rows["v_rot_err"][use] = res["v_rot_err"]
    rows["v_exp"][use] = res["v_exp"]
    rows["v_exp_err"][use] = res["v_exp_err"]
    for key in GEOMETRY_PARAMETERS:
        rows[key][use] = res["geometry"][key]
        if key + "_err" in rows:
            rows[key + "_err"][use] = res["geometry_err"].get(key, np.nan)


def _table(rows, edges, geometry, meta):
    r_mid = 0.5 * (edges[1:] + edges[:-1])
    scale = geometry.kpc_per_arcsec
    t = QTable()
    t["radius_arcsec"] = r_mid * u.arcsec
    t["radius"] = r_mid * scale * u.kpc
    t["r_in"] = edges[:-1] * scale * u.kpc
    t["r_out"] = edges[1:] * scale * u.kpc
    kms = u.km / u.s
    for key in ("v_rot", "v_rot_err", "v_exp", "v_exp_err", "vsys", "vsys_err"):
        t[key] = rows[key] * kms
    for key in ("pa", "pa_err", "inc", "inc_err"):
        t[key] = rows[key] * u.deg
    t["xc"] = rows["xc"] * u.arcsec
    t["yc"] = rows["yc"] * u.arcsec
    t["n_pixels"] = rows["n_pixels"]
    t["n_beams"] = rows["n_pixels"] / meta["pixels_per_beam"]
    # pixels a fully measured ring would have: its sky area outside the two wedges
    inc = math.radians(min(geometry.inclination, MAX_FIT_INCLINATION))
    full = (math.pi * (edges[1:] ** 2 - edges[:-1] ** 2) * math.cos(inc)
            * (1 - meta["exclude_deg"] / 90.0) / meta["pixel"] ** 2)
    t["coverage"] = rows["n_pixels"] / full
    t.meta.update(meta)
    return t


def _peak_velocity(spec, vel):
    """Velocity of the spectrum's maximum, refined by a parabola through three channels."""
    k = int(np.argmax(spec))
    if 0 < k < spec.size - 1:
        a, b, c = spec[k - 1], spec[k], spec[k + 1]
        den = a - 2 * b + c
        shift = 0.5 * (a - c) / den if den < 0 else 0.0
        return vel[k] + shift * (vel[1] - vel[0])
    return vel[k]


def _side_mean(a, b):
    """Mean of the two sides where both exist, the one that exists otherwise, else NaN."""
    both = np.isfinite(a) & np.isfinite(b)
    return np.where(both, 0.5 * (a + b), np.where(np.isfinite(a), a, b))


def major_axis_curve(cube, grid, geometry, radii, position_angle=None, inclination=None,
                     systemic=None):
    """Long-slit rotation curve along the major axis at ``radii`` (arcsec).

    Parameters
    ----------
    cube : ndarray (ny, nx, nv)
        The cube inside the moment mask (zero elsewhere), so that noise peaks outside the
        emission are never taken for the line.
    grid : SkyGrid
    geometry : Geometry
    radii : ndarray (m,)
        arcsec from the centre along the major axis.
    position_angle, inclination, systemic : float, optional
        Slit geometry (deg, deg, km/s); default the true one of ``geometry``.

    Returns
    -------
    QTable: radius (arcsec, kpc), v_peak_receding/approaching, v_mean_receding/
    approaching, and v_rot_peak, v_rot_mean (km/s, both sides averaged, deprojected).
    """
    pa = math.radians(geometry.position_angle if position_angle is None else position_angle)
    inc = geometry.inclination if inclination is None else inclination
    vsys = geometry.systemic if systemic is None else systemic
    vel = grid.channel_velocities()
    radii = np.asarray(radii, float)
    out = {}
    for side, sign in (("receding", 1.0), ("approaching", -1.0)):
        px = grid.cx - sign * radii * math.sin(pa) / grid.pixel
        py = grid.cy + sign * radii * math.cos(pa) / grid.pixel
        coords = np.array([np.repeat(py, grid.nv), np.repeat(px, grid.nv),
                           np.tile(np.arange(grid.nv), radii.size)])
        spectra = ndimage.map_coordinates(cube, coords, order=1, mode="constant",
                                          cval=0.0).reshape(radii.size, grid.nv)
        peak, mean = np.full(radii.size, np.nan), np.full(radii.size, np.nan)
        for m, spec in enumerate(spectra):
            held = np.clip(spec, 0.0, None)
            if held.sum() <= 0:
                continue
            peak[m] = _peak_velocity(spec, vel)
            mean[m] = float(held @ vel / held.sum())
        out[side] = (peak, mean)
    sin_i = math.sin(math.radians(inc))
    t = QTable()
    kms = u.km / u.s
    t["radius_arcsec"] = radii * u.arcsec
    t["radius"] = radii * geometry.kpc_per_arcsec * u.kpc
    for i, what in enumerate(("peak", "mean")):
        rec, app = out["receding"][i], out["approaching"][i]
        t[f"v_{what}_receding"] = rec * kms
        t[f"v_{what}_approaching"] = app * kms
        t[f"v_rot_{what}"] = _side_mean(rec - vsys, vsys - app) / sin_i * kms
    t.meta["slit"] = {"pa": math.degrees(pa), "inc": inc, "vsys": vsys}
    return t
