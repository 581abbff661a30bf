"""Mock observations with a known truth, for testing rotation-curve fitting methods.

A disk component of a particle realisation is put on the sky (:mod:`.project`), turned
into a spectral cube with moment maps and FITS/WCS headers (:mod:`.cube`), and its
rotation curve derived as an observer would (tilted rings and a major-axis slit,
:mod:`.tilted_ring`), next to the truth on the same rings (:mod:`.truth`)::

    from icgen.mock import Geometry, Instrument, observe
    obs = observe("galaxy.h5", Geometry(60, 35, 12, systemic=900), Instrument(noise=0.05),
                  tracer="disk", seed=1)
    obs.scores()
    obs.write("mock_out")
"""
_EXPORTS = {"MockObservation": "observation", "observe": "observation", "tracer_particles": "observation",
            "OUTPUT_FILES": "observation", "Geometry": "project", "Instrument": "project",
            "hubble_systemic": "project", "kpc_per_arcsec": "project"}


def __getattr__(name):
    # Lazy imports: ``icgen mock --help`` and the other commands do not pay for numba,
    # scipy and astropy.io.fits.
    if name in _EXPORTS:
        import importlib
        return getattr(importlib.import_module(f".{_EXPORTS[name]}", __name__), name)
    raise AttributeError(f"module 'icgen.mock' has no attribute {name!r}")


__all__ = list(_EXPORTS)
