"""Self-consistent vertical structure of isothermal gas disks.

Iterates: potential of all components with the current gas density -> new gas density
rho_g ~ exp(-[Phi(R,z) - Phi(R,0)]/c_s^2) normalised to Sigma_g(R), until the midplane density
changes by less than defaults.GAS_TOLERANCE. Under-relaxed, because a self-gravitating layer
overshoots under plain iteration.

The solution must be a thin layer: its sech^2-equivalent scale height at R_d below
MAX_LAYER_HEIGHT scale lengths, else ModelError. Hot gas (c_s comparable to v_c) is not
held in a layer at all: the isothermal atmosphere exp(-dPhi/c_s^2) keeps a density floor
exp(-v_esc^2 / (2 c_s^2)) at any height and used to fill the whole grid (a slab 200 kpc
high for 1e7 K gas).
"""
from dataclasses import dataclass, field

import numpy as np

from .. import defaults
from ..errors import ModelError
from ..profiles.disk import log_cosh
from ..profiles.gas import GasDisk
from ..units import G
from .total import CombinedPotential

RELAXATION = 1.0   # weight of the new q per step (0.6 converged fastest among 0.4-1, measured)
# Largest sech^2-equivalent scale height of the gas at R = R_d, in scale lengths: a thin
# layer, as for a stellar disk (z_d < R_d), with a margin. Measured on
# configs/gas_rich_spiral.toml (v_c = 160 km/s at R_d = 5 kpc), temperature scan:
#   T [K]   c_s/v_c   height/R_d   column at R_d beyond |z| = 3 R_d
#   3e5     0.28      0.23         2e-7
#   6e5     0.40      0.43         6e-4
#   1e6     0.52      0.72         2e-2
#   2e6     0.74      2.1          0.26 (rotation clamped to 0 in the midplane)
#   1e7     1.7       28           (a slab filling the grid)
# Below 0.5 less than ~1e-3 of a column lies in the atmosphere far above the layer.
MAX_LAYER_HEIGHT = 0.5


@dataclass
class GasSolution:
    """Iteration record: number of iterations and the midplane change at each step."""
    iterations: int = 0
    changes: list = field(default_factory=list)


def _q_on_nodes(potential_fns, gas):
    """(Phi(R,z) - Phi(R,0)) / c_s^2 on the gas node grid from a list of evaluators.

    On the axis (R = 0) a point mass makes Phi(0, 0) = -inf: the layer there is infinitely
    thin. That node column then takes the potential of the first column off the axis
    (R = R_nodes[1], ~2e-3 R_d), which holds a ~1e-6 fraction of the gas.
    """
    R, Z = np.meshgrid(gas.R_nodes, gas.z_nodes, indexing="ij")
    with np.errstate(invalid="ignore", divide="ignore"):
        phi = sum(f(R.ravel(), Z.ravel()) for f in potential_fns).reshape(R.shape)
    if not np.isfinite(phi[0]).all():
        phi[0] = sum(f(np.full(Z.shape[1], gas.R_nodes[1]), gas.z_nodes) for f in potential_fns)
    return (phi - phi[:, :1]) / gas.cs**2


def _reference_height(q, gas):
    """sech^2 height whose half-mass height matches that of exp(-q) at R = R_d."""
    i = int(np.searchsorted(gas.R_nodes, gas.R_d))
    w = np.exp(-q[i]) * gas.s_z * np.cosh(gas.y)
    cum = np.concatenate([[0], np.cumsum(0.5 * (w[1:] + w[:-1]) * np.diff(gas.y))])
    z_half = np.interp(0.5 * cum[-1], cum, gas.z_nodes)
    return z_half / np.arctanh(0.5)


