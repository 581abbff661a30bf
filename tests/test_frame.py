"""The model's centre is the origin of every file, and every command that reads a snapshot
measures about one frame: the galaxy's centre (icgen.frame), even when the galaxy is
displaced and moving."""
import warnings

import h5py
import numpy as np
import pytest
from scipy import stats

from conftest import model_from_components
from icgen import read_snapshot
from icgen.build import build_snapshot
from icgen.cli import main
from icgen.spec import spec_from_dict
from icgen.diagnostics import check
from icgen.frame import find_frame, galaxy_frame
from icgen.mock import Geometry, Instrument, observe
from icgen.snapshot import open_snapshot

# A cool disk in a Hernquist halo, with a Hernquist bulge: the case that was written 5 kpc
# off-centre before the model's centre became the origin of the file.
GALAXY = {
    "disk": {"kind": "disk", "mass": "4e10 Msun", "scale_length": "3 kpc",
             "scale_height": "0.3 kpc", "toomre_q": 1.2, "particles": 150_000},
    "halo": {"kind": "halo", "profile": "hernquist", "mass": "8e11 Msun",
             "scale_radius": "25 kpc", "particles": 100_000},
    "bulge": {"kind": "bulge", "profile": "hernquist", "mass": "8e9 Msun",
              "scale_radius": "0.5 kpc", "particles": 30_000}}
SHIFT = np.array([3.0, -4.0, 0.0])            # |shift| = 5 kpc
BOOST = np.array([60.0, 0.0, -80.0])          # |boost| = 100 km/s


def spec(components, seed=7):
    return spec_from_dict({"model": {"name": "frame test", "seed": seed},
                           "components": components})


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """The galaxy as built, and a copy displaced by SHIFT and moving at BOOST."""
    folder = tmp_path_factory.mktemp("frame")
    built, moved = folder / "built.h5", folder / "moved.h5"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        build_snapshot(spec(GALAXY), built)
    with open(built, "rb") as a, open(moved, "wb") as b:
        b.write(a.read())
    with h5py.File(moved, "r+") as f:
        for g in f["particles"].values():
            g["position"][...] = g["position"][...] + SHIFT
            g["velocity"][...] = g["velocity"][...] + BOOST
    return built, moved


def test_built_galaxy_is_centred_on_the_origin(files):
    # Every disk's density centre at the origin within 0.05 kpc (the bar); the
    # disk's particles alone: the shrinking sphere on a flat-cored disk wanders, so the
    # disk's frame is used (icgen.frame). Net momentum < 0.01 km/s; the sampled centre of
    # mass recorded in the file; the far halo particles do not move the galaxy.
    snap = read_snapshot(files[0])
    disk = snap.components["disk"]
    f = find_frame({"disk": {k: disk[k] for k in ("position", "velocity", "mass")}})
    assert np.linalg.norm(f.position) < 0.05
    m = np.concatenate([c["mass"] for c in snap.components.values()])
    x = np.concatenate([c["position"] for c in snap.components.values()])
    v = np.concatenate([c["velocity"] for c in snap.components.values()])
    assert np.linalg.norm(m @ v / m.sum()) < 0.01
    # the file's units are kpc, km/s and 1e10 Msun: the recorded centre of mass is the
    # particles' own, up to float64 summation order
    np.testing.assert_allclose(snap.attrs["centre_of_mass"], m @ x / m.sum(), atol=1e-9)
    assert np.linalg.norm(snap.frame.position) < 0.05


def test_frame_finds_the_displacement(files):
    built, moved = (read_snapshot(p) for p in files)
    # the same particles, moved: the frame moves with them (to float64 rounding)
    np.testing.assert_allclose(moved.frame.position - built.frame.position, SHIFT, atol=1e-9)
    np.testing.assert_allclose(moved.frame.velocity - built.frame.velocity, BOOST, atol=1e-9)
    # the file reader and the in-memory reader agree to the last bit (same subset, seed)
    with open_snapshot(files[1]) as snap:
        f = snap.frame()
    np.testing.assert_array_equal(f.position, moved.frame.position)
    np.testing.assert_array_equal(f.velocity, moved.frame.velocity)
    # and centred() puts the galaxy back at rest at the origin
    back = moved.centred()
    np.testing.assert_allclose(back.components["disk"]["position"],
                               built.components["disk"]["position"] - built.frame.position,
                               atol=1e-9)


