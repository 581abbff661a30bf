"""Snapshot files: the HDF5 writer (streamed, atomic), schema version 1; the reader is
icgen/snapshot_read.py (its names are importable from here too).

Layout (README.md, "Snapshot file format")::

    /                      attrs: schema, schema_version, length_unit, velocity_unit,
                                  mass_unit, G, seed, config, created, icgen_version
    /particles/<name>/     position (N, 3), velocity (N, 3), mass (N,), id (N,) uint64;
                           gas (kind gas_disk) also internal_energy (N,), specific,
                           in velocity_unit^2
                           attrs: kind, count, total_mass
    /model/rotation_curve/ radius (M,), v_circ_total (M,), v_circ_<name> (M,)

Values are in the output units named by the root attributes (the model's [output] table);
the writer converts from the internal units (kpc, km/s, Msun) once, at the edge.

The writer fills pre-sized datasets chunk by chunk in a temporary file next to the target
(``.NAME.partial-<pid>``, see :func:`icgen.paths.partial_path`) and renames it only when
everything is written, so a file at the target path is always complete. The root attribute
``schema`` is written last: even a temporary file left by a killed process is never taken
for a snapshot. HDF5 reaches the disk through :class:`_DiskFile`, which keeps HDF5 from
ever seeing a failed write (a full disk becomes one clean :class:`OutputWriteError`).
"""
import datetime
import fcntl
import io
import math
import os
import stat
from dataclasses import dataclass, field

import astropy.constants as const
import astropy.units as u
import h5py
import numpy as np

from . import __version__
from . import paths
from .errors import ModelError
from .paths import OutputWriteError, describe_os_error, format_bytes
from .units import unit_scale

__all__ = ["SCHEMA", "SCHEMA_VERSION", "READABLE_VERSIONS", "PRECISIONS", "COMPRESSIONS",
           "OutputUnits", "NonFiniteError", "OutputWriteError", "SnapshotWriter", "Snapshot",
           "read_snapshot", "read_header", "load_model_from_snapshot", "partial_path",
           "gravitational_constant", "check_format", "check_output_units",
           "estimate_file_size", "describe", "open_snapshot", "SPEED_OF_LIGHT"]

SCHEMA = "icgen-snapshot"
SCHEMA_VERSION = 2
#: Versions this icgen reads: 1 had the centre of mass moved to the origin, 2 keeps the
#: model centre there and records the centre of mass.
READABLE_VERSIONS = (1, 2)
#: Float dtype per ``precision``; explicitly little-endian, as the schema says.
PRECISIONS = {"single": "<f4", "double": "<f8"}
COMPRESSIONS = ("gzip", "lzf")
ID_DTYPE = "<u8"
#: Component kind whose particles also carry a specific internal energy.
GAS_KIND = "gas_disk"
# Ids run 1..N over the whole file in component order; 0 is left unused because some
# simulation codes read id 0 as "no particle" (common practice, from memory).
FIRST_ID = 1
# HDF5 chunk of compressed datasets, in particles: 16384 x 3 x 8 B = 384 KiB, under
# h5py's default 1 MiB chunk cache, so a partial-chunk write does not thrash it.
H5_CHUNK_ROWS = 16384
# Particles per read-modify-write step of the velocity pass (bounds its memory).
PASS_ROWS = 262144
# Half-mass radii come from a streamed histogram of radii in kpc (then converted to the
# output unit): 1000 log bins per decade (relative width 0.23 %, then linear interpolation
# inside the bin) from 1e-6 to 1e7 kpc, wide enough for any galaxy.
_R_LOG_MIN, _R_PER_DECADE = -6.0, 1000
_R_EDGES = np.logspace(_R_LOG_MIN, 7.0, 13 * _R_PER_DECADE + 1)
_ROOT_KEYS = ("schema", "schema_version", "length_unit", "velocity_unit", "mass_unit", "G",
              "seed", "config", "created", "icgen_version")
#: Speed of light in km/s (astropy.constants.c, exact by the SI definition).
SPEED_OF_LIGHT = float(const.c.to_value(u.km / u.s))
# Range of values (internal units) that every output unit must hold as normal floats of
# the file's precision, checked before any work: lengths 1e-6 kpc (0.2 au) to 1e7 kpc
# (10 Gpc, beyond any halo), speeds 1e-3 km/s to c, masses 1e-3 Msun to 1e16 Msun (above
# the most massive galaxy clusters, ~1e15 Msun). The bounds are generous on purpose: a
# unit that fails them is a typo, not a choice; values that still fall outside stop the
# writer at their chunk (NonFiniteError).
_VALUE_RANGES = {"length": (1e-6, 1e7), "velocity": (1e-3, SPEED_OF_LIGHT),
                 "mass": (1e-3, 1e16)}
