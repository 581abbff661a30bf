"""`icgen check`: particle measurements (icgen.diagnostics.measure) and the pass/fail logic
(icgen.diagnostics.check) on correct and deliberately corrupted snapshots."""
import json
import math
import shutil

import h5py
import numpy as np
import pytest

from icgen.cli import main
from icgen.diagnostics import check, measure
from icgen.frame import shrinking_sphere_centre
from icgen.units import G

# ------------------------------------------------------------------ direct summation


def ring_sums_oracle(radii, n_az, pos, m, eps):
    """Plain numpy version of measure.ring_force_sums (the obvious triple loop)."""
    phi = 2 * np.pi * (np.arange(n_az) + 0.5) / n_az
    s1, s2 = [], []
    for R in radii:
        p = np.column_stack([R * np.cos(phi), R * np.sin(phi), np.zeros(n_az)])   # (A, 3)
        d = p[None, :, :] - pos[:, None, :]                                       # (N, A, 3)
        d2 = (d**2).sum(axis=2) + eps**2
        e_r = np.column_stack([np.cos(phi), np.sin(phi), np.zeros(n_az)])
        g = ((d * e_r[None]).sum(axis=2) / d2**1.5).mean(axis=1)
        s1.append((m * g).sum())
        s2.append(((m * g) ** 2).sum())
    return np.array(s1), np.array(s2)


def test_ring_kernel_matches_numpy_oracle():
    rng = np.random.default_rng(1)
    pos = rng.normal(size=(300, 3)) * [3, 3, 0.4]
    m = rng.uniform(0.5, 2, 300)
    radii = np.array([0.5, 2.0, 7.0])
    s1, s2 = np.zeros(3), np.zeros(3)
    phi = 2 * np.pi * (np.arange(8) + 0.5) / 8
    measure.ring_force_sums(radii, np.cos(phi), np.sin(phi), pos[:, 0].copy(), pos[:, 1].copy(),
                            pos[:, 2].copy(), m, 0.05**2, s1, s2)
    o1, o2 = ring_sums_oracle(radii, 8, pos, m, 0.05)
    # same arithmetic in another order: round-off only
    np.testing.assert_allclose(s1, o1, rtol=1e-11)
    np.testing.assert_allclose(s2, o2, rtol=1e-11)


def hernquist_positions(n, a, rng):
    """Hernquist (1990, ApJ 356, 359) sphere: M(<r)/M = r^2/(r+a)^2 (eq. 3) inverted,
    r = a sqrt(u)/(1 - sqrt(u)); isotropic directions."""
    s = np.sqrt(rng.uniform(size=n))
    r = a * s / (1 - s)
    mu = rng.uniform(-1, 1, n)
    ph = rng.uniform(0, 2 * np.pi, n)
    st = np.sqrt(1 - mu * mu)
    return r[:, None] * np.column_stack([st * np.cos(ph), st * np.sin(ph), mu])


def hernquist_v2(R, M, a):
    """v_c^2 = G M(<R)/R = G M R/(R+a)^2 (Hernquist 1990, eq. 3 and Newton's theorem)."""
    return G * M * R / (R + a) ** 2


# Softening 0.005 a, rings from 40 softenings out: the softened-shell integral puts the
# bias of v_c^2 below 0.3 % there, against a noise of >= 1.5 % with 2e5 particles.
EPS, RINGS = 0.005, np.geomspace(0.2, 20.0, 12)


def test_direct_sum_rotation_curve_of_hernquist_sphere():
    # Hernquist (1990): the measured v_c^2 must match G M(<r)/r within 5 of its own
    # standard errors at every ring (12 rings: Gaussian false-alarm chance ~7e-6).
    M, a, n = 1e11, 1.0, 200_000
    pos = hernquist_positions(n, a, np.random.default_rng(5))
    v2, err = measure.midplane_v2(pos, np.full(n, M / n), RINGS, EPS, n_azimuth=32)
    dev = (v2 - hernquist_v2(RINGS, M, a)) / err
    assert np.all(np.abs(dev) < 5), dev
    assert np.all(err / v2 < 0.05)     # and the measurement is informative


