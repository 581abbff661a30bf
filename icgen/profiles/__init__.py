"""Density profiles: one module per family (spheroids, exponential disks).

Every component object offers ``density(R, z)`` (Msun/kpc^3, arrays in kpc) and the pieces
the potential solver needs: an analytic part (``analytic_terms``) and a density to be
expanded in multipoles (``multipole_density``, or None).
"""
from .spheroid import make_spheroid, Spheroid, PointMass
from .disk import ExponentialDisk

__all__ = ["make_spheroid", "Spheroid", "PointMass", "ExponentialDisk"]
