"""The total force of a CombinedPotential as plain arrays, for numba code that needs it one
point at a time (the orbit integrator).

:func:`force_field` packs the pieces the fast path of ``CombinedPotential.evaluate`` sums:
the grid of disks and tabulated spheroids (potential/grid.py), closed-form spheres, and for
points off the grid the exact pieces (Dehnen & Binney 1998 thin layers of stellar disks
plus the multipole table). :func:`force` sums them with the same per-point
kernels, so it returns what ``evaluate`` returns, to the last bit. Gas layers are scipy
splines with no numba form: off the grid, a model with gas answers "not found" and the
caller asks ``evaluate``.

The field is one flat tuple. Unpack it once, outside the loop over points, and pass the
pieces to :func:`force` (inlined): unpacking a tuple of arrays per call costs a reference
count per array, about 100 ns per force, and numba cannot inline a ``*field`` call.
"""
import math

import numpy as np
from numba import njit

from . import kernels
from .grid import locate, spline_force

_NO_TABLE = (0.0, 1.0, np.ones(2), np.zeros((2, 1)), np.zeros((2, 1)), np.zeros((2, 1)))

# Numbers of a field, one float64 array (flags 0/1): the positions in it.
(USABLE, HAS_GRID, GRID_S, GRID_H, GRID_XMAX, GRID_CORE, GRID_HALF, INLINE, HAS_TABLE,
 TABLE_LNR0, TABLE_H) = range(11)


def _pack(usable, grid, table, spheres, layers, inline):
    """The flat field tuple: (numbers, c_force, codes, gm, a, layers, r, phi_l, dphi_l,
    d2phi_l); numbers at the positions above."""
    t_l0, t_h, *t_arr = _NO_TABLE if table is None else (table.lnr0, table.h, table.r,
                                                          *table.kernel_arrays())
    if grid is not None:
        g = (grid.s, grid.h, grid.x_max, grid.core, (grid.c_force.shape[0] - 1) // 2)
        c_force = grid.c_force
    else:
        g, c_force = (1.0, 1.0, 0.0, 0.0, 0), np.zeros((1, 1, 2))
    numbers = np.array([usable, grid is not None, *g, inline, table is not None, t_l0, t_h],
                       dtype=np.float64)
    return (numbers, c_force, *spheres, layers, *t_arr)


def force_field(potential):
    """The total force of ``potential`` (a CombinedPotential) as a flat tuple for
    :func:`force`. Units: kpc, (km/s)^2/kpc."""
    terms = potential.sphere_terms()
    spheres = (np.array([t[0] for t in terms], np.int64), np.array([t[1] for t in terms]),
               np.array([t[2] for t in terms]))
    return _pack(True, potential.grid, potential.smooth_table(), spheres,
                 potential.stellar_layers(), not potential.has_python_layers())


#: A field with no answer anywhere: every force then comes from the caller's evaluate.
NO_FIELD = _pack(False, None, None, (np.zeros(0, np.int64), np.zeros(0), np.zeros(0)),
                 np.zeros((0, 6)), False)


@njit(cache=True, error_model="numpy", inline="always")
def force(R, z, p, c_force, codes, gms, scales, layers, rn, pt, dpt, d2pt):
    """(found, F_R, F_z) of a field at one point, R >= 0 and z in kpc; ``found`` is False
    (forces 0) where only ``CombinedPotential.evaluate`` can give the answer. The sums run
    in the order ``evaluate`` uses, for equal bits."""
    if p[USABLE] == 0.0:
        return False, 0.0, 0.0
    f_r, f_z = 0.0, 0.0
    inside = False
    if p[HAS_GRID] != 0.0:
        inside, ix, iy, tx, ty = locate(R, z, p[GRID_S], p[GRID_H], p[GRID_XMAX],
                                        p[GRID_CORE], int(p[GRID_HALF]))
        if inside:
            f_r, f_z = spline_force(ix, iy, tx, ty, c_force)
    if not inside:
        if p[INLINE] == 0.0:
            return False, 0.0, 0.0
        for k in range(layers.shape[0]):
            _, a, b = kernels.thin_layer_point(R, z, layers[k, 0], layers[k, 1], layers[k, 2],
                                               layers[k, 3], layers[k, 4], int(layers[k, 5]))
            f_r += a
            f_z += b
        if p[HAS_TABLE] != 0.0:
            _, a, b = kernels.multipole_point(R, z, p[TABLE_LNR0], p[TABLE_H], rn, pt, dpt,
                                              d2pt)
            f_r += a
            f_z += b
    r = math.sqrt(R * R + z * z)
    if r > 0:
        for k in range(codes.shape[0]):
            _, d = kernels.sphere_point(r, codes[k], gms[k], scales[k])
            f_r -= d * R / r
            f_z -= d * z / r
    return True, f_r, f_z


@njit(cache=True, error_model="numpy")
def force_at(R, z, field):
    """:func:`force` for one point and a packed field (tests, single points)."""
    p, c_force, codes, gms, scales, layers, rn, pt, dpt, d2pt = field
    return force(R, z, p, c_force, codes, gms, scales, layers, rn, pt, dpt, d2pt)
