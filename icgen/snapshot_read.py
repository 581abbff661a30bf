"""Reading icgen snapshots (HDF5 schema versions 1 and 2), validated in one place.

Every reader of a snapshot (``icgen info``, ``check``, ``drift``, ``mock``, ``stability
FILE.h5`` and the API functions below) opens it through :func:`open_snapshot`, which
checks the whole header before anything else is read:

- the file: exists, is HDF5, opens; root attribute ``schema`` is ``"icgen-snapshot"`` and
  ``schema_version`` is 1 or 2 (:data:`icgen.snapshot.READABLE_VERSIONS`);
- every root attribute is present with its type: unit strings astropy parses as a length,
  velocity and mass; ``G`` finite, > 0 and equal to G in those units; ``seed`` a whole
  number >= 0; ``config``, ``created`` and ``icgen_version`` text; from version 2 on,
  ``centre_of_mass`` and ``velocity_shift`` three finite numbers each;
- ``config`` parses as a model, and its components match the groups of ``/particles``
  exactly (names and kinds; counts where the model gives them);
- each group has the attributes ``kind``, ``count`` (a whole number >= 1) and
  ``total_mass`` (finite, > 0) and the datasets of its kind, with shapes (count, 3) or
  (count,), float32/float64 values and unsigned integer ids;
- ``/model/rotation_curve`` holds finite 1-D curves of one length, one per component and
  the total.

Particle values are checked as they are read, in slabs of :data:`SLAB_ROWS` rows (memory
stays flat): every value finite and below :data:`MAX_MAGNITUDE` in magnitude (so that
squares and sums stay finite), masses and internal energies > 0.
:meth:`SnapshotFile.scan` reads every slab for that check alone (``icgen info``) and also
compares each ``total_mass`` with the sum of its masses.

Any failure raises a one-line :class:`icgen.errors.ModelError` naming the file, the
attribute or dataset, and the rule (exit status 2 in the CLI).
"""
import dataclasses
import math
import os
import tomllib
from dataclasses import dataclass

import astropy.units as u
import h5py
import numpy as np

from . import __version__
from .errors import MISSING, ModelError, show_value
from .frame import Frame, galaxy_frame
from .snapshot import (GAS_KIND, READABLE_VERSIONS, SCHEMA, _ROOT_KEYS, _ROOT_VECTORS,
                       gravitational_constant)

__all__ = ["SLAB_ROWS", "SnapshotFile", "Snapshot", "open_snapshot", "read_header",
           "read_rows", "read_snapshot", "load_model_from_snapshot", "describe",
           "internal_scales"]

#: Rows read (and checked) at a time: 2^20 rows of (N, 3) float64 are 24 MiB.
SLAB_ROWS = 1 << 20
#: Rows per step of the value check inside a slab: its temporary arrays stay ~2 MB.
CHECK_ROWS = 1 << 16
#: Stored G against G of the stored units (astropy.constants): relative tolerance. Wide
#: enough for the CODATA 2014 -> 2018 change of G (3e-5), far below a unit mix-up.
G_TOLERANCE = 1e-3
#: total_mass against the sum of the masses: relative tolerance. Both are float64 sums
#: of the same stored values in other orders (round-off ~1e-16 sqrt(N)).
TOTAL_MASS_TOLERANCE = 1e-6
#: Largest magnitude of a stored value: r^2 = x^2 + y^2 + z^2 (and v^2) must stay finite
#: in float64 (max 1.8e308), or every diagnostic sees inf (a shrinking sphere of radius
#: inf never shrinks). No galaxy in any unit comes near it.
MAX_MAGNITUDE = 1e150
#: Datasets of every particle group: name -> (trailing shape, dtype kind); gas adds one.
_DATASETS = {"position": ((3,), "f"), "velocity": ((3,), "f"), "mass": ((), "f"),
             "id": ((), "u")}
_GAS_DATASETS = {"internal_energy": ((), "f")}
#: Float datasets whose values must be > 0 (the others: finite).
_POSITIVE = ("mass", "internal_energy")
_UNIT_TYPES = (("length_unit", "length"), ("velocity_unit", "velocity"),
               ("mass_unit", "mass"))
_TEXT_KEYS = ("config", "created", "icgen_version")


def _plain(value):
    """h5py attribute value -> plain Python value."""
    if isinstance(value, bytes):
        return value.decode("utf-8", "replace")
    if isinstance(value, np.generic):
        return value.item()
    return value


def _is_whole(value):
    return isinstance(value, (int, np.integer)) and not isinstance(value, (bool, np.bool_))