def test_galaxy_frame_uses_a_seeded_subset_beyond_max_particles(monkeypatch):
    # above MAX_PARTICLES the frame comes from a seeded subset: same seed, same frame,
    # another seed another subset
    monkeypatch.setattr("icgen.frame.MAX_PARTICLES", 5000)
    rng = np.random.default_rng(1)
    n = 20_000
    parts = {"a": {"position": rng.normal(size=(n, 3)), "velocity": rng.normal(size=(n, 3)),
                   "mass": np.ones(n)}}
    one, two, other = galaxy_frame(parts, 3), galaxy_frame(parts, 3), galaxy_frame(parts, 4)
    np.testing.assert_array_equal(one.position, two.position)
    assert not np.array_equal(one.position, other.position)
    # the subset's mean velocity of a unit Gaussian: within 5 standard errors of zero
    assert np.all(np.abs(one.velocity) < 5 / np.sqrt(5000))
    # a Gaussian blob of unit dispersion has a flat core: the centre wanders by ~0.1 for
    # 5000 particles (the mean over the inner 5 %, ~r^2/5 of pull towards the centre, sets
    # it to ~ SE * 5/r^2); 0.3 is far from any real offset
    assert np.linalg.norm(one.position) < 0.3


def test_check_passes_on_the_displaced_galaxy(files, capsys):
    # check measures about the frame: the displaced, moving galaxy passes as the built one
    for path in files:
        assert main(["check", str(path), "--quiet"]) == 0, check.check_snapshot(path).failed()
    res = check.check_snapshot(files[1])
    np.testing.assert_allclose(res.frame["position_kpc"], SHIFT, atol=0.1)
    np.testing.assert_allclose(res.frame["velocity_kms"], BOOST, atol=3.0)


def test_drift_passes_on_the_displaced_galaxy(files, tmp_path):
    report = tmp_path / "drift"
    assert main(["drift", str(files[1]), "--time", "0.1 Gyr", "--sample", "20000",
                 "--outputs", "4", "--report", str(report), "--quiet"]) == 0
    import json
    data = json.load(open(report / "drift.json"))
    np.testing.assert_allclose(data["settings"]["frame"]["position_kpc"], SHIFT, atol=0.1)


def test_mock_recovers_the_curve_of_the_displaced_galaxy(files):
    # The tilted-ring curve of the displaced, moving galaxy within 3 % of the disk's
    # ring-mean v_phi beyond three beams (the bar; before the frame it was off by
    # up to 1700 %), and the same truth as the galaxy at the origin.
    geometry = Geometry(60.0, 35.0, 10.0, systemic=700.0)
    instrument = Instrument(beam=10.0, pixel=10.0 / 3, channel=5.0)
    built, moved = (observe(str(p), geometry, instrument, tracer="disk") for p in files)
    np.testing.assert_allclose(moved.truth["v_phi_mean"].value, built.truth["v_phi_mean"].value,
                               rtol=1e-9)
    s, t = moved.scores(), moved.truth
    sel = (s["in_beams"] > 3) & (t["n_particles"] > 1000)
    assert sel.sum() >= 8
    rel = np.abs(s["rings_minus_vphi"][sel] / t["v_phi_mean"][sel])
    assert rel.max() < 0.03, rel
    assert np.all(t["v_phi_mean"].value[t["n_particles"] > 100] > 0)


def test_hernquist_sphere_about_the_origin_follows_hernquist(tmp_path):
    # A Hernquist halo of 1e12 Msun, a = 30 kpc, written to a file: its density about the
    # origin follows Hernquist (1990) eq. 3, M(<r) = M r^2/(r + a)^2 with M the uncut law's
    # mass 2 pi rho0 a^3, inside the outer cut; chi-square of shell counts with multinomial
    # errors (before the frame fix the density at 3 kpc was 85 % low).
    components = {"halo": {"kind": "halo", "profile": "hernquist", "mass": "1e12 Msun",
                           "scale_radius": "30 kpc", "particles": 200_000}}
    path = tmp_path / "h.h5"
    build_snapshot(spec(components), path)
    halo = model_from_components(components).components["halo"]
    m_full = 2 * np.pi * halo.rho0 * 30.0**3
    r = np.linalg.norm(read_snapshot(path).components["halo"]["position"], axis=1)
    edges = np.concatenate([[0], np.geomspace(1.0, halo.r_t, 30)])
    x = edges / 30.0
    frac = np.diff(x**2 / (1 + x) ** 2) * m_full / halo.total_mass
    counts = np.histogram(r, np.append(edges, np.inf))[0]
    expected = np.append(frac, 1 - frac.sum()) * r.size
    assert stats.chisquare(counts, expected).pvalue > 1e-3
    # no particle beyond 100 median radii (the bar; 4000 before the outer cut)
    assert r.max() < 100 * np.median(r)


@pytest.mark.slow
def test_default_model_extent_and_momentum(tmp_path):
    # The built-in default model: no particle beyond 100 times its component's median
    # radius (3400 for the bulge before the cut), net momentum < 0.01 km/s.
    from icgen.spec import load_spec
    path = tmp_path / "default.h5"
    build_snapshot(load_spec(None), path)
    snap = read_snapshot(path)
    total, momentum = 0.0, np.zeros(3)
    for name, c in snap.components.items():
        r = np.linalg.norm(c["position"], axis=1)
        assert r.max() < 100 * np.median(r), name
        total += c["mass"].sum()
        momentum += c["mass"] @ c["velocity"]
    assert np.linalg.norm(momentum / total) < 0.01
