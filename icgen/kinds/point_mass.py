"""Point masses (``kind = "point_mass"``): one particle at rest at the centre, e.g. a
central black hole, with the closed-form potential -G M/r."""
import numpy as np

from ..profiles.spheroid import PointMass
from .base import Kind


class PointMassSampler:
    def draw(self, u):
        n = u.shape[0]
        return np.zeros((n, 3)), np.zeros((n, 3)), None


class PointMassKinematics:
    def mean_velocity(self, position, velocity):
        return np.zeros_like(np.asarray(position, float))


def _build(specs, model_spec, others):
    return [PointMass(s.name, s.mass) for s in specs]


KIND = Kind("point_mass", "point mass", _build, lambda model, name, tables: PointMassSampler(),
            lambda model, name: PointMassKinematics(), point=True,
            not_integrated="the fixed centre of the potential",
            style=("tab:purple", (0, (1, 1))))
