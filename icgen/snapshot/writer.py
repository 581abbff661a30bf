"""The snapshot writer: streamed, atomic (docs/snapshot-format.md).

Values are in the output units of the model's ``[output]`` table; the writer converts
from the internal units (kpc, km/s, Msun) once, at the edge (:class:`FileUnits`).

The writer fills pre-sized datasets chunk by chunk in a temporary file next to the target
(``.NAME.partial-<pid>``, see :func:`icgen.paths.partial_path`) and renames it only when
everything is written, so a file at the target path is always complete. The root attribute
``schema`` is written last: even a temporary file left by a killed process is never taken
for a snapshot. HDF5 reaches the disk through :class:`DiskFile`, which keeps HDF5 from
ever seeing a failed write (a full disk becomes one clean :class:`OutputWriteError`).

A piece of the particle range is written by :func:`create_datasets` and
:func:`write_chunk` alone (conversion, finite checks, ids), into any group: the
writer's own file, or a file holding one block range of one component.
"""
import datetime
import math
import os
import stat
from dataclasses import dataclass, field

import h5py
import numpy as np

from ..version import __version__
from ..errors import ModelError
from ..paths import OutputWriteError, describe_os_error, format_bytes, partial_path
from .diskfile import DiskFile
from .schema import (CURVE_GROUP, H5_CHUNK_ROWS, ID_DTYPE, PRECISIONS, SCHEMA, SCHEMA_VERSION,
                     SPEED_OF_LIGHT, check_format, check_output_units, datasets,
                     estimate_file_size, first_ids)

__all__ = ["NonFiniteError", "SnapshotWriter", "create_datasets", "write_chunk"]

# Particles per read-modify-write step of the velocity pass (bounds its memory).
PASS_ROWS = 262144
# Half-mass radii come from a streamed histogram of radii in kpc (then converted to the
# output unit): 1000 log bins per decade (relative width 0.23 %, then linear interpolation
# inside the bin) from 1e-6 to 1e7 kpc, wide enough for any galaxy.
_R_LOG_MIN, _R_PER_DECADE = -6.0, 1000
_R_EDGES = np.logspace(_R_LOG_MIN, 7.0, 13 * _R_PER_DECADE + 1)


class NonFiniteError(RuntimeError):
    """A NaN or infinity about to be written; nothing is left on disk."""


def _check_finite(values, component, what, start):
    """Raise NonFiniteError naming the component and the first bad particle."""
    bad = ~np.isfinite(values)
    if bad.any():
        row = int(np.flatnonzero(bad.reshape(values.shape[0], -1).any(axis=1))[0])
        shown = ", ".join(f"{float(x):.6g}" for x in np.atleast_1d(values[row]))
        shown = f"({shown})" if values.ndim > 1 else shown
        raise NonFiniteError(
            f"component {component!r}: {what} of particle {start + row} is {shown} (in "
            f"output units); sampling produced a non-finite value, nothing written")


def create_datasets(group, kind, count, dtype, compress=None):
    """The datasets of one particle group (schema ``datasets(kind)``), ``count`` rows of
    ``dtype`` floats and ids; ``compress`` None: contiguous, else chunked with shuffle."""
    opts = {} if compress is None else dict(compression=compress, shuffle=True)
    rows = min(count, H5_CHUNK_ROWS)
    for key, (tail, kind_) in datasets(kind).items():
        shape = (count,) + tail
        chunks = (rows,) + tail if opts else None
        group.create_dataset(key, shape=shape, dtype=dtype if kind_ == "f" else ID_DTYPE,
                             chunks=chunks, **opts)


