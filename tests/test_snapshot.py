"""Snapshot writer and reader alone: round trips, units, guards, schema
(docs/snapshot-format.md).

The particles here are invented (random numbers from a seeded generator): the writer is
checked for storing exactly what it is given, independently of the samplers.
"""
import math
import os
import shutil
from collections import namedtuple

import astropy.constants as const
import astropy.units as u
import h5py
import numpy as np
import pytest

from icgen.spec import spec_from_dict, spec_from_toml_text
from icgen.errors import ModelError
from icgen.sampling import ParticleChunk
from icgen.snapshot import (FileUnits, NonFiniteError, SnapshotWriter, check_output_units,
                            create_datasets, describe, partial_path, read_header, read_rows,
                            read_snapshot, write_chunk)
from icgen.snapshot.schema import first_ids

Plan = namedtuple("Plan", "name kind count")

# IAU 2012 Resolution B2 (au) and the IAU 2015 definition of the parsec; used to convert
# G without astropy.units.
AU_M = 149_597_870_700.0
PC_M = AU_M * 648_000.0 / math.pi

ROOT_KEYS = {"schema", "schema_version", "length_unit", "velocity_unit", "mass_unit", "G",
             "seed", "config", "created", "icgen_version", "centre_of_mass", "velocity_shift"}


def make_spec(length="kpc", velocity="km/s", mass="1e10 Msun", seed=3):
    return spec_from_dict({
        "model": {"name": "writer test", "seed": seed},
        "output": {"length_unit": length, "velocity_unit": velocity, "mass_unit": mass},
        "components": {
            "halo": {"kind": "halo", "profile": "hernquist", "mass": "1e12 Msun",
                     "scale_radius": "20 kpc", "particles": 3000},
            "disk": {"kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
                     "scale_height": "0.3 kpc", "toomre_q": 1.5, "particles": 2000},
        }})


PLANS = [Plan("halo", "halo", 3000), Plan("disk", "disk", 2000)]


def invented_particles(seed=0):
    """name -> (position kpc, velocity km/s, mass Msun), random but finite."""
    rng = np.random.default_rng(seed)
    out = {}
    for p, scale, m in zip(PLANS, (50.0, 5.0), (3e8, 2.5e7)):
        out[p.name] = (rng.normal(0, scale, (p.count, 3)), rng.normal(0, 150, (p.count, 3)),
                       np.full(p.count, m))
    return out


def chunks_of(parts, size, rng=None):
    """ParticleChunks of ``size``; shuffled order if ``rng`` (the writer takes any order)."""
    chunks = []
    for name, (x, v, m) in parts.items():
        for lo in range(0, len(m), size):
            chunks.append(ParticleChunk(name, lo, x[lo:lo + size], v[lo:lo + size], m[lo:lo + size]))
    if rng is not None:
        rng.shuffle(chunks)
    return chunks


def curve():
    r = np.linspace(0.5, 30, 20)
    return r, {"total": np.full(20, 200.0), "halo": np.full(20, 150.0), "disk": np.full(20, 130.0)}


def write(path, spec, parts, precision="double", compress=None, size=700, momentum=None):
    with SnapshotWriter(path, spec, PLANS, precision, compress) as w:
        for chunk in chunks_of(parts, size, np.random.default_rng(1)):
            w.append(chunk)
        w.finish(*curve(), momentum=momentum)
        w.commit()
    return w