def _is_real(value):
    return isinstance(value, (int, float, np.integer, np.floating)) \
        and not isinstance(value, (bool, np.bool_))


@dataclass(frozen=True)
class ComponentInfo:
    """Header of one particle group: attributes and storage."""
    kind: str
    count: int
    total_mass: float          # mass_unit
    dtype: str                 # of the float datasets, e.g. "float64"
    compression: object        # None, "gzip" or "lzf"
    keys: tuple                # datasets in reading order


class SnapshotFile:
    """An open, header-validated snapshot; use :func:`open_snapshot`.

    Attributes
    ----------
    path : str
    file : h5py.File (read-only)
    attrs : dict
        Root attributes as plain Python values.
    components : dict name -> ComponentInfo, in model-file order
    spec : icgen.spec.ModelSpec
        The model parsed from ``config``.
    """

    def __init__(self, path):
        self.path = str(path)
        self.file = _open_hdf5(path)
        try:
            self.attrs = _root_attrs(self.file, self.path)
            self.spec = _stored_spec(self.attrs["config"], self.path)
            self.components = _groups(self.file, self.spec, self.path)
            self.curve = _curve(self.file, self.components, self.path)
        except (OSError, RuntimeError, KeyError) as exc:     # HDF5 metadata damaged
            self.file.close()
            raise ModelError(self.path, MISSING, f"damaged HDF5 file "
                                                 f"({' '.join(str(exc).split())})") from None
        except BaseException:
            self.file.close()
            raise

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
        return {k: self.attrs[f"{k}_unit"] for k in ("length", "velocity", "mass")}

    @property
    def scales(self):
        """Dataset name -> divisor taking the file's values to internal units."""
        return internal_scales(self.units, self.path)

    def read_internal(self, name, key):
        """A whole dataset in internal units (kpc, km/s, Msun, (km/s)^2), float64."""
        values = np.asarray(self.read(name, key), np.float64)
        return values / self.scales[key] if key in self.scales else values

    def read_rows_internal(self, rows):
        """:meth:`read_rows` in internal units, float64 (ids left out)."""
        scale = self.scales
        return {name: {k: np.asarray(v, np.float64) / scale[k] for k, v in comp.items()}
                for name, comp in self.read_rows(rows).items()}

    def frame(self):
        """The galaxy's Frame (icgen.frame): found from at most frame.MAX_PARTICLES
        particles, a random subset seeded with the file's seed, the same subset
        :func:`icgen.frame.galaxy_frame` picks from the particles in memory."""
        from .frame import subset_rows, MAX_PARTICLES
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
            values = _read(ds, lo, lo + slab, self._where(name, key))
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
        total = sum(float(np.sum(p, dtype=np.float64)) for p in pieces)
        stored = self.components[name].total_mass
        if not math.isclose(total, stored, rel_tol=TOTAL_MASS_TOLERANCE):
            raise ModelError(f"{self.path} group /particles/{name}", MISSING,
                             f"attribute total_mass {stored:.9g} differs from the sum of its "
                             f"masses {total:.9g}")

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
                        values = _read(ds, lo, lo + slab, self._where(name, key))
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
    """Open ``path`` read-only as an icgen snapshot with a validated header (module
    docstring); a context manager. Raises a one-line ModelError otherwise."""
    return SnapshotFile(path)


# ------------------------------------------------------------------ header checks


def _get(group, key):
    """group[key], or None where there is nothing (or nothing readable) of that name."""
    try:
        return group.get(key)
    except (KeyError, TypeError, ValueError, OSError):
        return None


def _read(ds, lo, hi, where):
    """ds[lo:hi]; a file cut short or damaged gives a one-line ModelError."""
    try:
        return ds[lo:hi]
    except (OSError, ValueError) as exc:
        raise ModelError(where, MISSING, f"rows {lo}..{min(hi, ds.shape[0]) - 1} cannot be read "
                                         f"({' '.join(str(exc).split())}); the file is damaged "
                                         f"or cut short") from None


def _open_hdf5(path):
    key = str(path)
    if not os.path.exists(path):
        raise ModelError(key, MISSING, "no such file")
    if os.path.isdir(path):
        raise ModelError(key, MISSING, "is a folder, not a snapshot file")
    if not h5py.is_hdf5(path):
        raise ModelError(key, MISSING, "not an HDF5 file, so not an icgen snapshot")
    try:
        return h5py.File(path, "r")
    except OSError as exc:
        raise ModelError(key, MISSING, f"cannot open as HDF5: {' '.join(str(exc).split())}") from None


