"""The `icgen curve` and `icgen new` commands, run in-process through cli.main."""
import numpy as np
import pytest
from astropy.table import QTable

from icgen.cli import main
from icgen.spec import load_spec
from icgen.units import G


def test_curve_default_model_prints_table_and_numbers(capsys):
    assert main(["curve", "--points", "10"]) == 0
    out = capsys.readouterr().out
    assert "Midplane circular speed" in out
    assert "v_max =" in out and "disk fraction" in out and "dark/baryonic" in out


def test_curve_writes_ecsv_and_png(tmp_path, capsys):
    table, png = tmp_path / "rc.ecsv", tmp_path / "rc.png"
    assert main(["curve", "--table", str(table), "--plot", str(png), "--quiet"]) == 0
    assert capsys.readouterr().out == ""
    t = QTable.read(table, format="ascii.ecsv")
    assert str(t["v_circ_total"].unit) == "km / s" and str(t["radius"].unit) == "kpc"
    # components add in quadrature to the total (v^2 is linear in the potential)
    comps = [c for c in t.colnames if c.startswith("v_circ_") and c != "v_circ_total"]
    v2 = sum(np.sign(t[c].value) * t[c].value ** 2 for c in comps)
    np.testing.assert_allclose(v2, t["v_circ_total"].value ** 2, rtol=1e-9, atol=1e-9)
    assert png.stat().st_size > 10_000 and png.read_bytes()[:4] == b"\x89PNG"


def test_curve_enclosed_mass_matches_keplerian_speed(capsys):
    # At a radius far beyond all mass the enclosed mass of the summary is the total, and
    # v_c^2 r / G of the curve equals it (Newton's shell theorem: outside all mass the
    # potential is -G M/r). Enclosed masses come from the profiles' mass laws, v_c from the
    # potential solver: two independent routes; 1e-3 is the solver's accuracy bar.
    from icgen.diagnostics.curve import rotation_curve, summarize
    from icgen.model import MassModel
    m = MassModel(load_spec(None))
    r_far = 3 * max(c.extent for c in m.components.values())
    s = summarize(m, radii=[r_far])
    total = sum(v[0] for v in s.enclosed.values())
    assert total == pytest.approx(sum(c.total_mass for c in m.components.values()), rel=1e-4)
    v = rotation_curve(m, [r_far])["v_circ_total"].value[0]
    assert v**2 * r_far / G == pytest.approx(total, rel=1e-3)


@pytest.mark.parametrize("argv,key", [
    (["curve", "--rmax", "40"], "--rmax"),
    (["curve", "--rmax", "-3 kpc"], "--rmax"),
    (["curve", "--radii", "5 km/s"], "--radii"),
    (["curve", "--table", "/nonexistent-dir/x.ecsv"], "--table"),
    (["curve", "/nonexistent/model.toml"], "model.toml"),
])
def test_curve_bad_input_exit_2_one_line(argv, key, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and key in err and err.startswith("icgen: error:")


def test_new_writes_loadable_starter_and_refuses_overwrite(tmp_path, capsys):
    path = tmp_path / "galaxy.toml"
    assert main(["new", str(path)]) == 0
    spec = load_spec(str(path))
    assert len(spec.components) >= 2
    text = path.read_text()
    assert text.count("#") > 20          # a commented starter, not a bare dump
    before = path.read_bytes()
    assert main(["new", str(path)]) == 2
    assert path.read_bytes() == before
    assert main(["new", str(path), "--overwrite"]) == 0


def test_curve_on_bad_model_file_exit_2(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text('[components.disk]\nkind = "disk"\nmass = 5e10\n')
    assert main(["curve", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "components.disk.mass" in err


def test_model_curve_of_a_point_mass_is_keplerian():
    # v_c = sqrt(G M / R) around a point mass (Kepler); with no length scale the radii run
    # to POINT_MASS_RADIUS in CURVE_POINTS even steps. The QTable of `icgen curve` holds
    # the model's numbers unchanged.
    from conftest import model_from_components
    from icgen.diagnostics.curve import rotation_curve
    from icgen.model import CURVE_POINTS, POINT_MASS_RADIUS
    m = model_from_components({"bh": {"kind": "point_mass", "mass": "1e9 Msun"}})
    R, speeds = m.rotation_curve()
    np.testing.assert_array_equal(R, np.linspace(POINT_MASS_RADIUS / CURVE_POINTS,
                                                 POINT_MASS_RADIUS, CURVE_POINTS))
    # closed form -G M / r evaluated in float64: a few ulp
    np.testing.assert_allclose(speeds["total"], np.sqrt(G * 1e9 / R), rtol=1e-12)
    np.testing.assert_array_equal(speeds["bh"], speeds["total"])
    table = rotation_curve(m)
    assert table["radius"].value.tobytes() == R.tobytes()
    assert table["v_circ_bh"].value.tobytes() == speeds["bh"].tobytes()
