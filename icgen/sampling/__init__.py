"""Particle realisation of a MassModel: positions and equilibrium velocities.

Typical use::

    from icgen import sampling
    sampling.plan(model)                          # counts and particle masses
    parts = sampling.sample(model)                # small N: all in memory, no net momentum
    report = sampling.SamplingReport()
    for chunk in sampling.iter_chunks(model, report=report):   # large N: streamed
        writer.append(chunk)
    x0, v0 = report.center_of_mass()              # subtract v0 afterwards

Particles are bit-identical for a given model seed whatever the chunk size or the number
of numba threads. Options: ``quiet_start`` (scrambled Sobol points) and ``mirror``
(each particle followed by its point reflection).
"""
from ..samplers.seeds import BLOCK_SIZE
from .realize import (ComponentPlan, ParticleChunk, SamplingReport, SamplingWarning,
                      center_of_mass, iter_chunks, particles, plan, sample)

__all__ = ["ComponentPlan", "ParticleChunk", "SamplingReport", "SamplingWarning",
           "center_of_mass", "iter_chunks", "particles", "plan", "sample", "BLOCK_SIZE"]
