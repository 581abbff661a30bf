"""Orbits of test particles in a frozen axisymmetric potential: kick-drift-kick leapfrog.

The leapfrog (Verlet 1967, Phys. Rev. 159, 98; kick-drift-kick form as in Springel 2005,
MNRAS 364, 1105, sect. 3) is symplectic and time-reversible: for a fixed step its energy
error stays bounded and oscillates, of order (Omega dt)^2, instead of growing (Hairer,
Lubich & Wanner 2003, Acta Numerica 12, 399). It works in Cartesian coordinates; the
force of the axisymmetric potential, (F_R, F_z) at R = sqrt(x^2 + y^2), is projected on
x and y. Neither the kick (force along (x, y)/R and z) nor the drift exerts a torque about
the z axis, so L_z = x v_y - y v_x is kept to round-off at every step: the discrete form
of Noether's theorem for the rotational symmetry.

Particles in a frozen potential do not interact, so each may have its own constant step
without losing any of this: particle i takes m_i steps per interval, m_i a power of two,
and all particles meet at the ends of the intervals (the block steps of Makino 1991,
PASJ 43, 859, here with no coupling between blocks). Particles are kept sorted by m_i,
finest first, so the particles due for a force at a sub-step are a prefix of the arrays.

Layers: numba kernels over flat float64 arrays (parallel over particles, no checks), the
:class:`Orbits` driver that calls them with a force function, and the public diagnostics
(icgen.diagnostics.drift) that check the input. Units: kpc, km/s, (km/s)^2/kpc, time in
kpc/(km/s) (= 0.97779 Gyr, icgen.units).
"""
import math

import numba
import numpy as np
from numba import njit, prange

__all__ = ["kick", "kick_drift", "cylindrical_radius", "specific_energy",
           "angular_momentum_z", "pericentre", "substeps", "Orbits"]


@njit(cache=True, parallel=True)
def kick(x, y, vx, vy, vz, f_r, f_z, dt):
    """v += F dt_i for every particle (in place), F = (F_R x/R, F_R y/R, F_z); dt (N,).

    On the z axis (R = 0) F_R vanishes by symmetry, so the in-plane kick is zero.
    """
    for i in prange(x.shape[0]):
        R = math.sqrt(x[i] * x[i] + y[i] * y[i])
        if R > 0.0:
            a = f_r[i] * dt[i] / R
            vx[i] += a * x[i]
            vy[i] += a * y[i]
        vz[i] += f_z[i] * dt[i]


@njit(cache=True, parallel=True)
def kick_drift(x, y, z, vx, vy, vz, f_r, f_z, dt, kick_factor, R_out):
    """A kick of ``kick_factor * dt_i`` then a drift of ``dt_i`` (in place); R_out gets
    the new sqrt(x^2 + y^2) for the next force call. dt (N,), internal time units.

    One parallel loop instead of three: each parallel region costs a thread barrier,
    which dominates for the small particle sets of the finest steps.
    """
    for i in prange(x.shape[0]):
        R = math.sqrt(x[i] * x[i] + y[i] * y[i])
        h = kick_factor * dt[i]
        if R > 0.0:
            a = f_r[i] * h / R
            vx[i] += a * x[i]
            vy[i] += a * y[i]
        vz[i] += f_z[i] * h
        x[i] += vx[i] * dt[i]
        y[i] += vy[i] * dt[i]
        z[i] += vz[i] * dt[i]
        R_out[i] = math.sqrt(x[i] * x[i] + y[i] * y[i])


@njit(cache=True, parallel=True)
def cylindrical_radius(x, y, out):
    """out = sqrt(x^2 + y^2) (in place)."""
    for i in prange(x.shape[0]):
        out[i] = math.sqrt(x[i] * x[i] + y[i] * y[i])