def _check_thin_layer(gas, potentials):
    """ModelError unless the solved layer's scale height at R_d is below MAX_LAYER_HEIGHT R_d;
    the message gives the height, c_s and v_c(R_d) in the sum of ``potentials``."""
    height = _reference_height(gas.q_nodes, gas)
    if height <= MAX_LAYER_HEIGHT * gas.R_d:
        return
    f_r = sum(p.evaluate(np.array([gas.R_d]), np.zeros(1), exact=True)[1][0] for p in potentials)
    v_c = float(np.sqrt(max(-gas.R_d * f_r, 0.0)))
    raise _no_layer(gas, f"c_s = {gas.cs:.4g} km/s against v_c = {v_c:.4g} km/s gives a scale "
                         f"height of {height:.4g} kpc at R_d = {gas.R_d:.4g} kpc, above "
                         f"{MAX_LAYER_HEIGHT:g} x scale_length")


def _no_layer(gas, why):
    """ModelError naming the key that set the sound speed: no thin gas layer, and why."""
    key = gas.spec.sound_speed_key
    shown = f"{getattr(gas.spec, key):.6g} {'K' if key == 'temperature' else 'km/s'}"
    spitzer = gas.cs**2 / (np.pi * G * gas.surface_density(gas.R_d))
    return ModelError(f"components.{gas.name}.{key}", shown,
                      f"no thin hydrostatic gas layer: {why} (its own gravity alone would hold "
                      f"it at c_s^2/(pi G Sigma) = {spitzer:.4g} kpc at R_d = {gas.R_d:.4g} kpc, "
                      f"Spitzer 1942); lower the temperature or add mass to hold it")


def solve_gas(gas_specs, others):
    """GasDisk objects in equilibrium with ``others`` (component objects) and themselves.

    Returns (list of GasDisk, GasSolution). Raises ModelError if it does not converge.
    """
    fixed = CombinedPotential(others, grid=False) if others else None
    fixed_fn = [] if fixed is None else [lambda R, z: fixed.evaluate(R, z, exact=True)[0]]
    gases = []
    for spec in gas_specs:
        probe = GasDisk(spec, z_ref=0.05 * spec.scale_length)
        if fixed_fn:
            probe.set_vertical(_q_on_nodes(fixed_fn, probe))
        # thinner of: confinement by the other components, and the self-gravitating
        # slab of Spitzer (1942) at R_d, z0 = c_s^2/(pi G Sigma)
        spitzer = spec.cs**2 / (np.pi * G * probe.surface_density(probe.R_d))
        z_ref = min(_reference_height(probe.q_nodes, probe) if fixed_fn else np.inf,
                    spitzer, 0.5 * spec.scale_length)
        gas = GasDisk(spec, z_ref=z_ref)
        # start from the other components' field plus the gas's own Spitzer slab at each R
        z0 = spec.cs**2 / (np.pi * G * np.maximum(gas.surface_density(gas.R_nodes), 1e-300))
        q_self = 2 * log_cosh(gas.z_nodes[None, :] / z0[:, None])
        gas.set_vertical(q_self + (_q_on_nodes(fixed_fn, gas) if fixed_fn else 0.0))
        gases.append(gas)
    record = GasSolution()
    for it in range(1, defaults.GAS_MAX_ITERATIONS + 1):
        own = CombinedPotential(gases, grid=False)
        fns = fixed_fn + [lambda R, z: own.evaluate(R, z, exact=True)[0]]
        change = 0.0
        for gas in gases:
            old = gas.midplane.copy()
            q_new = _q_on_nodes(fns, gas)
            if not np.isfinite(q_new).all():
                raise _no_layer(gas, "the vertical iteration diverged")
            gas.set_vertical(gas.q_nodes + RELAXATION * (q_new - gas.q_nodes))
            alive = gas.surface_density(gas.R_nodes) > 1e-6 * gas.sigma0
            change = max(change, float(np.max(np.abs(gas.midplane[alive] / old[alive] - 1))))
        record.changes.append(change)
        record.iterations = it
        if change < defaults.GAS_TOLERANCE:
            for gas in gases:
                _check_thin_layer(gas, [p for p in (fixed, own) if p is not None])
            return gases, record
    names = ", ".join(g.name for g in gases)
    raise ModelError(f"components.{gases[0].name}", names,
                     f"gas vertical equilibrium did not converge in {defaults.GAS_MAX_ITERATIONS} "
                     f"iterations (last midplane change {record.changes[-1]:.1e}); "
                     "try a higher temperature or a less massive gas disk")
