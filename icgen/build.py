"""Build a snapshot file: model -> potential -> sampled chunks -> streamed HDF5 writer.

``build_snapshot`` is what ``icgen build`` runs. Memory stays bounded whatever the
particle count: one chunk of particles (``chunk_size``) is held at a time. Positions are
written as sampled, so the model's centre is the origin of the file; the net momentum,
known only once every particle is made, is removed by a uniform velocity shift in a second
in-place pass over the velocities, slab by slab.

Every input is checked before any work starts (ModelError, nothing written): the output
path (:func:`icgen.paths.check_target`), the options, the output units, and, once the
particle counts are known and before any sampling, the file size against the free space
of the target folder. SIGINT, SIGTERM and SIGHUP become :class:`BuildInterrupted`; a
failed write (full disk, file-size limit) becomes :class:`icgen.paths.OutputWriteError`;
like any error they remove the temporary file.
"""
import dataclasses
import os
import shutil
import signal
import threading
import time
import warnings
from contextlib import contextmanager
from dataclasses import dataclass, field

import numpy as np

from . import defaults, sampling
from .sampling import realize
from .spec import ModelSpec
from .errors import ModelError
from .paths import check_target, format_bytes
from .progress import progress_enabled, stage_bar
from .snapshot import (SPEED_OF_LIGHT, SnapshotWriter, check_format, check_output_units,
                       estimate_file_size)

__all__ = ["DEFAULT_CHUNK_SIZE", "BuildInterrupted", "BuildResult", "ComponentSummary",
           "build_snapshot", "check_output_path", "check_free_space", "HANDLED_SIGNALS"]

# Particles per chunk (the reason for the number is in defaults.py).
DEFAULT_CHUNK_SIZE = defaults.CHUNK_PARTICLES
#: Signals that stop a build cleanly: Ctrl-C, kill, and closing the terminal.
HANDLED_SIGNALS = tuple(getattr(signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP")
                        if hasattr(signal, name))


class BuildInterrupted(BaseException):
    """SIGINT, SIGTERM or SIGHUP arrived during a build; the temporary file has been removed.

    A BaseException, like KeyboardInterrupt, so that no ``except Exception`` on the way
    swallows it. ``exit_status`` is 128 + the signal number (130, 143, 129), as shells
    report.
    """

    def __init__(self, signum):
        self.signum = int(signum)
        self.exit_status = 128 + self.signum
        super().__init__(f"interrupted by {signal.Signals(signum).name}")


class _SignalGuard:
    """Records SIGINT/SIGTERM/SIGHUP and raises BuildInterrupted, at once and at checkpoints.

    The handler raises at once, so a long stage stops promptly; but Python drops an
    exception raised while it runs a weakref callback or a finalizer ("Exception
    ignored in ..."), which happened in testing. So the signal is also recorded and
    :meth:`check`, called between chunks and before the final rename, raises again:
    a signalled build can never reach the rename.

    While the snapshot file is open the handler only records (:meth:`deferred`): HDF5
    calls back into Python to write, and an exception raised there would be a failed
    write inside HDF5. The checks between chunks and centring blocks then raise.
    """

    def __init__(self):
        self.received = None
        self.defer = False

    def handler(self, signum, frame):
        if self.received is not None:   # already unwinding: let the clean-up finish
            return
        self.received = signum
        if not self.defer:
            raise BuildInterrupted(signum)

    def check(self):
        if self.received is not None:
            raise BuildInterrupted(self.received)

    @contextmanager
    def deferred(self):
        """Record signals without raising while the block runs; :meth:`check` raises.
        (A signal during the final close and rename lets the complete file stand.)"""
        before, self.defer = self.defer, True
        try:
            yield self
        finally:
            self.defer = before


@contextmanager
def _signals_raise():
    """A _SignalGuard handling HANDLED_SIGNALS while the block runs (main thread only;
    elsewhere signals cannot be caught and the guard never fires). SIGXFSZ is ignored
    meanwhile, so that a file-size limit (ulimit -f) fails the write with EFBIG, which
    the writer reports, instead of killing the process and leaving its temporary file."""
    guard = _SignalGuard()
    if threading.current_thread() is not threading.main_thread():
        yield guard
        return
    previous = {s: signal.signal(s, guard.handler) for s in HANDLED_SIGNALS}
    if hasattr(signal, "SIGXFSZ"):
        previous[signal.SIGXFSZ] = signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
    try:
        yield guard
    finally:
        for s, h in previous.items():
            signal.signal(s, h)


@dataclass
class ComponentSummary:
    """One component of a written file, in the file's output units."""
    name: str
    kind: str
    count: int
    particle_mass: float
    total_mass: float
    half_mass_radius: float
    farthest: float


@dataclass
class BuildResult:
    """What ``build_snapshot`` wrote.

    ``centre_of_mass`` is (position kpc, velocity km/s) of the sampled particles, the
    velocity being the uniform shift's opposite (positions are not moved); ``timing``
    holds seconds per stage; ``warnings`` the sampler's and the writer's messages
    (particles faster than light); ``size_estimate`` the file size (bytes) estimated
    before sampling.
    """
    path: str
    size_bytes: int
    seed: int
    units: object
    components: list
    centre_of_mass: tuple
    timing: dict = field(default_factory=dict)
    warnings: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    size_estimate: int = 0

    def report(self):
        """Summary table and the output line, as printed by ``icgen build``."""
        from .textout import format_table

        L, M = self.units.length, self.units.mass
        rows = [[c.name, c.kind, f"{c.count:,}", f"{c.particle_mass:.4g}",
                 f"{c.total_mass:.4g}", f"{c.half_mass_radius:.4g}", f"{c.farthest:.4g}"]
                for c in self.components]
        headers = ["component", "kind", "particles", f"m/particle [{M}]",
                   f"total mass [{M}]", f"r_half [{L}]", f"r_max [{L}]"]
        x0, v0 = self.centre_of_mass
        vec = lambda v: "(" + ", ".join(f"{c:+.3g}" for c in v) + ")"
        lines = [format_table(headers, rows), "",
                 "r_half, r_max: half-mass radius and farthest particle, about the model "
                 "centre (the origin), from the written particles",
                 f"centre of mass of the particles: {vec(x0)} kpc from the model centre "
                 f"(|d| = {np.linalg.norm(x0):.3g} kpc, sampling noise; positions are not "
                 f"moved)",
                 f"net momentum removed: every velocity shifted by {vec(-v0)} km/s",
                 *self.notes,
                 *[f"warning: {w}" for w in self.warnings],
                 f"wrote {self.path} ({self.size_bytes / 1e6:.1f} MB, estimated before "
                 f"sampling {self.size_estimate / 1e6:.1f} MB; seed {self.seed}) "
                 f"in {sum(self.timing.values()):.1f} s"]
        return "\n".join(lines)


def check_output_path(path, overwrite=False, inputs=()):
    """Absolute target path, or ModelError if it cannot be written (nothing is touched):
    the rules of :func:`icgen.paths.check_target`, ``inputs`` being the model file."""
    return check_target(path, "--output", overwrite=overwrite, inputs=inputs)


def check_free_space(path, spec, plans, precision="double", compress=None):
    """Estimated file size (bytes, :func:`icgen.snapshot.estimate_file_size`); ModelError
    with the figures when it exceeds the free space of the target's folder."""
    need = estimate_file_size(plans, precision, compress, len(spec.to_toml().encode()))
    folder = os.path.dirname(os.path.abspath(path))
    free = shutil.disk_usage(folder).free
    if need > free:
        count = sum(int(p.count) for p in plans)
        how = f"{precision} precision" + ("; compression assumed to gain nothing"
                                          if compress else "")
        raise ModelError("--output", path, f"the snapshot needs about {format_bytes(need)} "
                                           f"({count:,} particles, {how}) but {folder} has "
                                           f"{format_bytes(free)} free")
    return need


def _check_options(precision, compress, chunk_size):
    check_format(precision, compress)
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer)) \
            or chunk_size < 1:
        raise ModelError("--chunk-size", chunk_size, f"must be a whole number >= 1, e.g. {DEFAULT_CHUNK_SIZE}")