def _root_attrs(f, path):
    """Root attributes as plain values, every one present and of its type."""
    attrs = {}
    for k in f.attrs:
        try:
            attrs[k] = _plain(f.attrs[k])
        except (OSError, TypeError, ValueError):     # a type h5py cannot read
            attrs[k] = MISSING
    schema = attrs.get("schema", MISSING)
    if not (isinstance(schema, str) and schema == SCHEMA):
        found = ("no 'schema' attribute" if schema is MISSING
                 else f"schema attribute {show_value(schema)}")
        raise ModelError(path, MISSING, f"not an icgen snapshot ({found}; expected {SCHEMA!r})")
    version = attrs.get("schema_version", MISSING)
    if not _is_whole(version) or version not in READABLE_VERSIONS:
        readable = ", ".join(map(str, READABLE_VERSIONS))
        raise ModelError(path, MISSING, f"schema_version {version!r} is not one this icgen "
                                        f"{__version__} reads ({readable})")
    vectors = _ROOT_VECTORS if version >= 2 else ()
    missing = [k for k in _ROOT_KEYS + vectors if k not in attrs]
    if missing:
        raise ModelError(path, MISSING,
                         f"incomplete icgen snapshot: root attribute {missing[0]!r} missing")
    where = lambda k: f"{path} attribute {k}"
    scales = {}
    from .units import unit_scale
    for key, kind in _UNIT_TYPES:
        scales[kind] = unit_scale(attrs[key], kind, where(key))
    G = attrs["G"]
    if not (_is_real(G) and math.isfinite(G) and G > 0):
        raise ModelError(where("G"), G, "must be a finite number > 0")
    G_units = gravitational_constant(attrs["length_unit"], attrs["velocity_unit"],
                                     attrs["mass_unit"])
    if not math.isclose(G, G_units, rel_tol=G_TOLERANCE):
        raise ModelError(where("G"), G, f"differs from G in the stored units ({G_units:.7g} "
                                        f"{attrs['length_unit']} ({attrs['velocity_unit']})^2"
                                        f" / ({attrs['mass_unit']})): units or G were changed")
    if not (_is_whole(attrs["seed"]) and attrs["seed"] >= 0):
        raise ModelError(where("seed"), attrs["seed"], "must be a whole number >= 0")
    for key in _TEXT_KEYS:
        if not isinstance(attrs[key], str):
            raise ModelError(where(key), attrs[key], "must be text (a string attribute)")
    for key in vectors:
        value = np.asarray(attrs[key]) if attrs[key] is not MISSING else None
        if (value is None or value.shape != (3,) or value.dtype.kind != "f"
                or not np.all(np.isfinite(value))):
            raise ModelError(where(key), MISSING, "must be three finite numbers (x, y, z)")
    return attrs


#: Keys renamed since: {old key: new key}. A stored config is what icgen itself wrote, so it
#: is read with the names of its time (a model file with an old key is an error that names
#: the new one).
_RENAMED_KEYS = {"spin": "retrograde_flip_fraction"}


def _stored_spec(config, path):
    """ModelSpec from the ``config`` attribute; a bad one names the attribute."""
    from .spec import parse_toml, spec_from_dict
    source = f"{path} attribute config"
    try:
        data = parse_toml(config, source)
        for table in (data.get("components") or {}).values():
            for old, new in _RENAMED_KEYS.items():
                if isinstance(table, dict) and old in table and new not in table:
                    table[new] = table.pop(old)
        return spec_from_dict(data)
    except ModelError as exc:
        if exc.key.startswith(f"{path} attribute config"):
            raise
        raise ModelError(f"{path} attribute config", MISSING,
                         f"not a valid model: {exc}") from None


def _groups(f, spec, path):
    """ComponentInfo per particle group, in model-file order, checked against ``spec``."""
    top = _get(f, "particles")
    if not isinstance(top, h5py.Group):
        raise ModelError(path, MISSING, "incomplete icgen snapshot: group /particles missing")
    names = [c.name for c in spec.components]
    extra = [n for n in top if n not in names]
    absent = [n for n in names if n not in top]
    if extra or absent:
        what = (f"has a particle group {extra[0]!r}" if extra
                else f"has no particle group {absent[0]!r}")
        raise ModelError(f"{path} group /particles", MISSING,
                         f"{what}; its groups must be the components of the stored model "
                         f"({', '.join(names)})")
    return {c.name: _group(top[c.name], c, path) for c in spec.components}


