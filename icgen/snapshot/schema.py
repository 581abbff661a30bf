"""The snapshot format: names, layout, dtypes, the ids' rule, the units of a file in both
directions, and the file-size estimate (docs/snapshot-format.md describes the format).

Layout::

    /                      attrs: ROOT_KEYS (+ ROOT_VECTORS from version 2 on)
    /particles/<name>/     DATASETS (+ GAS_DATASETS for kinds with a pressure: gas)
                           attrs: GROUP_ATTRS
    /model/rotation_curve/ radius (M,), v_circ_total (M,), v_circ_<name> (M,)

Values are in the units named by the root attributes: :class:`FileUnits` converts
internal units (kpc, km/s, Msun) to them for the writer and back for every reader.
"""
import math
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u
import numpy as np

from ..errors import ModelError
from ..kinds import kind_of
from ..units import unit_scale

__all__ = ["SCHEMA", "SCHEMA_VERSION", "READABLE_VERSIONS", "PRECISIONS", "COMPRESSIONS",
           "ID_DTYPE", "FIRST_ID", "H5_CHUNK_ROWS", "ROOT_KEYS", "ROOT_VECTORS",
           "GROUP_ATTRS", "DATASETS", "GAS_DATASETS", "CURVE_GROUP", "SPEED_OF_LIGHT",
           "FileUnits", "datasets", "first_ids", "gravitational_constant", "check_format",
           "check_output_units", "estimate_file_size"]

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
#: Ids run FIRST_ID.. over the whole file in component order; 0 is left unused because
#: some simulation codes read id 0 as "no particle" (common practice, from memory).
FIRST_ID = 1
#: HDF5 chunk of compressed datasets, in particles: 16384 x 3 x 8 B = 384 KiB, under
#: h5py's default 1 MiB chunk cache, so a partial-chunk write does not thrash it.
H5_CHUNK_ROWS = 16384
#: Root attributes of every version.
ROOT_KEYS = ("schema", "schema_version", "length_unit", "velocity_unit", "mass_unit", "G",
             "seed", "config", "created", "icgen_version")
#: Root attributes of version 2 on, three numbers each: the sampled centre of mass (the
#: model centre is the origin) and the velocity shift that removed the net momentum.
ROOT_VECTORS = ("centre_of_mass", "velocity_shift")
#: Attributes of each particle group.
GROUP_ATTRS = ("kind", "count", "total_mass")
#: Datasets of every particle group, in writing order: name -> (trailing shape, dtype
#: kind): "f" the file's float type, "u" the ids' unsigned integer.
DATASETS = {"position": ((3,), "f"), "velocity": ((3,), "f"), "mass": ((), "f"),
            "id": ((), "u")}
#: The extra dataset of a kind with a pressure (icgen.kinds): specific internal energy, in
#: velocity_unit^2.
GAS_DATASETS = {"internal_energy": ((), "f")}
#: The analytic rotation curve: radius, v_circ_total and v_circ_<name>, float64.
CURVE_GROUP = "model/rotation_curve"
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
_INTERNAL = {"length": ("kpc", "lengths"), "velocity": ("km/s", "speeds"),
             "mass": ("Msun", "masses")}
# File-size estimate: HDF5 metadata per dataset (object header, layout, attributes;
# ~1.7 kB measured with h5py 3.16 / HDF5 2.0, rounded up), per chunk of a compressed
# dataset (chunk index entry, ~100 B, rounded up), and for the file (superblock, groups).
_DATASET_OVERHEAD = 4096
_CHUNK_OVERHEAD = 256
_FILE_OVERHEAD = 65536
# Points of the stored rotation curve assumed by the estimate (MassModel's curve: 120).
_CURVE_POINTS_BOUND = 1000


def datasets(kind):
    """Datasets of a particle group of this component kind: name -> (tail, dtype kind)."""
    return dict(DATASETS, **(GAS_DATASETS if kind_of(kind).pressure else {}))


def first_ids(counts):
    """First id of each component, ``counts`` in file order (ids run on across them)."""
    out, next_id = [], FIRST_ID
    for n in counts:
        out.append(next_id)
        next_id += int(n)
    return out


def gravitational_constant(length_unit, velocity_unit, mass_unit):
    """G (astropy.constants, CODATA) in length_unit velocity_unit^2 / mass_unit."""
    target = u.Unit(length_unit) * u.Unit(velocity_unit) ** 2 / u.Unit(mass_unit)
    return float(const.G.to_value(target))


