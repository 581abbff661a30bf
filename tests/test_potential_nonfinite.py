"""NaN and infinities in the potential kernels: NaN out, never a read out of bounds.

The grid and multipole kernels turn a coordinate into a table index with int(); int(NaN)
in compiled code is any integer, so a NaN point used to read far outside the tables (a
segmentation fault). The rule tested here (IEEE 754: an invalid operation gives NaN, and
a computation on NaN stays NaN): CombinedPotential.evaluate returns NaN in Phi, F_R and
F_z for any point with a NaN or infinite coordinate, and the other points of the same
call get exactly the bits they get alone.
"""
import numpy as np
import pytest

from conftest import model_from_components
from icgen.integrate import Orbits, pericentre
from icgen.potential import kernels
from icgen.potential.field import force_at

BAD = [(np.nan, 0.0), (0.0, np.nan), (np.inf, 0.0), (-np.inf, 1.0), (3.0, np.inf),
       (2.0, -np.inf), (np.inf, np.nan), (np.nan, np.nan)]


@pytest.fixture(scope="module")
def gas_model():
    # a gas disk: off the grid its force comes from scipy splines, not numba
    return model_from_components({
        "halo": {"kind": "halo", "profile": "nfw", "mass": "3e11 Msun", "concentration": 10,
                 "particles": 100},
        "gas": {"kind": "gas_disk", "mass": "5e9 Msun", "scale_length": "4 kpc",
                "temperature": "1e4 K", "particles": 100}})


def test_evaluate_of_nan_points_is_nan(default_model):
    # the call that crashed: 1000 NaN radii at z = 0
    phi, f_r, f_z = default_model.potential.evaluate(np.full(1000, np.nan), np.zeros(1000))
    assert np.isnan(phi).all() and np.isnan(f_r).all() and np.isnan(f_z).all()


@pytest.mark.parametrize("exact", [False, True])
def test_non_finite_points_give_nan_and_leave_the_others_alone(default_model, gas_model, exact):
    rng = np.random.default_rng(3)
    R = 10 ** rng.uniform(-3, 3, 4000)
    z = rng.choice([-1, 1], 4000) * 10 ** rng.uniform(-4, 3, 4000)
    bad_R, bad_z = (np.array(c) for c in zip(*BAD))
    slots = rng.choice(4000 + len(BAD), len(BAD), replace=False)
    good = np.ones(4000 + len(BAD), bool)
    good[slots] = False
    mixed_R, mixed_z = np.empty(good.size), np.empty(good.size)
    mixed_R[good], mixed_z[good] = R, z
    mixed_R[slots], mixed_z[slots] = bad_R, bad_z
    for model in (default_model, gas_model):
        alone = model.potential.evaluate(R, z, exact=exact)
        mixed = model.potential.evaluate(mixed_R, mixed_z, exact=exact)
        for a, m in zip(alone, mixed):
            assert np.isnan(m[slots]).all()
            assert np.array_equal(m[good], a)               # bit for bit
            assert np.isfinite(a).all()
        for name in model.components:                         # one component: exact path
            one = model.potential.evaluate(bad_R, bad_z, component=name)
            assert all(np.isnan(x).all() for x in one)


def test_kernels_never_index_with_nan(default_model):
    # the numba pieces alone, without evaluate's mask: no crash, NaN or no answer
    P = default_model.potential
    bad_R = np.array([c[0] for c in BAD])
    bad_z = np.array([c[1] for c in BAD])
    _, _, _, outside = P.grid.evaluate(bad_R, bad_z)
    assert outside.all()                          # locate: off the grid, never a cell
    t = P.smooth_table()
    phi, f_r, f_z = (np.zeros(bad_R.size) for _ in range(3))
    kernels.add_multipole(bad_R, bad_z, t.lnr0, t.h, t.r, *t.kernel_arrays(), phi, f_r, f_z)
    assert not np.isfinite(f_r).any() and not np.isfinite(f_z).any()
    field = P.force_field()
    for R, z in BAD:
        found, a, b = force_at(float(abs(R)) if R == R else R, z, field)
        assert not (np.isfinite(a) and np.isfinite(b))
    out = np.empty(2)
    lnr = np.log(np.geomspace(0.01, 100, 64))
    pericentre(np.array([np.nan, 5.0]), np.array([1e4, 1e4]), np.array([10.0, 10.0]),
               lnr[0], lnr[1] - lnr[0], -1e5 / np.exp(lnr), out)
    assert np.isnan(out[0]) and np.isfinite(out[1])


def test_orbits_with_a_nan_particle_run_and_stay_nan(default_model, gas_model):
    # a NaN particle inside the orbit kernel (inline field, and Python forces for gas)
    for model in (default_model, gas_model):
        pos = np.array([[8.0, 0.0, 0.1], [np.nan, 0.0, 0.0], [30.0, 0.0, 0.0]])
        vel = np.array([[0.0, 200.0, 0.0], [0.0, 200.0, 0.0], [0.0, 150.0, 5.0]])
        o = Orbits(pos, vel, model.potential.evaluate, 8, model.potential.force_field())
        o.advance(0.01)
        assert o.nonfinite() == 1
        assert np.isfinite(o.positions()[[0, 2]]).all() and np.isnan(o.positions()[1]).any()