def test_direct_sum_errors_are_calibrated():
    # The stated error must be the actual scatter: over 24 independent samplings the
    # z-scores at 4 rings must have a standard deviation near 1. With ~50 effectively
    # independent z-scores the estimate scatters by ~10 %; [0.7, 1.35] is ~3 sigma wide.
    M, a, n = 1e11, 1.0, 20_000
    radii = np.array([0.3, 1.0, 3.0, 10.0])
    z = []
    for seed in range(24):
        pos = hernquist_positions(n, a, np.random.default_rng(100 + seed))
        v2, err = measure.midplane_v2(pos, np.full(n, M / n), radii, EPS, n_azimuth=16)
        z.append((v2 - hernquist_v2(radii, M, a)) / err)
    z = np.concatenate(z)
    assert 0.7 < z.std() < 1.35, z.std()
    assert abs(z.mean()) < 0.5          # no bias beyond ~3 sigma of the mean of ~50


def test_subsample_is_noisier_by_the_expected_factor():
    # A random tenth of the sources with masses x10: the error must grow by ~sqrt(10)
    # (1/sqrt(n) noise; 2.5..4.5 allows for the scatter of the error estimates themselves)
    # and the result stay consistent with Hernquist (1990).
    M, a, n = 1e11, 1.0, 100_000
    pos = hernquist_positions(n, a, np.random.default_rng(9))
    m = np.full(n, M / n)
    _, err_all = measure.midplane_v2(pos, m, RINGS, EPS, 16)
    v2, err_sub = measure.midplane_v2(pos, m, RINGS, EPS, 16, max_sources=n // 10,
                                      rng=np.random.default_rng(2))
    ratio = np.median(err_sub / err_all)
    assert 2.5 < ratio < 4.5, ratio
    assert np.all(np.abs(v2 - hernquist_v2(RINGS, M, a)) < 5 * err_sub)


# ------------------------------------------------------------------ binned statistics


def test_binned_statistics_against_numpy_and_bootstrap():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 3, 6000)
    v = rng.normal(10 * x, 1 + x)                        # dispersion grows with x
    idx = measure.bin_index(x, np.array([0.0, 1.0, 2.0, 3.0]))
    mean, e_mean = measure.binned_mean(v, idx, 3)
    sig, e_sig = measure.binned_dispersion(v, idx, 3)
    for k in range(3):
        vk = v[idx == k]
        # numpy oracle (round-off only; np.std with ddof=0 as in binned_dispersion)
        assert mean[k] == pytest.approx(vk.mean(), rel=1e-12)
        assert sig[k] == pytest.approx(vk.std(), rel=1e-12)
        assert e_mean[k] == pytest.approx(vk.std(ddof=1) / math.sqrt(vk.size), rel=1e-12)
        # independent numerics: bootstrap standard error of sigma (400 resamples: the
        # bootstrap's own scatter is ~1/sqrt(2*400) = 4 %; 15 % is ~4 of those)
        boot = [rng.choice(vk, vk.size).std() for _ in range(400)]
        assert e_sig[k] == pytest.approx(np.std(boot), rel=0.15)
    # ratio of sums: bootstrap again (Cochran 1977 linearised variance)
    a, b = v**2, 1 + x
    r, e_r = measure.ratio_of_sums(a, b)
    boot = []
    for _ in range(400):
        j = rng.integers(0, a.size, a.size)
        boot.append(a[j].sum() / b[j].sum())
    assert r == pytest.approx(a.sum() / b.sum(), rel=1e-12)
    assert e_r == pytest.approx(np.std(boot), rel=0.15)


def test_shrinking_sphere_finds_a_displaced_centre_despite_outliers():
    # Power et al. (2003, sec. 2.5) shrinking spheres: a Hernquist sphere moved to c0,
    # plus 1 % of particles spread over 1000 kpc that drag the centre of mass far away.
    rng = np.random.default_rng(11)
    c0 = np.array([3.0, -2.0, 0.5])
    pos = hernquist_positions(50_000, 1.0, rng) + c0
    junk = rng.uniform(-1000, 1000, (500, 3)) + [800, 0, 0]
    allpos = np.vstack([pos, junk])
    m = np.ones(len(allpos))
    c = shrinking_sphere_centre(allpos, m)
    # the final sphere holds ~1000 particles within ~0.3 a: centre good to ~0.3/sqrt(1000)
    # per axis, i.e. 0.01; 0.05 is 5 times that
    assert np.linalg.norm(c - c0) < 0.05
    assert np.linalg.norm(m @ allpos / m.sum() - c0) > 5       # the centre of mass is not


# ------------------------------------------------------------------ snapshots

