"""Orbits of test particles in a frozen axisymmetric potential: kick-drift-kick leapfrog.

The leapfrog (Verlet 1967, Phys. Rev. 159, 98; kick-drift-kick form as in Springel 2005,
MNRAS 364, 1105, sect. 3) is symplectic and time-reversible: for a fixed step its energy
error stays bounded and oscillates, of order (Omega dt)^2, instead of growing (Hairer,
Lubich & Wanner 2003, Acta Numerica 12, 399). It works in Cartesian coordinates; the
force of the axisymmetric potential, (F_R, F_z) at R = sqrt(x^2 + y^2), is projected on
x and y. Neither the kick (force along (x, y)/R and z) nor the drift exerts a torque about
the z axis, so L_z = x v_y - y v_x is kept to round-off at every step: the discrete form
of Noether's theorem for the rotational symmetry.

Particles in a frozen potential do not interact, so each has its own constant step
(m_i steps per output interval) and its whole orbit over an interval is one loop of a
numba kernel, with the force of the model evaluated inline (icgen.potential.field: the
same numbers ``CombinedPotential.evaluate`` gives). Particles go to worker threads in
chunks, costliest first; the result does not depend on the chunks or the thread count.
Where the inline force has no answer (off the grid of a model with a gas disk, or any
point when no field is given) the particle stops half-way through its step, Python
evaluates the force for all stopped particles at once, and the kernel resumes them.

Units: kpc, km/s, (km/s)^2/kpc, time in kpc/(km/s) (= 0.97779 Gyr, icgen.units).
"""
import math
from concurrent.futures import ThreadPoolExecutor
from typing import Protocol, runtime_checkable

import numba
import numpy as np
from numba import njit, prange

from .potential.field import NO_FIELD, force

__all__ = ["Integrator", "leapfrog", "specific_energy", "pericentre", "substeps", "Orbits"]


@runtime_checkable
class Integrator(Protocol):
    """What a run that follows particles in time needs from their integrator.

    :class:`Orbits` (test particles in a frozen potential) is one; a self-gravitating
    integrator can be another. Arrays are fresh copies in the original particle order;
    kpc, km/s, time in kpc/(km/s).

    Attributes
    ----------
    steps_taken : int
        Particle steps taken so far (summed over the particles).
    force_calls : int
        Force evaluations made outside the compiled kernel so far.
    """

    steps_taken: int
    force_calls: int

    def __len__(self) -> int:
        """Number of particles N."""

    def advance(self, interval: float) -> None:
        """Advance every particle by ``interval``; positions and velocities are then
        synchronous."""

    def positions(self) -> np.ndarray:
        """(N, 3) positions, kpc."""

    def velocities(self) -> np.ndarray:
        """(N, 3) velocities, km/s."""

    def energies(self) -> np.ndarray:
        """(N,) specific energies v^2/2 + Phi, (km/s)^2."""

    def nonfinite(self) -> int:
        """Number of particles whose position or velocity is NaN or infinite."""


@njit(cache=True, parallel=True)
def specific_energy(vx, vy, vz, phi, out):
    """out = (vx^2 + vy^2 + vz^2)/2 + Phi, (km/s)^2 (in place)."""
    for i in prange(vx.shape[0]):
        out[i] = 0.5 * (vx[i] * vx[i] + vy[i] * vy[i] + vz[i] * vz[i]) + phi[i]


