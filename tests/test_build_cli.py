"""``icgen build`` and ``icgen info`` end to end, in-process through ``icgen.cli.main``
(and in a subprocess for the signal tests), plus the shipped model files.
"""
import dataclasses
import glob
import io
import os
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import h5py
import numpy as np
import pytest

import icgen
from icgen import sampling
from icgen.cli import main
from icgen.spec import load_spec
from icgen.model import MassModel
from icgen.progress import progress_enabled
from icgen.snapshot import load_model_from_snapshot, read_snapshot

REPO = Path(__file__).resolve().parents[1]
CONFIGS = sorted(glob.glob(str(REPO / "configs" / "*.toml")))
USE_CASES = {"large_spiral", "bar_unstable_disk", "cored_dwarf", "thin_thick_disk", "lsb_disk"}

# A small model: the halo has more than one sampling block (65536 particles) so that
# chunk sizes really cut across block edges; ~80k particles sample in under a second.
SMALL_MODEL = """\
[model]
name = "small test galaxy"
seed = 31
[output]
length_unit = "{length}"
velocity_unit = "{velocity}"
mass_unit = "{mass}"
[components.halo]
kind = "halo"
profile = "nfw"
mass = "3e11 Msun"
concentration = 10
particles = 70_000
[components.disk]
kind = "disk"
mass = "3e10 Msun"
scale_length = "2.5 kpc"
scale_height = "0.25 kpc"
toomre_q = 1.5
particles = 8_000
[components.bulge]
kind = "bulge"
profile = "hernquist"
mass = "5e9 Msun"
scale_radius = "0.5 kpc"
particles = 2_000
[components.bh]
kind = "point_mass"
mass = "4e6 Msun"
"""
DATASETS = ("position", "velocity", "mass", "id")


def write_model(folder, length="kpc", velocity="km/s", mass="1e10 Msun", name="small.toml"):
    path = Path(folder) / name
    path.write_text(SMALL_MODEL.format(length=length, velocity=velocity, mass=mass))
    return str(path)


def build(model, out, *extra):
    return main(["build", model, "-o", str(out), "--quiet", *extra])


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    return tmp_path_factory.mktemp("build")


@pytest.fixture(scope="module")
def model_file(workdir):
    return write_model(workdir)


@pytest.fixture(scope="module")
def reference(workdir, model_file):
    """The small model built once with default options (double precision, kpc, km/s)."""
    out = workdir / "reference.h5"
    assert build(model_file, out) == 0
    return out


@pytest.fixture(scope="module")
def sampled(model_file):
    """sample() of the same model: all particles in memory, centre of mass removed;
    and the removed offset (position kpc, velocity km/s)."""
    report = sampling.SamplingReport()
    parts = sampling.sample(MassModel(load_spec(model_file)), report=report)
    return parts, report.center_of_mass()


def datasets(path):
    with h5py.File(path, "r") as f:
        return {f"{n}/{k}": f[f"particles/{n}/{k}"][()] for n in f["particles"] for k in DATASETS}


def leftovers(folder, keep=()):
    return sorted(set(os.listdir(folder)) - set(keep))


# ---------------------------------------------------------------- end to end


def test_build_writes_a_snapshot_that_info_reads(reference, capsys):
    assert main(["info", str(reference)]) == 0
    text = capsys.readouterr().out
    assert "small test galaxy (seed 31)" in text
    for name, count in (("halo", "70,000"), ("disk", "8,000"), ("bulge", "2,000"), ("bh", "1")):
        assert name in text and count in text
    assert not [f for f in os.listdir(reference.parent) if ".partial-" in f]


