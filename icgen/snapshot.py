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
(``.NAME.partial-<pid>``) and renames it only when everything is written, so a file at the
target path is always complete. The root attribute ``schema`` is written last: even a
temporary file left by a killed process is never taken for a snapshot.
"""
import datetime
import math
import os
from dataclasses import dataclass, field

import astropy.constants as const
import astropy.units as u
import h5py
import numpy as np

from . import __version__
from .errors import ModelError
from .units import unit_scale

__all__ = ["SCHEMA", "SCHEMA_VERSION", "PRECISIONS", "COMPRESSIONS", "OutputUnits",
           "NonFiniteError", "SnapshotWriter", "Snapshot", "read_snapshot", "read_header",
           "load_model_from_snapshot", "partial_path", "gravitational_constant",
           "check_format", "describe", "open_snapshot"]

SCHEMA = "icgen-snapshot"
SCHEMA_VERSION = 1
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
# Particles per read-modify-write step of the centre-of-mass pass (bounds its memory).
PASS_ROWS = 262144
# Half-mass radii come from a streamed histogram of radii in output length units:
# 1000 log bins per decade (relative width 0.23 %, then linear interpolation inside
# the bin) from 1e-6 to 1e7, wide enough for any galaxy in any sane length unit.
_R_LOG_MIN, _R_PER_DECADE = -6.0, 1000
_R_EDGES = np.logspace(_R_LOG_MIN, 7.0, 13 * _R_PER_DECADE + 1)
_ROOT_KEYS = ("schema", "schema_version", "length_unit", "velocity_unit", "mass_unit", "G",
              "seed", "config", "created", "icgen_version")


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
        """From a :class:`icgen.config.OutputSpec`."""
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


def partial_path(path):
    """Temporary name next to ``path``: ``dir/.NAME.partial-<pid>``."""
    folder, name = os.path.split(os.path.abspath(path))
    return os.path.join(folder, f".{name}.partial-{os.getpid()}")


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
    total_out: float = 0.0    # sum of the written masses, output unit


class SnapshotWriter:
    """Streamed writer of one snapshot file.

    Use::

        with SnapshotWriter(path, spec, plans) as w:   # a temporary file is created
            for chunk in chunks:
                w.append(chunk)                        # internal units, any order
            w.finish(curve_radius, curve_speeds)       # centre of mass -> origin, attrs
            w.commit()                                 # rename onto ``path``

    Leaving the ``with`` block without ``commit`` (an error, a signal) removes the
    temporary file.

    Parameters
    ----------
    path : str or PathLike
        Target file.
    spec : icgen.config.ModelSpec
        The resolved model: its ``output`` units, ``seed`` and ``to_toml()`` are stored.
    plans : sequence
        Per component, in file order, objects with ``name``, ``kind`` and ``count``
        (e.g. :func:`icgen.sampling.plan`).
    precision : {"double", "single"}
        Float type of position, velocity and mass.
    compress : {None, "gzip", "lzf"}
        None: contiguous datasets; otherwise chunked with the shuffle filter.
    """

    def __init__(self, path, spec, plans, precision="double", compress=None):
        check_format(precision, compress)
        self.path = os.path.abspath(path)
        self.tmp_path = partial_path(path)
        self.spec = spec
        self.units = OutputUnits.from_spec(spec.output)
        self.dtype = np.dtype(PRECISIONS[precision])
        self.centre = (np.zeros(3), np.zeros(3))
        self.streams = {}
        next_id = FIRST_ID
        for p in plans:
            self.streams[p.name] = _Stream(p.kind, int(p.count), next_id)
            next_id += int(p.count)
        self._file = None
        try:
            self._file = h5py.File(self.tmp_path, "w")
            self._create_datasets(compress)
        except BaseException:   # a signal can land here too: never leave the file
            self.abort()
            raise
        self._finished = False

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
        m = np.asarray(chunk.mass, dtype=np.float64)
        s.mass += m.sum()
        s.mass_x += m @ np.asarray(chunk.position, dtype=np.float64)
        s.mass_v += m @ np.asarray(chunk.velocity, dtype=np.float64)
        g = self._file["particles"][chunk.component]
        for what, out in converted.items():
            g[what][lo:hi] = out
        g["id"][lo:hi] = np.arange(s.first_id + lo, s.first_id + hi, dtype=ID_DTYPE)
        s.written += n

    def centre_of_mass(self):
        """(position (3,) kpc, velocity (3,) km/s) of everything appended so far."""
        m = sum(s.mass for s in self.streams.values())
        if m == 0:
            return np.zeros(3), np.zeros(3)
        return (sum(s.mass_x for s in self.streams.values()) / m,
                sum(s.mass_v for s in self.streams.values()) / m)

    def finish(self, curve_radius, curve_speeds, offset=None, progress=None):
        """Move the centre of mass to rest at the origin and write all attributes.

        Parameters
        ----------
        curve_radius : ndarray (M,)
            Radii of the analytic rotation curve, kpc.
        curve_speeds : dict
            "total" and each component name -> (M,) circular speed, km/s.
        offset : (ndarray (3,), ndarray (3,)), optional
            Position (kpc) and velocity (km/s) to subtract from every particle, in place
            and chunk by chunk (memory stays bounded). Default: the mass-weighted mean
            of the appended chunks, whose last bits depend on how the particles were
            chunked; pass sums made in a fixed order (the sampler's per-block sums) for
            files that are bit-identical whatever the chunk size. Zeros: no shift.
        progress : callable(n), optional
            Called with the number of particles done in the centring pass.
        """
        for name, s in self.streams.items():
            if s.written != s.count:
                raise RuntimeError(f"component {name!r}: {s.written} of {s.count} particles written")
        x0, v0 = self.centre_of_mass() if offset is None else offset
        self.centre = (np.asarray(x0, float).reshape(3), np.asarray(v0, float).reshape(3))
        for name in self.streams:
            self._centre_pass(name, progress)
        self._write_curve(np.asarray(curve_radius, float), curve_speeds)
        self._write_attrs()
        self._finished = True

    def _centre_pass(self, name, progress):
        """Shift one component in place; sum its written masses and bin its radii."""
        s = self.streams[name]
        g = self._file["particles"][name]
        x0 = self.centre[0] * self.units.length_scale
        v0 = self.centre[1] * self.units.velocity_scale
        shift = bool(np.any(x0 != 0) or np.any(v0 != 0))
        # the component's own centre of mass, after the shift, in output units
        own = (s.mass_x / s.mass - self.centre[0]) * self.units.length_scale
        # total_mass is summed here, in fixed PASS_ROWS blocks, so that it does not
        # depend on the chunking of the sampler
        s.total_out = 0.0
        for lo in range(0, s.count, PASS_ROWS):
            hi = min(lo + PASS_ROWS, s.count)
            pos = g["position"][lo:hi].astype(np.float64)
            if shift:
                pos = _shifted(pos - x0, name, "position", lo, self.dtype)
                vel = _shifted(g["velocity"][lo:hi].astype(np.float64) - v0, name,
                               "velocity", lo, self.dtype)
                g["position"][lo:hi] = pos
                g["velocity"][lo:hi] = vel
                pos = pos.astype(np.float64)
            mass = g["mass"][lo:hi].astype(np.float64)
            s.total_out += float(mass.sum())
            d = pos - own
            s.r_hist += _radius_histogram(np.sqrt(np.einsum("ij,ij->i", d, d)), mass)
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
        a["config"] = self.spec.to_toml()
        a["created"] = created.isoformat().replace("+00:00", "Z")
        a["icgen_version"] = __version__
        a["schema"] = SCHEMA       # last: marks the file as complete

    def half_mass_radii(self):
        """Component name -> radius (output length unit) of the sphere about the
        component's own centre of mass holding half its mass, from the written particles
        (valid after :meth:`finish`)."""
        # a single particle is its own centre (the histogram would say "< 1e-6")
        return {name: 0.0 if s.count == 1 else _half_mass_radius(s.r_hist)
                for name, s in self.streams.items()}

    # ------------------------------------------------------------------ closing

    def commit(self, overwrite=False):
        """Close, flush to disk and rename the temporary file onto the target."""
        if not self._finished:
            raise RuntimeError("commit() before finish()")
        self._file.close()
        with open(self.tmp_path, "rb") as fh:
            os.fsync(fh.fileno())    # data on disk before the rename makes it visible
        if not overwrite and os.path.exists(self.path):
            # the target appeared while we were building
            self.abort()
            raise ModelError("--output", self.path, "file exists; pass --overwrite to replace it")
        os.replace(self.tmp_path, self.path)

    def abort(self):
        """Close and remove the temporary file (safe to call more than once)."""
        try:
            if self._file is not None and self._file.id.valid:
                self._file.close()
        finally:
            if os.path.exists(self.tmp_path):
                os.remove(self.tmp_path)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        if os.path.exists(self.tmp_path):
            self.abort()
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