SMALL = {
    "model": {"name": "small default", "seed": 20261201},
    "components": {
        "halo": {"kind": "halo", "profile": "nfw", "mass": "1.0e12 Msun", "concentration": 10,
                 "particles": 60_000},
        "disk": {"kind": "disk", "mass": "4.5e10 Msun", "scale_length": "3.0 kpc",
                 "scale_height": "0.3 kpc", "vertical": "sech2", "toomre_q": 1.5,
                 "particles": 30_000},
        "bulge": {"kind": "bulge", "profile": "hernquist", "mass": "1.0e10 Msun",
                  "scale_radius": "0.6 kpc", "particles": 10_000},
    }}


@pytest.fixture(scope="module")
def small_snapshot(tmp_path_factory):
    """The default model with 1e5 particles in all (same shape, fewer particles)."""
    from icgen.build import build_snapshot
    from icgen.spec import spec_from_dict
    path = tmp_path_factory.mktemp("snap") / "small.h5"
    build_snapshot(spec_from_dict(SMALL), path, quiet=True)
    return path


def corrupted(src, tmp_path, edit):
    """Copy of snapshot ``src`` with ``edit(h5py.File)`` applied. Each group's
    ``total_mass`` is set to the sum of its edited masses, as a generator that wrote
    wrong masses would have written it (the reader refuses a file where they differ)."""
    dst = tmp_path / "corrupt.h5"
    shutil.copy(src, dst)
    with h5py.File(dst, "r+") as f:
        edit(f["particles"])
        for g in f["particles"].values():
            g.attrs["total_mass"] = float(np.sum(g["mass"][()], dtype=np.float64))
    return dst


def run_check(path, tmp_path, capsys):
    """(exit status, JSON dict, set of failed (quantity, component)) of `icgen check`."""
    js = tmp_path / "check.json"
    status = main(["check", str(path), "--json", str(js)])
    out = capsys.readouterr().out
    data = json.loads(js.read_text())
    failed = {(r["quantity"], r["component"]) for r in data["rows"] if not r["passed"]}
    assert ("FAIL" in out) == bool(failed)
    return status, data, failed


def test_correct_snapshot_passes_and_writes_report(small_snapshot, tmp_path, capsys):
    report = tmp_path / "report"
    assert main(["check", str(small_snapshot), "--report", str(report)]) == 0
    out = capsys.readouterr().out
    assert "all checks pass" in out and "FAIL" not in out
    data = json.loads((report / "check.json").read_text())
    assert data["passed"] and data["n_sigma"] == check.N_SIGMA
    quantities = {(r["quantity"], r["component"]) for r in data["rows"]}
    expected = {("v_c midplane", "total"), ("v_c midplane", "disk"), ("surface density", "disk"),
                ("vertical profile", "disk"), ("density", "halo"), ("density", "bulge"),
                ("mean v_phi", "disk"), ("sigma_R", "disk"), ("sigma_phi", "disk"),
                ("sigma_z", "disk"), ("sigma_r", "halo"), ("sigma_theta", "halo"),
                ("sigma_phi", "halo"), ("beta", "bulge"), ("Toomre Q", "disk"),
                ("centre of mass", "all"), ("galaxy centre", "all"),
                ("angular momentum / M", "disk"), ("virial 2T/|W|", "total"),
                ("stored analytic curve", "all")}
    assert expected <= quantities
    for r in data["rows"]:   # every figure is in the file, with its error and verdict
        assert len(r["measured"]) == len(r["predicted"]) == len(r["error"]) == len(r["x"])
    png = report / "check.png"
    assert png.read_bytes()[:4] == b"\x89PNG" and png.stat().st_size > 50_000


# Rows that depend only on positions and masses: scaling velocities cannot move them.
STATIC = {"v_c midplane", "surface density", "vertical profile", "density", "galaxy centre",
          "centre of mass", "stored analytic curve"}


def test_velocities_scaled_by_1_1_fail_kinematics_only(small_snapshot, tmp_path, capsys):
    def edit(particles):
        for g in particles.values():
            g["velocity"][...] = g["velocity"][...] * 1.1
    status, data, failed = run_check(corrupted(small_snapshot, tmp_path, edit), tmp_path, capsys)
    assert status == 1
    # 2T/|W| becomes 1.21 (virial theorem); mean rotation and dispersions 10 % high
    must = {("virial 2T/|W|", c) for c in ("halo", "disk", "bulge", "total")}
    must |= {("mean v_phi", "disk"), ("angular momentum / M", "disk"), ("sigma_r", "halo")}
    assert must <= failed
    assert not {q for q, _ in failed} & STATIC
    virial = next(r for r in data["rows"] if r["quantity"] == "virial 2T/|W|"
                  and r["component"] == "total")
    # 1.1^2 = 1.21, within 5 standard errors of the unscaled ratio's noise (~0.5 %)
    assert virial["measured"][0] == pytest.approx(1.21, abs=0.03)