def test_file_holds_exactly_what_was_sampled(reference, sampled):
    sampled, _ = sampled
    snap = read_snapshot(reference)
    assert list(snap.components) == ["halo", "disk", "bulge", "bh"]
    mass_scale = (1 * u.Msun).to_value(u.Unit("1e10 Msun"))
    for name, parts in sampled.items():
        c = snap.components[name]
        # kpc and km/s are the internal units (factor 1), the file is float64 and both
        # sides subtract the same per-block centre-of-mass sums: identical bits
        assert np.array_equal(c["position"], parts["position"])
        assert np.array_equal(c["velocity"], parts["velocity"])
        # one multiplication by astropy's factor (1e-10 to the last bit): 2 ulp
        np.testing.assert_allclose(c["mass"], parts["mass"] * mass_scale, rtol=5e-16)
    ids = np.concatenate([c["id"] for c in snap.components.values()])
    assert np.array_equal(np.sort(ids), np.arange(1, 80_002))     # unique across the file


def _with_model_keys(folder, name, lines):
    path = Path(folder) / name
    path.write_text(Path(write_model(folder)).read_text().replace(
        "seed = 31\n", "seed = 31\n" + lines))
    return str(path)


def test_mirror_key_pairs_particles_and_keeps_the_dense_centre_at_the_origin(
        workdir, reference):
    # [model] mirror = true: each particle is followed by its point reflection, so the
    # centre of mass is at the origin by construction (up to summation round-off) and
    # the centring pass moves nothing; without it the dense centre ends up off the
    # origin by ~ r_rms / sqrt(N) (common practice in N-body set-ups: symmetric pairs).
    from icgen.frame import shrinking_sphere_centre
    out = workdir / "mirrored.h5"
    assert build(_with_model_keys(workdir, "mirrored.toml", "mirror = true\n"), out) == 0
    snap = read_snapshot(out)
    assert load_model_from_snapshot(out).spec.mirror
    for name in ("halo", "disk", "bulge"):
        pos, vel = snap.components[name]["position"], snap.components[name]["velocity"]
        assert np.abs(pos[0::2] + pos[1::2]).max() < 1e-9
        assert np.abs(vel[0::2] + vel[1::2]).max() < 1e-9
    halo = snap.components["halo"]
    centre = shrinking_sphere_centre(halo["position"], halo["mass"])
    ref = read_snapshot(reference).components["halo"]
    ref_centre = shrinking_sphere_centre(ref["position"], ref["mass"])
    assert np.linalg.norm(centre) < 1e-6 < 1e-3 < np.linalg.norm(ref_centre)


def test_quiet_start_key_is_the_samplers_quiet_start(workdir, model_file):
    # [model] quiet_start = true in the file gives what sample(quiet_start=True) gives
    out = workdir / "quiet.h5"
    assert build(_with_model_keys(workdir, "quiet.toml", "quiet_start = true\n"), out) == 0
    snap = read_snapshot(out)
    parts = sampling.sample(MassModel(load_spec(model_file)), quiet_start=True)
    for name in ("halo", "disk", "bulge"):
        np.testing.assert_allclose(snap.components[name]["position"],
                                   parts[name]["position"], rtol=0, atol=1e-12)


def test_single_precision_is_the_sample_rounded(workdir, model_file, sampled):
    out = workdir / "single.h5"
    assert build(model_file, out, "--precision", "single") == 0
    snap = read_snapshot(out)
    sampled, offset = sampled
    for name, parts in sampled.items():
        for key, x0 in zip(("position", "velocity"), offset):
            got = snap.components[name][key]
            want = parts[key]                   # x - x0 in float64
            assert got.dtype == np.float32
            # written as float32(x), then float32(float32(x) - x0) by the centring pass:
            # two roundings of at most half a float32 ulp, 2**-24 |value| each (IEEE 754)
            raw = np.abs(want) + np.abs(x0)
            bound = 2.0**-24 * (raw + np.abs(got.astype(np.float64))) * (1 + 1e-9)
            assert np.all(np.abs(got - want) <= bound)


def test_same_seed_gives_identical_files_whatever_the_chunk_size(workdir, model_file, reference):
    again = workdir / "again.h5"
    chunked = workdir / "chunked.h5"
    assert build(model_file, again) == 0
    assert build(model_file, chunked, "--chunk-size", "777") == 0
    ref = datasets(reference)
    for other in (again, chunked):
        data = datasets(other)
        assert data.keys() == ref.keys()
        for key in ref:
            assert np.array_equal(data[key], ref[key]), key
    with h5py.File(reference, "r") as a, h5py.File(chunked, "r") as b:
        for key in a.attrs:
            if key != "created":
                assert np.array_equal(a.attrs[key], b.attrs[key]), key
        for name in a["particles"]:
            assert dict(a[f"particles/{name}"].attrs) == dict(b[f"particles/{name}"].attrs)


