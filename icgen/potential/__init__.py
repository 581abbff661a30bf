"""Gravitational potential of a galaxy model: analytic pieces plus a multipole expansion."""
from .total import GalaxyPotential

__all__ = ["GalaxyPotential"]