def _group(g, comp, path):
    where = f"{path} group /particles/{comp.name}"
    if not isinstance(g, h5py.Group):
        raise ModelError(where, MISSING, "must be a group of datasets")
    attrs = {}
    for k in ("kind", "count", "total_mass"):
        if k not in g.attrs:
            raise ModelError(where, MISSING, f"incomplete icgen snapshot: attribute {k!r} missing")
        attrs[k] = _plain(g.attrs[k])
    if not (isinstance(attrs["kind"], str) and attrs["kind"] == comp.kind):
        raise ModelError(f"{where} attribute kind", attrs["kind"],
                         f"must be the stored model's kind of the component, {comp.kind!r}")
    count = attrs["count"]
    if not (_is_whole(count) and count >= 1):
        raise ModelError(f"{where} attribute count", count, "must be a whole number >= 1")
    if comp.particles is not None and count != comp.particles:
        raise ModelError(f"{where} attribute count", count,
                         f"must be the stored model's particles ({comp.particles})")
    total = attrs["total_mass"]
    if not (_is_real(total) and math.isfinite(total) and total > 0):
        raise ModelError(f"{where} attribute total_mass", total, "must be a finite number > 0")
    layout = dict(_DATASETS, **(_GAS_DATASETS if comp.kind == GAS_KIND else {}))
    for key, (tail, kind) in layout.items():
        ds = _get(g, key)
        dwhere = f"{path} dataset /particles/{comp.name}/{key}"
        if not isinstance(ds, h5py.Dataset):
            raise ModelError(dwhere, MISSING, "missing: every particle group needs "
                                              f"{', '.join(layout)}")
        shape = (count,) + tail
        if ds.shape != shape:
            raise ModelError(dwhere, MISSING, f"has shape {ds.shape}; must be {shape} "
                                              f"(count = {count})")
        ok = (ds.dtype.kind == kind and (kind != "f" or ds.dtype.itemsize in (4, 8)))
        if not ok:
            rule = "float32 or float64" if kind == "f" else "an unsigned integer"
            raise ModelError(dwhere, MISSING, f"has type {ds.dtype}; must be {rule}")
    pos = g["position"]
    return ComponentInfo(comp.kind, int(count), float(total), str(pos.dtype), pos.compression,
                         tuple(layout))


def _curve(f, components, path):
    """/model/rotation_curve: radius, v_circ_total, v_circ_<name> -> (M,) float64, checked:
    1-D float arrays of one length, finite (radius >= 0). They are small: read here."""
    g = _get(f, "model/rotation_curve")
    where = f"{path} group /model/rotation_curve"
    if not isinstance(g, h5py.Group):
        raise ModelError(where, MISSING, "incomplete icgen snapshot: missing")
    keys = ["radius", "v_circ_total"] + [f"v_circ_{n}" for n in components]
    length, out = None, {}
    for key in keys:
        ds = _get(g, key)
        dwhere = f"{path} dataset /model/rotation_curve/{key}"
        if not isinstance(ds, h5py.Dataset):
            raise ModelError(dwhere, MISSING, "missing: the curve has radius, v_circ_total "
                                              "and v_circ_<component> for each component")
        if ds.dtype.kind != "f" or ds.ndim != 1 or ds.shape[0] < 1:
            raise ModelError(dwhere, MISSING, f"has type {ds.dtype} and shape {ds.shape}; "
                                              f"must be a 1-D float array")
        length = ds.shape[0] if length is None else length
        if ds.shape[0] != length:
            raise ModelError(dwhere, MISSING, f"has {ds.shape[0]} values; the radius has {length}")
        values = np.asarray(_read(ds, 0, length, dwhere), np.float64)
        check_values(values, "radius" if key == "radius" else "speed", dwhere, 0)
        out[key] = values
    return out


# ------------------------------------------------------------------ value checks