def write_chunk(group, chunk, kind, units, first_id, offset=0):
    """Write one ParticleChunk (internal units) into ``group``'s datasets.

    Rows ``chunk.start - offset`` on (a group holding a component's particles from
    ``offset`` on); ids ``first_id + chunk.start`` on, ``first_id`` being the component's
    first id in the whole file. Values are converted with ``units`` (FileUnits) to the
    datasets' float type; a NaN or infinity, before or after the conversion, raises
    NonFiniteError before anything is written.
    """
    dtype = group["position"].dtype
    lo = chunk.start
    converted = {}
    for what in datasets(kind):
        if what == "id":
            continue
        values = getattr(chunk, what, None)
        if values is None:
            raise RuntimeError(f"gas component {chunk.component!r}: chunk has no {what}")
        values = np.asarray(values, dtype=np.float64)
        with np.errstate(over="ignore"):    # overflow to inf is caught just below
            out = units.to_file(what, values).astype(dtype, copy=False)
        # one check after conversion: scales are finite and > 0, so a NaN or inf
        # in the input stays one, and a float32 overflow shows up as inf
        _check_finite(out, chunk.component, what, lo)
        converted[what] = out
    n = len(chunk.mass)
    for what, out in converted.items():
        group[what][lo - offset:lo - offset + n] = out
    group["id"][lo - offset:lo - offset + n] = np.arange(first_id + lo, first_id + lo + n,
                                                         dtype=ID_DTYPE)


@dataclass
class _Stream:
    """Per-component bookkeeping of the writer (internal units, float64 sums)."""
    kind: str
    count: int
    first_id: int
    written: int = 0
    mass: float = 0.0
    mass_x: np.ndarray = field(default_factory=lambda: np.zeros(3))
    mass_v: np.ndarray = field(default_factory=lambda: np.zeros(3))
    r_hist: np.ndarray = field(default_factory=lambda: np.zeros(_R_EDGES.size + 1))
    r_max: float = 0.0        # farthest particle from the origin, output unit
    total_out: float = 0.0    # sum of the written masses, output unit
    faster_than_light: int = 0    # particles with |v| > c, as sampled
    max_speed: float = 0.0        # km/s, as sampled

    def record(self, chunk, length_scale):
        """Add one chunk's sums, speeds and radii (float64, internal units)."""
        v = np.asarray(chunk.velocity, dtype=np.float64)
        if len(chunk.mass):
            v2 = np.einsum("ij,ij->i", v, v)
            self.faster_than_light += int(np.count_nonzero(v2 > SPEED_OF_LIGHT**2))
            self.max_speed = max(self.max_speed, math.sqrt(float(v2.max())))
        m = np.asarray(chunk.mass, dtype=np.float64)
        pos = np.asarray(chunk.position, dtype=np.float64)
        self.mass += m.sum()
        self.mass_x += m @ pos
        self.mass_v += m @ v
        r = np.sqrt(np.einsum("ij,ij->i", pos, pos))            # kpc
        if r.size:
            self.r_max = max(self.r_max, float(r.max()) * length_scale)
        self.r_hist += _radius_histogram(r, m)
        self.written += len(chunk.mass)


