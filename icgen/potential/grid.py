"""Fast path: the total potential and forces interpolated on an (R, z) grid.

Nodes are uniform in x = asinh(R/s), y = asinh(z/s) with s the smallest vertical scale of
the model, so the grid is fine near the midplane and the centre and logarithmic far out.
The grid covers both signs of R and z (filled by symmetry: Phi and F_z even in R, F_R odd;
Phi and F_R even in z, F_z odd), so odd quantities need no special edge rule. Each of Phi,
F_R, F_z is interpolated by a cubic B-spline (C2, error O(h^4); coefficients from
scipy.ndimage.spline_filter, Unser 1999, IEEE Signal Processing Magazine 16, 22). Points
outside the grid, or within a few cells of the centre, use the exact evaluation: there a
cusp's force changes direction (NFW) and an exponential disk's goes as R ln R (Freeman 1970,
ApJ 160, 811, eq. 10 as y -> 0), which a spline of fixed cells resolves only to ~1e-3 of
|F| (measured without this rule).
"""
import math

import numpy as np
from numba import njit, prange
from scipy.ndimage import spline_filter

from .. import defaults

SIXTH = 1.0 / 6.0


@njit(cache=True, error_model="numpy", inline="always")
def _bspline_weights(t):
    """Cubic B-spline weights of the four nodes around a point at fraction t of a cell."""
    u = 1.0 - t
    t2 = t * t
    t3 = t2 * t
    return (SIXTH * u * u * u, SIXTH * (3 * t3 - 6 * t2 + 4),
            SIXTH * (-3 * t3 + 3 * t2 + 3 * t + 1), SIXTH * t3)


@njit(cache=True, error_model="numpy", inline="always")
def _asinh(u):
    """asinh(u) = sign(u) ln(|u| + sqrt(1 + u^2)): absolute error ~1e-16 (a grid coordinate
    needs no more), and twice as fast as libm's asinh."""
    a = abs(u)
    return math.copysign(math.log(a + math.sqrt(1.0 + a * a)), u)


@njit(cache=True, error_model="numpy", inline="always")
def locate(R, z, s, h, x_max, core, half):
    """Cell of (R, z) on the grid: (inside, ix, iy, tx, ty). ``inside`` is False beyond
    12 cells of the edge (the mirror rule of the spline prefilter spoils the last cells),
    within ``core`` (asinh units) of the centre, and for a NaN or infinite R or z (the
    comparisons are written so that NaN fails them: int(NaN) would index anywhere)."""
    x = _asinh(R / s)
    y = _asinh(z / s)
    edge = x_max - 12 * h
    if not (abs(x) <= edge and abs(y) <= edge) or (abs(x) < core and abs(y) < core):
        return False, 0, 0, 0.0, 0.0
    gx = x / h + half           # > 0 inside
    gy = y / h + half
    ix = int(gx)
    iy = int(gy)
    return True, ix, iy, gx - ix, gy - iy


@njit(cache=True, error_model="numpy", inline="always")
def _spline_sum(ix, iy, wx, w0, w1, w2, w3, c, j):
    """B-spline sum of slot j of the coefficients c[i, k, j] on a cell, with the weights
    wx (x direction, 4 values) and w0..w3 (y direction)."""
    p = 0.0
    for di in range(4):
        k = ix - 1 + di
        p += wx[di] * (w0 * c[k, iy - 1, j] + w1 * c[k, iy, j] + w2 * c[k, iy + 1, j]
                       + w3 * c[k, iy + 2, j])
    return p


@njit(cache=True, error_model="numpy", inline="always")
def spline_force(ix, iy, tx, ty, c):
    """(F_R, F_z): B-spline sums on a cell of the interleaved coefficients c[i, j, 0:2]."""
    wx = _bspline_weights(tx)
    w0, w1, w2, w3 = _bspline_weights(ty)
    return (_spline_sum(ix, iy, wx, w0, w1, w2, w3, c, 0),
            _spline_sum(ix, iy, wx, w0, w1, w2, w3, c, 1))


@njit(cache=True, error_model="numpy", inline="always")
def spline_potential(ix, iy, tx, ty, c):
    """Phi: the B-spline sum on a cell of the coefficients c[i, j, 0]."""
    wx = _bspline_weights(tx)
    w0, w1, w2, w3 = _bspline_weights(ty)
    return _spline_sum(ix, iy, wx, w0, w1, w2, w3, c, 0)


@njit(cache=True, parallel=True, error_model="numpy")
def interpolate(R, z, s, h, x_max, core, c_phi, c_force, phi, f_r, f_z, outside):
    """B-spline interpolation of Phi and (F_R, F_z) at (R, z); ``outside[i]`` is set to
    True where :func:`locate` puts the point off the grid (values left untouched)."""
    half = (c_phi.shape[0] - 1) // 2
    for i in prange(R.shape[0]):
        inside, ix, iy, tx, ty = locate(R[i], z[i], s, h, x_max, core, half)
        if not inside:
            outside[i] = True
            continue
        phi[i] = spline_potential(ix, iy, tx, ty, c_phi)
        f_r[i], f_z[i] = spline_force(ix, iy, tx, ty, c_force)


class PotentialGrid:
    """Interpolation grid of an exact evaluator ``exact(R, z) -> (Phi, F_R, F_z)``."""

    def __init__(self, exact, s, r_max, core_cells=16, per_unit=defaults.GRID_NODES_PER_ASINH_UNIT):
        self.s = float(s)
        x_max = math.asinh(r_max / s)
        half = int(math.ceil(x_max * per_unit))
        self.h = x_max / half
        self.x_max = x_max
        self.core = core_cells * self.h
        x = np.arange(-half, half + 1) * self.h
        xq = x[half:]                                     # x >= 0 quadrant
        R, Z = np.meshgrid(s * np.sinh(xq), s * np.sinh(xq), indexing="ij")
        phi, f_r, f_z = (a.reshape(R.shape) for a in exact(R.ravel(), Z.ravel()))
        c_phi, c_fr, c_fz = (spline_filter(_unfold(q, sr, sz), order=3, mode="mirror")
                             for q, sr, sz in ((phi, 1, 1), (f_r, -1, 1), (f_z, 1, -1)))
        self.c_phi = np.ascontiguousarray(c_phi[:, :, None])      # one slot, as c_force
        self.c_force = np.ascontiguousarray(np.stack([c_fr, c_fz], axis=-1))

    def evaluate(self, R, z):
        """(Phi, F_R, F_z, outside) at flat float64 arrays R, z."""
        n = R.shape[0]
        phi, f_r, f_z = np.empty(n), np.empty(n), np.empty(n)
        outside = np.zeros(n, dtype=np.bool_)
        interpolate(R, z, self.s, self.h, self.x_max, self.core, self.c_phi, self.c_force,
                    phi, f_r, f_z, outside)
        return phi, f_r, f_z, outside


def _unfold(q, sign_r, sign_z):
    """Quadrant (x >= 0, y >= 0) -> full grid using the parities in R and z."""
    top = np.concatenate([sign_r * q[:0:-1], q], axis=0)          # R < 0 rows first
    return np.concatenate([sign_z * top[:, :0:-1], top], axis=1)
