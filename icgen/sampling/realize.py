"""Orchestration: particle counts, deterministic blocks, streamed chunks, centre of mass.

A component's particles are made in fixed blocks of ``seeds.BLOCK_SIZE``; block b of the
component at position c in the model file depends only on (model seed, c, b) and on the
model's tables, so chunks of any size, made in any order or on other workers, give the
same bytes. Only one chunk (plus one block and the tables) is held in memory.
"""
import time
import warnings
import weakref
from dataclasses import dataclass, field

import numpy as np

from ..spec import model_warnings
from .. import defaults
from ..errors import ModelError, MISSING
from ..kinds import kind_of
from ..kinds.spheroid import spherical_range
from ..samplers import seeds
from ..samplers.spheroid_velocities import radial_table

# Halo particles heavier than this many disk particles heat the disk numerically
# (Ludlow et al. 2019, MNRAS 488, L123); common practice is to stay below ~5.
MASS_RATIO_LIMIT = 5.0


class SamplingWarning(UserWarning):
    """A sampled model that is legal but likely to behave badly in a simulation."""


@dataclass(frozen=True)
class ComponentPlan:
    """Particle budget of one component: count and particle mass (Msun)."""
    name: str
    kind: str
    count: int
    particle_mass: float
    index: int


@dataclass
class ParticleChunk:
    """Consecutive particles ``start .. start + n`` of one component (internal units)."""
    component: str
    start: int
    position: np.ndarray    # (n, 3) kpc
    velocity: np.ndarray    # (n, 3) km/s
    mass: np.ndarray        # (n,) Msun
    internal_energy: np.ndarray | None = None   # (n,) (km/s)^2, gas only

    def __len__(self):
        return self.mass.shape[0]


@dataclass
class SamplingReport:
    """Diagnostics of one sampling run, filled in while chunks are made.

    Attributes
    ----------
    plan : list of ComponentPlan
    warnings : list of str
    clamped_mass_fraction : dict name -> float
        Per disk, the fraction of its sampled mass where vbar_phi^2 < 0 was set to 0.
    timing : dict name -> float
        Seconds spent on the tables ("tables") and on each component's particles.
    block_sums : dict (component index, block) -> (m, m x (3,), m v (3,))
        Sums over each whole block made (Msun, Msun kpc, Msun km/s), float64.
    """
    plan: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    clamped_mass_fraction: dict = field(default_factory=dict)
    timing: dict = field(default_factory=dict)
    block_sums: dict = field(default_factory=dict, repr=False)

    def add_block(self, component, block, mass, position, velocity):
        """Record the sums of one whole block (float64 arrays, internal units) of the
        component at index ``component`` in the model file."""
        key = (int(component), int(block))
        if key in self.block_sums:
            raise ValueError(f"block {key[1]} of component {key[0]} recorded twice")
        self.block_sums[key] = (mass.sum(), mass @ position, mass @ velocity)

    def merge(self, other):
        """Add the block sums of another report (pieces made by other workers); a block
        recorded in both is an error."""
        twice = self.block_sums.keys() & other.block_sums.keys()
        if twice:
            raise ValueError(f"blocks {sorted(twice)[:3]} (component, block) recorded twice")
        self.block_sums.update(other.block_sums)

    def center_of_mass(self):
        """(position (3,) kpc, velocity (3,) km/s) of all blocks recorded: per component
        the blocks added in block order, then the components in model order, so the
        result does not depend on the order (or the worker) the blocks came from."""
        sums = {}
        for (c, _), (m, mx, mv) in sorted(self.block_sums.items(), key=lambda kv: kv[0]):
            tm, tx, tv = sums.setdefault(c, [0.0, np.zeros(3), np.zeros(3)])
            sums[c] = [tm + m, tx + mx, tv + mv]
        m = sum(s[0] for s in sums.values())
        if m == 0:
            return np.zeros(3), np.zeros(3)
        return (sum(s[1] for s in sums.values()) / m,
                sum(s[2] for s in sums.values()) / m)

    def summary(self):
        """Short human-readable lines."""
        lines = [f"{p.name}: {p.count} particles of {p.particle_mass:.4g} Msun"
                 for p in self.plan]
        lines += [f"{n}: mean rotation clamped for {f:.3%} of the mass"
                  for n, f in self.clamped_mass_fraction.items()]
        lines += [f"time {k}: {v:.2f} s" for k, v in self.timing.items()]
        return lines + [f"warning: {w}" for w in self.warnings]


def plan(model):
    """Particle count and mass per component, in model-file order.

    Count = ``particles`` of the component, or round(total mass / model.particle_mass);
    a point mass is one particle.
    """
    out = []
    for index, spec in enumerate(model.spec.components):
        comp = model.components[spec.name]
        mass = float(comp.total_mass)
        count = spec.particles
        if count is None:
            pm = model.spec.particle_mass
            if pm is None:
                raise ModelError(f"components.{spec.name}.particles", MISSING,
                                 "required unless [model] sets particle_mass")
            count = int(round(mass / pm))
            if count < 1:
                raise ModelError("model.particle_mass", pm, f"leaves component "
                                 f"{spec.name!r} ({mass:.3g} Msun) with no particle; "
                                 f"use a smaller particle mass")
        out.append(ComponentPlan(spec.name, comp.kind, int(count), mass / count, index))
    return out


