"""The galaxy's frame: where a snapshot's galaxy is centred and how fast it moves.

icgen writes the model's centre at the origin, at rest. A snapshot may still hold a galaxy
elsewhere: a file moved or evolved by other software, or a galaxy deliberately displaced.
Every command that measures particles against the model (check, drift, mock) finds the
frame one way, here, and measures about it:

- position: the shrinking-sphere density centre (Power et al. 2003, MNRAS 338, 14,
  sect. 2.5) of all particles (at most ``MAX_PARTICLES``, a seeded random subset);
  then refined to the mean position of the nearest ``CENTRE_FRACTION`` of the particles
  (see :func:`find_frame`);
- velocity: the mass-weighted mean velocity of all the particles, the galaxy's bulk motion
  (the dense centre of a galaxy in equilibrium moves with it). The mean velocity of the
  inner particles alone, tried first, was off by ~2.5 km/s for a disk galaxy of 2.8e5
  particles (hot bulge and halo particles): enough to add ~3 km/s of spurious sigma_phi to
  its outer disk, which has 5 km/s.

For an icgen snapshot the centre is a noise-sized distance from zero and the velocity is
zero (the build removes the net momentum). Measured over 5 seeds: 0.011 kpc for the
default model (cuspy halo and bulge), 0.027 kpc for the cored dwarf and 0.14 kpc for the
low-surface-brightness disk of configs/ (flat cores locate a centre less well; the
shrinking sphere alone: 0.006, 0.059 and 0.42 kpc): far below the scales any command
measures on. For a displaced galaxy they are its displacement and motion.
Units: kpc, km/s, Msun.
"""
from dataclasses import dataclass

import numpy as np

__all__ = ["Frame", "find_frame", "galaxy_frame", "subset_rows", "shrinking_sphere_centre",
           "MAX_PARTICLES", "CENTRE_FRACTION"]

#: At most this many particles (a seeded random subset) locate the frame: the centre is
#: then good to ~ r_final / sqrt(n_final) whatever the file's size, and memory stays flat.
MAX_PARTICLES = 2_000_000
#: The frame's position scatters by up to this many times its standard error (flat
#: cores; see Frame).
POSITION_ERROR_FACTOR = 4.0
#: Fraction of the particles, nearest the density centre, that fix the frame.
CENTRE_FRACTION = 0.05

# Shrinking sphere (Power et al. 2003): each step keeps the particles inside a sphere 2.5 %
# smaller than the last, about their centre of mass, and stops when fewer than
# SHRINK_MIN_PARTICLES (or 1e-3 of them all) remain; the centre is then good to about
# r_final / sqrt(n_final). The first sphere is centred on the coordinate-wise median and
# holds SHRINK_START_FACTOR times that many particles (at least 1 % of them): starting from
# the whole galaxy costs ~100 passes over nearly all particles (5 s at 1e6), and the median
# of a centrally concentrated galaxy is already within a few tenths of a kpc of its centre,
# well inside that first sphere.
SHRINK_FACTOR = 0.975
SHRINK_MIN_PARTICLES = 1000
SHRINK_START_FACTOR = 50


