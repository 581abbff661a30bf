"""Validation of icgen snapshots (HDF5 schema versions 1 and 2), in one place.

Every reader of a snapshot (``icgen info``, ``check``, ``drift``, ``mock``, ``stability
FILE.h5`` and the API functions of :mod:`icgen.snapshot.reader`) opens it through
:func:`icgen.snapshot.open_snapshot`, which checks the whole header
(:func:`validate_header`) before anything else is read:

- the file: exists, is HDF5, opens; root attribute ``schema`` is ``"icgen-snapshot"`` and
  ``schema_version`` is 1 or 2 (:data:`icgen.snapshot.schema.READABLE_VERSIONS`);
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

Particle values are checked as they are read (:func:`check_values`), slab by slab (the
reader's ``SLAB_ROWS``; memory stays flat): every value finite and below
:data:`MAX_MAGNITUDE` in magnitude (so that squares and sums stay finite), masses and
internal energies > 0. ``SnapshotFile.scan`` reads every slab for that check alone
(``icgen info``) and also compares each ``total_mass`` with the sum of its masses
(:func:`check_total`).

Any failure raises a one-line :class:`icgen.errors.ModelError` naming the file, the
attribute or dataset, and the rule (exit status 2 in the CLI).
"""
import math
import os
from dataclasses import dataclass

import h5py
import numpy as np

from ..version import __version__
from ..spec import spec_from_stored_text
from ..errors import MISSING, ModelError, show_value
from .schema import (CURVE_GROUP, GROUP_ATTRS, READABLE_VERSIONS, ROOT_KEYS, ROOT_VECTORS,
                     SCHEMA, FileUnits, datasets)

__all__ = ["CHECK_ROWS", "G_TOLERANCE", "TOTAL_MASS_TOLERANCE", "MAX_MAGNITUDE",
           "ComponentInfo", "Header", "open_hdf5", "validate_header", "read_slab",
           "check_values", "check_total"]

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
#: Float datasets whose values must be > 0 (the others: finite).
_POSITIVE = ("mass", "internal_energy")
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


@dataclass(frozen=True)
class Header:
    """Everything :func:`validate_header` checked: root attributes as plain values, the
    file's units, the stored model, the particle groups (model-file order) and the
    rotation curve (key -> (M,) float64, file units)."""
    attrs: dict
    units: FileUnits
    spec: object
    components: dict
    curve: dict


def validate_header(f, path):
    """Header of an open h5py.File, checked (module docstring); ModelError otherwise."""
    attrs, units = _root_attrs(f, path)
    spec = _stored_spec(attrs["config"], path)
    components = _groups(f, spec, path)
    return Header(attrs, units, spec, components, _curve(f, components, path))


# ------------------------------------------------------------------ header checks


def _get(group, key):
    """group[key], or None where there is nothing (or nothing readable) of that name."""
    try:
        return group.get(key)
    except (KeyError, TypeError, ValueError, OSError):
        return None


def read_slab(ds, lo, hi, where):
    """ds[lo:hi]; a file cut short or damaged gives a one-line ModelError."""
    try:
        return ds[lo:hi]
    except (OSError, ValueError) as exc:
        raise ModelError(where, MISSING, f"rows {lo}..{min(hi, ds.shape[0]) - 1} cannot be read "
                                         f"({' '.join(str(exc).split())}); the file is damaged "
                                         f"or cut short") from None


def open_hdf5(path):
    """h5py.File of ``path``, read-only; a one-line ModelError when it is none."""
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
    """(root attributes as plain values, FileUnits), every attribute present and of
    its type."""
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
    vectors = ROOT_VECTORS if version >= 2 else ()
    missing = [k for k in ROOT_KEYS + vectors if k not in attrs]
    if missing:
        raise ModelError(path, MISSING,
                         f"incomplete icgen snapshot: root attribute {missing[0]!r} missing")
    where = lambda k: f"{path} attribute {k}"
    units = FileUnits.parse(attrs["length_unit"], attrs["velocity_unit"], attrs["mass_unit"],
                            f"{path} attribute ")
    G = attrs["G"]
    if not (_is_real(G) and math.isfinite(G) and G > 0):
        raise ModelError(where("G"), G, "must be a finite number > 0")
    G_units = units.G
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
    return attrs, units


def _stored_spec(config, path):
    """ModelSpec from the ``config`` attribute; a bad one names the attribute."""
    source = f"{path} attribute config"
    try:
        return spec_from_stored_text(config, source)
    except ModelError as exc:
        if exc.key == source:
            raise
        raise ModelError(source, MISSING, f"not a valid model: {exc}") from None


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
    for k in GROUP_ATTRS:
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
    layout = datasets(comp.kind)
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
    g = _get(f, CURVE_GROUP)
    where = f"{path} group /{CURVE_GROUP}"
    if not isinstance(g, h5py.Group):
        raise ModelError(where, MISSING, "incomplete icgen snapshot: missing")
    keys = ["radius", "v_circ_total"] + [f"v_circ_{n}" for n in components]
    length, out = None, {}
    for key in keys:
        ds = _get(g, key)
        dwhere = f"{path} dataset /{CURVE_GROUP}/{key}"
        if not isinstance(ds, h5py.Dataset):
            raise ModelError(dwhere, MISSING, "missing: the curve has radius, v_circ_total "
                                              "and v_circ_<component> for each component")
        if ds.dtype.kind != "f" or ds.ndim != 1 or ds.shape[0] < 1:
            raise ModelError(dwhere, MISSING, f"has type {ds.dtype} and shape {ds.shape}; "
                                              f"must be a 1-D float array")
        length = ds.shape[0] if length is None else length
        if ds.shape[0] != length:
            raise ModelError(dwhere, MISSING, f"has {ds.shape[0]} values; the radius has {length}")
        values = np.asarray(read_slab(ds, 0, length, dwhere), np.float64)
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


def check_total(stored, pieces, where):
    """ModelError unless the masses in ``pieces`` sum (float64) to ``stored``."""
    total = sum(float(np.sum(p, dtype=np.float64)) for p in pieces)
    if not math.isclose(total, stored, rel_tol=TOTAL_MASS_TOLERANCE):
        raise ModelError(where, MISSING, f"attribute total_mass {stored:.9g} differs from the "
                                         f"sum of its masses {total:.9g}")
