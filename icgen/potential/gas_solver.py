"""Self-consistent vertical structure of isothermal gas disks.

Iterates: potential of all components with the current gas density -> new gas density
rho_g ~ exp(-[Phi(R,z) - Phi(R,0)]/c_s^2) normalised to Sigma_g(R), until the midplane density
changes by less than defaults.GAS_TOLERANCE. Under-relaxed, because a self-gravitating layer
overshoots under plain iteration.
"""
from dataclasses import dataclass, field

import numpy as np

from .. import defaults
from ..errors import ModelError
from ..profiles.disk import log_cosh
from ..profiles.gas import GasDisk
from ..units import G
from .total import GalaxyPotential

RELAXATION = 1.0   # weight of the new q per step (0.6 converged fastest among 0.4-1, measured)


@dataclass
class GasSolution:
    """Iteration record: number of iterations and the midplane change at each step."""
    iterations: int = 0
    changes: list = field(default_factory=list)


def _q_on_nodes(potential_fns, gas):
    """(Phi(R,z) - Phi(R,0)) / c_s^2 on the gas node grid from a list of evaluators."""
    R, Z = np.meshgrid(gas.R_nodes, gas.z_nodes, indexing="ij")
    phi = sum(f(R.ravel(), Z.ravel()) for f in potential_fns).reshape(R.shape)
    return (phi - phi[:, :1]) / gas.cs**2


def _reference_height(q, gas):
    """sech^2 height whose half-mass height matches that of exp(-q) at R = R_d."""
    i = int(np.searchsorted(gas.R_nodes, gas.R_d))
    w = np.exp(-q[i]) * gas.s_z * np.cosh(gas.y)
    cum = np.concatenate([[0], np.cumsum(0.5 * (w[1:] + w[:-1]) * np.diff(gas.y))])
    z_half = np.interp(0.5 * cum[-1], cum, gas.z_nodes)
    return z_half / np.arctanh(0.5)


def solve_gas(gas_specs, others):
    """GasDisk objects in equilibrium with ``others`` (component objects) and themselves.

    Returns (list of GasDisk, GasSolution). Raises ModelError if it does not converge.
    """
    fixed = GalaxyPotential(others, grid=False) if others else None
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
        own = GalaxyPotential(gases, grid=False)
        fns = fixed_fn + [lambda R, z: own.evaluate(R, z, exact=True)[0]]
        change = 0.0
        for gas in gases:
            old = gas.midplane.copy()
            q_new = _q_on_nodes(fns, gas)
            gas.set_vertical(gas.q_nodes + RELAXATION * (q_new - gas.q_nodes))
            alive = gas.surface_density(gas.R_nodes) > 1e-6 * gas.sigma0
            change = max(change, float(np.max(np.abs(gas.midplane[alive] / old[alive] - 1))))
        record.changes.append(change)
        record.iterations = it
        if change < defaults.GAS_TOLERANCE:
            return gases, record
    names = ", ".join(g.name for g in gases)
    raise ModelError(f"components.{gases[0].name}", names,
                     f"gas vertical equilibrium did not converge in {defaults.GAS_MAX_ITERATIONS} "
                     f"iterations (last midplane change {record.changes[-1]:.1e}); "
                     "try a higher temperature or a less massive gas disk")
