"""Isothermal gas disks (``kind = "gas_disk"``): a layer in vertical hydrostatic
equilibrium in the potential of every component, itself included, solved after the
others; pressure-supported rotation and an internal energy."""
from ..potential.gas_solver import solve_gas
from ..samplers.gas import GasKinematics, GasSampler
from .base import Kind


def _build(specs, model_spec, others):
    gases, solution = solve_gas(specs, others)
    for g in gases:
        g.solution = solution
    return gases


def _sampler(model, name, tables):
    return GasSampler(model.components[name], model.potential)


def _kinematics(model, name):
    return GasKinematics(model.components[name], model.potential)


KIND = Kind("gas_disk", "gas disk", _build, _sampler, _kinematics, flattened=True,
            pressure=True, self_consistent=True,
            not_integrated="pressure-supported gas: orbits without pressure forces would "
                           "fall inwards, which says nothing of the model",
            style=("tab:green", (0, (5, 1))))