def _resolve_spec(model, seed):
    """(spec, MassModel or None) with the seed override applied."""
    from .model import MassModel

    if isinstance(model, MassModel):
        spec, built = model.spec, model
    elif isinstance(model, ModelSpec):
        spec, built = model, None
    else:
        raise ModelError("model", model, "must be a ModelSpec or a MassModel")
    if seed is not None and seed != spec.seed:
        # ModelSpec is frozen; replace() re-runs its validation on the new seed.
        spec, built = dataclasses.replace(spec, seed=seed), None
    return spec, built


def build_snapshot(model, path, *, seed=None, overwrite=False, precision="double",
                   compress=None, chunk_size=DEFAULT_CHUNK_SIZE, quiet=True):
    """Sample ``model`` and write it as an icgen snapshot (HDF5 schema version 1).

    Parameters
    ----------
    model : icgen.spec.ModelSpec or icgen.model.MassModel
    path : str or PathLike
        Target file; its folder must exist.
    seed : int, optional
        Replaces the model's seed (stored in the file's ``seed`` and ``config``).
    overwrite : bool
        Replace an existing file at ``path``.
    precision : {"double", "single"}
        Float type of positions, velocities and masses.
    compress : {None, "gzip", "lzf"}
        Chunked datasets with shuffle and this filter; None: contiguous.
    chunk_size : int
        Particles held in memory at a time; the file does not depend on it.
    quiet : bool
        No progress bars (they are drawn only on a terminal anyway).

    Returns
    -------
    BuildResult

    Raises
    ------
    ModelError
        Bad input, found before any work (or a target that appeared meanwhile).
    NonFiniteError
        The sampler produced a NaN or infinity (names the component); nothing written.
    BuildInterrupted
        SIGINT, SIGTERM or SIGHUP; nothing written.
    icgen.paths.OutputWriteError
        A write failed (full disk, file-size limit); nothing written.
    """
    path = check_output_path(path, overwrite)
    _check_options(precision, compress, chunk_size)
    spec, built = _resolve_spec(model, seed)
    check_output_units(spec.output, precision)
    bars = progress_enabled(quiet)
    timing = {}
    with _signals_raise() as guard:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", sampling.SamplingWarning)
            model = _stage("potential", bars, timing,
                           lambda: built if built is not None else _galaxy_model(spec))
            plans = sampling.plan(model)
            estimate = check_free_space(path, spec, plans, precision, compress)
            guard.check()
            _stage("velocity tables", bars, timing, lambda: realize.samplers(model))
            guard.check()
            with guard.deferred(), SnapshotWriter(path, spec, plans, precision,
                                                  compress) as writer:
                report = sampling.SamplingReport()
                _stream(model, writer, plans, chunk_size, bars, timing, report, guard)
                # the sampler sums m x and m v per fixed block: a velocity shift that
                # does not depend on chunk_size, hence bit-identical files
                _finish(model, writer, plans, bars, timing, report.center_of_mass(), guard)
                guard.check()
                t0 = time.perf_counter()
                writer.commit(overwrite)
                timing["commit"] = time.perf_counter() - t0
    messages = []
    for w in caught:
        if issubclass(w.category, sampling.SamplingWarning):
            messages.append(str(w.message))
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    messages += _speed_warnings(writer)
    result = _result(writer, plans, path, spec, timing, messages)
    result.size_estimate = estimate
    sol = getattr(model, "gas_solution", None)
    if sol is not None:
        result.notes.append(f"gas vertical equilibrium: converged in {sol.iterations} "
                            f"iterations (last midplane density change {sol.changes[-1]:.1e})")
    return result


