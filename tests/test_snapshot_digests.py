"""Snapshots do not change when the code is reorganised: the shipped configs (and the
built-in default), at reduced particle counts, must give files whose every dataset and
attribute (but the creation time and the version string) hash to the recorded digests.

A digest is a SHA-256 over the bytes of every dataset and attribute in a fixed order. It
also depends on the numerical libraries (numpy's SIMD exp and log, scipy, numba) and the
CPU: the record names the versions it was made with, and with other versions the test
is skipped with the reason (the build is still exercised). Record again, after checking
that a change of output is intended, with

    python tests/test_snapshot_digests.py --record
"""
import hashlib
import json
import os
import sys
import warnings
from pathlib import Path

import h5py
import numpy as np
import pytest

ROOT = Path(__file__).resolve().parent.parent
RECORD = Path(__file__).resolve().parent / "data" / "snapshot_digests.json"
#: Particles per component in these builds (a point mass keeps its one).
PARTICLES = 3000
#: Attributes that change from run to run by design.
VOLATILE = {"created", "icgen_version"}


def cases():
    """name -> (model file or None for the default, precision, [model] overrides)."""
    out = {"default": (None, "double", {}),
           "default-single-mirror-quiet": (None, "single", {"mirror": True,
                                                            "quiet_start": True})}
    for path in sorted((ROOT / "configs").glob("*.toml")):
        out[path.stem] = (path, "double", {})
    return out


def libraries():
    import astropy
    import h5py as h5
    import numba
    import scipy
    return {"numpy": np.__version__, "scipy": scipy.__version__, "numba": numba.__version__,
            "h5py": h5.__version__, "hdf5": h5.version.hdf5_version,
            "astropy": astropy.__version__}


def build(case, folder):
    from icgen.build import build_snapshot
    from icgen.spec import load_dict, spec_from_dict
    path, precision, overrides = cases()[case]
    data = load_dict(path)
    data.setdefault("model", {}).update(overrides)
    for table in data["components"].values():
        if table.get("kind") != "point_mass":
            table["particles"] = PARTICLES
    out = Path(folder) / f"{case}.h5"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        build_snapshot(spec_from_dict(data), out, precision=precision)
    return out


def _update(h, value):
    a = np.asarray(value)
    if a.dtype.kind in "OUS":
        h.update(repr(value).encode())
    else:
        h.update(str(a.dtype).encode() + str(a.shape).encode())
        h.update(np.ascontiguousarray(a).tobytes())


def digest(path):
    """SHA-256 of every dataset and attribute of an HDF5 file, in a fixed order."""
    h = hashlib.sha256()
    with h5py.File(path, "r") as f:
        items = []
        f.visititems(lambda name, obj: items.append((name, obj)))
        for name, obj in [("/", f)] + sorted(items, key=lambda t: t[0]):
            h.update(name.encode())
            for key in sorted(obj.attrs):
                if key not in VOLATILE:
                    h.update(key.encode())
                    _update(h, obj.attrs[key])
            if isinstance(obj, h5py.Dataset):
                _update(h, obj[()])
    return h.hexdigest()


def recorded():
    if not RECORD.exists():
        return None
    return json.loads(RECORD.read_text())


@pytest.mark.parametrize("case", sorted(cases()))
def test_snapshot_is_bit_identical_to_the_record(case, tmp_path):
    record = recorded()
    got = digest(build(case, tmp_path))
    if record is None:
        pytest.skip(f"no record at {RECORD}")
    if record["libraries"] != libraries():
        pytest.skip(f"digests recorded with {record['libraries']}, running {libraries()}")
    assert got == record["digests"][case], f"{case}: the snapshot changed"


def main(argv):
    if argv[1:] != ["--record"]:
        print(__doc__)
        return 2
    import tempfile
    sys.path.insert(0, str(ROOT))
    with tempfile.TemporaryDirectory() as folder:
        digests = {case: digest(build(case, folder)) for case in sorted(cases())}
    RECORD.parent.mkdir(exist_ok=True)
    RECORD.write_text(json.dumps({"libraries": libraries(), "particles": PARTICLES,
                                  "digests": digests}, indent=1) + "\n")
    print(f"wrote {RECORD}")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
