"""Extreme but finite model values through the commands, and the limits behind the rules.

Every value here once ended in a traceback (or a NaN in a written file). Each must now end
in exit status 2 with one line naming the key and the allowed range, and nothing written,
from ``icgen build``, ``icgen curve`` and ``icgen stability`` alike.
"""
import copy
import io
import contextlib
import os

import numpy as np
import pytest

from conftest import model_from_components
from reference.eddington_cut import min_df_ratio
from icgen import cli, spec
from icgen.spec import spec_from_dict, spheroid
from icgen.errors import ModelError

HALO = {"kind": "halo", "profile": "nfw", "mass": "1e12 Msun", "concentration": 10,
        "particles": 300}
DISK = {"kind": "disk", "mass": "4.5e10 Msun", "scale_length": "3 kpc",
        "scale_height": "0.3 kpc", "toomre_q": 1.5, "particles": 300}
GAS = {"kind": "gas_disk", "mass": "8e9 Msun", "scale_length": "5 kpc",
       "temperature": "2e4 K", "particles": 300}
BURKERT = {"kind": "halo", "profile": "burkert", "mass": "1e11 Msun", "core_radius": "5 kpc",
           "outer_radius": "100 kpc", "particles": 300}


def write_model(folder, components, **model):
    """A model file (TOML text written by the project's own writer) in ``folder``."""
    lines = ['[model]', f'name = "{model.get("name", "limits test")}"', "seed = 3"]
    for name, table in components.items():
        lines.append(f"[components.{name}]")
        for key, value in table.items():
            lines.append(f"{key} = {value!r}" if not isinstance(value, str)
                         else f'{key} = "{value}"')
    path = folder / "model.toml"
    path.write_text("\n".join(lines) + "\n")
    return path


