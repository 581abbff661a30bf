"""Fast path: the total potential and forces interpolated on an (R, z) grid.

Nodes are uniform in x = asinh(R/s), y = asinh(z/s) with s the smallest vertical scale of
the model, so the grid is fine near the midplane and the centre and logarithmic far out.
The grid covers both signs of R and z (filled by symmetry: Phi and F_z even in R, F_R odd;
Phi and F_R even in z, F_z odd), so odd quantities need no special edge rule. Each of Phi,
F_R, F_z is interpolated by a cubic B-spline (C2, error O(h^4); coefficients from
scipy.ndimage.spline_filter, Unser 1999, IEEE Signal Processing Magazine 16, 22). Points
outside the grid, or within a few cells of the centre (cusps), use the exact evaluation.
"""
import math

import numpy as np
from numba import njit, prange
from scipy.ndimage import spline_filter

from .. import defaults


@njit(cache=True, error_model="numpy")
def _bspline_weights(t):
    """Cubic B-spline weights of the four nodes around a point at fraction t of a cell."""
    u = 1.0 - t
    return (u * u * u / 6.0, (3 * t * t * t - 6 * t * t + 4) / 6.0,
            (-3 * t * t * t + 3 * t * t + 3 * t + 1) / 6.0, t * t * t / 6.0)


@njit(cache=True, parallel=True, error_model="numpy")
def interpolate(R, z, s, h, x_max, c_phi, c_fr, c_fz, phi, f_r, f_z, outside):
    """B-spline interpolation of three coefficient grids at (R, z); ``outside[i]`` is set
    to True where the point lies beyond the grid or within 6 cells of the centre, where a
    cusp makes the force direction jump (values left untouched there)."""
    core = 6 * h
    edge = x_max - 12 * h   # the mirror rule of the spline prefilter spoils the last cells
    n = c_phi.shape[0]
    half = (n - 1) // 2
    for i in prange(R.shape[0]):
        x = math.asinh(R[i] / s)
        y = math.asinh(z[i] / s)
        if abs(x) > edge or abs(y) > edge or (
                abs(x) < core and abs(y) < core):
            outside[i] = True
            continue
        gx = x / h + half
        gy = y / h + half
        ix = int(math.floor(gx))
        iy = int(math.floor(gy))
        wx = _bspline_weights(gx - ix)
        wy = _bspline_weights(gy - iy)
        p, a, b = 0.0, 0.0, 0.0
        for di in range(4):
            for dj in range(4):
                w = wx[di] * wy[dj]
                p += w * c_phi[ix - 1 + di, iy - 1 + dj]
                a += w * c_fr[ix - 1 + di, iy - 1 + dj]
                b += w * c_fz[ix - 1 + di, iy - 1 + dj]
        phi[i] = p
        f_r[i] = a
        f_z[i] = b


class PotentialGrid:
    """Interpolation grid of an exact evaluator ``exact(R, z) -> (Phi, F_R, F_z)``."""

    def __init__(self, exact, s, r_max, per_unit=defaults.GRID_NODES_PER_ASINH_UNIT):
        self.s = float(s)
        x_max = math.asinh(r_max / s)
        half = int(math.ceil(x_max * per_unit))
        self.h = x_max / half
        self.x_max = x_max
        x = np.arange(-half, half + 1) * self.h
        xq = x[half:]                                     # x >= 0 quadrant
        R, Z = np.meshgrid(s * np.sinh(xq), s * np.sinh(xq), indexing="ij")
        phi, f_r, f_z = (a.reshape(R.shape) for a in exact(R.ravel(), Z.ravel()))
        self.coeffs = tuple(spline_filter(_unfold(q, sr, sz), order=3, mode="mirror")
                            for q, sr, sz in ((phi, 1, 1), (f_r, -1, 1), (f_z, 1, -1)))

    def evaluate(self, R, z):
        """(Phi, F_R, F_z, outside) at flat float64 arrays R, z."""
        n = R.shape[0]
        phi, f_r, f_z = np.empty(n), np.empty(n), np.empty(n)
        outside = np.zeros(n, dtype=np.bool_)
        interpolate(R, z, self.s, self.h, self.x_max, *self.coeffs, phi, f_r, f_z, outside)
        return phi, f_r, f_z, outside


def _unfold(q, sign_r, sign_z):
    """Quadrant (x >= 0, y >= 0) -> full grid using the parities in R and z."""
    top = np.concatenate([sign_r * q[:0:-1], q], axis=0)          # R < 0 rows first
    return np.concatenate([sign_z * top[:, :0:-1], top], axis=1)