def test_disk_scale_length_changed_by_10_percent_fails_the_disk_profile(
        small_snapshot, tmp_path, capsys):
    def edit(particles):
        pos = particles["disk"]["position"][...]
        pos[:, :2] *= 1.1                    # R -> 1.1 R: scale length 10 % longer
        particles["disk"]["position"][...] = pos
    status, _, failed = run_check(corrupted(small_snapshot, tmp_path, edit), tmp_path, capsys)
    assert status == 1
    assert ("surface density", "disk") in failed
    # the halo, the bulge and the disk's vertical structure are untouched: only disk
    # rows (and totals that include the disk) may fail
    assert all(c in ("disk", "total") for _, c in failed), failed
    assert ("vertical profile", "disk") not in failed


def test_halo_masses_doubled_fail_halo_gravity_and_density(small_snapshot, tmp_path, capsys):
    def edit(particles):
        particles["halo"]["mass"][...] = particles["halo"]["mass"][...] * 2
    status, _, failed = run_check(corrupted(small_snapshot, tmp_path, edit), tmp_path, capsys)
    assert status == 1
    # v_c^2 of the halo doubles, its density doubles; kinematics and 2T/|W| (both T and
    # W scale with the mass) are unchanged
    assert failed == {("v_c midplane", "halo"), ("v_c midplane", "total"), ("density", "halo")}


def test_check_bad_input_exit_2(tmp_path, capsys):
    not_h5 = tmp_path / "x.h5"
    not_h5.write_text("hello")
    for argv, key in ((["check", str(tmp_path / "missing.h5")], "missing.h5"),
                      (["check", str(not_h5)], "x.h5"),
                      (["check", str(not_h5), "--sigma", "-1"], "--sigma"),
                      (["check", str(not_h5), "--softening", "3"], "--softening")):
        assert main(argv) == 2
        err = capsys.readouterr().err.strip()
        assert "\n" not in err and key in err and err.startswith("icgen: error:")


@pytest.mark.slow
def test_full_size_default_model_passes(tmp_path, capsys):
    # The built-in default model at its full particle numbers: every row within 5 errors.
    from icgen.build import build_snapshot
    from icgen.spec import load_spec
    path = tmp_path / "default.h5"
    build_snapshot(load_spec(None), path, quiet=True)
    status, data, failed = run_check(path, tmp_path, capsys)
    assert status == 0 and not failed
    assert sum(data["particles"].values()) == sum(c.particles for c in load_spec(None).components)


@pytest.mark.slow
def test_gas_disk_checks_and_a_wrong_temperature_fails():
    # Isothermal gas: the virial theorem with pressure, 2T + 3 int P dV + W = 0 (P/rho =
    # (gamma - 1) u), and u = c_s^2/(gamma - 1). Raising u by 10 % must fail exactly the
    # internal-energy row and the gas's virial ratio (kinematics and gravity untouched).
    from conftest import model_from_components
    from icgen import sampling
    model = model_from_components({
        "halo": {"kind": "halo", "profile": "hernquist", "mass": "3e11 Msun",
                 "scale_radius": "15 kpc", "particles": 20_000},
        "gas": {"kind": "gas_disk", "mass": "1e10 Msun", "scale_length": "4 kpc",
                "temperature": "1e4 K", "particles": 20_000}})
    parts = sampling.sample(model)
    assert check.check_particles(model, parts).passed
    thick = {k: dict(v) for k, v in parts.items()}
    thick["gas"]["position"] = parts["gas"]["position"] * np.array([1.0, 1.0, 1.3])
    # a layer 30% too thick fails its vertical profile against the hydrostatic column
    assert ("vertical profile", "gas") in check.check_particles(model, thick).failed()
    parts["gas"]["internal_energy"] = parts["gas"]["internal_energy"] * 1.1
    assert set(check.check_particles(model, parts).failed()) == {
        ("internal energy", "gas"), ("virial 2T/|W|", "gas")}
