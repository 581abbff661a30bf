"""Damaged snapshots: every reader validates the file in one place (icgen.snapshot.validate).

A small snapshot is built once with ``build_snapshot``; each test copies it, damages the
copy with h5py (as an edit or a cut after writing would) and runs the commands in-process
through ``icgen.cli.main``. The rule (from the project's input-error contract, common
practice for command-line tools): exit status 2, one line on stderr naming the file and the
attribute or dataset at fault, and nothing written.
"""
import os
import shutil

import h5py
import numpy as np
import pytest

from conftest import model_from_components
from icgen.cli import main
from icgen.errors import ModelError
from icgen.snapshot import load_model_from_snapshot, read_header, read_rows, read_snapshot
from icgen.snapshot import SLAB_ROWS, check_values, open_snapshot

N_HALO, N_DISK = 3000, 2000


@pytest.fixture(scope="module")
def good(tmp_path_factory):
    import warnings
    from icgen.build import build_snapshot
    model = model_from_components({
        "halo": {"kind": "halo", "profile": "hernquist", "mass": "1e11 Msun",
                 "scale_radius": "8 kpc", "particles": N_HALO},
        "disk": {"kind": "disk", "mass": "5e9 Msun", "scale_length": "2 kpc",
                 "scale_height": "0.2 kpc", "toomre_q": 1.5, "particles": N_DISK}})
    path = tmp_path_factory.mktemp("good") / "galaxy.h5"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        build_snapshot(model, path)
    return str(path)


def damaged(good, tmp_path, damage):
    """A copy of ``good`` with ``damage(h5py.File)`` applied."""
    path = str(tmp_path / "damaged.h5")
    shutil.copy(good, path)
    with h5py.File(path, "r+") as f:
        damage(f)
    return path


def _set_attr(where, key, value):
    def damage(f):
        f[where].attrs[key] = value
    return damage


def _replace(dataset, make):
    """Replace a dataset by make(old values)."""
    def damage(f):
        old = f[dataset][()]
        del f[dataset]
        f.create_dataset(dataset, data=make(old))
    return damage


def _set_row(dataset, row, value):
    def damage(f):
        f[dataset][row] = value
    return damage


def _delete(dataset):
    def damage(f):
        del f[dataset]
    return damage