@dataclass(frozen=True)
class FileUnits:
    """A file's unit strings, the factors from internal units (x_file = x_internal *
    scale) and G in those units; converts datasets both ways."""

    length: str
    velocity: str
    mass: str
    length_scale: float
    velocity_scale: float
    mass_scale: float
    G: float

    @classmethod
    def parse(cls, length, velocity, mass, prefix=""):
        """From three unit strings; a bad one is a ModelError naming ``prefix`` and the
        unit's attribute (``prefix + "length_unit"``)."""
        scales = [unit_scale(s, kind, f"{prefix}{kind}_unit")
                  for s, kind in ((length, "length"), (velocity, "velocity"), (mass, "mass"))]
        return cls(length, velocity, mass, *scales,
                   gravitational_constant(length, velocity, mass))

    def as_dict(self):
        """{"length", "velocity", "mass"} -> unit string."""
        return {"length": self.length, "velocity": self.velocity, "mass": self.mass}

    def scale(self, key):
        """Factor internal -> file of a dataset (particle or rotation-curve key)."""
        if key in ("position", "radius"):
            return self.length_scale
        if key == "velocity" or key.startswith("v_circ_"):
            return self.velocity_scale
        if key == "mass":
            return self.mass_scale
        if key == "internal_energy":
            return self.velocity_scale ** 2
        raise KeyError(f"no unit for dataset {key!r}")

    def to_file(self, key, values):
        """float64 values in internal units -> file units (float64)."""
        scale = self.scale(key)
        return values * scale if scale != 1.0 else values

    def to_internal(self, key, values):
        """Values in file units -> internal units (kpc, km/s, Msun, (km/s)^2), float64."""
        return np.asarray(getattr(values, "value", values), np.float64) / self.scale(key)


def check_format(precision, compress):
    """ModelError unless ``precision`` is in PRECISIONS and ``compress`` None or in COMPRESSIONS."""
    if precision not in PRECISIONS:
        raise ModelError("--precision", precision, f"must be one of {', '.join(PRECISIONS)}")
    if compress is not None and compress not in COMPRESSIONS:
        raise ModelError("--compress", compress, f"must be one of {', '.join(COMPRESSIONS)}")


def check_output_units(output, precision="double"):
    """FileUnits of a model's ``[output]`` table (``length_unit``, ``velocity_unit``,
    ``mass_unit``), or ModelError when a unit's scale would turn a galaxy's values
    (``_VALUE_RANGES``, internal units) into infinities or subnormal numbers of the file's
    float type, or G (always float64) into one."""
    check_format(precision, None)
    info = np.finfo(PRECISIONS[precision])
    strings, scales = {}, {}
    for kind, (lo, hi) in _VALUE_RANGES.items():
        unit = strings[kind] = getattr(output, f"{kind}_unit")
        scale = scales[kind] = unit_scale(unit, kind, f"output.{kind}_unit")
        with np.errstate(over="ignore", under="ignore"):
            big, small = np.float64(hi) * scale, np.float64(lo) * scale
        if not (math.isfinite(big) and big <= info.max and small >= info.tiny):
            internal, plural = _INTERNAL[kind]
            raise ModelError(f"output.{kind}_unit", unit,
                             f"scales {plural} by {scale:.3g}: {lo:g} to {hi:g} {internal} "
                             f"would be {small:.3g} to {big:.3g}, outside the normal "
                             f"{precision}-precision range ({info.tiny:.3g} to "
                             f"{info.max:.3g}); choose a unit nearer {internal}")
    shown = ", ".join(strings.values())
    try:
        G = gravitational_constant(*strings.values())
    except (ArithmeticError, ValueError, u.UnitsError) as exc:   # astropy scale of 0 or inf
        reason = exc.args[-1] if exc.args and isinstance(exc.args[-1], str) else str(exc)
        raise ModelError("output", shown,
                         f"astropy cannot express G in these units "
                         f"({' '.join(reason.split())}); choose units nearer kpc, km/s, Msun"
                         ) from None
    if not (math.isfinite(G) and G >= np.finfo(np.float64).tiny):
        raise ModelError("output", shown, f"G in these units is {G:.3g}, not a normal "
                                          f"float64; choose units nearer kpc, km/s, Msun")
    return FileUnits(*strings.values(), *scales.values(), G)


def estimate_file_size(plans, precision="double", compress=None, config_bytes=0):
    """Upper estimate (bytes) of the snapshot file of these plans (objects with ``count``
    and ``kind``).

    Datasets at their full size (compression assumed to gain nothing), HDF5 metadata per
    dataset and per compressed chunk, the rotation curve (at most _CURVE_POINTS_BOUND
    points) and the stored model file (``config_bytes``).
    """
    check_format(precision, compress)
    size = {"f": np.dtype(PRECISIONS[precision]).itemsize, "u": np.dtype(ID_DTYPE).itemsize}
    total = _FILE_OVERHEAD + config_bytes
    n_components = 0
    for p in plans:
        n = int(p.count)
        n_components += 1
        for tail, kind in datasets(p.kind).values():
            total += n * math.prod(tail) * size[kind] + _DATASET_OVERHEAD
            if compress is not None:
                total += -(-n // H5_CHUNK_ROWS) * _CHUNK_OVERHEAD
    total += (n_components + 2) * (_CURVE_POINTS_BOUND * 8 + _DATASET_OVERHEAD)
    return int(total)