class SnapshotWriter:
    """Streamed writer of one snapshot file.

    Use::

        with SnapshotWriter(path, spec, plans) as w:   # a temporary file is created
            for chunk in chunks:
                w.append(chunk)                        # internal units, any order
            w.finish(curve_radius, curve_speeds)       # net momentum -> 0, attrs
            w.commit()                                 # rename onto ``path``

    Positions are written as sampled: the model's centre is the origin of the file.

    Leaving the ``with`` block without ``commit`` (an error, a signal) removes the
    temporary file.

    Parameters
    ----------
    path : str or PathLike
        Target file.
    spec : icgen.spec.ModelSpec
        The resolved model: its ``output`` units, ``seed`` and ``to_toml()`` are stored.
    plans : sequence
        Per component, in file order, objects with ``name``, ``kind`` and ``count``
        (e.g. :func:`icgen.sampling.plan`).
    precision : {"double", "single"}
        Float type of position, velocity and mass.
    compress : {None, "gzip", "lzf"}
        None: contiguous datasets; otherwise chunked with the shuffle filter.

    A failed write (full disk, file-size limit) raises :class:`OutputWriteError` from
    the call that finds it (``append``, ``commit``, or the ``with`` block's exit) and
    removes the temporary file.
    """

    def __init__(self, path, spec, plans, precision="double", compress=None):
        check_format(precision, compress)
        self.path = os.path.abspath(path)
        self.tmp_path = partial_path(path)
        self.spec = spec
        self.units = check_output_units(spec.output, precision)
        self.dtype = np.dtype(PRECISIONS[precision])
        self.size_estimate = estimate_file_size(plans, precision, compress,
                                                len(spec.to_toml().encode()))
        self.bulk = (np.zeros(3), np.zeros(3))
        ids = first_ids([p.count for p in plans])
        self.streams = {p.name: _Stream(p.kind, int(p.count), i) for p, i in zip(plans, ids)}
        self._file = self._disk = None
        self._finished = False
        try:
            try:
                self._disk = DiskFile(self.tmp_path)
            except OSError as exc:
                raise self._write_error(exc) from None
            self._file = h5py.File(self._disk, "w")
            self._create_datasets(compress)
            self._raise_if_failed()
        except BaseException:   # a signal can land here too: never leave the file
            self.abort()
            raise

    def _create_datasets(self, compress):
        # track_order: groups list in model-file order, not alphabetically
        top = self._file.create_group("particles", track_order=True)
        for name, s in self.streams.items():
            create_datasets(top.create_group(name), s.kind, s.count, self.dtype, compress)

    # ------------------------------------------------------------------ writing

    def append(self, chunk):
        """Write one ParticleChunk (internal units) into its slice of the datasets
        (:func:`write_chunk`). Raises NonFiniteError for a NaN or infinity."""
        s = self.streams.get(chunk.component)
        n = len(chunk.mass)
        if s is None or chunk.start < 0 or chunk.start + n > s.count:
            raise RuntimeError(f"chunk of {chunk.component!r} [{chunk.start}, "
                               f"{chunk.start + n}) does not fit the planned datasets")
        write_chunk(self._file["particles"][chunk.component], chunk, s.kind, self.units,
                    s.first_id)
        s.record(chunk, self.units.length_scale)
        self._raise_if_failed()

    def centre_of_mass(self):
        """(position (3,) kpc, velocity (3,) km/s) of everything appended so far."""
        m = sum(s.mass for s in self.streams.values())
        if m == 0:
            return np.zeros(3), np.zeros(3)
        return (sum(s.mass_x for s in self.streams.values()) / m,
                sum(s.mass_v for s in self.streams.values()) / m)

    def finish(self, curve_radius, curve_speeds, momentum=None, progress=None):
        """Remove the net momentum and write all attributes.

        Positions are never moved: the model's centre stays at the origin, and the sampled
        centre of mass, a noise-sized distance from it, is recorded in the root attribute
        ``centre_of_mass``. The net momentum is removed by one uniform velocity shift,
        recorded in ``velocity_shift``, so that nothing drifts in a live simulation.

        Parameters
        ----------
        curve_radius : ndarray (M,)
            Radii of the analytic rotation curve, kpc.
        curve_speeds : dict
            "total" and each component name -> (M,) circular speed, km/s.
        momentum : (ndarray (3,), ndarray (3,)), optional
            Centre of mass (kpc) and mass-weighted mean velocity (km/s) of all particles.
            Default: from the appended chunks, whose last bits depend on how the particles
            were chunked; pass sums made in a fixed order (the sampler's per-block sums)
            for files that are bit-identical whatever the chunk size. The velocity is
            subtracted from every particle, in place and slab by slab (memory stays
            bounded); zero: no shift.
        progress : callable(n), optional
            Called with the number of particles done in the velocity pass.
        """
        for name, s in self.streams.items():
            if s.written != s.count:
                raise RuntimeError(f"component {name!r}: {s.written} of {s.count} particles written")
        x0, v0 = self.centre_of_mass() if momentum is None else momentum
        self.bulk = (np.asarray(x0, float).reshape(3), np.asarray(v0, float).reshape(3))
        for name in self.streams:
            self._velocity_pass(name, progress)
        self._write_curve(np.asarray(curve_radius, float), curve_speeds)
        self._write_attrs()
        self._finished = True

    def _velocity_pass(self, name, progress):
        """Shift one component's velocities in place; sum its written masses (in fixed
        slabs, so that the sum does not depend on the sampler's chunking)."""
        s = self.streams[name]
        g = self._file["particles"][name]
        v0 = self.bulk[1] * self.units.velocity_scale
        shift = bool(np.any(v0 != 0))
        s.total_out = 0.0
        for lo in range(0, s.count, PASS_ROWS):
            hi = min(lo + PASS_ROWS, s.count)
            if shift:
                g["velocity"][lo:hi] = _shifted(g["velocity"][lo:hi].astype(np.float64) - v0,
                                                name, "velocity", lo, self.dtype)
            s.total_out += float(g["mass"][lo:hi].astype(np.float64).sum())
            if progress is not None:
                progress(hi - lo)

    def _write_curve(self, radius, speeds):
        parent, leaf = CURVE_GROUP.split("/")
        g = self._file.require_group(parent).create_group(leaf, track_order=True)
        values = {"radius": self.units.to_file("radius", radius)}
        for name in ["total"] + list(self.streams):
            key = f"v_circ_{name}"
            values[key] = self.units.to_file(key, np.asarray(speeds[name], float))
        for key, v in values.items():
            _check_finite(v, "rotation curve", key, 0)
            g.create_dataset(key, data=v.astype("<f8"))

    def _write_attrs(self):
        for name, s in self.streams.items():
            g = self._file["particles"][name]
            g.attrs["kind"] = s.kind
            g.attrs["count"] = np.int64(s.count)
            g.attrs["total_mass"] = s.total_out
        a = self._file.attrs
        created = datetime.datetime.now(datetime.timezone.utc).replace(microsecond=0)
        a["schema_version"] = np.int64(SCHEMA_VERSION)
        a["length_unit"] = self.units.length
        a["velocity_unit"] = self.units.velocity
        a["mass_unit"] = self.units.mass
        a["G"] = self.units.G
        a["seed"] = np.int64(self.spec.seed)
        a["centre_of_mass"] = (self.bulk[0] * self.units.length_scale).astype("<f8")
        a["velocity_shift"] = (-self.bulk[1] * self.units.velocity_scale).astype("<f8")
        a["config"] = self.spec.to_toml()
        a["created"] = created.isoformat().replace("+00:00", "Z")
        a["icgen_version"] = __version__
        a["schema"] = SCHEMA       # last: marks the file as complete

    def half_mass_radii(self):
        """Component name -> radius (output length unit) of the sphere about the model
        centre (the origin) holding half its mass, from the written particles."""
        # a single particle is its own centre (the histogram would say "< 1e-6")
        return {name: 0.0 if s.count == 1
                else _half_mass_radius(s.r_hist) * self.units.length_scale
                for name, s in self.streams.items()}

    # ------------------------------------------------------------------ closing

    def commit(self, overwrite=False):
        """Check every float attribute, close, flush to disk and rename the temporary
        file onto the target. NonFiniteError or OutputWriteError leave nothing."""
        if not self._finished:
            raise RuntimeError("commit() before finish()")
        self._check_attributes()
        self._raise_if_failed()
        self._file.close()
        self._disk.sync()            # data on disk before the rename makes it visible
        self._raise_if_failed()      # the final close and fsync write too
        self._disk.close()
        if os.path.lexists(self.path):
            # the target appeared, or changed kind, while we were building
            try:
                st = os.stat(self.path)
                regular = stat.S_ISREG(st.st_mode)
            except OSError:
                regular = True       # a dangling link: os.replace replaces the link
            if not overwrite or not regular:
                self.abort()
                rule = ("file exists; pass --overwrite to replace it" if regular else
                        "is not a regular file; icgen writes and replaces regular files only")
                raise ModelError("--output", self.path, rule)
        os.replace(self.tmp_path, self.path)

    def _check_attributes(self):
        """NonFiniteError for a NaN or infinite float attribute anywhere in the file."""
        def check(where, obj):
            for key, value in obj.attrs.items():
                arr = np.asarray(value)
                if arr.dtype.kind in "fc" and not np.all(np.isfinite(arr)):
                    raise NonFiniteError(f"attribute {key!r} of /{where} is "
                                         f"{' '.join(str(value).split())} (in output units); "
                                         f"nothing written")
        check("", self._file)
        self._file.visititems(check)

    def _raise_if_failed(self):
        """Raise what the disk file kept: OutputWriteError for a failed write, or the
        exception a signal handler raised while HDF5 was writing."""
        error = None if self._disk is None else self._disk.error
        if error is None:
            return
        if isinstance(error, OSError):
            raise self._write_error(error) from None
        raise error

    def _write_error(self, exc):
        """OutputWriteError for ``exc``: what failed, where, and the space needed."""
        import resource
        import shutil

        folder = os.path.dirname(self.path)
        written = 0 if self._disk is None else self._disk.written
        line = (f"cannot write {self.path}: {describe_os_error(exc)} with "
                f"{format_bytes(written)} written; the snapshot needs about "
                f"{format_bytes(self.size_estimate)}")
        try:
            line += f", {format_bytes(shutil.disk_usage(folder).free)} free in {folder}"
        except OSError:
            pass
        limit = resource.getrlimit(resource.RLIMIT_FSIZE)[0]
        if limit != resource.RLIM_INFINITY:
            line += f", file-size limit (ulimit -f) {format_bytes(limit)}"
        return OutputWriteError(line + "; nothing written")

    def abort(self):
        """Close and remove the temporary file (safe to call more than once)."""
        try:
            if self._file is not None and self._file.id.valid:
                try:
                    self._file.close()
                except Exception:    # the file is removed below whatever HDF5 says
                    pass
        finally:
            if self._disk is not None:
                self._disk.close()
            try:
                os.remove(self.tmp_path)
            except FileNotFoundError:
                pass

    @property
    def write_failed(self):
        """True once a write to the temporary file has failed."""
        return self._disk is not None and isinstance(self._disk.error, OSError)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None or os.path.lexists(self.tmp_path):
            self.abort()
        if exc_type is not None and issubclass(exc_type, Exception) and self.write_failed \
                and not issubclass(exc_type, OutputWriteError):
            # whatever broke after a failed write (a read of dropped data) is that failure
            raise self._write_error(self._disk.error) from None
        return False


