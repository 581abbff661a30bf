"""Reading icgen snapshots: the one reader every command and API function uses.

:func:`open_snapshot` validates the header (:mod:`icgen.snapshot.validate`);
:class:`SnapshotFile` reads datasets slab by slab, checking their values as they come,
in the file's units or in internal units (kpc, km/s, Msun: ``read_internal``,
``read_rows_internal``, ``read_curve_internal``), the units every diagnostic measures in.
:func:`read_snapshot` reads a whole file into a :class:`Snapshot`
(``Snapshot.internal()`` for internal units).
"""
import dataclasses
import tomllib
from dataclasses import dataclass

import astropy.units as u
import numpy as np

from ..errors import MISSING, ModelError
from ..frame import MAX_PARTICLES, Frame, galaxy_frame, subset_rows
from .schema import FileUnits
from .validate import check_total, check_values, open_hdf5, read_slab, validate_header

__all__ = ["SLAB_ROWS", "INTERNAL_KEYS", "SnapshotFile", "Snapshot", "open_snapshot",
           "read_header", "read_rows", "read_snapshot", "load_model_from_snapshot"]

#: Rows read (and checked) at a time: 2^20 rows of (N, 3) float64 are 24 MiB.
SLAB_ROWS = 1 << 20
#: Particle datasets that have a unit (all but the ids), in reading order.
INTERNAL_KEYS = ("position", "velocity", "mass", "internal_energy")


