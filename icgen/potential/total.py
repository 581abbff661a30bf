"""Total potential of a galaxy model: closed-form spheres, Dehnen & Binney (1998) thin
layers of the disks, and one multipole expansion of everything else.

Exact evaluation keeps the expansion as radial tables of Phi_l(r) (cubic Hermite in ln r)
summed over P_l(mu) at each point; the fast path interpolates that sum on an (R, z) B-spline
grid (potential/grid.py). Midplane v_c, Omega and kappa are tabulated once and splined.
"""
import numpy as np
from scipy.interpolate import CubicSpline

from .. import defaults
from ..units import G
from . import kernels
from .field import force_field
from .grid import PotentialGrid
from .multipole import radial_grid, solve

class CombinedPotential:
    """Potential of a list of components (profiles.* objects).

    Parameters
    ----------
    components : list
        Component objects with ``name``, ``scale``, ``extent``, ``analytic_terms()`` and
        ``multipole_density()``; optionally ``lmax`` (highest harmonic of their density,
        0 for a sphere), ``z_d`` (a vertical scale), ``thin_layer_params()`` (a stellar
        disk's Dehnen & Binney layer, numba-ready) or ``add_layer(...)`` (a layer
        evaluated in Python: the gas).
    lmax : int
        Highest even harmonic for components that do not give their own.
    """

    def __init__(self, components, lmax=defaults.DISK_LMAX, grid=True):
        self.components = {c.name: c for c in components}
        scales = [c.scale for c in components if c.scale > 0] or [1.0]
        extents = [c.extent for c in components if c.extent > 0] or [1.0]
        self.r_grid = radial_grid(defaults.RADIAL_INNER_FRACTION * min(scales),
                                  defaults.RADIAL_OUTER_FACTOR * max(extents),
                                  defaults.RADIAL_POINTS_PER_DECADE)
        self.tables = {}
        for c in components:
            dens = c.multipole_density()
            if dens is None:
                continue
            l_c = getattr(c, "lmax", lmax)
            self.tables[c.name] = solve(dens, self.r_grid, l_c,
                                        4 if l_c == 0 else defaults.ANGULAR_NODES, G)
        self._table_cache = {}   # sum of the tables of a set of components, made on first use
        # Two kinds of pieces: closed-form spheres (and point masses, singular at r = 0),
        # always evaluated exactly, and the smooth rest (disk layers, multipole tables),
        # which the fast path interpolates on a grid.
        self.smooth_names = [c.name for c in components if c.name in self.tables
                             or _stellar_layer(c) or _python_layer(c)]
        self.grid = None
        if self.smooth_names and grid:
            smooth = [self.components[n] for n in self.smooth_names]
            vertical = [c.z_d for c in smooth if hasattr(c, "z_d")]
            s = min(vertical) if vertical else 0.1 * min(c.scale for c in smooth)
            self.grid = PotentialGrid(lambda R, z: self._smooth(R, z, self.smooth_names),
                                      s, max(c.extent for c in smooth))
        if grid:
            self._build_midplane()

    # -- the pieces -------------------------------------------------------------------
    def sphere_terms(self, names=None):
        """Closed-form spheres [(code, G M, a)] of the named components (all: None), in
        component order."""
        names = list(self.components) if names is None else names
        return [(code, G * mass, a) for n in names
                for code, mass, a in self.components[n].analytic_terms()]

    def stellar_layers(self, names=None):
        """Dehnen & Binney thin-layer parameters (4 pi G Sigma0, R_d, R_t, w_t, z_d, code) of
        the named stellar disks, in component order, shape (k, 6)."""
        names = self.smooth_names if names is None else names
        rows = [self.components[n].thin_layer_params() for n in names
                if _stellar_layer(self.components[n])]
        return np.array([[4 * np.pi * G * p[0], *p[1:]] for p in rows]).reshape(-1, 6)

    def has_python_layers(self):
        """True when a layer has no numba form (a gas disk's splines)."""
        return any(_python_layer(c) for c in self.components.values())

    def smooth_table(self, names=None):
        """Sum of the multipole tables of the named components (all smooth: None), or None."""
        names = self.smooth_names if names is None else names
        key = tuple(sorted(n for n in names if n in self.tables))
        if key not in self._table_cache:
            self._table_cache[key] = _sum({n: self.tables[n] for n in key})
        return self._table_cache[key]

    # -- evaluation -------------------------------------------------------------------
    def evaluate(self, R, z, component=None, exact=False):
        """(Phi, F_R, F_z) at points (R, z) in kpc; units (km/s)^2 and (km/s)^2/kpc.

        ``component`` limits the sum to one named component (None: all; the exact sum is
        always used for one component). The total uses the interpolation grid unless
        ``exact`` is True (relative difference ~1e-5, see potential/grid.py). Points with
        a NaN or infinite R or z get NaN in all three; the others are not affected."""
        R, z = np.broadcast_arrays(np.asarray(R, float), np.asarray(z, float))
        shape = R.shape
        Rf, zf = np.ascontiguousarray(R).ravel(), np.ascontiguousarray(z).ravel()
        good = np.isfinite(Rf) & np.isfinite(zf)
        if good.all():
            out = self._evaluate_flat(Rf, zf, component, exact)
        else:
            out = tuple(np.full(Rf.shape, np.nan) for _ in range(3))
            for full, part in zip(out, self._evaluate_flat(Rf[good], zf[good], component,
                                                            exact)):
                full[good] = part
        return tuple(a.reshape(shape) for a in out)

    def _evaluate_flat(self, Rf, zf, component, exact):
        if component is not None:
            return self._exact(Rf, zf, [component])
        if exact or self.grid is None:
            return self._exact(Rf, zf, list(self.components))
        return self._gridded(Rf, zf)

    def _gridded(self, Rf, zf):
        """Grid inside, exact smooth pieces outside it, then the closed-form spheres; the
        order of the sums is that of potential/field.py's ``force``."""
        phi, f_r, f_z, outside = self.grid.evaluate(Rf, zf)
        if outside.any():
            far = self._smooth(Rf[outside], zf[outside], self.smooth_names)
            for arr, val in zip((phi, f_r, f_z), far):
                arr[outside] = val
        self._add_spheres(Rf, zf, list(self.components), phi, f_r, f_z)
        return phi, f_r, f_z

    def _add_spheres(self, Rf, zf, names, phi, f_r, f_z):
        for code, gm, a in self.sphere_terms(names):
            kernels.add_spherical(Rf, zf, code, gm, a, phi, f_r, f_z)

    def _smooth(self, Rf, zf, names):
        """Layers of the named disks (component order), then their summed tables."""
        Rf, zf = np.ascontiguousarray(Rf, dtype=float), np.ascontiguousarray(zf, dtype=float)
        phi, f_r, f_z = np.zeros_like(Rf), np.zeros_like(Rf), np.zeros_like(Rf)
        for name in names:
            c = self.components[name]
            if _python_layer(c):
                c.add_layer(Rf, zf, G, phi, f_r, f_z)
            elif _stellar_layer(c):
                s0, r_d, r_t, w_t, z_d, code = c.thin_layer_params()
                kernels.add_thin_layer(Rf, zf, 4 * np.pi * G * s0, r_d, r_t, w_t, z_d,
                                       int(code), phi, f_r, f_z)
        table = self.smooth_table(names)
        if table is not None:
            kernels.add_multipole(Rf, zf, table.lnr0, table.h, table.r, *table.kernel_arrays(),
                                  phi, f_r, f_z)
        return phi, f_r, f_z

    def _exact(self, Rf, zf, names):
        """Sum of the named components' exact pieces at flat arrays."""
        phi, f_r, f_z = self._smooth(Rf, zf, [n for n in names if n in self.smooth_names])
        self._add_spheres(np.ascontiguousarray(Rf, dtype=float),
                          np.ascontiguousarray(zf, dtype=float), names, phi, f_r, f_z)
        return phi, f_r, f_z

    def force_field(self):
        """The total force as numba-ready arrays (potential/field.py), made once."""
        if not hasattr(self, "_field"):
            self._field = force_field(self)
        return self._field

    def potential(self, R, z, component=None):
        """Phi (km/s)^2 at (R, z) kpc."""
        return self.evaluate(R, z, component)[0]

    def forces(self, R, z, component=None):
        """(F_R, F_z) = -grad Phi in (km/s)^2/kpc."""
        return self.evaluate(R, z, component)[1:]

    def density(self, R, z, component=None):
        """rho (Msun/kpc^3) of one component or the sum."""
        names = list(self.components) if component is None else [component]
        return sum(self.components[n].density(R, z) for n in names)

    # -- midplane ---------------------------------------------------------------------
    def _build_midplane(self):
        r_max = max(c.extent for c in self.components.values()) or 100.0
        # from 10x the innermost multipole node, so the splines never extrapolate inwards
        # of the scales the model resolves (omega/kappa clamp R to this range)
        R = np.geomspace(10 * self.r_grid[0], r_max, defaults.MIDPLANE_POINTS)
        self._mid_R = R
        self._vc2 = {n: -R * self.forces(R, 0.0, n)[0] for n in self.components}
        vc2 = -R * self.evaluate(R, 0 * R, exact=True)[1]
        self._vc2_total = vc2
        spline = CubicSpline(np.log(R), vc2)
        kappa2 = spline(np.log(R), 1) / R**2 + 2 * vc2 / R**2
        self._omega = CubicSpline(np.log(R), np.sqrt(np.maximum(vc2, 0)) / R)
        self._kappa = CubicSpline(np.log(R), np.sqrt(np.maximum(kappa2, 0)))

    def circular_speed(self, R, component=None):
        """Midplane circular speed (km/s), sqrt(R dPhi/dR); for a component whose
        contribution R dPhi/dR is negative the sign is kept: sign(v^2) sqrt(|v^2|)."""
        R = np.asarray(R, float)
        v2 = -R * self.evaluate(R, np.zeros_like(R), component, exact=True)[1]
        return np.sign(v2) * np.sqrt(np.abs(v2))

    def omega(self, R):
        """Angular frequency Omega = v_c/R (km/s/kpc); R clamped to the table range."""
        return self._omega(np.log(np.clip(np.asarray(R, float), self._mid_R[0], self._mid_R[-1])))

    def kappa(self, R):
        """Epicycle frequency, kappa^2 = R dOmega^2/dR + 4 Omega^2 (km/s/kpc)
        (Binney & Tremaine 2008, eq. 3.80)."""
        return self._kappa(np.log(np.clip(np.asarray(R, float), self._mid_R[0], self._mid_R[-1])))


def _sum(tables):
    total = None
    for t in tables.values():
        total = t if total is None else total + t
    return total


def _stellar_layer(c):
    """The component has a Dehnen & Binney thin layer with a numba form (stellar disk)."""
    return hasattr(c, "thin_layer_params")


def _python_layer(c):
    """The component adds a layer evaluated in Python (the gas's splines)."""
    return hasattr(c, "add_layer")
