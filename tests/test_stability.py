"""Stability and resolution numbers (icgen.diagnostics.stability, `icgen stability`)."""
import json
import math

import numpy as np
import pytest

from conftest import model_from_components
from icgen.cli import main
from icgen.diagnostics import stability as st
from icgen.sampling import ComponentPlan
from icgen.units import G


# ------------------------------------------------------------------ formulas, by hand


def test_toomre_q_solar_neighbourhood_by_hand():
    # Toomre (1964, ApJ 139, 1217): Q = sigma_R kappa / (3.36 G Sigma). Inputs are
    # round solar-neighbourhood values (from memory): sigma_R = 30 km/s,
    # kappa = 36 km/s/kpc, Sigma = 50 Msun/pc^2 = 5e7 Msun/kpc^2.
    # By hand: 3.36 * 4.300917e-6 * 5e7 = 722.554; 30 * 36 / 722.554 = 1.49470.
    q = st.toomre_q(30.0, 36.0, 5e7)
    assert q == pytest.approx(1.49470, rel=2e-5)   # 6 digits carried by hand


def test_swing_parameter_by_hand_and_from_the_critical_wavelength():
    # Toomre (1981): X_m = kappa^2 R / (2 pi G Sigma m). By hand for kappa = 36 km/s/kpc,
    # R = 8 kpc, Sigma = 5e7 Msun/kpc^2, m = 2: 1296 * 8 / (2 pi * 4.300917e-6 * 5e7 * 2)
    # = 10368 / 2702.343 = 3.83669.
    x = st.swing_parameter(36.0, 8.0, 5e7, m=2)
    assert x == pytest.approx(3.83669, rel=2e-5)
    # The same number as the ratio of the m-armed wavelength 2 pi R / m to Toomre's
    # (1964) critical wavelength lambda_crit = 4 pi^2 G Sigma / kappa^2 (round-off only).
    lam_crit = 4 * math.pi**2 * G * 5e7 / 36.0**2
    for m in (1, 2, 4):
        assert st.swing_parameter(36.0, 8.0, 5e7, m) == pytest.approx(
            2 * math.pi * 8.0 / m / lam_crit, rel=1e-12)


def test_bar_parameter_by_hand():
    # Efstathiou, Lake & Negroponte (1982, MNRAS 199, 1069): eps = v_max/sqrt(G M_d/R_d).
    # By hand: sqrt(4.300917e-6 * 5e10 / 3) = sqrt(71681.95) = 267.7349; 200/267.7349 = 0.747007.
    assert st.bar_parameter(200.0, 5e10, 3.0) == pytest.approx(0.747007, rel=2e-6)


def test_power_relaxation_ratio_by_hand_and_from_its_definition():
    # Power et al. (2003, MNRAS 338, 14) eq. 20. By hand for N = 1e4, rhobar = 1e4 rho_crit:
    # sqrt(200)/8 = 1.767767, 1e4/ln(1e4) = 1085.7362, (1e4)^-1/2 = 0.01 -> 19.1935.
    assert st.power_kappa(1e4, 1e4 * 127.0, 127.0) == pytest.approx(19.1935, rel=2e-5)
    # From its definition, with independent numerics: t_relax = N/(8 ln N) t_circ(r),
    # t_circ = 2 pi r / v_c, v_c^2 = G M/r; r200 where the mean density is 200 rho_crit.
    M, a, rho_crit, n_tot = 1e12, 30.0, 127.0, 1e6
    mass = lambda r: M * r**2 / (r + a) ** 2                  # Hernquist (1990) eq. 3
    t_circ = lambda r: 2 * math.pi * r / math.sqrt(G * mass(r) / r)
    from scipy.optimize import brentq
    r200 = brentq(lambda r: mass(r) / (4 / 3 * math.pi * r**3) - 200 * rho_crit, 1, 1e4)
    r = 5.0
    n = n_tot * mass(r) / M
    direct = n / (8 * math.log(n)) * t_circ(r) / t_circ(r200)
    rhobar = mass(r) / (4 / 3 * math.pi * r**3)
    assert st.power_kappa(n, rhobar, rho_crit) == pytest.approx(direct, rel=1e-9)


def test_optimal_softening_by_hand():
    # Power et al. (2003) eq. 15: eps_opt = 4 r200 / sqrt(N200) = 4 * 200 / 1000.
    assert st.optimal_softening(200.0, 1e6) == pytest.approx(0.8, rel=1e-14)


def test_first_crossing_interpolates_in_log_radius():
    # y = ln x crosses 1 at x = e exactly; linear in ln x is exact for it.
    x = np.geomspace(1, 10, 7)
    assert st.first_crossing(x, np.log(x), 1.0) == pytest.approx(math.e, rel=1e-12)
    assert st.first_crossing(x, np.log(x), 5.0) is None