class SnapshotFile:
    """An open, header-validated snapshot; use :func:`open_snapshot`.

    Attributes
    ----------
    path : str
    file : h5py.File (read-only)
    attrs : dict
        Root attributes as plain Python values.
    components : dict name -> ComponentInfo, in model-file order
    file_units : icgen.snapshot.schema.FileUnits
        The file's units and their conversion to internal units.
    spec : icgen.spec.ModelSpec
        The model parsed from ``config``.
    """

    def __init__(self, path):
        self.path = str(path)
        self.file = open_hdf5(path)
        try:
            header = validate_header(self.file, self.path)
        except (OSError, RuntimeError, KeyError) as exc:     # HDF5 metadata damaged
            self.file.close()
            raise ModelError(self.path, MISSING, f"damaged HDF5 file "
                                                 f"({' '.join(str(exc).split())})") from None
        except BaseException:
            self.file.close()
            raise
        self.attrs, self.file_units, self.spec = header.attrs, header.units, header.spec
        self.components, self.curve = header.components, header.curve

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def close(self):
        self.file.close()

    @property
    def units(self):
        """{"length", "velocity", "mass"} -> unit string."""
        return self.file_units.as_dict()

    def read_internal(self, name, key=None):
        """One float dataset (or, with ``key`` None, every float dataset of component
        ``name`` as a dict) in internal units (kpc, km/s, Msun, (km/s)^2), float64."""
        if key is None:
            return {k: self.read_internal(name, k) for k in self.components[name].keys
                    if k != "id"}
        return self.file_units.to_internal(key, self.read(name, key))

    def read_rows_internal(self, rows):
        """:meth:`read_rows` in internal units, float64 (ids left out)."""
        return {name: {k: self.file_units.to_internal(k, v) for k, v in comp.items()}
                for name, comp in self.read_rows(rows).items()}

    def read_curve_internal(self):
        """:meth:`read_curve` in internal units: radius kpc, v_circ_* km/s."""
        return {k: self.file_units.to_internal(k, v) for k, v in self.curve.items()}

    def frame(self):
        """The galaxy's Frame (icgen.frame): found from at most frame.MAX_PARTICLES
        particles, a random subset seeded with the file's seed, the same subset
        :func:`icgen.frame.galaxy_frame` picks from the particles in memory."""
        counts = {n: c.count for n, c in self.components.items()}
        rows, _ = subset_rows(counts, MAX_PARTICLES, int(self.attrs["seed"]))
        return galaxy_frame(self.read_rows_internal(rows), int(self.attrs["seed"]),
                            subset=False)

    def _where(self, name, key):
        return f"{self.path} dataset /particles/{name}/{key}"

    def slabs(self, name, key, slab=SLAB_ROWS):
        """Yield (start row, values) of one dataset, ``slab`` rows at a time, each slab
        checked (finite floats; masses and internal energies > 0)."""
        ds = self.file["particles"][name][key]
        for lo in range(0, ds.shape[0], slab):
            values = read_slab(ds, lo, lo + slab, self._where(name, key))
            check_values(values, key, self._where(name, key), lo)
            yield lo, values

    def read(self, name, key):
        """A whole dataset, checked slab by slab (masses also against ``total_mass``)."""
        ds = self.file["particles"][name][key]
        out = np.empty(ds.shape, ds.dtype)
        for lo, values in self.slabs(name, key):
            out[lo:lo + values.shape[0]] = values
        if key == "mass":
            self._check_total(name, [out])
        return out

    def _check_total(self, name, pieces):
        """ModelError unless the masses sum (float64) to the group's ``total_mass``."""
        check_total(self.components[name].total_mass, pieces,
                    f"{self.path} group /particles/{name}")

    def read_rows(self, rows, slab=SLAB_ROWS):
        """Some particles, in the file's units, holding in memory only them and one slab
        of ``slab`` rows at a time (each slab read is checked).

        ``rows`` maps component -> sorted row indices. Returns component -> dict of the
        position, velocity, mass (and internal_energy) rows, in that order.
        """
        out = {}
        for name, idx in rows.items():
            if name not in self.components:
                raise ModelError("rows", name, f"no such component in {self.path} (have: "
                                               f"{', '.join(self.components)})")
            idx = np.asarray(idx, np.int64)
            count = self.components[name].count
            if idx.size and (idx[0] < 0 or idx[-1] >= count or np.any(np.diff(idx) < 0)):
                raise ModelError("rows", name, f"row indices must be sorted and in [0, {count})")
            comp = {}
            for key in self.components[name].keys:
                if key == "id":
                    continue
                ds, pieces = self.file["particles"][name][key], []
                for lo in range(0, count, slab):
                    a, b = np.searchsorted(idx, [lo, lo + slab])
                    if b > a:
                        values = read_slab(ds, lo, lo + slab, self._where(name, key))
                        check_values(values, key, self._where(name, key), lo)
                        pieces.append(values[idx[a:b] - lo])
                comp[key] = (np.concatenate(pieces) if pieces
                             else np.empty((0,) + ds.shape[1:], ds.dtype))
            out[name] = comp
        return out

    def read_curve(self):
        """/model/rotation_curve: key -> (M,) float64 (read and checked on opening)."""
        return {key: values.copy() for key, values in self.curve.items()}

    def scan(self):
        """Read every dataset once, checking its values (see :meth:`slabs`), and each
        group's ``total_mass`` against the sum of its masses. Returns rows scanned."""
        rows = 0
        for name, c in self.components.items():
            for key in c.keys:
                sums = []
                for _, values in self.slabs(name, key):
                    if key == "mass":
                        sums.append(np.sum(values, dtype=np.float64))
                if key == "mass":
                    self._check_total(name, sums)
            rows += c.count
        return rows


def open_snapshot(path):
    """Open ``path`` read-only as an icgen snapshot with a validated header
    (:mod:`icgen.snapshot.validate`); a context manager. Raises a one-line ModelError
    otherwise."""
    return SnapshotFile(path)