@pytest.mark.parametrize("precision", ["double", "single"])
@pytest.mark.parametrize("compress", [None, "gzip", "lzf"])
def test_round_trip_stores_exactly_what_it_is_given(tmp_path, precision, compress):
    spec = make_spec()
    parts = invented_particles()
    path = tmp_path / "snap.h5"
    no_shift = (np.zeros(3), np.zeros(3))
    w = write(path, spec, parts, precision, compress, momentum=no_shift)
    dtype = {"double": np.float64, "single": np.float32}[precision]
    # astropy's factor for 1e10 Msun is 1e-10 to the last bit or two
    scale = w.units.mass_scale
    assert scale == pytest.approx(1e-10, rel=1e-15)
    snap = read_snapshot(path)
    assert list(snap.components) == ["halo", "disk"]          # model-file order
    for name, (x, v, m) in parts.items():
        c = snap.components[name]
        # kpc and km/s have scale 1 exactly; the mass is one float64 multiplication
        # before the cast, so the same expression must give the same bits.
        assert np.array_equal(c["position"], x.astype(dtype))
        assert np.array_equal(c["velocity"], v.astype(dtype))
        assert np.array_equal(c["mass"], (m * scale).astype(dtype))
        assert c["position"].dtype == dtype and c["kind"] == name
    ids = np.concatenate([c["id"] for c in snap.components.values()])
    assert ids.dtype == np.uint64 and np.unique(ids).size == ids.size == 5000
    with h5py.File(path, "r") as f:
        for name in ("halo", "disk"):
            d = f[f"particles/{name}/position"]
            # explicitly little-endian on disk (schema), whatever the machine
            assert d.dtype.str == np.dtype(dtype).newbyteorder("<").str
            if compress is None:
                assert d.chunks is None and d.compression is None   # plain contiguous
            else:
                assert d.compression == compress and d.shuffle


def test_read_rows_returns_the_chosen_rows_of_the_full_read(tmp_path):
    # reading slab by slab (here slabs of 7 rows, so the chosen rows straddle slab
    # edges, and a slab with none is skipped) gives exactly those rows of the full read
    path = tmp_path / "snap.h5"
    write(path, make_spec(), invented_particles())
    full = read_snapshot(path).components
    rng = np.random.default_rng(5)
    rows = {name: np.sort(rng.choice(len(c["mass"]), size=len(c["mass"]) // 3,
                                     replace=False)) for name, c in full.items()}
    rows["disk"] = rows["disk"][rows["disk"] >= 14]                 # slabs 0, 1: nothing
    got = read_rows(path, rows, slab=7)
    for name, idx in rows.items():
        for key in ("position", "velocity", "mass"):
            assert np.array_equal(got[name][key], full[name][key][idx])
    assert read_rows(path, {"halo": np.array([], int)})["halo"]["position"].shape == (0, 3)


def test_root_and_group_attributes_follow_the_schema(tmp_path):
    spec = make_spec()
    parts = invented_particles()
    path = tmp_path / "snap.h5"
    write(path, spec, parts)
    with h5py.File(path, "r") as f:
        assert set(f.attrs) == ROOT_KEYS
        assert f.attrs["schema"] == "icgen-snapshot" and f.attrs["schema_version"] == 2
        assert f.attrs["seed"] == 3
        # ISO 8601 in UTC (schema): parseable, with a zero offset
        import datetime
        created = datetime.datetime.fromisoformat(f.attrs["created"].replace("Z", "+00:00"))
        assert created.utcoffset() == datetime.timedelta(0)
        assert set(f["particles"]) == {"halo", "disk"}
        for name, (x, v, m) in parts.items():
            g = f[f"particles/{name}"]
            assert g.attrs["kind"] == name and g.attrs["count"] == len(m)
            # total_mass: float64 sum of the written masses, 1e-10 of the Msun values;
            # relative 1e-12 covers the summation order (N eps ~ 1e-12 for N ~ 3000)
            assert g.attrs["total_mass"] == pytest.approx(m.sum() * 1e-10, rel=1e-12)
        curve_keys = {"radius", "v_circ_total", "v_circ_halo", "v_circ_disk"}
        assert set(f["model/rotation_curve"]) == curve_keys
    # the stored model file loads back to the same spec
    assert spec_from_toml_text(read_snapshot(path).config) == spec