def shrinking_sphere_centre(position, mass):
    """Density centre (3,) of particles (position (N, 3), mass (N,)) by the shrinking-sphere
    method of Power et al. (2003).

    The centre of mass is a poor centre for a sampled galaxy: the few halo and bulge
    particles at hundreds of kpc move it by ~ r_rms / sqrt(N) (a few tenths of a kpc at
    N = 1e5), while the dense centre is located to ~0.01 kpc.
    """
    n = position.shape[0]
    centre = np.median(position, axis=0)
    d = position - centre
    d2 = np.einsum("ij,ij->i", d, d)
    floor = max(SHRINK_MIN_PARTICLES, int(1e-3 * n))
    start = min(n, max(SHRINK_START_FACTOR * floor, n // 100))
    radius = float(np.sqrt(np.partition(d2, start - 1)[start - 1])) * (1 + 1e-12)
    pos, m = position, mass
    while True:
        inside = d2 <= radius * radius
        if np.count_nonzero(inside) < floor:
            return centre
        pos, m = pos[inside], m[inside]
        centre = m @ pos / m.sum()
        d = pos - centre
        d2 = np.einsum("ij,ij->i", d, d)
        radius *= SHRINK_FACTOR


@dataclass(frozen=True)
class Frame:
    """The galaxy's centre (position kpc, velocity km/s) in a snapshot's coordinates.

    ``position_error`` and ``velocity_error`` (3,) are the standard errors of the means
    that fixed the frame. The position is a
    mode-seeking estimate whose scatter is larger, by up to POSITION_ERROR_FACTOR in flat
    cores (z-scores of rms 2.1-3.5 over 8 seeds of four configs/ models, measured): near
    a flat density maximum the mean over a sphere barely pulls towards it.
    """

    position: np.ndarray
    velocity: np.ndarray
    position_error: np.ndarray = None
    velocity_error: np.ndarray = None

    def to_galaxy(self, parts):
        """Particles (name -> dict with "position", "velocity", ...) moved into the frame:
        the galaxy's centre at rest at the origin. Other entries are kept as they are."""
        return {name: {**p, "position": np.asarray(p["position"], float) - self.position,
                       "velocity": np.asarray(p["velocity"], float) - self.velocity}
                for name, p in parts.items()}

    def as_dict(self):
        return {"position_kpc": [float(x) for x in self.position],
                "velocity_kms": [float(v) for v in self.velocity]}

    def describe(self):
        """One line for reports."""
        x = ", ".join(f"{c:+.3g}" for c in self.position)
        v = ", ".join(f"{c:+.3g}" for c in self.velocity)
        return (f"galaxy centre at ({x}) kpc, moving at ({v}) km/s "
                f"(density centre; measured about it)")


#: Most refinement steps of the centre (each moves it to the mean of the inner particles).
REFINE_STEPS = 100
#: The refinement uses at least this many particles.
REFINE_MIN_PARTICLES = 1000


def find_frame(parts):
    """The Frame of particles (name -> dict of "position" (n, 3), "velocity" (n, 3),
    "mass" (n,)).

    Start from the shrinking-sphere centre, then move the centre to the mean position of
    the nearest CENTRE_FRACTION of the particles (at least 1000; each counts once: a
    mass-weighted mean let 20 heavy halo particles among 2000 light gas particles pull the
    centre of a thin gas disk 0.06 kpc off its plane, measured) until it stops moving; the
    velocity is the mass-weighted mean of all. The shrinking sphere alone
    random-walks in a flat core (its last spheres hold few particles and feel no gradient):
    0.42 kpc off on average for the low-surface-brightness disk of configs/, 0.14 kpc after
    the refinement (5 seeds, measured); in a cusp both do well (0.006 and 0.011 kpc for the
    default model).
    Pass at most MAX_PARTICLES (a random subset, :func:`subset_rows`) for large files.
    """
    live = [p for p in parts.values() if np.asarray(p["mass"]).size]
    pos = np.concatenate([np.asarray(p["position"], float) for p in live])
    vel = np.concatenate([np.asarray(p["velocity"], float) for p in live])
    m = np.concatenate([np.asarray(p["mass"], float) for p in live])
    c = shrinking_sphere_centre(pos, m)
    k = max(min(pos.shape[0], REFINE_MIN_PARTICLES), int(CENTRE_FRACTION * pos.shape[0]))
    for _ in range(REFINE_STEPS):
        d2 = np.einsum("ij,ij->i", pos - c, pos - c)
        inner = np.argpartition(d2, k - 1)[:k]
        new = pos[inner].mean(axis=0)
        moved = float(np.linalg.norm(new - c))
        c = new
        if moved <= 1e-9 * np.sqrt(d2[inner].max()):
            break
    v = m @ vel / m.sum()
    v_error = np.sqrt(((m[:, None] * (vel - v)) ** 2).sum(axis=0)) / m.sum()
    return Frame(c, v, pos[inner].std(axis=0) / np.sqrt(k), v_error)


def subset_rows(counts, total, seed):
    """Rows of a seeded random subsample of ``total`` particles, proportional per
    component: ``counts`` maps name -> count; returns (rows name -> sorted indices,
    weights name -> count / chosen). All rows when ``total`` is None or not smaller than
    the sum."""
    everything = sum(counts.values())
    if total is None or total >= everything:
        return {n: np.arange(c) for n, c in counts.items()}, {n: 1.0 for n in counts}
    rng = np.random.default_rng(seed)
    rows, weights = {}, {}
    for name, c in counts.items():
        k = int(round(total * c / everything))
        if k == 0:
            continue
        rows[name] = np.sort(rng.choice(c, size=k, replace=False))
        weights[name] = c / k
    return rows, weights


def galaxy_frame(parts, seed, subset=True):
    """The Frame of a galaxy's particles, as every command finds it: :func:`find_frame` of
    at most MAX_PARTICLES of them, a random subset seeded with ``seed`` (the snapshot's
    seed) and picked by :func:`subset_rows`, so that a reader of the whole file and one
    of the subset alone find the same frame. ``subset=False``: ``parts`` are that subset
    already."""
    if subset:
        counts = {n: np.asarray(p["mass"]).size for n, p in parts.items()}
        rows, _ = subset_rows(counts, MAX_PARTICLES, seed)
        if any(rows[n].size < counts[n] for n in rows) or len(rows) < len(counts):
            parts = {n: {k: np.asarray(parts[n][k])[idx] for k in ("position", "velocity", "mass")}
                     for n, idx in rows.items()}
    return find_frame(parts)