# File-size estimate: HDF5 metadata per dataset (object header, layout, attributes;
# ~1.7 kB measured with h5py 3.16 / HDF5 2.0, rounded up), per chunk of a compressed
# dataset (chunk index entry, ~100 B, rounded up), and for the file (superblock, groups).
_DATASET_OVERHEAD = 4096
_CHUNK_OVERHEAD = 256
_FILE_OVERHEAD = 65536
# Points of the stored rotation curve assumed by the estimate (curve.default_radii: 120).
_CURVE_POINTS_BOUND = 1000
#: Root attributes of version 2 on, three numbers each: the sampled centre of mass (the
#: model centre is the origin) and the velocity shift that removed the net momentum.
_ROOT_VECTORS = ("centre_of_mass", "velocity_shift")


class NonFiniteError(RuntimeError):
    """A NaN or infinity about to be written; nothing is left on disk."""


def gravitational_constant(length_unit, velocity_unit, mass_unit):
    """G (astropy.constants, CODATA) in length_unit velocity_unit^2 / mass_unit."""
    target = u.Unit(length_unit) * u.Unit(velocity_unit) ** 2 / u.Unit(mass_unit)
    return float(const.G.to_value(target))


@dataclass(frozen=True)
class OutputUnits:
    """Output unit strings and the factors from internal units (x_out = x_int * scale)."""

    length: str
    velocity: str
    mass: str
    length_scale: float
    velocity_scale: float
    mass_scale: float
    G: float

    @classmethod
    def from_spec(cls, output):
        """From a :class:`icgen.spec.OutputSpec`."""
        return cls(output.length_unit, output.velocity_unit, output.mass_unit,
                   unit_scale(output.length_unit, "length", "output.length_unit"),
                   unit_scale(output.velocity_unit, "velocity", "output.velocity_unit"),
                   unit_scale(output.mass_unit, "mass", "output.mass_unit"),
                   gravitational_constant(output.length_unit, output.velocity_unit,
                                          output.mass_unit))


def check_format(precision, compress):
    """ModelError unless ``precision`` is in PRECISIONS and ``compress`` None or in COMPRESSIONS."""
    if precision not in PRECISIONS:
        raise ModelError("--precision", precision, f"must be one of {', '.join(PRECISIONS)}")
    if compress is not None and compress not in COMPRESSIONS:
        raise ModelError("--compress", compress, f"must be one of {', '.join(COMPRESSIONS)}")


def check_output_units(output, precision="double"):
    """OutputUnits of a :class:`icgen.spec.OutputSpec`, or ModelError when a unit's
    scale would turn a galaxy's values (``_VALUE_RANGES``, internal units) into infinities
    or subnormal numbers of the file's float type, or G (always float64) into one."""
    check_format(precision, None)
    info = np.finfo(PRECISIONS[precision])
    for kind, (lo, hi) in _VALUE_RANGES.items():
        unit = getattr(output, f"{kind}_unit")
        scale = unit_scale(unit, kind, f"output.{kind}_unit")
        with np.errstate(over="ignore", under="ignore"):
            big, small = np.float64(hi) * scale, np.float64(lo) * scale
        if not (math.isfinite(big) and big <= info.max and small >= info.tiny):
            internal = {"length": "kpc", "velocity": "km/s", "mass": "Msun"}[kind]
            plural = {"length": "lengths", "velocity": "speeds", "mass": "masses"}[kind]
            raise ModelError(f"output.{kind}_unit", unit,
                             f"scales {plural} by {scale:.3g}: {lo:g} to {hi:g} {internal} "
                             f"would be {small:.3g} to {big:.3g}, outside the normal "
                             f"{precision}-precision range ({info.tiny:.3g} to "
                             f"{info.max:.3g}); choose a unit nearer {internal}")
    try:
        units = OutputUnits.from_spec(output)
    except (ArithmeticError, ValueError, u.UnitsError) as exc:   # astropy scale of 0 or inf
        reason = exc.args[-1] if exc.args and isinstance(exc.args[-1], str) else str(exc)
        raise ModelError("output", f"{output.length_unit}, {output.velocity_unit}, "
                                   f"{output.mass_unit}",
                         f"astropy cannot express G in these units "
                         f"({' '.join(reason.split())}); choose units nearer kpc, km/s, Msun"
                         ) from None
    G = units.G
    if not (math.isfinite(G) and G >= np.finfo(np.float64).tiny):
        raise ModelError("output", f"{units.length}, {units.velocity}, {units.mass}",
                         f"G in these units is {G:.3g}, not a normal float64; choose units "
                         f"nearer kpc, km/s, Msun")
    return units


