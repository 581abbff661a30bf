"""Stellar disks (``kind = "disk"``): exponential profile, positions by inverse CDF, and
velocities by one of the disk velocity methods.

A velocity method is a module that provides a velocity sampler (``sample(R, z, u)`` ->
v_R, v_z, v_phi, clamped) and its kinematics (moments computed independently, see
icgen.kinds.base). Adding one is one new module and one line in ``VELOCITY_METHODS``.
"""
import numpy as np

from ..errors import ModelError, did_you_mean
from ..profiles.disk import ExponentialDisk
from ..samplers import disk_velocities
from ..samplers.positions import DiskPositions
from .base import Kind

#: name -> (velocity sampler class, kinematics class); each called (disk, spec, potential).
VELOCITY_METHODS = {
    "jeans": (disk_velocities.DiskVelocities, disk_velocities.JeansDiskKinematics),
}
DEFAULT_METHOD = "jeans"


def method(spec):
    """The (sampler class, kinematics class) of a disk spec's velocity method."""
    name = getattr(spec, "velocities", None) or DEFAULT_METHOD
    if name not in VELOCITY_METHODS:
        hint = did_you_mean(name, VELOCITY_METHODS)
        raise ModelError(f"components.{spec.name}.velocities", name,
                         f"must be one of {', '.join(VELOCITY_METHODS)}"
                         + (f"; {hint}" if hint else ""))
    return VELOCITY_METHODS[name]


class DiskSampler:
    """Positions (icgen.samplers.positions) and the method's velocities, in Cartesians."""

    def __init__(self, disk, spec, potential):
        self.positions = DiskPositions(disk)
        self.velocities = method(spec)[0](disk, spec, potential)

    def draw(self, u):
        R, z, phi = self.positions.sample(u)
        v_R, v_z, v_phi, clamped = self.velocities.sample(R, z, u[:, 3:6])
        c, s = np.cos(phi), np.sin(phi)
        pos = np.column_stack([R * c, R * s, z])
        vel = np.column_stack([v_R * c - v_phi * s, v_R * s + v_phi * c, v_z])
        return pos, vel, clamped


def _build(specs, model_spec, others):
    out = [ExponentialDisk(s) for s in specs]
    for s in specs:
        method(s)                      # an unknown method is refused before any work
    return out


def _sampler(model, name, tables):
    return DiskSampler(model.components[name], model.spec.component(name), model.potential)


def _kinematics(model, name):
    spec = model.spec.component(name)
    return method(spec)[1](model.components[name], spec, model.potential)


KIND = Kind("disk", "disk", _build, _sampler, _kinematics, flattened=True,
            style=("tab:blue", ":"))