@njit(cache=True, parallel=True)
def specific_energy(vx, vy, vz, phi, out):
    """out = (vx^2 + vy^2 + vz^2)/2 + Phi, (km/s)^2 (in place)."""
    for i in prange(vx.shape[0]):
        out[i] = 0.5 * (vx[i] * vx[i] + vy[i] * vy[i] + vz[i] * vz[i]) + phi[i]


@njit(cache=True, parallel=True)
def angular_momentum_z(x, y, vx, vy, out):
    """out = x v_y - y v_x, kpc km/s (in place)."""
    for i in prange(x.shape[0]):
        out[i] = x[i] * vy[i] - y[i] * vx[i]


@njit(cache=True)
def _interp(lnr, lnr0, dlnr, table):
    """Linear interpolation of a table uniform in ln r (clamped at both ends)."""
    t = (lnr - lnr0) / dlnr
    n = table.shape[0]
    if t <= 0.0:
        return table[0]
    if t >= n - 1:
        return table[n - 1]
    k = int(t)
    w = t - k
    return (1.0 - w) * table[k] + w * table[k + 1]


@njit(cache=True, parallel=True)
def pericentre(r, v2, L2, lnr0, dlnr, phi_tab, out):
    """Pericentre radius r_p (kpc) of each particle in a spherical approximation.

    Phi(r) is a table uniform in ln r (icgen uses the midplane of the model); the
    particle's energy is taken as E = v^2/2 + Phi(r) at its radius r, so r lies inside
    the allowed range, and r_p is the smallest root of 2 (E - Phi(r_p)) = L^2 / r_p^2
    (Binney & Tremaine 2008, sect. 3.1), found by bisection in ln r; orbits that reach the
    first table node (radial ones) get r_p = exp(lnr0).
    """
    for i in prange(r.shape[0]):
        lnr = math.log(r[i])
        e = 0.5 * v2[i] + _interp(lnr, lnr0, dlnr, phi_tab)
        lo = lnr0
        hi = lnr
        if 2.0 * (e - _interp(lo, lnr0, dlnr, phi_tab)) - L2[i] * math.exp(-2.0 * lo) < 0.0:
            for _ in range(60):
                mid = 0.5 * (lo + hi)
                g = 2.0 * (e - _interp(mid, lnr0, dlnr, phi_tab)) - L2[i] * math.exp(-2.0 * mid)
                if g < 0.0:
                    lo = mid
                else:
                    hi = mid
            out[i] = math.exp(hi)
        else:
            out[i] = math.exp(lo)


# Below this many particles a sub-step runs on one thread: a parallel region costs a
# thread barrier (~10 us idle, milliseconds on a busy machine) and the force call opens
# several; measured on 2 cores, one thread is faster for 1e3 particles even when idle and
# up to 10x faster when other processes compete for the cores.
SERIAL_BELOW = 8192


def substeps(interval, timescale, accuracy, max_level):
    """Steps per interval for each particle: the smallest power of two 2^k with
    interval / 2^k <= accuracy * timescale, capped at k = max_level.

    Returns
    -------
    m : (N,) int64
    capped : (N,) bool
        Particles that wanted a finer step than the cap allows.
    """
    want = interval / (accuracy * np.asarray(timescale, float))
    k = np.ceil(np.log2(np.maximum(want, 1.0)))
    k = np.where(np.isfinite(k), k, 0.0)
    capped = k > max_level
    return (2 ** np.minimum(k, max_level)).astype(np.int64), capped