# (damage, words the one-line error must contain): each a damage seen in the field or a
# rule of the schema (docs/snapshot-format.md)
HEADER_DAMAGE = {
    "config not text": (_set_attr("/", "config", 5), "attribute config"),
    "config not TOML": (_set_attr("/", "config", "[model"), "attribute config"),
    "config not a model": (_set_attr("/", "config", "[model]\nname = 'x'\n"),
                           "attribute config"),
    "unknown unit": (_set_attr("/", "length_unit", "bananas"), "attribute length_unit"),
    "unit of the wrong kind": (_set_attr("/", "mass_unit", "km"), "attribute mass_unit"),
    "unit not text": (_set_attr("/", "velocity_unit", 3.0), "attribute velocity_unit"),
    "G changed": (_set_attr("/", "G", 1.0), "attribute G"),
    "G not finite": (_set_attr("/", "G", np.nan), "attribute G"),
    "seed negative": (_set_attr("/", "seed", -4), "attribute seed"),
    "version as text": (_set_attr("/", "schema_version", "1"), "schema_version"),
    "created not text": (_set_attr("/", "created", 2026), "attribute created"),
    "schema as an array": (_set_attr("/", "schema", np.array([b"icgen-snapshot", b"x"])),
                           "not an icgen snapshot"),
    "kind as an array": (_set_attr("particles/disk", "kind", np.array([b"disk", b"disk"])),
                         "/particles/disk attribute kind"),
    "seed as an array": (_set_attr("/", "seed", np.array([1, 2])), "attribute seed"),
    "root attribute missing": (lambda f: f.attrs.__delitem__("seed"), "'seed' missing"),
    "extra particle group": (lambda f: f.copy(f["particles/disk"], "particles/disk2"),
                             "group /particles: has a particle group 'disk2'"),
    "particle group missing": (_delete("particles/disk"),
                               "group /particles: has no particle group 'disk'"),
    "kind changed": (_set_attr("particles/disk", "kind", "bulge"),
                     "/particles/disk attribute kind"),
    "count huge": (_set_attr("particles/disk", "count", np.int64(10**12)),
                   "/particles/disk attribute count"),
    "count not whole": (_set_attr("particles/disk", "count", 2000.5),
                        "/particles/disk attribute count"),
    "total_mass NaN": (_set_attr("particles/halo", "total_mass", np.nan),
                       "/particles/halo attribute total_mass"),
    "group attribute missing": (lambda f: f["particles/halo"].attrs.__delitem__("count"),
                                "'count' missing"),
    "mass missing": (_delete("particles/disk/mass"), "dataset /particles/disk/mass: missing"),
    "position missing": (_delete("particles/halo/position"),
                         "dataset /particles/halo/position: missing"),
    "position (N, 2)": (_replace("particles/disk/position", lambda a: a[:, :2]),
                        "dataset /particles/disk/position: has shape (2000, 2)"),
    "velocity short": (_replace("particles/disk/velocity", lambda a: a[:-1]),
                       "dataset /particles/disk/velocity: has shape (1999, 3)"),
    "mass as integers": (_replace("particles/disk/mass", lambda a: np.ones(a.shape, np.int64)),
                         "dataset /particles/disk/mass: has type int64"),
    "mass as float16": (_replace("particles/disk/mass", lambda a: a.astype(np.float16)),
                        "dataset /particles/disk/mass: has type float16"),
    "signed ids": (_replace("particles/halo/id", lambda a: a.astype(np.int64)),
                   "dataset /particles/halo/id: has type int64"),
    "curve missing": (_delete("model/rotation_curve/v_circ_disk"),
                      "dataset /model/rotation_curve/v_circ_disk: missing"),
    "curve NaN": (_set_row("model/rotation_curve/v_circ_total", 3, np.nan),
                  "dataset /model/rotation_curve/v_circ_total: row 3 is nan"),
}
VALUE_DAMAGE = {
    "NaN mass": (_set_row("particles/disk/mass", 17, np.nan),
                 "dataset /particles/disk/mass: row 17 is nan"),
    "negative mass": (_set_row("particles/disk/mass", 17, -1e-5),
                      "dataset /particles/disk/mass: row 17 is -1e-05"),
    "zero mass": (_set_row("particles/halo/mass", 0, 0.0),
                  "dataset /particles/halo/mass: row 0 is 0"),
    "NaN position": (_set_row("particles/disk/position", 5, [np.nan, 0.0, 0.0]),
                     "dataset /particles/disk/position: row 5 is (nan, 0, 0)"),
    "infinite velocity": (_set_row("particles/halo/velocity", N_HALO - 1, [0.0, np.inf, 0.0]),
                          f"dataset /particles/halo/velocity: row {N_HALO - 1} is (0, inf, 0)"),
    # a finite position whose square overflows: the shrinking-sphere centre of check and
    # drift then looped for ever on a sphere of infinite radius
    "position squared overflows": (_set_row("particles/halo/position", 439, [1.0, -6.7e174, 0.0]),
                                   "dataset /particles/halo/position: row 439 is (1, -6.7e+174, 0)"),
    "total_mass edited": (_set_attr("particles/disk", "total_mass", 0.4),
                          "total_mass 0.4 differs from the sum of its masses"),
}


def commands(path, out):
    """Every command that reads a snapshot, writing (if it got that far) under ``out``."""
    return {"info": ["info", path],
            "check": ["check", path, "--report", str(out / "check")],
            "drift": ["drift", path, "--time", "0.01 Gyr", "--outputs", "1",
                      "--report", str(out / "drift")],
            "mock": ["mock", path, "--tracer", "disk", "--inclination", "60 deg",
                     "--position-angle", "35 deg", "--distance", "12 Mpc",
                     "-o", str(out / "mock")],
            "stability": ["stability", path, "--json", str(out / "stability.json")]}


def _refused(argv, words, capsys):
    status = main(argv)
    out, err = capsys.readouterr()
    assert status == 2, (argv[0], out, err)
    assert err.startswith("icgen: error: ") and err.count("\n") == 1, err
    assert words in err, err
    return err


@pytest.mark.parametrize("case", sorted(HEADER_DAMAGE))
def test_damaged_header_is_refused_by_every_reader(good, tmp_path, capsys, case):
    damage, words = HEADER_DAMAGE[case]
    path = damaged(good, tmp_path, damage)
    out = tmp_path / "out"
    out.mkdir()
    for name, argv in commands(path, out).items():
        err = _refused(argv, words, capsys)
        assert path in err or "schema_version" in words
    assert os.listdir(out) == []                       # nothing written
    for read in (read_header, read_snapshot, load_model_from_snapshot,
                 lambda p: read_rows(p, {"disk": np.arange(5)})):
        with pytest.raises(ModelError, match="schema_version" if "version" in case else
                           "damaged.h5") as exc:
            read(path)
        assert "\n" not in str(exc.value)


