"""Gravitational potential of a galaxy model: analytic pieces plus a multipole expansion."""
from .total import CombinedPotential

__all__ = ["CombinedPotential"]
