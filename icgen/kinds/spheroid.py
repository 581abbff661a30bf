"""Halos and bulges (``kind = "halo"`` and ``"bulge"``): a cut spherical profile, radii by
inverse CDF, velocities from the Eddington (or Osipkov-Merritt) distribution function or
the Jeans-Maxwellian option in the spherically averaged total potential."""
from ..profiles.spheroid import TruncatedSpheroid, make_spheroid
from ..samplers.positions import SpheroidPositions
from ..samplers.spheroid_velocities import (TABLE_INNER_FRACTION, TABLE_OUTER_FACTOR,
                                            SpheroidKinematics, SpheroidVelocities)
from .base import Kind


def spherical_range(model):
    """(r_lo, r_hi) kpc of the spherically averaged tables of a model's spheroids: from
    TABLE_INNER_FRACTION of the smallest scale to TABLE_OUTER_FACTOR times the largest
    extent; None without spheroids."""
    spheroids = [c for c in model.components.values() if isinstance(c, TruncatedSpheroid)]
    if not spheroids:
        return None
    return (TABLE_INNER_FRACTION * min(c.scale for c in spheroids),
            TABLE_OUTER_FACTOR * max(c.extent for c in spheroids))


class SpheroidSampler:
    """Radii and directions (icgen.samplers.positions) and velocities."""

    def __init__(self, comp, spec, table):
        self.positions = SpheroidPositions(comp)
        self.velocities = SpheroidVelocities(comp, spec, table)

    def draw(self, u):
        r, nhat = self.positions.sample(u)
        return r[:, None] * nhat, self.velocities.sample(r, nhat, u[:, 3:7]), None


def _build(specs, model_spec, others):
    return [make_spheroid(s, model_spec.cosmology, model_spec.redshift) for s in specs]


def _sampler(model, name, tables):
    return SpheroidSampler(model.components[name], model.spec.component(name),
                           tables.spherical())


def _kinematics(model, name):
    return SpheroidKinematics(model.components[name], model.spec.component(name),
                              model.potential, *spherical_range(model))


HALO = Kind("halo", "halo", _build, _sampler, _kinematics, dark=True, style=("tab:gray", "--"))
BULGE = Kind("bulge", "bulge", _build, _sampler, _kinematics, style=("tab:red", "-."))