def test_positions_stay_and_the_net_momentum_is_removed(tmp_path):
    # The model centre stays the origin of the file: positions as given; one uniform
    # velocity shift removes the net momentum; both recorded in the root attributes.
    spec = make_spec()
    parts = invented_particles()
    path = tmp_path / "snap.h5"
    w = write(path, spec, parts, momentum=None)      # the writer's own mass-weighted means
    m_all = np.concatenate([p[2] for p in parts.values()])
    x0 = np.concatenate([p[0] for p in parts.values()]).T @ m_all / m_all.sum()
    v0 = np.concatenate([p[1] for p in parts.values()]).T @ m_all / m_all.sum()
    # the writer summed chunk by chunk in another order: float64 rounding, ~1e-13 relative
    np.testing.assert_allclose(w.bulk[0], x0, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(w.bulk[1], v0, rtol=1e-12, atol=1e-12)
    snap = read_snapshot(path)
    for name, (x, v, m) in parts.items():
        np.testing.assert_array_equal(snap.components[name]["position"], x)
        np.testing.assert_array_equal(snap.components[name]["velocity"], v - w.bulk[1])
    np.testing.assert_array_equal(snap.attrs["centre_of_mass"], w.bulk[0])
    np.testing.assert_array_equal(snap.attrs["velocity_shift"], -w.bulk[1])
    mass = np.concatenate([c["mass"] for c in snap.components.values()])
    vel = np.concatenate([c["velocity"] for c in snap.components.values()])
    # the net momentum is zero up to float64 rounding of velocities ~200 km/s
    assert np.all(np.abs(vel.T @ mass / mass.sum()) < 1e-12)


def test_unit_conversion_and_G_in_output_units(tmp_path):
    spec = make_spec(length="pc", velocity="m/s", mass="Msun")
    parts = invented_particles()
    path = tmp_path / "snap.h5"
    write(path, spec, parts, momentum=(np.zeros(3), np.zeros(3)))
    snap = read_snapshot(path, quantity=True)
    for name, (x, v, m) in parts.items():
        c = snap.components[name]
        # one float64 multiplication each way: a few ulp
        np.testing.assert_allclose(c["position"].to_value(u.kpc), x, rtol=1e-14)
        np.testing.assert_allclose(c["velocity"].to_value(u.km / u.s), v, rtol=1e-14)
        np.testing.assert_allclose(c["mass"].to_value(u.Msun), m, rtol=1e-14)
    # G in pc (m/s)^2 / Msun by hand from SI: G_SI * M_sun / pc, with the IAU parsec
    expected = const.G.si.value * const.M_sun.si.value / PC_M
    assert snap.attrs["G"] == pytest.approx(expected, rel=1e-12)
    assert snap.G.to_value(u.m**3 / u.kg / u.s**2) == pytest.approx(const.G.si.value, rel=1e-12)


def test_half_mass_radius_of_a_uniform_sphere(tmp_path):
    # Uniform sphere of radius 1: M(<r) = r^3, so r_half = 2^(-1/3) = 0.7937 (elementary).
    # The sample median has standard deviation sqrt(1/4 / N) / (dM/dr) = 0.5 / sqrt(N)
    # / (3 r_half^2) = 8.4e-4 for N = 1e5; 4e-3 is ~5 sigma and ~20 bin widths.
    rng = np.random.default_rng(5)
    n = 100_000
    d = rng.normal(size=(n, 3))
    x = d / np.linalg.norm(d, axis=1)[:, None] * rng.random(n)[:, None] ** (1 / 3)
    spec = make_spec()
    plans = [Plan("halo", "halo", n), Plan("disk", "disk", 1)]
    with SnapshotWriter(tmp_path / "s.h5", spec, plans) as w:
        w.append(ParticleChunk("halo", 0, x, np.zeros((n, 3)), np.ones(n)))
        w.append(ParticleChunk("disk", 0, np.zeros((1, 3)), np.zeros((1, 3)), np.ones(1)))
        w.finish(np.ones(2), {k: np.ones(2) for k in ("total", "halo", "disk")})
        w.commit()
    radii = w.half_mass_radii()
    assert radii["halo"] == pytest.approx(2 ** (-1 / 3), abs=4e-3)
    assert radii["disk"] == 0.0


@pytest.mark.parametrize("bad", [np.nan, np.inf, -np.inf])
def test_non_finite_value_stops_the_writer_and_leaves_nothing(tmp_path, bad):
    spec = make_spec()
    parts = invented_particles()
    parts["disk"][1][1234, 2] = bad
    path = tmp_path / "snap.h5"
    with pytest.raises(NonFiniteError, match=r"component 'disk': velocity of particle 1234"):
        write(path, spec, parts)
    assert os.listdir(tmp_path) == []


def test_overflow_in_single_precision_is_caught(tmp_path):
    # 1e36 kpc is finite, but in pc it is 1e39, above the float32 maximum 3.4e38 (IEEE
    # 754), so the cast to single precision would write inf.
    spec = make_spec(length="pc")
    parts = invented_particles()
    parts["halo"][0][7, 0] = 1e36
    with pytest.raises(NonFiniteError, match=r"'halo': position of particle 7 is \(inf, "):
        write(tmp_path / "s.h5", spec, parts, precision="single")
    assert os.listdir(tmp_path) == []


def test_partial_file_is_never_taken_for_a_snapshot(tmp_path):
    spec = make_spec()
    parts = invented_particles()
    path = tmp_path / "snap.h5"
    with pytest.raises(KeyboardInterrupt):
        with SnapshotWriter(path, spec, PLANS) as w:
            for chunk in chunks_of(parts, 1000)[:2]:
                w.append(chunk)
            w._file.flush()
            shutil.copy(partial_path(path), tmp_path / "copy.h5")
            raise KeyboardInterrupt     # as an interrupted build would
    assert sorted(os.listdir(tmp_path)) == ["copy.h5"]
    with pytest.raises(ModelError, match="not an icgen snapshot"):
        read_snapshot(tmp_path / "copy.h5")


def test_reader_rejects_other_files_with_one_line_errors(tmp_path):
    text = tmp_path / "notes.h5"
    text.write_text("not hdf5\n")
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f.create_dataset("x", data=np.arange(3))
    newer = tmp_path / "newer.h5"
    write(newer, make_spec(), invented_particles())
    with h5py.File(newer, "a") as f:
        f.attrs["schema_version"] = 3
    cases = [(tmp_path / "missing.h5", "no such file"), (text, "not an HDF5 file"),
             (other, "not an icgen snapshot"), (newer, "schema_version 3"),
             (tmp_path, "is a folder")]
    for path, words in cases:
        with pytest.raises(ModelError, match=words) as exc:
            read_header(path)
        assert "\n" not in str(exc.value)


def test_describe_reads_attributes_only(tmp_path):
    path = tmp_path / "snap.h5"
    write(path, make_spec(), invented_particles(), precision="single", compress="gzip")
    text = describe(path)
    assert "writer test (seed 3)" in text
    assert "float32, gzip" in text and "1e10 Msun" in text
    assert text.index("halo") < text.index("disk")      # file order kept


def test_writer_rejects_bad_options(tmp_path):
    with pytest.raises(ModelError, match="--precision"):
        SnapshotWriter(tmp_path / "s.h5", make_spec(), PLANS, precision="half")
    with pytest.raises(ModelError, match="--compress"):
        SnapshotWriter(tmp_path / "s.h5", make_spec(), PLANS, compress="zip")
    assert os.listdir(tmp_path) == []


def test_gas_internal_energy_is_stored_in_velocity_unit_squared(tmp_path):
    # schema: gas particles also carry internal_energy (specific, velocity_unit^2)
    from types import SimpleNamespace
    # the stored model must have the file's components (the reader checks it)
    spec = spec_from_dict({
        "model": {"name": "gas writer test", "seed": 3},
        "output": {"length_unit": "kpc", "velocity_unit": "m/s", "mass_unit": "1e10 Msun"},
        "components": {"gas": {"kind": "gas_disk", "mass": "5e7 Msun", "scale_length": "3 kpc",
                               "temperature": "1e4 K", "particles": 500}}})
    plans = [Plan("gas", "gas_disk", 500)]
    rng = np.random.default_rng(9)
    x, v = rng.normal(0, 5, (500, 3)), rng.normal(0, 100, (500, 3))
    energy = rng.uniform(50, 150, 500)                      # (km/s)^2
    chunk = SimpleNamespace(component="gas", start=0, position=x, velocity=v,
                            mass=np.full(500, 1e5), internal_energy=energy)
    with SnapshotWriter(tmp_path / "gas.h5", spec, plans) as w:
        w.append(chunk)
        w.finish(np.ones(2), {"total": np.ones(2), "gas": np.ones(2)},
                 momentum=(np.zeros(3), np.zeros(3)))
        w.commit()
    snap = read_snapshot(tmp_path / "gas.h5", quantity=True)
    got = snap.components["gas"]["internal_energy"]
    # (km/s)^2 -> (m/s)^2 is a factor 1e6, one float64 multiplication: a few ulp
    assert got.unit.is_equivalent(u.m**2 / u.s**2)
    np.testing.assert_allclose(got.to_value((u.km / u.s) ** 2), energy, rtol=1e-14)
    np.testing.assert_allclose(read_snapshot(tmp_path / "gas.h5").components["gas"]
                               ["internal_energy"], energy * 1e6, rtol=1e-14)
    # a gas chunk without internal energy is refused, and nothing is left behind
    del chunk.internal_energy
    with pytest.raises(RuntimeError, match="internal_energy"):
        with SnapshotWriter(tmp_path / "gas2.h5", spec, plans) as w:
            w.append(chunk)
    assert sorted(os.listdir(tmp_path)) == ["gas.h5"]


def test_a_piece_of_one_component_written_alone_matches_the_whole_file(tmp_path):
    # The seam for spreading a build over workers: a block range of one component,
    # written into its own file by create_datasets + write_chunk (rows from an offset,
    # ids of the whole file), holds exactly the rows and ids of the whole file.
    spec, parts = make_spec(), invented_particles()
    whole = tmp_path / "whole.h5"
    w = write(whole, spec, parts, momentum=(np.zeros(3), np.zeros(3)))
    lo, hi = 1000, 2500
    x, v, m = (a[lo:hi] for a in parts["halo"])
    first = first_ids([p.count for p in PLANS])[0]
    with h5py.File(tmp_path / "piece.h5", "w") as f:
        g = f.create_group("halo")
        create_datasets(g, "halo", hi - lo, np.dtype("<f8"))
        for a in range(lo, hi, 600):       # any chunking of the piece
            b = min(a + 600, hi)
            write_chunk(g, ParticleChunk("halo", a, x[a - lo:b - lo], v[a - lo:b - lo],
                                         m[a - lo:b - lo]), "halo", w.units, first,
                        offset=lo)
        piece = {k: g[k][()] for k in g}
    with h5py.File(whole, "r") as f:
        for key, values in piece.items():
            assert values.tobytes() == f[f"particles/halo/{key}"][lo:hi].tobytes(), key
    assert piece["id"][0] == first + lo == 1001      # ids run from 1 over the file


def test_file_units_convert_both_ways_as_astropy_does():
    # The factors against astropy's own conversions (astropy.units), both directions.
    units = FileUnits.parse("pc", "m/s", "1e10 Msun")
    x = np.array([0.5, 8.0, 250.0])                   # kpc, km/s, Msun, (km/s)^2
    cases = {"position": (u.kpc, u.pc), "radius": (u.kpc, u.pc),
             "velocity": (u.km / u.s, u.m / u.s), "v_circ_disk": (u.km / u.s, u.m / u.s),
             "mass": (u.Msun, 1e10 * u.Msun),
             "internal_energy": ((u.km / u.s) ** 2, (u.m / u.s) ** 2)}
    for key, (internal, file_unit) in cases.items():
        in_file = units.to_file(key, x)
        np.testing.assert_allclose(in_file, (x * internal).to_value(file_unit), rtol=1e-15)
        np.testing.assert_allclose(units.to_internal(key, in_file), x, rtol=1e-15)
    with pytest.raises(KeyError):
        units.scale("id")
    # the writer's checked units are the same object the reader parses from a file
    output = namedtuple("Output", "length_unit velocity_unit mass_unit")("pc", "m/s",
                                                                         "1e10 Msun")
    assert check_output_units(output) == units