def _speed_warnings(writer):
    """One message per component with particles faster than light (as sampled)."""
    out = []
    for name, s in writer.streams.items():
        if s.faster_than_light:
            out.append(f"component {name!r}: {s.faster_than_light:,} particles faster than "
                       f"light (fastest {s.max_speed:.4g} km/s; c = {SPEED_OF_LIGHT:.6g} km/s,"
                       f" astropy.constants.c): the model is not physical there")
    return out


def _galaxy_model(spec):
    from .model import MassModel

    return MassModel(spec)


def _stage(name, bars, timing, fn):
    """Run a one-step stage under its own bar; record its time."""
    t0 = time.perf_counter()
    with stage_bar(name, 1, bars) as bar:
        out = fn()
        bar.update(1)
    timing[name] = time.perf_counter() - t0
    return out


def _stream(model, writer, plans, chunk_size, bars, timing, report, guard):
    """Sample every component chunk by chunk and append each chunk to the writer."""
    t_sample = t_write = 0.0
    bars_left = iter(plans)
    current, done = None, 0     # the component whose bar is open, particles shown
    bar = None
    chunks = sampling.iter_chunks(model, chunk_size=chunk_size, report=report)
    try:
        while True:
            if bar is None or done == current.count:
                # open the next component's bar before its first chunk is sampled, so
                # that its clock and rate include the sampling
                if bar is not None:
                    bar.close()
                current, done = next(bars_left, None), 0
                bar = stage_bar(current.name, current.count, bars, unit=" particles") \
                    if current is not None else None
            t0 = time.perf_counter()
            chunk = next(chunks, None)
            t1 = time.perf_counter()
            t_sample += t1 - t0
            guard.check()
            if chunk is None:
                break
            writer.append(chunk)
            t_write += time.perf_counter() - t1
            if bar is not None and current.name == chunk.component:
                bar.update(len(chunk))
                done += len(chunk)
    finally:
        chunks.close()
        if bar is not None:
            bar.close()
    timing["sampling"] = t_sample
    timing["writing"] = t_write


def _finish(model, writer, plans, bars, timing, offset, guard):
    """Velocity pass (net momentum to zero), analytic rotation curve and attributes."""
    t0 = time.perf_counter()
    radius, speeds = model.rotation_curve()
    with stage_bar("momentum", sum(p.count for p in plans), bars, unit=" particles") as bar:
        def progress(n):
            guard.check()
            bar.update(n)

        writer.finish(radius, speeds, momentum=offset, progress=progress)
    timing["momentum"] = time.perf_counter() - t0


def _result(writer, plans, path, spec, timing, messages):
    radii = writer.half_mass_radii()
    units = writer.units
    comps = []
    for p in plans:
        total = writer.streams[p.name].total_out
        comps.append(ComponentSummary(p.name, p.kind, p.count, total / p.count, total,
                                      radii[p.name], writer.streams[p.name].r_max))
    return BuildResult(path, os.path.getsize(path), spec.seed, units, comps,
                       writer.bulk, timing, messages)
