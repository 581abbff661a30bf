"""Model-file specs of a whole model: ``ModelSpec`` (components plus model-wide settings),
``OutputSpec`` (units of the written snapshot), the map of component kinds to spec classes,
and ``model_warnings``.

Masses Msun; the cosmology (astropy realisation name) sets rho_crit for NFW halos.
"""

import math
from dataclasses import dataclass

from icgen.errors import MISSING, ModelError, did_you_mean
from icgen.units import check_cosmology, unit_scale

from .disk import DiskSpec
from .fields import VALUE_KINDS, check_component_count, set_field, shown, validate_fields
from .gas_disk import GasDiskSpec
from .point_mass import PointMassSpec
from .spheroid import CriticalDensity, SpheroidSpec, check_cut, nfw_concentration, nfw_m
from .toml_text import model_toml

#: The spec class of each component kind (``kind = ...`` in a model file), in the order
#: messages list them.
SPEC_CLASSES = {"halo": SpheroidSpec, "bulge": SpheroidSpec, "disk": DiskSpec,
                "gas_disk": GasDiskSpec, "point_mass": PointMassSpec}
KINDS = tuple(SPEC_CLASSES)
_SPEC_TYPES = tuple(dict.fromkeys(SPEC_CLASSES.values()))

MODEL_KEYS = ("name", "seed", "cosmology", "redshift", "particle_mass", "quiet_start", "mirror")
OUTPUT_KEYS = ("length_unit", "velocity_unit", "mass_unit")
#: Longest model name (characters): it is stored in the snapshot and printed.
MAX_MODEL_NAME = 200


@dataclass(frozen=True)
class OutputSpec:
    """Units of the written snapshot: strings astropy can parse, possibly scaled."""

    length_unit: str = "kpc"
    velocity_unit: str = "km/s"
    mass_unit: str = "1e10 Msun"

    def __post_init__(self):
        unit_scale(self.length_unit, "length", "output.length_unit")
        unit_scale(self.velocity_unit, "velocity", "output.velocity_unit")
        unit_scale(self.mass_unit, "mass", "output.mass_unit")


@dataclass(frozen=True)
class ModelSpec:
    """A whole model: components in file order plus model-wide settings.

    ``particle_mass`` (Msun) is the common particle mass used for components that give no
    ``particles``; the sampler turns it into counts.
    """

    name: str
    seed: int
    components: tuple
    cosmology: str = "Planck18"
    redshift: float = 0.0
    particle_mass: float | None = None
    output: OutputSpec = OutputSpec()
    quiet_start: bool = False
    mirror: bool = False

    def __post_init__(self):
        if not isinstance(self.name, str) or not self.name.strip() or not self.name.isprintable():
            raise ModelError("model.name", self.name, "must be a non-empty line of text")
        if len(self.name) > MAX_MODEL_NAME:
            rule = f"must be at most {MAX_MODEL_NAME} characters long (got {len(self.name)})"
            raise ModelError("model.name", self.name, rule)
        check_cosmology(self.cosmology)
        validate_fields(self, "model.")
        if not isinstance(self.output, OutputSpec):
            raise ModelError("output", self.output, "must be an OutputSpec")
        self._check_components()

    def _check_components(self):
        if not isinstance(self.components, (tuple, list)) or not self.components:
            rule = "the model needs at least one component, e.g. [components.halo] with kind = 'halo'"
            raise ModelError("components", MISSING, rule)
        check_component_count(len(self.components))
        set_field(self, "components", tuple(self.components))
        names = set()
        for spec in self.components:
            if not isinstance(spec, _SPEC_TYPES):
                rule = "each must be a DiskSpec, SpheroidSpec, GasDiskSpec or PointMassSpec"
                raise ModelError("components", spec, rule)
            if spec.name in names:
                raise ModelError("components", spec.name, "component names must be unique")
            names.add(spec.name)
            if spec.particles is None and self.particle_mass is None:
                rule = ("required unless [model] sets particle_mass; give a whole number, "
                        "e.g. 100_000, or model.particle_mass = '1e5 Msun'")  # fmt: skip
                raise ModelError(f"components.{spec.name}.particles", MISSING, rule)
        rho_crit = CriticalDensity(self.cosmology, self.redshift)
        for spec in self.components:
            if isinstance(spec, SpheroidSpec):
                check_cut(spec, rho_crit)
            if spec.particles is None:
                self._check_count_from_particle_mass(spec, rho_crit)

    def _check_count_from_particle_mass(self, spec, rho_crit):
        """The count mass / particle_mass of a component without ``particles`` must obey
        the rule of ``particles`` (mass: M200 for an NFW halo, before its outer cut)."""
        mass = spec.mass
        if mass is None:   # nfw from density_scale and scale_radius
            c = nfw_concentration(spec.density_scale, rho_crit(), f"components.{spec.name}.")
            mass = 4 * math.pi * spec.density_scale * spec.scale_radius**3 * nfw_m(c)
        field = VALUE_KINDS["particles"]
        if mass / self.particle_mass > field.hi:
            rule = (f"gives component {spec.name!r} ({mass:.3g} Msun) "
                    f"{mass / self.particle_mass:.3g} particles; at most {field.hi:.0e}")
            raise ModelError("model.particle_mass", shown(self.particle_mass, "Msun"), rule)

    def component(self, name):
        """Return the component spec called ``name`` (ModelError if there is none)."""
        for spec in self.components:
            if spec.name == name:
                return spec
        names = [spec.name for spec in self.components]
        hint = did_you_mean(name, names)
        rule = f"no such component (have: {', '.join(names)})" + (f"; {hint}" if hint else "")
        raise ModelError("components", name, rule)

    def to_toml(self):
        """The fully resolved model as TOML text; loading it gives back an equal spec.

        Dimensional values are written in internal units with repr-exact floats.
        """
        return model_toml(self)


def model_warnings(spec):
    """Messages for legal values that keep a model from staying in equilibrium once
    simulated (``icgen build`` prints them with the sampler's warnings).

    A disk with toomre_q or toomre_q_min below 1 is locally unstable to axisymmetric
    perturbations (Toomre 1964, ApJ 139, 1217): it fragments or heats within a few
    rotations. Not an error: cold and unstable disks are studied on purpose.
    """
    out = []
    for c in spec.components:
        for key in ("toomre_q", "toomre_q_min"):
            q = getattr(c, key, None) if isinstance(c, DiskSpec) else None
            if q is not None and q < 1:
                out.append(f"disk {c.name!r}: {key} = {q:g} is below 1: locally unstable to "
                           f"axisymmetric perturbations (Toomre 1964, ApJ 139, 1217), it will "
                           f"fragment or heat within a few rotations")
    return out
