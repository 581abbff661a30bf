"""Deterministic, chunk-independent realisations; plan, options and the sampling API."""
import numba
import numpy as np
import pytest

from conftest import model_from_components
from icgen import sampling
from icgen.errors import ModelError

COMPONENTS = {
    "halo": {"kind": "halo", "profile": "hernquist", "mass": "4e11 Msun",
             "scale_radius": "20 kpc", "particles": 150_000},
    "disk": {"kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
             "scale_height": "0.3 kpc", "toomre_q": 1.5, "particles": 70_001},
    "bulge": {"kind": "bulge", "profile": "hernquist", "mass": "1e10 Msun",
              "scale_radius": "0.5 kpc", "particles": 1000},
    "bh": {"kind": "point_mass", "mass": "1e8 Msun"},
}


def new_model(**model_keys):
    return model_from_components(COMPONENTS, **model_keys)


def collect(model, chunk_size, **options):
    out = {}
    for chunk in sampling.iter_chunks(model, chunk_size, **options):
        assert len(chunk) <= chunk_size
        parts = out.setdefault(chunk.component, [])
        assert chunk.start == sum(len(p) for p in parts)       # consecutive, in order
        parts.append(np.concatenate([chunk.position, chunk.velocity, chunk.mass[:, None]], 1))
    return {k: np.concatenate(v) for k, v in out.items()}


def assert_identical(a, b):
    assert list(a) == list(b)
    for name in a:
        assert a[name].tobytes() == b[name].tobytes(), name


@pytest.fixture(scope="module")
def model():
    return new_model()


@pytest.mark.parametrize("options", [{}, {"quiet_start": True, "mirror": True}])
def test_chunk_size_does_not_change_the_particles(model, options):
    # Same seed, same bytes whatever the chunk size (docs/snapshot-format.md; 1e4 is not
    # a block multiple; 1e6 holds each component in one chunk).
    assert_identical(collect(model, 10_000, **options), collect(model, 1_000_000, **options))


def test_thread_count_does_not_change_the_particles():
    # The same model built and sampled with 1 and with 2 numba threads (tables included).
    before = numba.get_num_threads()
    try:
        numba.set_num_threads(1)
        one = collect(new_model(), 1_000_000)
        numba.set_num_threads(min(2, numba.config.NUMBA_NUM_THREADS))
        two = collect(new_model(), 1_000_000)
    finally:
        numba.set_num_threads(before)
    assert_identical(one, two)


def test_ranges_are_independent_units(model):
    # particles(start, stop) gives the slice of the full stream for any range, so chunks
    # can be made out of order or elsewhere.
    full = collect(model, 1_000_000)["halo"]
    for start, stop in ((0, 7), (65_530, 65_542), (100_000, 150_000), (149_999, 150_000)):
        c = sampling.particles(model, "halo", start, stop)
        got = np.concatenate([c.position, c.velocity, c.mass[:, None]], 1)
        assert got.tobytes() == full[start:stop].tobytes()


def test_seed_changes_the_particles(model):
    other = new_model(seed=2)
    a = sampling.particles(model, "disk", 0, 100).position
    b = sampling.particles(other, "disk", 0, 100).position
    assert not np.allclose(a, b)


def test_quiet_start_lowers_the_sampling_noise():
    # Scrambled Sobol points (Sobol 1967; scipy.stats.qmc): the fraction of disk particles
    # inside R_d, 1 - 2/e (Freeman 1970), errs far below the binomial noise of random
    # points (sqrt(p(1-p)/N) = 1.9e-3 for N = 65536, one block).
    model = model_from_components({"disk": {**COMPONENTS["disk"], "particles": 65536}})
    p = 1 - 2 / np.e
    noise = np.sqrt(p * (1 - p) / 65536)
    c = sampling.particles(model, "disk", 0, 65536, quiet_start=True)
    R = np.hypot(c.position[:, 0], c.position[:, 1])
    assert abs(np.mean(R < 3.0) - p) < 0.05 * noise
    # and the Sobol stream is chunk-independent too (fast_forward to each block)
    part = sampling.particles(model, "disk", 30_000, 65536, quiet_start=True)
    assert part.position.tobytes() == c.position[30_000:].tobytes()


