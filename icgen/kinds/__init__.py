"""The registry of component kinds: the one place that says what each value of a model
file's ``kind`` key means (its profile, sampler, kinematics and traits; icgen.kinds.base).
Everything else asks here instead of comparing kind strings.

A new kind is a module with a ``Kind`` and one line below.
"""
from . import disk, gas_disk, point_mass, spheroid
from .base import Kind, Kinematics, Sampler

__all__ = ["KINDS", "Kind", "Kinematics", "Sampler", "kind_of"]

#: kind name -> Kind, in the order components of each kind are built (self-consistent
#: layers last, in the potential of the others).
KINDS = {k.name: k for k in (spheroid.HALO, spheroid.BULGE, disk.KIND, point_mass.KIND,
                             gas_disk.KIND)}


def kind_of(thing):
    """The Kind of a component, spec, plan or kind name."""
    return KINDS[thing if isinstance(thing, str) else thing.kind]