def test_seed_override_is_stored_and_changes_the_particles(workdir, model_file, reference):
    out = workdir / "seed99.h5"
    assert build(model_file, out, "--seed", "99") == 0
    snap = read_snapshot(out)
    assert snap.seed == 99
    rebuilt = load_model_from_snapshot(out)
    assert rebuilt.spec == dataclasses.replace(load_spec(model_file), seed=99)
    assert tomllib.loads(snap.config)["model"]["seed"] == 99
    assert not np.array_equal(snap.components["disk"]["position"],
                              read_snapshot(reference).components["disk"]["position"])


@pytest.mark.parametrize("precision, rtol", [
    # double: N equal float64 masses summed, relative error <= N eps ~ 1e-11
    ("double", 1e-11),
    # single: each mass rounded to float32 (2**-24 = 6e-8 relative), summed in float64
    ("single", 1e-7),
])
def test_units_total_masses_and_G(workdir, reference, precision, rtol):
    model_file = write_model(workdir, "pc", "m/s", "Msun", name=f"si_{precision}.toml")
    out = workdir / f"pc_{precision}.h5"
    assert build(model_file, out, "--precision", precision) == 0
    snap = read_snapshot(out, quantity=True)
    model = MassModel(load_spec(model_file))
    with h5py.File(out, "r") as f:
        for name, comp in model.components.items():
            total = snap.components[name]["mass"].sum(dtype=np.float64).to_value(u.Msun)
            assert total == pytest.approx(comp.total_mass, rel=rtol)
            stored = f[f"particles/{name}"].attrs["total_mass"]
            assert stored == pytest.approx(comp.total_mass, rel=rtol)   # output unit: Msun
    # G from astropy.constants converted to pc (m/s)^2 / Msun by astropy, independently
    g_expected = const.G.to_value(u.pc * (u.m / u.s) ** 2 / u.Msun)
    assert snap.attrs["G"] == pytest.approx(g_expected, rel=1e-12)
    assert snap.G.to_value(u.m**3 / (u.kg * u.s**2)) == pytest.approx(const.G.si.value, rel=1e-12)
    if precision == "double":
        # the same particles as the kpc file: one float64 multiplication each way
        ref = read_snapshot(reference)
        for name in model.components:
            x = snap.components[name]["position"].to_value(u.kpc)
            v = snap.components[name]["velocity"].to_value(u.km / u.s)
            scale_x = np.abs(ref.components[name]["position"]).max()
            np.testing.assert_allclose(x, ref.components[name]["position"], rtol=1e-13,
                                       atol=1e-14 * scale_x)
            np.testing.assert_allclose(v, ref.components[name]["velocity"], rtol=1e-13,
                                       atol=1e-12)
        curve = snap.rotation_curve
        np.testing.assert_allclose(curve["radius"].to_value(u.kpc),
                                   ref.rotation_curve["radius"], rtol=1e-14)
        np.testing.assert_allclose(curve["v_circ_total"].to_value(u.km / u.s),
                                   ref.rotation_curve["v_circ_total"], rtol=1e-14)


def test_summary_table_is_printed(workdir, model_file, capsys):
    out = workdir / "loud.h5"
    # not --quiet: the summary goes to stdout; no bar, since stderr is not a terminal here
    assert main(["build", model_file, "-o", str(out), "--compress", "lzf"]) == 0
    captured = capsys.readouterr()
    assert "r_half [kpc]" in captured.out and f"wrote {out}" in captured.out
    assert "particles/s" not in captured.err and "%|" not in captured.err
    disk_row = next(line for line in captured.out.splitlines() if line.strip().startswith("disk"))
    # half-mass radius of an exponential disk: 1.678 R_d (solving (1 + x) e^-x = 1/2;
    # Freeman 1970 profile), R_d = 2.5 kpc -> 4.20 kpc; the thin disk's 3D radius adds
    # ~1 %, and 8000 particles give ~1.5 % noise on the median: 5 %
    assert float(disk_row.split()[-2]) == pytest.approx(1.678 * 2.5, rel=0.05)