@njit(cache=True)
def _interp(lnr, lnr0, dlnr, table):
    """Linear interpolation of a table uniform in ln r (clamped at both ends; NaN for a
    NaN lnr, which must not become an index)."""
    t = (lnr - lnr0) / dlnr
    n = table.shape[0]
    if t != t:
        return math.nan
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
    first table node (radial ones) get r_p = exp(lnr0); a NaN energy gives NaN.
    """
    for i in prange(r.shape[0]):
        lnr = math.log(r[i])
        e = 0.5 * v2[i] + _interp(lnr, lnr0, dlnr, phi_tab)
        if e != e:
            out[i] = math.nan
            continue
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


@njit(cache=True, error_model="numpy", inline="always")
def _kick(u, v, w, x, y, R, f_r, f_z, dt):
    """Velocity after a kick of dt by the force (F_R x/R, F_R y/R, F_z); F_R = 0 on the
    axis by symmetry."""
    a = f_r * dt / R if R > 0.0 else 0.0
    return u + a * x, v + a * y, w + f_z * dt


# _nrt=False: no reference counting in this kernel (it allocates nothing and only reads
# the caller's arrays); numba's own library code uses the option. Counting the arrays of
# the field at every force call cost ~55 ns of the ~215 ns of a step (measured).
@njit(cache=True, nogil=True, error_model="numpy", _nrt=False)
def leapfrog(idx, x, y, z, vx, vy, vz, f_r, f_z, dt, steps, done, waiting, field):
    """Advance particles ``idx`` until each has taken ``steps[i]`` steps of ``dt[i]``
    (``done[i]`` counts them), all arrays (N,) float64 / int64 / bool, in place.

    ``f_r, f_z`` hold the force at each particle's position. A step is a half kick, a
    drift and a half kick; the force after the drift comes from ``potential.field.force``.
    Where that has none the particle stops with ``waiting[i]`` set; the caller stores the
    force at its new position in ``f_r, f_z`` and calls again, which first completes the
    stopped step.
    """
    p, c_force, codes, gms, scales, layers, rn, pt, dpt, d2pt = field
    for j in range(idx.shape[0]):
        i = idx[j]
        h = 0.5 * dt[i]
        xi, yi, zi, ui, vi, wi = x[i], y[i], z[i], vx[i], vy[i], vz[i]
        fr, fz = f_r[i], f_z[i]
        k = done[i]
        R = math.sqrt(xi * xi + yi * yi)
        if waiting[i]:                       # the closing half kick of the stopped step
            waiting[i] = False
            ui, vi, wi = _kick(ui, vi, wi, xi, yi, R, fr, fz, h)
            k += 1
        while k < steps[i]:
            ui, vi, wi = _kick(ui, vi, wi, xi, yi, R, fr, fz, h)
            xi += 2.0 * h * ui
            yi += 2.0 * h * vi
            zi += 2.0 * h * wi
            R = math.sqrt(xi * xi + yi * yi)
            found, fr, fz = force(R, zi, p, c_force, codes, gms, scales, layers, rn, pt, dpt,
                                  d2pt)
            if not found:
                waiting[i] = True
                break
            ui, vi, wi = _kick(ui, vi, wi, xi, yi, R, fr, fz, h)
            k += 1
        x[i], y[i], z[i], vx[i], vy[i], vz[i] = xi, yi, zi, ui, vi, wi
        f_r[i], f_z[i] = fr, fz
        done[i] = k


#: Chunks of work per thread and call: enough to even out the threads' loads, few
#: enough that handing them out costs nothing measurable.
TASKS_PER_THREAD = 16


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
    """Positions and velocities of N test particles and their leapfrog in a frozen
    potential: an :class:`Integrator`.

    Parameters
    ----------
    position : (N, 3) array, kpc
    velocity : (N, 3) array, km/s
    evaluate : callable
        ``evaluate(R, z) -> (Phi, F_R, F_z)`` on flat float64 arrays, e.g.
        ``MassModel.potential.evaluate``; units (km/s)^2 and (km/s)^2/kpc.
    steps : (N,) int array or int
        Steps each particle takes per call of :meth:`advance`.
    field : tuple, optional
        ``icgen.potential.field.force_field(potential)`` of the same potential, for the
        inline forces; None: every force comes from ``evaluate`` (slow; for tests and
        potentials that have no field).
    threads : int, optional
        Worker threads (default: numba's thread count).

    Notes
    -----
    The state is six contiguous 1-D arrays sorted by ``steps``, most first: particle ``k``
    of these arrays is input particle ``order[k]``. Between calls of :meth:`advance`
    positions and velocities are synchronous (same time).
    """

    def __init__(self, position, velocity, evaluate, steps=1, field=None, threads=None):
        pos = np.asarray(position, dtype=np.float64)
        vel = np.asarray(velocity, dtype=np.float64)
        steps = np.broadcast_to(np.asarray(steps, dtype=np.int64), pos.shape[:1])
        self.order = np.argsort(-steps, kind="stable")
        self.steps = np.ascontiguousarray(steps[self.order])
        self.x, self.y, self.z = (np.ascontiguousarray(pos[self.order, k]) for k in range(3))
        self.vx, self.vy, self.vz = (np.ascontiguousarray(vel[self.order, k]) for k in range(3))
        self.evaluate = evaluate
        self.field = NO_FIELD if field is None else field
        self.threads = threads or numba.get_num_threads()
        n = self.x.size
        self._done = np.zeros(n, np.int64)
        self._waiting = np.zeros(n, np.bool_)
        self.force_calls = 0          # calls of ``evaluate`` during the orbits
        self.steps_taken = 0
        self._phi, self._f_r, self._f_z = self._evaluate(np.arange(n))

    def __len__(self):
        return self.x.shape[0]

    def _evaluate(self, idx):
        x, y = self.x[idx], self.y[idx]
        R = np.sqrt(x * x + y * y)            # as the kernel computes it, for equal bits
        return tuple(np.ascontiguousarray(a) for a in self.evaluate(R, self.z[idx]))

    def _run(self, idx, dt, pool):
        """Run the kernel on particles ``idx`` in about TASKS_PER_THREAD x threads chunks
        of equal work (steps left), in order: the particles are sorted costliest first, so
        the thread that frees up next takes the next costliest chunk."""
        args = (self.x, self.y, self.z, self.vx, self.vy, self.vz, self._f_r, self._f_z,
                dt, self.steps, self._done, self._waiting, self.field)
        if pool is None:
            leapfrog(idx, *args)
            return
        work = np.cumsum(self.steps[idx] - self._done[idx])
        tasks = TASKS_PER_THREAD * self.threads
        cuts = np.searchsorted(work, work[-1] * np.arange(1, tasks) / tasks, side="right")
        chunks = [c for c in np.split(idx, np.unique(cuts)) if c.size]
        for _ in pool.map(lambda c: leapfrog(c, *args), chunks):
            pass

    def advance(self, interval):
        """Advance every particle by ``interval`` (internal time units) in its own steps."""
        dt = interval / self.steps
        self._done[:] = 0
        idx = np.arange(self.x.size)
        pool = ThreadPoolExecutor(self.threads) if self.threads > 1 else None
        try:
            while idx.size:
                self._run(idx, dt, pool)
                idx = np.flatnonzero(self._waiting)
                if idx.size:
                    _, self._f_r[idx], self._f_z[idx] = self._evaluate(idx)
                    self.force_calls += 1
        finally:
            if pool is not None:
                pool.shutdown()
        self.steps_taken += int(self.steps.sum())
        self._phi = self._evaluate(np.arange(self.x.size))[0]

    def nonfinite(self):
        """Number of particles whose position or velocity is NaN or infinite (an orbit
        that overflowed)."""
        bad = np.zeros(self.x.size, np.bool_)
        for a in (self.x, self.y, self.z, self.vx, self.vy, self.vz):
            bad |= ~np.isfinite(a)
        return int(np.count_nonzero(bad))

    def _unsorted(self, a):
        """Per-particle values ``a`` of the sorted state, in the input order."""
        out = np.empty_like(a)
        out[self.order] = a
        return out

    def energies(self):
        """(N,) specific energies E = v^2/2 + Phi, (km/s)^2, input order."""
        out = np.empty_like(self.x)
        specific_energy(self.vx, self.vy, self.vz, self._phi, out)
        return self._unsorted(out)

    def positions(self):
        """(N, 3) positions in the input order, kpc."""
        return self._unsorted(np.column_stack([self.x, self.y, self.z]))

    def velocities(self):
        """(N, 3) velocities in the input order, km/s."""
        return self._unsorted(np.column_stack([self.vx, self.vy, self.vz]))
