"""Model-file spec of a point mass (``kind = "point_mass"``), e.g. a central black hole."""

from dataclasses import dataclass

from icgen.errors import ModelError

from .fields import component_prefix, set_field, validate_fields

POINT_MASS_KEYS = ("kind", "mass", "particles")


@dataclass(frozen=True)
class PointMassSpec:
    """A single particle of ``mass`` Msun at the centre (e.g. a central black hole)."""

    name: str
    mass: float
    kind: str = "point_mass"
    particles: int = 1

    @classmethod
    def table_keys(cls, prefix, table):
        """(allowed, required) keys of a point mass's model-file table."""
        return POINT_MASS_KEYS, ("mass",)

    def __post_init__(self):
        p = component_prefix(self, ("point_mass",))
        # One particle: several at the same point would have no meaningful forces.
        if isinstance(self.particles, bool) or self.particles != 1:
            raise ModelError(p + "particles", self.particles, "a point mass is one particle: must be 1")
        set_field(self, "particles", 1)
        validate_fields(self, p)