class Orbits:
    """Positions and velocities of N test particles and their leapfrog in a frozen potential.

    Parameters
    ----------
    position : (N, 3) array, kpc
    velocity : (N, 3) array, km/s
    evaluate : callable
        ``evaluate(R, z) -> (Phi, F_R, F_z)`` on flat float64 arrays, e.g.
        ``GalaxyModel.potential.evaluate``; units (km/s)^2 and (km/s)^2/kpc.
    steps : (N,) int array or int
        Steps each particle takes per call of :meth:`advance`; powers of two (or all
        equal), so that every coarser step boundary is also a finer one.

    Notes
    -----
    The state is six contiguous 1-D arrays sorted by ``steps``, finest first: particle
    ``k`` of these arrays is input particle ``order[k]``. Between calls of :meth:`advance`
    positions and velocities are synchronous (same time).
    """

    def __init__(self, position, velocity, evaluate, steps=1):
        pos = np.asarray(position, dtype=np.float64)
        vel = np.asarray(velocity, dtype=np.float64)
        steps = np.broadcast_to(np.asarray(steps, dtype=np.int64), pos.shape[:1])
        self.order = np.argsort(-steps, kind="stable")
        self.steps = np.ascontiguousarray(steps[self.order])
        self.x, self.y, self.z = (np.ascontiguousarray(pos[self.order, k]) for k in range(3))
        self.vx, self.vy, self.vz = (np.ascontiguousarray(vel[self.order, k]) for k in range(3))
        self.evaluate = evaluate
        levels, first = np.unique(-self.steps, return_index=True)
        # (steps, number of particles with at least that many steps), coarsest first
        self._levels = [(int(-m), int(n)) for m, n in
                        zip(levels[::-1], np.append(first[1:], self.steps.size)[::-1])]
        self._R = np.empty_like(self.x)
        cylindrical_radius(self.x, self.y, self._R)
        self.force_calls = 0
        self.force_evaluations = 0
        n = self.x.size
        self._phi, self._f_r, self._f_z = np.empty(n), np.empty(n), np.empty(n)
        self._forces(n)

    def __len__(self):
        return self.x.shape[0]

    def _forces(self, n):
        """Forces and potential of the first n particles (the ones due)."""
        self.force_calls += 1
        self.force_evaluations += n
        phi, f_r, f_z = self.evaluate(self._R[:n], self.z[:n])
        self._phi[:n], self._f_r[:n], self._f_z[:n] = phi, f_r, f_z

    def _due(self, j, m_max):
        """Number of particles (a prefix) with a step boundary at sub-step j."""
        for m, n in self._levels:          # coarsest first: its particles and all finer
            if j % (m_max // m) == 0:
                return n
        return 0

    def advance(self, interval):
        """Advance every particle by ``interval`` (internal time units) in its own steps.

        Each particle's closing half kick and next opening half kick are merged into one
        full kick, so a particle costs one force evaluation per step.
        """
        dt = interval / self.steps
        m_max = int(self.steps[0]) if self.steps.size else 0
        threads = numba.get_num_threads()
        try:
            for j in range(m_max):
                n = self._due(j, m_max)
                numba.set_num_threads(1 if n < SERIAL_BELOW else threads)
                kick_drift(self.x[:n], self.y[:n], self.z[:n], self.vx[:n], self.vy[:n],
                           self.vz[:n], self._f_r[:n], self._f_z[:n], dt[:n],
                           0.5 if j == 0 else 1.0, self._R[:n])
                self._forces(n)
        finally:
            numba.set_num_threads(threads)
        kick(self.x, self.y, self.vx, self.vy, self.vz, self._f_r, self._f_z, 0.5 * dt)

    def energy(self):
        """Specific energy E = v^2/2 + Phi per particle, (km/s)^2, sorted order."""
        out = np.empty_like(self.x)
        specific_energy(self.vx, self.vy, self.vz, self._phi, out)
        return out

    def lz(self):
        """Specific angular momentum about the z axis per particle, kpc km/s, sorted order."""
        out = np.empty_like(self.x)
        angular_momentum_z(self.x, self.y, self.vx, self.vy, out)
        return out

    @property
    def position(self):
        """(N, 3) positions in the input order, kpc."""
        out = np.empty((self.x.size, 3))
        out[self.order] = np.column_stack([self.x, self.y, self.z])
        return out

    @property
    def velocity(self):
        """(N, 3) velocities in the input order, km/s."""
        out = np.empty((self.x.size, 3))
        out[self.order] = np.column_stack([self.vx, self.vy, self.vz])
        return out