def run(*argv):
    """(exit status, stdout, stderr) of the CLI run in-process."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = cli.main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def with_value(components, name, key, value):
    comps = copy.deepcopy(components)
    comps[name][key] = value
    return comps


BAD = [
    # (components, key named in the error, text the message must hold)
    (with_value({"disk": DISK}, "disk", "scale_length", "1e300 kpc"),
     "components.disk.scale_length", "must be between 1e-06 and 1e+05 kpc"),
    (with_value({"disk": DISK}, "disk", "scale_length", "1e-300 kpc"),
     "components.disk.scale_length", "must be between 1e-06 and 1e+05 kpc"),
    (with_value({"disk": DISK}, "disk", "scale_height", "1e-320 kpc"),
     "components.disk.scale_height", "must be between 1e-06 and 1e+05 kpc"),
    (with_value({"disk": DISK}, "disk", "toomre_q_radius", "1e6 kpc"),
     "components.disk.toomre_q_radius", "must be between 1e-06 and 1e+05 kpc"),
    (with_value({"disk": DISK}, "disk", "toomre_q_radius", "100 kpc"),
     "components.disk.toomre_q_radius", "between 0.3 and 30 kpc (0.1 to 10 scale lengths"),
    (with_value({"disk": DISK}, "disk", "mass", "1e300 Msun"),
     "components.disk.mass", "must be between 1 and 1e+16 Msun"),
    (with_value({"disk": {**DISK, "taper_radius": "20 kpc"}}, "disk", "taper_width", "0.1 kpc"),
     "components.disk.taper_width", "at least 0.1 x taper_radius = 2 kpc"),
    (with_value({"halo": HALO, "gas": {**GAS, "taper_radius": "20 kpc"}}, "gas", "taper_width",
                "0.1 kpc"), "components.gas.taper_width", "at least 0.1 x taper_radius = 2 kpc"),
    (with_value({"halo": HALO, "disk": DISK}, "halo", "truncation_width", "0.1 kpc"),
     "components.halo.truncation_width", "must be at least 0.0468 x r200"),
    (with_value({"halo": BURKERT}, "halo", "truncation_width", "1e-6 kpc"),
     "components.halo.truncation_width", "must be at least 0.0438 x outer_radius (100 kpc)"),
    (with_value({"halo": {**BURKERT, "outer_radius": "572 kpc"}}, "halo", "truncation_width",
                "10 kpc"), "components.halo.truncation_width", "x outer_radius (572 kpc) = 24.87 kpc"),
    (with_value({"halo": {**BURKERT, "profile": "pseudo_isothermal", "outer_radius": "6 kpc"}},
                "halo", "core_radius", "5 kpc"),
     "components.halo.truncation_width", "the default 0.1 x outer_radius (6 kpc) is too short"),
    ({"halo": {"kind": "halo", "profile": "nfw", "density_scale": "1e-20 Msun/kpc3",
               "scale_radius": "20 kpc", "particles": 300}},
     "components.halo.density_scale", "must be between 1 and 1e+16 Msun/kpc3"),
    ({"halo": {"kind": "halo", "profile": "nfw", "density_scale": "1e30 Msun/kpc3",
               "scale_radius": "20 kpc", "particles": 300}},
     "components.halo.density_scale", "must be between 1 and 1e+16 Msun/kpc3"),
    ({"halo": {"kind": "halo", "profile": "nfw", "density_scale": "1e3 Msun/kpc3",
               "scale_radius": "20 kpc", "particles": 300}},
     "components.halo.density_scale", "concentration r200/r_s, which must be > 1"),
    (with_value({"halo": HALO, "gas": GAS}, "gas", "scale_length", "5e12 kpc"),
     "components.gas.scale_length", "must be between 1e-06 and 1e+05 kpc"),
    (with_value({"halo": HALO, "gas": GAS}, "gas", "mass", "8e39 Msun"),
     "components.gas.mass", "must be between 1 and 1e+16 Msun"),
    (with_value({"halo": HALO, "gas": GAS}, "gas", "temperature", "-300 deg_C"),
     "components.gas.temperature", "below absolute zero"),
]


@pytest.mark.parametrize("components, key, text", BAD)
def test_extreme_values_exit_2_naming_key_and_range(tmp_path, components, key, text):
    model = write_model(tmp_path, components)
    for argv in (["build", model, "-o", tmp_path / "x.h5"], ["curve", model],
                 ["stability", model]):
        status, out, err = run(*argv)
        lines = err.strip().splitlines()
        assert status == 2 and len(lines) == 1, (argv[0], err)
        assert lines[0].startswith(f"icgen: error: {key}: ") and text in lines[0], lines[0]
        assert sorted(os.listdir(tmp_path)) == ["model.toml"]


def test_hot_gas_without_a_thin_layer_is_refused(tmp_path):
    # 1e7 K gas (c_s = 260 km/s) in a galaxy with v_c ~ 160-200 km/s is no layer: it used to
    # be written as a uniform slab 200 kpc high with only a rotation warning.
    model = write_model(tmp_path, {"halo": HALO, "disk": DISK,
                                   "gas": {**GAS, "temperature": "1e7 K"}})
    status, _, err = run("build", model, "-o", tmp_path / "x.h5")
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert err.startswith("icgen: error: components.gas.temperature: ")
    assert "no thin hydrostatic gas layer: c_s = 260" in err and "0.5 x scale_length" in err
    assert sorted(os.listdir(tmp_path)) == ["model.toml"]


def test_gas_far_larger_than_its_galaxy_is_refused(tmp_path):
    # scale length 1e5 kpc: Sigma ~ 0.1 Msun/kpc2, whose own gravity would hold the gas at
    # c_s^2/(pi G Sigma) ~ 2e8 kpc (Spitzer 1942): the vertical iteration used to diverge
    # into NaN and a traceback
    model = write_model(tmp_path, {"halo": HALO, "gas": {**GAS, "scale_length": "1e5 kpc"}})
    status, _, err = run("build", model, "-o", tmp_path / "x.h5")
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "components.gas.temperature: " in err and "no thin hydrostatic gas layer" in err
    assert sorted(os.listdir(tmp_path)) == ["model.toml"]


EDGES = [
    # values at the edges of their ranges that must build
    {"halo": HALO, "disk": {**DISK, "mass": "1e16 Msun", "scale_length": "1e-5 kpc",
                            "scale_height": "1e-6 kpc"}},
    {"halo": {**HALO, "concentration": 1000}, "disk": {**DISK, "toomre_q": 1e-300}},
    # a 1 Msun halo 2 pc across inside a disk: the total potential is flat to rounding at
    # its centre (a zero-width Eddington interval used to divide by zero)
    {"halo": {**HALO, "mass": "1 Msun"}, "disk": DISK},
    {"halo": HALO, "gas": {**GAS, "temperature": "1 K"}},
    {"disk": DISK, "bh": {"kind": "point_mass", "mass": "1e16 Msun"}},
]


@pytest.mark.parametrize("components", EDGES)
def test_values_at_the_edges_of_their_ranges_build(tmp_path, components):
    model = write_model(tmp_path, components)
    status, _, err = run("build", model, "-o", tmp_path / "x.h5", "--quiet")
    assert status == 0, err
    assert sorted(os.listdir(tmp_path)) == ["model.toml", "x.h5"]


def test_thin_layer_limit_lies_between_warm_and_hot_gas():
    # measured (potential/gas_solver.py): 3e5 K gas makes a layer 0.23 R_d thick in this
    # galaxy, 2e6 K gas one of 2.1 R_d; the limit 0.5 R_d must keep the first, refuse the other
    m = model_from_components({"halo": HALO, "disk": DISK,
                               "gas": {**GAS, "temperature": "3e5 K"}})
    assert m.gas_solution.iterations > 0
    with pytest.raises(ModelError, match="no thin hydrostatic gas layer"):
        model_from_components({"halo": HALO, "disk": DISK, "gas": {**GAS, "temperature": "2e6 K"}})


def test_point_masses_alone_have_a_curve(tmp_path):
    # no length scale at all: the table runs out to 10 kpc, and v_c = sqrt(G M / R)
    # (Kepler) for the two masses together
    model = write_model(tmp_path, {"bh": {"kind": "point_mass", "mass": "4e6 Msun"},
                                   "bh2": {"kind": "point_mass", "mass": "1e6 Msun"}})
    status, out, err = run("curve", model, "--table", tmp_path / "curve.ecsv")
    assert status == 0, err
    from astropy.table import QTable
    from icgen.units import G
    t = QTable.read(tmp_path / "curve.ecsv")
    R = t["radius"].value[1:]
    assert R[-1] == pytest.approx(10.0)
    # float rounding only: both sides are G M / R
    np.testing.assert_allclose(t["v_circ_total"].value[1:], np.sqrt(G * 5e6 / R), rtol=1e-10)
    assert run("stability", model)[0] == 0
    assert run("build", model, "-o", tmp_path / "x.h5", "--quiet")[0] == 0


def test_cold_disk_is_built_with_a_warning(tmp_path):
    # Q = 0.01 is legal (cold, unstable disks are studied on purpose) but the build says it
    # will not stay in equilibrium (Toomre 1964: Q < 1 is locally unstable)
    model = write_model(tmp_path, {"halo": HALO, "disk": {**DISK, "toomre_q": 0.01}})
    status, _, err = run("build", model, "-o", tmp_path / "x.h5", "--quiet")
    assert status == 0
    assert "icgen: warning: disk 'disk': toomre_q = 0.01 is below 1: locally unstable" in err
    cold = {k: v for k, v in DISK.items() if k != "toomre_q"} | {"toomre_q_min": 0.5}
    assert len(spec.model_warnings(spec_from_dict({"components": {"disk": cold}}))) == 1
    assert spec.model_warnings(spec_from_dict({"components": {"disk": DISK}})) == []


def test_model_name_length_is_limited(tmp_path):
    model = write_model(tmp_path, {"bh": {"kind": "point_mass", "mass": "4e6 Msun"}},
                        name="x" * 201)
    status, _, err = run("build", model, "-o", tmp_path / "x.h5")
    assert status == 2 and err.startswith("icgen: error: model.name: ")
    assert "at most 200 characters long (got 201)" in err and len(err) < 300
    assert spec_from_dict({"model": {"name": "x" * 200},
                           "components": {"bh": {"kind": "point_mass", "mass": "1 Msun"}}})


def test_large_files_and_many_components_are_refused_early(tmp_path):
    big = tmp_path / "big.toml"
    big.write_text("[model]\n" + "".join(f"k{i} = 1\n" for i in range(150_000)))
    assert big.stat().st_size > spec.MAX_MODEL_BYTES
    status, _, err = run("build", big, "-o", tmp_path / "x.h5")
    assert status == 2 and len(err.strip().splitlines()) == 1
    assert "at most 1 MB" in err and not (tmp_path / "x.h5").exists()
    with pytest.raises(ModelError, match="at most 1 MB"):
        spec.spec_from_toml_text("#" * (spec.MAX_MODEL_BYTES + 1))
    # many components: refused before any is read
    comps = {f"c{i}": {"kind": "point_mass", "mass": "1 Msun"} for i in range(10_000)}
    with pytest.raises(ModelError, match="the model has 10000 components; at most 64"):
        spec_from_dict({"components": comps})
    ok = {f"c{i}": {"kind": "point_mass", "mass": "1 Msun"} for i in range(64)}
    assert len(spec_from_dict({"components": ok}).components) == 64
    # a long component name, and many unknown keys: one short line naming the first
    with pytest.raises(ModelError, match="at most 64 characters"):
        spec_from_dict({"components": {"a" * 65: {"kind": "point_mass", "mass": "1 Msun"}}})
    keys = {f"unknown{i}": "x" * 100 for i in range(5_000)}
    with pytest.raises(ModelError) as exc_info:
        spec_from_dict({"model": keys, "components": ok})
    assert str(exc_info.value).startswith("model.unknown0: ") and len(str(exc_info.value)) < 400


def test_huge_values_are_shown_short():
    # the message shows a few items of a huge table and the ends of a huge string
    from icgen.errors import show_value
    assert len(show_value({str(i): i for i in range(100_000)})) <= 80
    assert len(show_value("x" * 10**6)) <= 80


@pytest.mark.parametrize("profile, ratio", [("nfw", 10.0), ("pseudo_isothermal", 10.0),
                                            ("burkert", 2.0)])
def test_truncation_limit_is_where_the_isotropic_df_turns_negative(profile, ratio):
    # The table in icgen/spec/spheroid.py, checked again: Eddington's formula (Binney &
    # Tremaine 2008, eq. 4.46) for a halo in its own potential, on a grid that resolves the
    # cut, is negative at E = Psi(r_t) for a decay length 10 % shorter than the measured
    # limit and positive 10 % above it.
    limit = spheroid.min_cut_fraction(profile, ratio) / spheroid.CUT_MARGIN
    assert min_df_ratio(profile, ratio, 0.9 * limit) < 0
    assert min_df_ratio(profile, ratio, 1.1 * limit) > 0
