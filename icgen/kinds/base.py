"""What every kind of component provides: the protocols of the registry (icgen.kinds).

A kind ties together, for one value of a model file's ``kind`` key, the profile object
built from a spec, the sampler that draws its particles, the kinematics (velocity moments
predicted independently of the sampler, what ``icgen check`` and ``stability`` compare
with) and a few traits that the rest of the code asks instead of comparing kind strings.
Units: kpc, km/s, Msun.
"""
from dataclasses import dataclass
from typing import Callable, Protocol

import numpy as np

__all__ = ["Kind", "Sampler", "Kinematics"]


class Sampler(Protocol):
    """Draws one block of a component's particles."""

    def draw(self, u: np.ndarray) -> tuple:
        """(position (n, 3) kpc, velocity (n, 3) km/s, clamped (n,) bool or None) from
        uniform deviates u (n, samplers.seeds.DIMENSIONS). A sampler with an attribute
        ``internal_energy`` ((km/s)^2) gives every particle that specific energy."""


class Kinematics(Protocol):
    """Velocity moments of a component, computed independently of its sampler's tables.

    Kinds add what suits them: ``moments(R, z)`` and ``toomre_q(R)`` (disks),
    ``sigma2(r)`` (spheroids), ``mean_vphi(R, z)`` and ``internal_energy`` (gas).
    """

    def mean_velocity(self, position: np.ndarray, velocity: np.ndarray) -> np.ndarray:
        """Expected velocity (n, 3) km/s of particles at ``position`` (n, 3) kpc (the
        velocities enter only where the expectation is conditional on them)."""


@dataclass(frozen=True)
class Kind:
    """One kind of component.

    Attributes
    ----------
    name : str
        The model file's ``kind`` value.
    label : str
        For messages ("gas disk").
    build : callable(specs, model_spec, others) -> list of components
        Profile objects (icgen.profiles) for the specs of this kind, in order; ``others``
        are the components of the kinds built before (a self-consistent layer needs them).
    sampler : callable(model, name, tables) -> Sampler
        ``tables`` gives shared tables by name (``tables.spherical()``: the spherically
        averaged potential).
    kinematics : callable(model, name) -> Kinematics
    flattened : bool
        A disk: surface density, vertical profile and annuli, not shells.
    dark : bool
        Dark matter (the dark-to-baryonic ratio; the particle-mass rule of disk heating).
    pressure : bool
        A fluid with an internal energy (its particles carry one; no orbits of its own).
    point : bool
        One particle at the centre (no profile to measure).
    self_consistent : bool
        Built after the others, in their potential (an isothermal layer).
    not_integrated : str
        Why ``icgen drift`` does not integrate its particles ("" when it does).
    style : tuple
        (matplotlib colour, line style) in plots.
    """

    name: str
    label: str
    build: Callable
    sampler: Callable
    kinematics: Callable
    flattened: bool = False
    dark: bool = False
    pressure: bool = False
    point: bool = False
    self_consistent: bool = False
    not_integrated: str = ""
    style: tuple = ("k", "-")

    @property
    def stellar_disk(self):
        """A collisionless disk (stars)."""
        return self.flattened and not self.pressure

    @property
    def spheroid(self):
        """A halo or bulge: shells, not annuli."""
        return not (self.flattened or self.point)