def mass_warnings(plans):
    """Messages for halo particles more than MASS_RATIO_LIMIT times heavier than disk ones."""
    disks = [p for p in plans if kind_of(p).stellar_disk]
    if not disks:
        return []
    light = min(disks, key=lambda p: p.particle_mass)
    out = []
    for p in plans:
        ratio = p.particle_mass / light.particle_mass
        if kind_of(p).dark and ratio > MASS_RATIO_LIMIT:
            out.append(f"halo particles of {p.name!r} ({p.particle_mass:.3g} Msun) are "
                       f"{ratio:.1f} times heavier than those of disk {light.name!r}; above "
                       f"{MASS_RATIO_LIMIT:g} they heat the disk numerically "
                       f"(Ludlow et al. 2019, MNRAS 488, L123)")
    return out


# -- samplers: tables built once per model object ------------------------------------
_CACHE = weakref.WeakKeyDictionary()


class SharedTables:
    """Tables that several components' samplers share, made on first use: the spherically
    averaged total potential of the spheroids (icgen.samplers.spheroid_velocities)."""

    def __init__(self, model):
        self.model = model
        self._spherical = None

    def spherical(self):
        if self._spherical is None:
            self._spherical = radial_table(self.model.potential,
                                           *spherical_range(self.model))
        return self._spherical


def samplers(model):
    """Per-component samplers (tables included) of ``model``, built once and cached; each
    kind makes its own (icgen.kinds)."""
    if model not in _CACHE:
        tables = SharedTables(model)
        _CACHE[model] = {s.name: kind_of(s).sampler(model, s.name, tables)
                         for s in model.spec.components}
    return _CACHE[model]


def _block(model, cplan, block, quiet_start, mirror):
    """One block of a component: (columns, clamped count); columns are position,
    velocity, mass and, for gas, internal energy. ``quiet_start``/``mirror`` None: the
    model file's ``[model]`` settings."""
    quiet_start = model.spec.quiet_start if quiet_start is None else bool(quiet_start)
    mirror = model.spec.mirror if mirror is None else bool(mirror)
    start = block * seeds.BLOCK_SIZE
    n_out = min(seeds.BLOCK_SIZE, cplan.count - start)
    n_base = (n_out + 1) // 2 if mirror else n_out
    first = start // 2 if mirror else start
    u = seeds.block_uniforms(model.spec.seed, cplan.index, block, n_base, first, quiet_start)
    sampler = samplers(model)[cplan.name]
    pos, vel, clamped = sampler.draw(u)
    if not (np.isfinite(pos).all() and np.isfinite(vel).all()):
        # a bug, not bad input: never let a NaN or inf reach a snapshot
        raise FloatingPointError(f"non-finite particle in component {cplan.name!r}, "
                                 f"block {block}")
    clamped = np.zeros(n_base, bool) if clamped is None else clamped
    if mirror:
        # point reflection x -> -x, v -> -v keeps L = x cross v: rotation survives
        pos = np.stack([pos, -pos], axis=1).reshape(-1, 3)[:n_out]
        vel = np.stack([vel, -vel], axis=1).reshape(-1, 3)[:n_out]
        clamped = np.repeat(clamped, 2)[:n_out]
    columns = [pos, vel, np.full(n_out, cplan.particle_mass)]
    energy = getattr(sampler, "internal_energy", None)
    if energy is not None:
        columns.append(np.full(n_out, float(energy)))
    return columns, int(np.count_nonzero(clamped))


def _chunk(name, start, columns):
    return ParticleChunk(name, start, *columns)


def _check_options(chunk_size=1):
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer)) \
            or chunk_size < 1:
        raise ModelError("chunk_size", chunk_size, "must be a whole number >= 1")