def test_particle_mass_ratios_and_ludlow_limit():
    plans = [ComponentPlan("halo", "halo", 100, 2e6, 0),
             ComponentPlan("thin", "disk", 100, 4e5, 1),
             ComponentPlan("thick", "disk", 100, 1e5, 2),
             ComponentPlan("bulge", "bulge", 10, 3e5, 3)]
    # ratios to the lightest disk particle, by hand: 2e6/1e5 = 20, 3e5/1e5 = 3
    assert st.particle_mass_ratios(plans) == pytest.approx({"halo": 20.0, "bulge": 3.0})
    assert st.MASS_RATIO_LIMIT == 5.0    # Ludlow et al. (2019): common practice


# ------------------------------------------------------------------ on models


@pytest.fixture(scope="module")
def default_report(default_model):
    return st.analyse(default_model)


def test_q_curve_returns_the_model_file_q_at_its_radius(default_report, default_model):
    # The default model sets toomre_q = 1.5 at 2.5 R_d (icgen's reading of Toomre 1964):
    # the curve must give it back. Tolerance: linear interpolation on a 400-point log grid
    # (step 1.5 %) of a curve whose curvature there is O(1) -> ~1e-4.
    d = default_report.disks[0]
    r0 = default_model.spec.component("disk").toomre_q_radius
    q0 = np.exp(np.interp(np.log(r0), np.log(d.radius), np.log(d.q)))
    assert q0 == pytest.approx(1.5, rel=5e-4)
    assert d.q_min <= q0 and d.r_q_min > 0


def test_default_model_resolution_numbers(default_report, default_model):
    # Particle mass ratio by hand from the model file: (M_halo / N_halo) / (M_disk / N_disk).
    count = {c.name: c.particles for c in default_model.spec.components}
    halo, disk = default_model.components["halo"], default_model.components["disk"]
    ratio = (halo.total_mass / count["halo"]) / (disk.total_mass / count["disk"])
    assert default_report.mass_ratios["halo"] == pytest.approx(ratio, rel=1e-12)
    verdict = {v.criterion: v for v in default_report.verdicts}["particle masses (halo)"]
    assert verdict.ok == (ratio <= 5)          # Ludlow et al. (2019) limit, common practice
    # Power et al. (2003): kappa_P(r_conv) = 0.6, recomputed here from eq. 20 directly
    # (first_crossing interpolates linearly in ln r on a 600-point grid: 1e-3).
    h = default_report.halos[0]
    from icgen.units import critical_density
    rho_c = critical_density(default_model.spec.cosmology, default_model.spec.redshift)
    m = halo.enclosed_mass(np.array([h.r_conv]))[0]
    n = count["halo"] * m / halo.total_mass
    k = st.power_kappa(n, m / (4 / 3 * np.pi * h.r_conv**3), rho_c)
    assert k == pytest.approx(0.6, rel=1e-3)
    assert h.eps_opt == pytest.approx(4 * h.r200 / math.sqrt(h.n200), rel=1e-12)


def test_heavy_halo_particles_get_a_caution():
    # Ludlow et al. (2019): 2e8/1e6 = 200 times heavier halo particles -> caution.
    model = model_from_components({
        "halo": {"kind": "halo", "profile": "hernquist", "mass": "2e11 Msun",
                 "scale_radius": "20 kpc", "particles": 1000},
        "disk": {"kind": "disk", "mass": "1e10 Msun", "scale_length": "3 kpc",
                 "scale_height": "0.3 kpc", "toomre_q": 1.5, "particles": 10000}})
    rep = st.analyse(model)
    assert rep.mass_ratios["halo"] == pytest.approx(200.0, rel=1e-12)
    verdict = {v.criterion: v for v in rep.verdicts}["particle masses (halo)"]
    assert not verdict.ok and "200.00" in verdict.text


def test_convergence_radius_shrinks_with_more_particles(default_model):
    # Ordering (Power et al. 2003): more particles relax more slowly, so r_conv moves in.
    radii = [st.halo_resolution(default_model, "halo", n).r_conv for n in (1e4, 1e5, 1e6)]
    assert radii[0] > radii[1] > radii[2] > 0