def check_values(values, key, where, start=0, rows=CHECK_ROWS):
    """Raise ModelError unless every row of ``values`` is finite with magnitude below
    MAX_MAGNITUDE (and > 0 for masses and internal energies, >= 0 for radii); integer
    arrays pass. Works ``rows`` rows at a time, so the temporary masks stay small.
    ``start`` is the row number of values[0]."""
    values = np.asarray(values)
    if values.dtype.kind != "f":
        return
    limit = f"finite and below {MAX_MAGNITUDE:g} in magnitude"
    for lo in range(0, max(values.shape[0], 1), rows):
        part = values[lo:lo + rows]
        if part.dtype.itemsize >= 8:
            ok = np.abs(part) < MAX_MAGNITUDE        # False for NaN and inf too
        else:                                        # float32: below 3.4e38 when finite
            ok = np.isfinite(part)
        if key in _POSITIVE:
            ok &= part > 0
            rule = f"must be {limit}, and > 0"
        elif key == "radius":
            ok &= part >= 0
            rule = f"must be {limit}, and >= 0"
        else:
            rule = f"must be {limit}"
        if not ok.all():
            flat = ~ok.reshape(part.shape[0], -1).all(axis=1)
            row = int(np.flatnonzero(flat)[0])
            shown = ", ".join(f"{float(x):.6g}" for x in np.atleast_1d(part[row]))
            raise ModelError(where, MISSING, f"row {start + lo + row} is "
                                             f"{'(' + shown + ')' if part.ndim > 1 else shown}; "
                                             f"values {rule}")


# ------------------------------------------------------------------ API


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

    def internal(self):
        """name -> dict of float64 arrays in internal units (kpc, km/s, Msun, (km/s)^2):
        position, velocity, mass and, for gas, internal_energy."""
        scale = internal_scales(self.units, self.path)
        value = lambda a: np.asarray(getattr(a, "value", a), np.float64)
        return {name: {k: value(c[k]) / scale[k] for k in scale if k in c}
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
        scale = internal_scales(self.units, self.path)
        shift = {"position": self.frame.position * scale["position"],
                 "velocity": self.frame.velocity * scale["velocity"]}
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


def internal_scales(units, where):
    """Divisors taking a snapshot's datasets to internal units (kpc, km/s, Msun): dataset
    name -> factor, from ``units`` {"length", "velocity", "mass"} (``where`` names the
    file in errors)."""
    from .units import unit_scale
    scale = {key: unit_scale(units[kind], kind, f"{where}:{kind}_unit") for key, kind in
             (("position", "length"), ("velocity", "velocity"), ("mass", "mass"))}
    scale["internal_energy"] = scale["velocity"] ** 2
    return scale


def read_header(path):
    """Root attributes and per-component group attributes, without reading particles
    (the header is validated, see the module docstring).

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
    """Read a whole snapshot (schema version 1) into memory, validated (module docstring).

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
    header is validated first)."""
    from .model import MassModel

    with open_snapshot(path) as snap:
        spec = snap.spec
    return MassModel(spec)


def _model_name(config_text):
    try:
        return str(tomllib.loads(config_text)["model"]["name"])
    except (tomllib.TOMLDecodeError, KeyError, TypeError):
        return "?"


def describe(path, scan=True):
    """Short human summary of a snapshot. The header is always validated; with ``scan``
    every value is read once and checked too (module docstring), which the summary says."""
    import time

    from .textout import format_table

    with open_snapshot(path) as snap:
        attrs, comps = snap.attrs, snap.components
        t0 = time.perf_counter()
        scanned = snap.scan() if scan else None
        t_scan = time.perf_counter() - t0
    mass_unit = attrs["mass_unit"]
    rows = []
    for name, c in comps.items():
        storage = c.dtype + (f", {c.compression}" if c.compression else "")
        rows.append([name, c.kind, f"{c.count:,}", f"{c.total_mass / c.count:.4g}",
                     f"{c.total_mass:.4g}", storage])
    total = sum(c.count for c in comps.values())
    rows.append(["total", "", f"{total:,}", "",
                 f"{sum(c.total_mass for c in comps.values()):.4g}", ""])
    headers = ["component", "kind", "particles", f"m/particle [{mass_unit}]",
               f"total mass [{mass_unit}]", "storage"]
    size = os.path.getsize(path)
    checked = (f"header and all {scanned:,} particles' values checked ({t_scan:.2f} s)"
               if scan else "header checked; values not scanned (--quick)")
    lines = [f"icgen snapshot {path} ({size / 1e6:.1f} MB), schema {attrs['schema']} "
             f"version {attrs['schema_version']}",
             f"model:    {snap.spec.name} (seed {attrs['seed']})",
             f"created:  {attrs['created']} by icgen {attrs['icgen_version']}",
             f"units:    length {attrs['length_unit']}, velocity {attrs['velocity_unit']}, "
             f"mass {mass_unit}",
             f"G:        {attrs['G']:.7g} {attrs['length_unit']} ({attrs['velocity_unit']})^2"
             f" / ({mass_unit})",
             f"valid:    {checked}", "",
             format_table(headers, rows)]
    return "\n".join(lines)