def _shifted(values, component, what, start, dtype):
    _check_finite(values, component, what, start)
    with np.errstate(over="ignore"):
        out = values.astype(dtype)
    _check_finite(out, component, what, start)
    return out


def _radius_histogram(r, mass):
    """Mass per log bin of _R_EDGES, with an underflow (index 0) and overflow bin."""
    # the bin index from log10 directly: 10 times faster than searchsorted on the edges
    with np.errstate(divide="ignore"):      # r = 0 -> -inf -> underflow bin
        x = (np.log10(r) - _R_LOG_MIN) * _R_PER_DECADE
    index = np.clip(np.floor(x) + 1, 0, _R_EDGES.size).astype(np.intp)
    return np.bincount(index, weights=mass, minlength=_R_EDGES.size + 1)


def _half_mass_radius(hist):
    """Radius where the cumulative histogram reaches half the mass (linear in the bin)."""
    total = hist.sum()
    if total <= 0:
        return math.nan
    cum = np.cumsum(hist)
    k = int(np.searchsorted(cum, 0.5 * total))
    if k >= _R_EDGES.size:
        return math.inf
    lo = 0.0 if k == 0 else _R_EDGES[k - 1]
    hi = _R_EDGES[k]
    before = cum[k - 1] if k > 0 else 0.0
    return float(lo + (hi - lo) * (0.5 * total - before) / hist[k])
