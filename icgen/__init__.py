"""icgen: equilibrium N-body initial conditions for disk galaxies.

Main entry points: :func:`load_model` (model file or dict -> :class:`MassModel`).
"""
from .version import __version__


def __getattr__(name):
    # Lazy imports keep ``import icgen`` light (numba kernels compile on first use).
    if name in ("load_model", "MassModel"):
        from . import model
        return getattr(model, name)
    if name == "read_snapshot":
        from . import snapshot
        return snapshot.read_snapshot
    raise AttributeError(f"module 'icgen' has no attribute {name!r}")


__all__ = ["load_model", "MassModel", "read_snapshot", "__version__"]