def iter_chunks(model, chunk_size=defaults.CHUNK_PARTICLES, quiet_start=None, mirror=None,
                report=None):
    """Yield ParticleChunk objects component by component, in model-file order.

    Parameters
    ----------
    model : MassModel
    chunk_size : int
        Particles per chunk (the last chunk of a component may be shorter). The particles
        do not depend on it.
    quiet_start : bool or None
        Positions and velocities from a scrambled Sobol sequence (one per component).
        None: the model file's ``[model] quiet_start`` (default false).
    mirror : bool or None
        Each particle followed by its point reflection (x, v) -> (-x, -v). None: the
        model file's ``[model] mirror`` (default false).
    report : SamplingReport, optional
        Filled in with the plan, warnings, timing, clamped mass fractions and the sums
        behind ``report.center_of_mass()`` (for removing the offset after streaming).
    """
    _check_options(chunk_size)
    report = SamplingReport() if report is None else report
    plans = plan(model)
    report.plan = plans
    for message in mass_warnings(plans) + model_warnings(model.spec):
        warnings.warn(message, SamplingWarning, stacklevel=2)
        report.warnings.append(message)
    t0 = time.perf_counter()
    samplers(model)
    report.timing["tables"] = time.perf_counter() - t0
    for cplan in plans:
        yield from _component_chunks(model, cplan, chunk_size, quiet_start, mirror, report)
        frac = report.clamped_mass_fraction.get(cplan.name, 0.0)
        if frac > 0:
            kind = kind_of(cplan).label
            message = (f"{kind} {cplan.name!r}: mean rotation set to 0 where the asymmetric "
                       f"drift (or pressure support) exceeds v_c, for {frac:.3%} of its "
                       f"mass (too hot there)")
            warnings.warn(message, SamplingWarning, stacklevel=2)
            report.warnings.append(message)


def _component_chunks(model, cplan, chunk_size, quiet_start, mirror, report):
    buf, held, emitted, clamped, busy = [], 0, 0, 0, 0.0
    n_blocks = seeds.block_count(cplan.count)
    for b in range(n_blocks):
        t0 = time.perf_counter()
        columns, nc = _block(model, cplan, b, quiet_start, mirror)
        busy += time.perf_counter() - t0      # time spent by the consumer is not ours
        report.add_block(cplan.index, b, columns[2], columns[0], columns[1])
        clamped += nc
        buf.append(columns)
        held += columns[2].size
        while held >= chunk_size or (b == n_blocks - 1 and held > 0):
            joined = [np.concatenate(c) for c in zip(*buf)]
            k = min(chunk_size, held)
            yield _chunk(cplan.name, emitted, [c[:k] for c in joined])
            buf = [[c[k:] for c in joined]] if held > k else []
            held -= k
            emitted += k
    report.timing[cplan.name] = report.timing.get(cplan.name, 0.0) + busy
    if kind_of(cplan).flattened:
        report.clamped_mass_fraction[cplan.name] = clamped / cplan.count


def particles(model, component, start, stop, quiet_start=None, mirror=None):
    """Particles start .. stop - 1 of one component as a ParticleChunk.

    An independent unit of work: it needs only the model (and its cached tables), so
    ranges can be made in any order or on other workers with identical results.
    """
    cplan = next((p for p in plan(model) if p.name == component), None)
    if cplan is None:
        raise ModelError("component", component, "no such component in the model")
    start, stop = max(int(start), 0), min(int(stop), cplan.count)
    parts = []
    for b in range(start // seeds.BLOCK_SIZE, seeds.block_count(stop)):
        columns, _ = _block(model, cplan, b, quiet_start, mirror)
        lo = max(start - b * seeds.BLOCK_SIZE, 0)
        hi = min(stop - b * seeds.BLOCK_SIZE, columns[2].size)
        parts.append([c[lo:hi] for c in columns])
    if not parts:
        return ParticleChunk(component, start, np.zeros((0, 3)), np.zeros((0, 3)), np.zeros(0))
    return _chunk(component, start, [np.concatenate(c) for c in zip(*parts)])


def sample(model, quiet_start=None, mirror=None, report=None):
    """All particles in memory, with zero net momentum.

    Positions are as sampled: the model's centre is the origin (the sampled centre of mass
    sits a noise-sized distance from it, ``report.center_of_mass()``); the mass-weighted
    mean velocity is subtracted from every particle, as ``icgen build`` does.

    Returns
    -------
    dict name -> dict(position (n, 3) kpc, velocity (n, 3) km/s, mass (n,) Msun
    [, internal_energy (n,) (km/s)^2 for gas])
    """
    report = SamplingReport() if report is None else report
    parts = {}
    for chunk in iter_chunks(model, 1 << 20, quiet_start, mirror, report):
        parts.setdefault(chunk.component, []).append(chunk)
    _, v0 = report.center_of_mass()
    out = {}
    for name, chunks in parts.items():
        out[name] = {"position": np.concatenate([c.position for c in chunks]),
                     "velocity": np.concatenate([c.velocity for c in chunks]) - v0,
                     "mass": np.concatenate([c.mass for c in chunks])}
        if chunks[0].internal_energy is not None:
            out[name]["internal_energy"] = np.concatenate([c.internal_energy for c in chunks])
    return out


def center_of_mass(model, quiet_start=None, mirror=None):
    """(position (3,) kpc, velocity (3,) km/s) of the full realisation, by one streamed
    pass that keeps nothing; a writer that streamed chunks can also read it from the
    SamplingReport it passed to ``iter_chunks``."""
    report = SamplingReport()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SamplingWarning)
        for _ in iter_chunks(model, 1 << 20, quiet_start, mirror, report):
            pass
    return report.center_of_mass()