@pytest.mark.parametrize("case", sorted(VALUE_DAMAGE))
def test_bad_values_are_refused_where_they_are_read(good, tmp_path, capsys, case):
    damage, words = VALUE_DAMAGE[case]
    path = damaged(good, tmp_path, damage)
    out = tmp_path / "out"
    out.mkdir()
    todo = commands(path, out)
    # stability uses only the stored model, never the particles: it is not asked here
    del todo["stability"]
    for name, argv in todo.items():
        if name == "drift" and "total_mass" in case:
            continue        # drift reads rows, not whole datasets: total_mass is not summed
        _refused(argv, words, capsys)
    assert os.listdir(out) == []
    with pytest.raises(ModelError, match="damaged.h5"):
        read_snapshot(path)
    # the header alone is fine: a quick look does not read the values
    assert main(["info", "--quick", path]) == 0
    assert "values not scanned" in capsys.readouterr().out


def test_mock_of_negative_masses_writes_no_cube(good, tmp_path, capsys):
    # negative masses used to give a cube of negative flux: now nothing is written
    path = damaged(good, tmp_path, lambda f: f["particles/disk/mass"].__setitem__(
        slice(None), -f["particles/disk/mass"][()]))
    out = tmp_path / "mock"
    err = _refused(commands(path, tmp_path)["mock"], "/particles/disk/mass: row 0 is -", capsys)
    assert "must be finite and below 1e+150 in magnitude, and > 0" in err
    assert not out.exists()


def test_file_cut_short_gives_one_line(good, tmp_path, capsys):
    # a copy cut after writing (an interrupted transfer): h5py may open it or not, but
    # every command ends in one line and exit 2
    for keep in (0.5, 0.9):
        path = str(tmp_path / f"cut{keep}.h5")
        with open(good, "rb") as src, open(path, "wb") as dst:
            data = src.read()
            dst.write(data[:int(keep * len(data))])
        for argv in commands(path, tmp_path).values():
            _refused(argv, path, capsys)


def test_read_rows_checks_each_slab_it_reads(good, tmp_path):
    path = damaged(good, tmp_path, _set_row("particles/halo/mass", 100, np.nan))
    # rows away from the bad one, in slabs of 50 that do not hold it: read fine
    assert read_rows(path, {"halo": np.arange(10)}, slab=50)["halo"]["mass"].size == 10
    # a slab holding it is refused, even when the bad row itself is not asked for
    with pytest.raises(ModelError, match="row 100 is nan"):
        read_rows(path, {"halo": np.array([101])}, slab=50)
    with pytest.raises(ModelError, match="row indices"):
        read_rows(path, {"halo": np.array([5, 3])})
    with pytest.raises(ModelError, match="no such component"):
        read_rows(path, {"bulge": np.array([1])})


def test_check_values_names_the_first_bad_row_across_slabs():
    values = np.ones((25, 3))
    values[23, 1] = np.inf
    with pytest.raises(ModelError, match=r"x: row 23 is \(1, inf, 1\); values must be finite"):
        check_values(values, "position", "x", rows=4)
    masses = np.ones(10)
    masses[7] = -2.0
    with pytest.raises(ModelError, match="row 1007 is -2"):
        check_values(masses, "mass", "m", start=1000, rows=3)
    check_values(np.arange(5, dtype=np.uint64), "id", "ids")        # integers pass
    check_values(np.array([-9.9e149, 9.9e149]), "velocity", "v")       # below the bound
    check_values(np.array([3e38], np.float32), "position", "x")        # float32: finite
    with pytest.raises(ModelError, match="row 0 is inf"):
        check_values(np.array([np.inf], np.float32), "position", "x")
    with pytest.raises(ModelError, match="row 1 is 1e.150; values must be finite and below"):
        check_values(np.array([0.0, 1e150]), "velocity", "v")
    assert SLAB_ROWS == 2**20


def test_good_file_summary_says_what_was_checked(good, capsys):
    assert main(["info", good]) == 0
    out = capsys.readouterr().out
    assert f"header and all {N_HALO + N_DISK:,} particles' values checked" in out
    with open_snapshot(good) as snap:
        assert snap.scan() == N_HALO + N_DISK
        assert list(snap.components) == ["halo", "disk"]
        assert snap.spec.name == "test model"


def test_stability_names_a_damaged_snapshot_not_a_toml_error(tmp_path, capsys):
    path = tmp_path / "galaxy.h5"
    path.write_text("this was an HDF5 file once\n")
    _refused(["stability", str(path)], "not an HDF5 file", capsys)