# ---------------------------------------------------------------- refusals and guards


def test_existing_target_is_untouched_without_overwrite(workdir, model_file, capsys):
    folder = workdir / "keep"
    folder.mkdir()
    target = folder / "galaxy.h5"
    target.write_bytes(b"precious")
    assert build(model_file, target) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "--overwrite" in err and err.startswith("icgen: error: --output")
    assert target.read_bytes() == b"precious"
    assert leftovers(folder) == ["galaxy.h5"]


@pytest.mark.parametrize("argv_tail, key", [
    (["-o", "no/such/folder/x.h5"], "--output"),
    (["-o", "x.h5", "--seed", "-3"], "model.seed"),
    (["-o", "x.h5", "--chunk-size", "0"], "--chunk-size"),
    (["-o", "."], "--output"),
])
def test_bad_input_is_one_line_exit_2_and_nothing_written(tmp_path, monkeypatch, capsys,
                                                          argv_tail, key):
    model = write_model(tmp_path)
    monkeypatch.chdir(tmp_path)
    # checks come before any work: building a model here would be a failure
    monkeypatch.setattr("icgen.model.MassModel.__init__", lambda *a: pytest.fail("built"))
    assert main(["build", model, *argv_tail]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(f"icgen: error: {key}")
    assert leftovers(tmp_path) == ["small.toml"]


def test_bad_model_file_is_exit_2_and_nothing_written(tmp_path, capsys):
    model = Path(write_model(tmp_path))
    model.write_text(model.read_text().replace("toomre_q = 1.5", "toomre_k = 1.5"))
    assert build(str(model), tmp_path / "x.h5") == 2
    err = capsys.readouterr().err
    assert "components.disk.toomre_k" in err and "did you mean 'toomre_q'" in err
    assert leftovers(tmp_path) == ["small.toml"]


def test_bad_choice_is_rejected_by_the_parser(tmp_path):
    with pytest.raises(SystemExit) as exc:
        main(["build", "-o", str(tmp_path / "x.h5"), "--precision", "half"])
    assert exc.value.code == 2
    assert leftovers(tmp_path) == []


def test_info_rejects_a_file_that_is_not_a_snapshot(tmp_path, capsys):
    other = tmp_path / "other.h5"
    with h5py.File(other, "w") as f:
        f.attrs["schema"] = "something-else"
    assert main(["info", str(other)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "not an icgen snapshot" in err


def test_nan_from_the_sampler_stops_the_build(tmp_path, monkeypatch, capsys):
    model = write_model(tmp_path)
    real = sampling.iter_chunks

    def poisoned(*args, **kwargs):
        for chunk in real(*args, **kwargs):
            if chunk.component == "disk":
                chunk.velocity[17, 1] = np.nan
            yield chunk

    monkeypatch.setattr(sampling, "iter_chunks", poisoned)
    assert build(model, tmp_path / "x.h5") == 1
    err = capsys.readouterr().err
    assert "component 'disk'" in err and "velocity of particle 17" in err
    assert leftovers(tmp_path) == ["small.toml"]


@pytest.mark.parametrize("signum, status, existing, min_bytes", [
    # once particles are in the temporary file (HDF5 allocates contiguous datasets at
    # their first write, so the file grows past 1 MB only then)
    (signal.SIGTERM, 143, False, 1_000_000),
    # as soon as the temporary file exists: in testing this once hit the writer's set-up
    (signal.SIGINT, 130, True, 0),   # with --overwrite: the old file must survive
    # closing the terminal: handled like SIGTERM, 128 + 1
    (signal.SIGHUP, 129, True, 1_000_000),
])
def test_signal_mid_write_leaves_nothing_behind(tmp_path, signum, status, existing, min_bytes):
    # A single Hernquist halo has a closed-form potential, so the temporary file appears
    # soon after start-up, and its 3e6 particles then take several seconds to sample
    # and write: the signal lands in the middle of the work.
    model = tmp_path / "big.toml"
    model.write_text('[model]\nname = "big"\n[components.halo]\nkind = "halo"\n'
                     'profile = "hernquist"\nmass = "1e12 Msun"\nscale_radius = "30 kpc"\n'
                     'particles = 3_000_000\n')
    target = tmp_path / "galaxy.h5"
    if existing:
        target.write_bytes(b"old file")
    argv = [sys.executable, "-m", "icgen.cli", "build", str(model), "-o", str(target), "--quiet"]
    argv += ["--overwrite"] if existing else []
    proc = subprocess.Popen(argv, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 120
        while not any(".partial-" in f and (tmp_path / f).stat().st_size >= min_bytes
                      for f in os.listdir(tmp_path)):
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline, "no temporary file appeared"
            time.sleep(0.02)
        proc.send_signal(signum)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == status, err
    assert "nothing written" in err
    assert leftovers(tmp_path, keep=["big.toml"]) == (["galaxy.h5"] if existing else [])
    if existing:
        assert target.read_bytes() == b"old file"


# ---------------------------------------------------------------- progress


class _FakeTerminal(io.StringIO):
    def isatty(self):
        return True


def test_progress_bars_only_on_a_terminal_and_not_when_quiet():
    assert progress_enabled(False, _FakeTerminal())
    assert not progress_enabled(True, _FakeTerminal())
    assert not progress_enabled(False, io.StringIO())


# ---------------------------------------------------------------- shipped model files


@pytest.mark.parametrize("path", CONFIGS, ids=[Path(p).stem for p in CONFIGS])
def test_shipped_models_load_and_say_what_they_are_for(path):
    spec = load_spec(path)
    text = Path(path).read_text()
    assert text.startswith("#") and "invented" in text.lower()
    if Path(path).stem in USE_CASES:
        total = sum(c.particles for c in spec.components)
        assert 50_000 <= total <= 400_000        # modest, so they build in seconds


def test_shipped_model_files_include_one_per_use_case():
    assert {Path(p).stem for p in CONFIGS} >= USE_CASES


def test_bar_unstable_disk_is_near_the_eln_threshold():
    # Efstathiou, Lake & Negroponte (1982, MNRAS 199, 1069): eps = v_max / sqrt(G M_d / R_d)
    # below ~1.1 means a bar forms. The model is meant to sit just below it.
    from icgen.diagnostics.curve import summarize
    from icgen.units import G
    model = MassModel(load_spec(REPO / "configs" / "bar_unstable_disk.toml"))
    disk = model.spec.component("disk")
    s = summarize(model, r_search=200.0)
    eps = s.v_max / np.sqrt(G * disk.mass / disk.scale_length)
    assert 1.0 <= eps <= 1.1
    assert all(c.kind != "bulge" for c in model.spec.components)


def test_lsb_disk_is_halo_dominated():
    # low-surface-brightness disks: the halo dominates v_c even at 2.2 R_d (common
    # practice in rotation-curve decomposition); here v_disk / v_total < 0.5 there
    from icgen.diagnostics.curve import summarize
    model = MassModel(load_spec(REPO / "configs" / "lsb_disk.toml"))
    assert summarize(model).disk_fraction_22 < 0.5


@pytest.mark.slow
@pytest.mark.parametrize("path", CONFIGS, ids=[Path(p).stem for p in CONFIGS])
def test_shipped_models_build(tmp_path, path):
    out = tmp_path / "model.h5"
    assert build(path, out) == 0
    assert main(["info", str(out)]) == 0
    snap = icgen.read_snapshot(out)
    spec = load_spec(path)
    for c in spec.components:
        assert snap.components[c.name]["mass"].size == c.particles
        assert np.isfinite(snap.components[c.name]["position"]).all()