def test_mirror_pairs(model):
    # Each particle is followed by its point reflection (x, v) -> (-x, -v): the centre of
    # mass is at rest at the origin to round-off and L = x cross v is shared by the pair.
    c = sampling.particles(model, "disk", 0, 70_001, mirror=True)
    x, v = c.position, c.velocity
    np.testing.assert_array_equal(x[1::2], -x[0:-1:2])
    np.testing.assert_array_equal(v[1::2], -v[0:-1:2])
    np.testing.assert_array_equal(np.cross(x[1::2], v[1::2]), np.cross(x[:-1:2], v[:-1:2]))
    com = c.mass[:-1] @ x[:-1] / c.mass[:-1].sum()            # odd count: last is unpaired
    assert np.all(np.abs(com) < 1e-12 * np.abs(x).max())


def test_plan_counts_and_point_mass(model):
    plans = sampling.plan(model)
    assert [p.name for p in plans] == ["halo", "disk", "bulge", "bh"]
    assert [p.count for p in plans] == [150_000, 70_001, 1000, 1]
    assert plans[1].particle_mass == pytest.approx(5e10 / 70_001, rel=1e-14)
    bh = sampling.particles(model, "bh", 0, 1)
    assert bh.mass.tolist() == [1e8]
    assert not bh.position.any() and not bh.velocity.any()


def test_counts_from_particle_mass_and_heavy_halo_warning():
    # count = round(M / particle_mass); halo particles 12.5x heavier than disk ones trip
    # the Ludlow et al. (2019, MNRAS 488, L123) warning (limit 5x, common practice).
    comps = {k: {kk: vv for kk, vv in v.items() if kk != "particles"}
             for k, v in COMPONENTS.items() if k in ("halo", "disk")}
    model = model_from_components(comps, particle_mass="1e7 Msun")
    assert [p.count for p in sampling.plan(model)] == [40_000, 5000]
    heavy = model_from_components({"halo": {**COMPONENTS["halo"], "particles": 1000},
                                   "disk": {**COMPONENTS["disk"], "particles": 1000},
                                   "bulge": COMPONENTS["bulge"]})
    report = sampling.SamplingReport()
    with pytest.warns(sampling.SamplingWarning, match="Ludlow"):
        for _ in sampling.iter_chunks(heavy, report=report):
            pass
    assert any("Ludlow" in w for w in report.warnings)


def test_sample_keeps_positions_and_removes_the_net_momentum(model):
    # The model centre is the origin: positions as sampled (the centre of mass lies where
    # the sampling put it); one uniform velocity shift removes the net momentum.
    report = sampling.SamplingReport()
    parts = sampling.sample(model, report=report)
    m = np.concatenate([p["mass"] for p in parts.values()])
    x = np.concatenate([p["position"] for p in parts.values()])
    v = np.concatenate([p["velocity"] for p in parts.values()])
    np.testing.assert_allclose(m @ v / m.sum(), 0, atol=1e-10 * np.abs(v).max())
    x0, v0 = report.center_of_mass()
    np.testing.assert_allclose(m @ x / m.sum(), x0, atol=1e-10 * np.abs(x).max())
    for name, p in parts.items():
        raw = sampling.particles(model, name, 0, p["mass"].size)
        np.testing.assert_array_equal(p["position"], raw.position)
        np.testing.assert_array_equal(p["velocity"], raw.velocity - v0)
    # the streamed pass gives the same sums as the report of the in-memory one
    np.testing.assert_array_equal(sampling.center_of_mass(model)[0], x0)
    np.testing.assert_array_equal(sampling.center_of_mass(model)[1], v0)
    assert np.all(np.isfinite(x)) and np.all(np.isfinite(v))


def test_bad_chunk_size_is_a_model_error(model):
    with pytest.raises(ModelError, match="chunk_size"):
        next(sampling.iter_chunks(model, 0))


def test_report_pieces_merge_to_the_same_centre_of_mass(model):
    # A streamed run's per-block sums, split between two reports (as pieces made by two
    # workers would be) and filled in another order, reduce to the same bits: the
    # reduction runs in fixed (component, block) order whoever made which block.
    whole = sampling.SamplingReport()
    for _ in sampling.iter_chunks(model, 50_000, report=whole):
        pass
    assert sorted(whole.block_sums) == [(0, 0), (0, 1), (0, 2), (1, 0), (1, 1), (2, 0),
                                        (3, 0)]
    odd, even = sampling.SamplingReport(), sampling.SamplingReport()
    for key in sorted(whole.block_sums, reverse=True):
        (odd if key[1] % 2 else even).block_sums[key] = whole.block_sums[key]
    odd.merge(even)
    for got, want in zip(odd.center_of_mass(), whole.center_of_mass()):
        assert got.tobytes() == want.tobytes()
    with pytest.raises(ValueError, match="recorded twice"):
        odd.merge(even)