@dataclass
class Snapshot:
    """A snapshot read into memory.

    Attributes
    ----------
    path : str
    components : dict
        name -> {"kind": str, "position" (N, 3), "velocity" (N, 3), "mass" (N,),
        "id" (N,) uint64, and for gas "internal_energy" (N,)}; arrays in the file's
        units, internal energy in velocity_unit^2 (astropy Quantities if read with
        ``quantity=True``; ids stay plain).
    units : dict
        "length", "velocity", "mass" -> unit strings astropy can parse.
    G : float or Quantity
        Gravitational constant in those units.
    seed : int
    config : str
        The resolved model file (TOML text).
    attrs : dict
        All root attributes.
    rotation_curve : dict
        "radius", "v_circ_total", "v_circ_<name>" -> (M,) arrays (Quantities if asked).
    """

    path: str
    components: dict
    units: dict
    G: object
    seed: int
    config: str
    attrs: dict
    rotation_curve: dict

    @property
    def model_name(self):
        return _model_name(self.config)

    @property
    def file_units(self):
        """FileUnits of :attr:`units` (conversion to and from internal units)."""
        return FileUnits.parse(self.units["length"], self.units["velocity"],
                               self.units["mass"], f"{self.path}:")

    def internal(self):
        """name -> dict of float64 arrays in internal units (kpc, km/s, Msun, (km/s)^2):
        position, velocity, mass and, for gas, internal_energy."""
        units = self.file_units
        return {name: {k: units.to_internal(k, c[k]) for k in INTERNAL_KEYS if k in c}
                for name, c in self.components.items()}

    @property
    def frame(self):
        """The galaxy's Frame (icgen.frame: position kpc, velocity km/s), found as every
        command finds it (the same particles, seeded with the file's seed)."""
        if "_frame" not in self.__dict__:
            self.__dict__["_frame"] = galaxy_frame(self.internal(), int(self.seed))
        return self.__dict__["_frame"]

    def centred(self):
        """A copy with positions and velocities moved into the galaxy's frame: its centre
        at rest at the origin (file units, Quantities kept)."""
        units = self.file_units
        shift = {"position": self.frame.position * units.scale("position"),
                 "velocity": self.frame.velocity * units.scale("velocity")}
        comps = {}
        for name, c in self.components.items():
            comps[name] = dict(c)
            for key, d in shift.items():
                unit = getattr(c[key], "unit", None)
                comps[name][key] = c[key] - (d * unit if unit is not None else d)
        out = dataclasses.replace(self, components=comps)
        f = self.frame
        out.__dict__["_frame"] = Frame(np.zeros(3), np.zeros(3), f.position_error,
                                       f.velocity_error)
        return out


def read_header(path):
    """Root attributes and per-component group attributes, without reading particles
    (the header is validated, :mod:`icgen.snapshot.validate`).

    Returns
    -------
    attrs : dict
    components : dict name -> {"kind", "count", "total_mass", "dtype", "compression"}
    """
    with open_snapshot(path) as snap:
        return dict(snap.attrs), {n: {"kind": c.kind, "count": c.count,
                                      "total_mass": c.total_mass, "dtype": c.dtype,
                                      "compression": c.compression}
                                  for n, c in snap.components.items()}


def read_rows(path, rows, slab=SLAB_ROWS):
    """Some particles of a snapshot: :meth:`SnapshotFile.read_rows` of ``path``."""
    with open_snapshot(path) as snap:
        return snap.read_rows(rows, slab)


def read_snapshot(path, quantity=False):
    """Read a whole snapshot into memory, validated (:mod:`icgen.snapshot.validate`).

    Parameters
    ----------
    path : str or PathLike
    quantity : bool
        Return positions, velocities, masses, G and the rotation curve as astropy
        Quantities in the file's units.

    Returns
    -------
    Snapshot

    Raises
    ------
    ModelError
        For a missing file, one that is not an icgen snapshot of a version this icgen
        reads, or one that breaks a rule of the schema (one line naming the attribute or
        dataset).
    """
    with open_snapshot(path) as snap:
        attrs, units = snap.attrs, snap.units
        L, V, M = (u.Unit(units[k]) for k in ("length", "velocity", "mass"))
        unit_of = {"position": L, "velocity": V, "mass": M, "radius": L,
                   "internal_energy": V**2}
        components = {}
        for name, c in snap.components.items():
            comp = {"kind": c.kind}
            for key in c.keys:
                data = snap.read(name, key)
                comp[key] = data * unit_of[key] if quantity and key != "id" else data
            components[name] = comp
        curve = {key: data * unit_of.get(key, V) if quantity else data
                 for key, data in snap.read_curve().items()}
    G = attrs["G"]
    if quantity:
        G = G * L * V**2 / M
    return Snapshot(str(path), components, units, G, attrs["seed"], attrs["config"],
                    dict(attrs), curve)


def load_model_from_snapshot(path):
    """MassModel rebuilt from the model file stored in a snapshot's ``config`` (the
    header is validated first). The model is imported here: it is slow to import and
    ``icgen info`` never needs it."""
    from ..model import MassModel

    with open_snapshot(path) as snap:
        spec = snap.spec
    return MassModel(spec)


def _model_name(config_text):
    try:
        return str(tomllib.loads(config_text)["model"]["name"])
    except (tomllib.TOMLDecodeError, KeyError, TypeError):
        return "?"
