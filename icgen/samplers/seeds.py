"""Deterministic uniform deviates, one independent stream per (component, block).

Every particle of a component belongs to a fixed-size block of ``BLOCK_SIZE`` particles.
The deviates of a block depend only on (model seed, component index, block index), never
on the chunk size, on the order in which blocks are made or on the number of threads:
that is what makes a chunk an independent unit of work.

Pseudo-random streams use ``numpy.random.SeedSequence(seed, spawn_key=(component, block))``
with PCG64. The quiet start uses a Sobol sequence (Sobol 1967, USSR Comput. Math. Math.
Phys. 7, 86) with the linear matrix scrambling and digital shift of ``scipy.stats.qmc.Sobol``
(Matousek 1998, J. Complexity 14, 527), one sequence per component, fast-forwarded to the
first point of the block.
"""
import warnings

import numpy as np

# Particles per block: a power of two, so that every block of a Sobol sequence is a
# (t, m, d)-net, and large enough that per-block overheads (numba calls,
# generator set-up) stay below ~1% of the work.
BLOCK_SIZE = 2**16

# Uniform deviates per particle: 3 for the position, 3 for the velocity, 1 more for the
# spin flip of spheroids (the gas sampler uses it to pick a vertical column). Fixed for
# every kind so that all samplers share one layout.
DIMENSIONS = 7

# spawn_key slot reserved for the Sobol scrambling of a component (block indices are
# far smaller, so this stream never coincides with a block stream).
_SOBOL_KEY = 2**32 - 1


def block_count(count, block_size=BLOCK_SIZE):
    """Number of blocks holding ``count`` particles."""
    return -(-int(count) // block_size)


def _open_interval(u, resolution):
    # Shift by half a grid step so that no deviate is exactly 0 (inverse CDFs of
    # unbounded variables would return infinities there); values stay below 1.
    return u + 0.5 * resolution


def block_uniforms(seed, component_index, block, n, first, quiet_start=False):
    """Uniform deviates in (0, 1) for ``n`` particles of one block.

    Parameters
    ----------
    seed : int
        Model seed (``model.seed``).
    component_index : int
        Position of the component in the model file.
    block : int
        Block index; the pseudo-random stream is keyed on it.
    n : int
        Number of particles to draw (the block size, or fewer in the last block).
    first : int
        Index of the block's first particle in the component's sequence (the Sobol
        sequence is fast-forwarded to it).
    quiet_start : bool
        Scrambled Sobol points instead of pseudo-random numbers.

    Returns
    -------
    ndarray, shape (n, DIMENSIONS), float64
    """
    if quiet_start:
        ss = np.random.SeedSequence(seed, spawn_key=(component_index, _SOBOL_KEY))
        from scipy.stats import qmc   # lazy: importing scipy.stats costs ~2 s
        engine = qmc.Sobol(DIMENSIONS, scramble=True, rng=np.random.default_rng(ss))
        if first > 0:   # scipy rejects fast_forward(0)
            engine.fast_forward(first)
        with warnings.catch_warnings():
            # a short last block is not a power of two; its points are still the
            # continuation of the same sequence, which is all the quiet start needs
            warnings.filterwarnings("ignore", "The balance properties", UserWarning)
            points = engine.random(n)
        return _open_interval(points, 2.0 ** -engine.bits)
    ss = np.random.SeedSequence(seed, spawn_key=(component_index, block))
    rng = np.random.Generator(np.random.PCG64(ss))
    # Generator.random returns multiples of 2**-53 in [0, 1).
    return _open_interval(rng.random((n, DIMENSIONS)), 2.0**-53)