def test_bare_exponential_disk_is_bar_unstable():
    # A self-gravitating exponential disk alone peaks at v = 0.6221 sqrt(G M/R_d)
    # (Freeman 1970, ApJ 160, 811, razor thin), far below the 1.1 of Efstathiou, Lake &
    # Negroponte (1982). z_d = 0.02 R_d lowers the peak by well under 2 % (thickness
    # corrections are of order z_d/R_d), hence the tolerance.
    model = model_from_components({"disk": {
        "kind": "disk", "mass": "5e10 Msun", "scale_length": "3 kpc",
        "scale_height": "0.06 kpc", "toomre_q": 1.2, "particles": 1000}})
    rep = st.analyse(model)
    assert rep.bar_parameter == pytest.approx(0.6221, rel=0.02)
    assert rep.bar_parameter < 0.6221          # a thick disk peaks below the thin one
    bar = next(v for v in rep.verdicts if v.criterion == "bar criterion")
    assert not bar.ok and "1.1" in bar.threshold
    assert rep.disk_fraction_22 == pytest.approx(1.0, rel=1e-9)   # disk only
    assert rep.halos == []


# ------------------------------------------------------------------ command line


def test_cli_stability_prints_verdicts_and_writes_json_and_png(tmp_path, capsys):
    js, png = tmp_path / "s.json", tmp_path / "s.png"
    assert main(["stability", "--json", str(js), "--plot", str(png)]) == 0
    out = capsys.readouterr().out
    for words in ("Toomre Q (disk)", "min Q >= 1", "bar criterion", "< 1.1",
                  "swing X_2", "disk fraction", "r_conv", "eps_opt", "halo/disk particle mass"):
        assert words in out
    data = json.loads(js.read_text())
    assert data["disks"][0]["q_min"] > 1 and len(data["disks"][0]["q"]) == st.CURVE_POINTS
    assert {"bar_parameter", "disk_fraction_22", "halos", "mass_ratios", "verdicts"} <= set(data)
    assert png.read_bytes()[:4] == b"\x89PNG" and png.stat().st_size > 10_000


def test_cli_stability_reads_the_model_stored_in_a_snapshot(tmp_path, capsys):
    from icgen.build import build_snapshot
    from icgen.spec import spec_from_dict
    comps = {"halo": {"kind": "halo", "profile": "hernquist", "mass": "5e11 Msun",
                      "scale_radius": "20 kpc", "particles": 2000},
             "disk": {"kind": "disk", "mass": "4e10 Msun", "scale_length": "3 kpc",
                      "scale_height": "0.3 kpc", "toomre_q": 1.3, "particles": 1000}}
    spec = spec_from_dict({"model": {"name": "tiny", "seed": 3}, "components": comps})
    path = tmp_path / "tiny.h5"
    build_snapshot(spec, path, quiet=True)
    js_file, js_toml = tmp_path / "a.json", tmp_path / "b.json"
    toml = tmp_path / "tiny.toml"
    toml.write_text(spec.to_toml())
    assert main(["stability", str(path), "--json", str(js_file), "--quiet"]) == 0
    assert main(["stability", str(toml), "--json", str(js_toml), "--quiet"]) == 0
    assert capsys.readouterr().out == ""
    a, b = json.loads(js_file.read_text()), json.loads(js_toml.read_text())
    assert a == b      # same stored model, same numbers (deterministic)
    assert a["mass_ratios"]["halo"] == pytest.approx(2.5e8 / 4e7)   # by hand


@pytest.mark.parametrize("argv,key", [
    (["stability", "/nonexistent/model.toml"], "model.toml"),
    (["stability", "--json", "/nonexistent-dir/x.json"], "--json"),
])
def test_cli_stability_bad_input_exit_2(argv, key, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and key in err


def test_gas_q_and_two_component_criterion_by_hand():
    from icgen.diagnostics.stability import combined_q, gas_toomre_q
    from icgen.units import G
    # Q_g = c_s kappa/(pi G Sigma) (Toomre 1964 for a fluid): c_s = 10 km/s,
    # kappa = 50 km/s/kpc, Sigma = 1e7 Msun/kpc^2 -> 500/(pi * 4.300917e-6 * 1e7) = 3.7005
    assert gas_toomre_q(10.0, 50.0, 1e7) == pytest.approx(500 / (np.pi * G * 1e7), rel=1e-12)
    assert gas_toomre_q(10.0, 50.0, 1e7) == pytest.approx(3.7005, rel=1e-4)
    # Wang & Silk (1994): 1/Q = 1/Q_s + 1/Q_g; Q_s = 2, Q_g = 1 -> 2/3
    assert combined_q([2.0, 1.0]) == pytest.approx(2 / 3, rel=1e-12)


def test_stability_report_of_gas_rich_model():
    from icgen.diagnostics.stability import analyse
    from icgen.model import MassModel
    from icgen.spec import load_spec
    rep = analyse(MassModel(load_spec("configs/gas_rich_spiral.toml")))
    (g,) = rep.gas
    # the combined disk is less stable than either component alone
    assert g.q_eff_min < g.q_min and g.q_eff_min < rep.disks[0].q_min
    names = [v.criterion for v in rep.verdicts]
    assert "gas Q (gas)" in names and "stars + gas Q (gas)" in names