def estimate_file_size(plans, precision="double", compress=None, config_bytes=0):
    """Upper estimate (bytes) of the snapshot file of these plans.

    Datasets at their full size (compression assumed to gain nothing), HDF5 metadata per
    dataset and per compressed chunk, the rotation curve (at most _CURVE_POINTS_BOUND
    points) and the stored model file (``config_bytes``).
    """
    check_format(precision, compress)
    item = np.dtype(PRECISIONS[precision]).itemsize
    total = _FILE_OVERHEAD + config_bytes
    n_components = 0
    for p in plans:
        n = int(p.count)
        n_components += 1
        columns = [(3, item), (3, item), (1, item), (1, np.dtype(ID_DTYPE).itemsize)]
        if p.kind == GAS_KIND:
            columns.append((1, item))
        for width, size in columns:
            total += n * width * size + _DATASET_OVERHEAD
            if compress is not None:
                total += -(-n // H5_CHUNK_ROWS) * _CHUNK_OVERHEAD
    total += (n_components + 2) * (_CURVE_POINTS_BOUND * 8 + _DATASET_OVERHEAD)
    return int(total)


def partial_path(path):
    """Temporary name next to ``path``: ``dir/.NAME.partial-<pid>``, shortened to fit the
    file-name limit (:func:`icgen.paths.partial_path`)."""
    return paths.partial_path(path)


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


class _DiskFile:
    """The temporary file, as the file object of h5py's "fileobj" driver.

    HDF5 cannot recover from a failed write: with its own driver a full disk (ENOSPC) or
    a file-size limit (EFBIG) brought errors from finalizers ("Exception ignored") and a
    crash in the final close. Here the first failed write (or an exception raised by a
    signal handler while HDF5 calls in) is kept in :attr:`error` and every later write
    is dropped: HDF5 always sees success and closes cleanly, and the writer stops at its
    next check with :class:`OutputWriteError`. Reads past the end give zeros, as HDF5's
    own driver does. The file holds an exclusive flock while open, so that
    :func:`icgen.paths.stale_partials` never takes it for a left-over.
    """

    def __init__(self, path):
        fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_TRUNC | getattr(os, "O_CLOEXEC", 0),
                     0o666)
        self._f = io.FileIO(fd, "r+b", closefd=True)
        self.error = None
        self.written = 0              # file size when the first failure came
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:               # no lock support (some network file systems)
            pass

    @property
    def closed(self):
        return self._f.closed

    def write(self, data):
        view = memoryview(data).cast("B")
        n = len(view)
        if self._f.closed:
            return n
        start = self._f.tell()
        done = 0
        try:
            if self.error is None:
                while done < n:
                    k = self._f.write(view[done:])
                    if not k:
                        raise OSError(5, "write() wrote nothing")   # EIO
                    done += k
        except BaseException as exc:  # an OSError, or a signal's exception: never to HDF5
            self._keep(exc)
        if done < n:
            self._f.seek(start + n)
        return n

    def _keep(self, exc):
        if self.error is None:
            self.error = exc
            try:
                self.written = os.fstat(self._f.fileno()).st_size
            except OSError:
                pass

    def readinto(self, buffer):
        view = memoryview(buffer).cast("B")
        got = 0
        try:
            if not self._f.closed:
                got = self._f.readinto(view) or 0
        except BaseException as exc:  # kept and raised by the writer, never in HDF5
            self._keep(exc)
            got = 0
        if got < len(view):
            view[got:] = bytes(len(view) - got)
        return len(view)

    def read(self, size=-1):
        if size is None or size < 0:
            return b"" if self._f.closed else self._f.read()
        buffer = bytearray(size)
        self.readinto(buffer)
        return bytes(buffer)

    def seek(self, offset, whence=0):
        if self._f.closed:
            return 0
        try:
            return self._f.seek(offset, whence)
        except BaseException as exc:
            self._keep(exc)
            return self._f.seek(offset, whence)   # HDF5 seeks to absolute offsets

    def tell(self):
        if self._f.closed:
            return 0
        try:
            return self._f.tell()
        except BaseException as exc:
            self._keep(exc)
            return self._f.tell()

    def truncate(self, size=None):
        if self._f.closed:
            return 0 if size is None else size
        try:
            if self.error is None:
                return self._f.truncate(size)
        except BaseException as exc:
            self._keep(exc)
        return self._f.tell() if size is None else size

    def flush(self):
        pass

    def sync(self):
        """fsync the data to disk (a failure is kept in :attr:`error` like a write's)."""
        if self.error is None and not self._f.closed:
            try:
                os.fsync(self._f.fileno())
            except OSError as exc:
                self._keep(exc)

    def close(self):
        self._f.close()


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
        self.streams = {}
        next_id = FIRST_ID
        for p in plans:
            self.streams[p.name] = _Stream(p.kind, int(p.count), next_id)
            next_id += int(p.count)
        self._file = self._disk = None
        self._finished = False
        try:
            try:
                self._disk = _DiskFile(self.tmp_path)
            except OSError as exc:
                raise self._write_error(exc) from None
            self._file = h5py.File(self._disk, "w")
            self._create_datasets(compress)
            self._raise_if_failed()
        except BaseException:   # a signal can land here too: never leave the file
            self.abort()
            raise

    def _create_datasets(self, compress):
        opts = {}
        if compress is not None:
            opts = dict(compression=compress, shuffle=True)
        # track_order: groups list in model-file order, not alphabetically
        top = self._file.create_group("particles", track_order=True)
        for name, s in self.streams.items():
            g = top.create_group(name)
            rows = min(s.count, H5_CHUNK_ROWS)
            layout = [("position", (s.count, 3), self.dtype),
                      ("velocity", (s.count, 3), self.dtype),
                      ("mass", (s.count,), self.dtype),
                      ("id", (s.count,), np.dtype(ID_DTYPE))]
            if s.kind == GAS_KIND:
                layout.append(("internal_energy", (s.count,), self.dtype))
            for key, shape, dtype in layout:
                chunks = (rows,) + shape[1:] if opts else None
                g.create_dataset(key, shape=shape, dtype=dtype, chunks=chunks, **opts)

    # ------------------------------------------------------------------ writing

    def append(self, chunk):
        """Write one ParticleChunk (internal units) into its slice of the datasets.

        Raises NonFiniteError for a NaN or infinity, before or after conversion.
        """
        s = self.streams.get(chunk.component)
        n = len(chunk.mass)
        if s is None or chunk.start < 0 or chunk.start + n > s.count:
            raise RuntimeError(f"chunk of {chunk.component!r} [{chunk.start}, "
                               f"{chunk.start + n}) does not fit the planned datasets")
        lo, hi = chunk.start, chunk.start + n
        u_ = self.units
        columns = [("position", chunk.position, u_.length_scale),
                   ("velocity", chunk.velocity, u_.velocity_scale),
                   ("mass", chunk.mass, u_.mass_scale)]
        if s.kind == GAS_KIND:
            energy = getattr(chunk, "internal_energy", None)
            if energy is None:
                raise RuntimeError(f"gas component {chunk.component!r}: chunk has no "
                                   f"internal_energy")
            columns.append(("internal_energy", energy, u_.velocity_scale**2))
        converted = {}
        for what, values, scale in columns:
            values = np.asarray(values, dtype=np.float64)
            with np.errstate(over="ignore"):    # overflow to inf is caught just below
                out = values * scale if scale != 1.0 else values
                out = out.astype(self.dtype, copy=False)
            # one check after conversion: scales are finite and > 0, so a NaN or inf
            # in the input stays one, and a float32 overflow shows up as inf
            _check_finite(out, chunk.component, what, lo)
            converted[what] = out
        v = np.asarray(chunk.velocity, dtype=np.float64)
        if n:
            v2 = np.einsum("ij,ij->i", v, v)
            s.faster_than_light += int(np.count_nonzero(v2 > SPEED_OF_LIGHT**2))
            s.max_speed = max(s.max_speed, math.sqrt(float(v2.max())))
        m = np.asarray(chunk.mass, dtype=np.float64)
        s.mass += m.sum()
        s.mass_x += m @ np.asarray(chunk.position, dtype=np.float64)
        s.mass_v += m @ np.asarray(chunk.velocity, dtype=np.float64)
        pos = np.asarray(chunk.position, dtype=np.float64)
        r = np.sqrt(np.einsum("ij,ij->i", pos, pos))            # kpc
        if r.size:
            s.r_max = max(s.r_max, float(r.max()) * u_.length_scale)
        s.r_hist += _radius_histogram(r, m)
        g = self._file["particles"][chunk.component]
        for what, out in converted.items():
            g[what][lo:hi] = out
        g["id"][lo:hi] = np.arange(s.first_id + lo, s.first_id + hi, dtype=ID_DTYPE)
        s.written += n
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
        g = self._file.require_group("model").create_group("rotation_curve", track_order=True)
        u_ = self.units
        values = {"radius": radius * u_.length_scale}
        for name in ["total"] + list(self.streams):
            values[f"v_circ_{name}"] = np.asarray(speeds[name], float) * u_.velocity_scale
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


# ---------------------------------------------------------------------- reading

# The reader, and the validation every reader goes through, live in icgen/snapshot_read.py;
# its names stay importable from here (loaded on first use: that module imports this one).
_READER_NAMES = ("Snapshot", "read_snapshot", "read_header", "read_rows",
                 "load_model_from_snapshot", "describe", "open_snapshot")


def __getattr__(name):
    if name in _READER_NAMES:
        from . import snapshot_read
        return getattr(snapshot_read, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
