"""Model-file layer: units, loading, validation messages, round trip, fuzzing."""

import copy
import math
import pickle
import tomllib

import astropy.constants as const
import astropy.units as u
import pytest
from astropy.cosmology import Planck15, Planck18
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from icgen.spec import disk, fields, gas_disk, model, point_mass, spheroid
from icgen.spec import (
    DiskSpec,
    ModelSpec,
    OutputSpec,
    PointMassSpec,
    SpheroidSpec,
    load_dict,
    load_spec,
    spec_from_dict,
    spec_from_toml_text,
)
from icgen.spec.default_model import DEFAULT_MODEL_TOML, STARTER_TOML
from icgen.errors import ModelError
from icgen.units import G, TIME_UNIT_GYR, critical_density, parse_quantity, unit_scale

# IAU 2012 Resolution B2: 1 au = 149 597 870 700 m exactly; 1 pc = (648000 / pi) au by
# definition (IAU 2015 Resolution B2). Used to convert without astropy.units.
AU_M = 149_597_870_700.0
KPC_M = 1e3 * AU_M * 648_000.0 / math.pi
# Julian year (365.25 d of 86400 s), the year astropy's Gyr is built on.
GYR_S = 1e9 * 365.25 * 86400.0


def default_dict():
    return tomllib.loads(DEFAULT_MODEL_TOML)


def assert_one_line_error(exc_info, key):
    message = str(exc_info.value)
    assert "\n" not in message and "\r" not in message
    assert message.startswith(key + ":"), message
    assert exc_info.value.key == key


# ---------------------------------------------------------------- units


def test_G_matches_astropy_constants_converted_by_hand():
    # G [m^3 kg^-1 s^-2] * M_sun [kg] / (kpc [m] * (1e3 m/s)^2); only the unit
    # conversion is redone here, so agreement to 1e-12 (float rounding) is expected.
    expected = const.G.si.value * const.M_sun.si.value / (KPC_M * 1e6)
    assert G == pytest.approx(expected, rel=1e-12)
    # The value README.md quotes ("Python API"), to its 7 digits.
    assert G == pytest.approx(4.300917e-6, rel=1e-7)


def test_time_unit_is_kpc_per_km_s_in_gyr():
    expected = KPC_M / 1e3 / GYR_S  # kpc in km over 1 km/s gives seconds
    assert TIME_UNIT_GYR == pytest.approx(expected, rel=1e-12)  # float rounding only


def test_critical_density_against_astropy_planck18_converted_independently():
    # Planck18.critical_density0 is in g/cm^3 (astropy.cosmology); convert by hand.
    rho_cgs = Planck18.critical_density0.to_value(u.g / u.cm**3)
    msun_g = const.M_sun.cgs.value
    expected = rho_cgs * (KPC_M * 100.0) ** 3 / msun_g
    assert critical_density("Planck18", 0) == pytest.approx(expected, rel=1e-12)  # rounding
    # Fact of the trade (from memory): rho_crit = 2.775e11 h^2 Msun/Mpc^3, h = 0.6766 for
    # Planck18; 4 digits given, so 1e-3.
    assert critical_density("Planck18", 0.0) == pytest.approx(277.5 * 0.6766**2, rel=1e-3)


def test_critical_density_follows_hubble_rate():
    # rho_crit(z) = rho_crit0 E(z)^2 with E = H(z)/H0 from astropy's Planck15.
    z = 1.5
    expected = critical_density("Planck15", 0.0) * Planck15.efunc(z) ** 2
    assert critical_density("Planck15", z) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("name", ["Planck 18", "planck18", 5, None, "LCDM"])
def test_critical_density_rejects_unknown_cosmology(name):
    with pytest.raises(ModelError) as exc_info:
        critical_density(name, 0.0)
    assert_one_line_error(exc_info, "model.cosmology")


@pytest.mark.parametrize(
    "text, unit, expected",
    [
        ("3.2 kpc", u.kpc, 3.2),
        ("800 pc", u.kpc, 0.8),
        ("5e10 Msun", u.Msun, 5e10),
        ("5e10 solMass", u.Msun, 5e10),
        ("210 km/s", u.km / u.s, 210.0),
        ("1e7 Msun/kpc3", u.Msun / u.kpc**3, 1e7),
        ("1e4 K", u.K, 1e4),
        ("30 deg", u.deg, 30.0),
        ("1 rad", u.deg, 180.0 / math.pi),
        ("-2 kpc", u.kpc, -2.0),  # sign checks belong to the key's own rule
    ],
)
def test_parse_quantity_converts_to_internal_units(text, unit, expected):
    # Unit definitions: 1 kpc = 1000 pc, 1 rad = 180/pi deg; 1e-12 covers float rounding.
    assert parse_quantity(text, "some.key", unit) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    "value",
    [3.0, 3, True, None, ["3 kpc"], "kpc", "3", "3 Kpc", "3 Msun", "3 km/s", "nan kpc",
     "inf kpc", "1e400 kpc", "3 dex(kpc)", "3 mag", "", "three kpc"],
)  # fmt: skip
def test_parse_quantity_rejects_bad_values(value):
    with pytest.raises(ModelError) as exc_info:
        parse_quantity(value, "components.disk.scale_length", u.kpc)
    assert_one_line_error(exc_info, "components.disk.scale_length")
    if isinstance(value, (int, float)):
        assert "give a string with a unit, e.g. '3 kpc'" in str(exc_info.value)


@pytest.mark.parametrize("text, kelvin", [("-10 deg_C", 263.15), ("1e4 K", 1e4), ("0 deg_C", 273.15)])
def test_temperatures_in_celsius_convert_to_kelvin(text, kelvin):
    # The Celsius scale is the kelvin scale shifted by 273.15 (its definition); astropy's
    # temperature equivalency applies it. 1e-12: float rounding.
    assert parse_quantity(text, "components.gas.temperature", u.K) == pytest.approx(kelvin, rel=1e-12)


@pytest.mark.parametrize("text", ["-300 deg_C", "-5 K", "-1e-3 K"])
def test_temperatures_below_absolute_zero_are_named_as_such(text):
    with pytest.raises(ModelError) as exc_info:
        parse_quantity(text, "components.gas.temperature", u.K)
    assert_one_line_error(exc_info, "components.gas.temperature")
    assert "is below absolute zero" in str(exc_info.value)
    assert "not temperature" not in str(exc_info.value)


def test_long_quantity_and_unit_strings_are_refused_unparsed():
    with pytest.raises(ModelError, match="too long for a number with a unit"):
        parse_quantity("1" * 10**6 + " kpc", "components.disk.scale_length", u.kpc)
    with pytest.raises(ModelError) as exc_info:
        unit_scale("k" * 10**6, "length", "output.length_unit")
    assert len(str(exc_info.value)) < 300


def test_unit_scale():
    # 1 Msun is 1e-10 of "1e10 Msun"; 1 kpc is 1000 pc; 1 km/s is 1000 m/s.
    assert unit_scale("1e10 Msun", "mass", "output.mass_unit") == pytest.approx(1e-10, rel=1e-12)
    assert unit_scale("pc", "length", "output.length_unit") == pytest.approx(1e3, rel=1e-12)
    assert unit_scale("m/s", "velocity", "output.velocity_unit") == pytest.approx(1e3, rel=1e-12)
    assert unit_scale("kpc", "length", "output.length_unit") == 1.0


@pytest.mark.parametrize("text", ["kpc", "Msunn", "", "dex(Msun)", "-1 Msun", 1e10, None, "Msun\n",
                                  "1e-300 Msun", "1e50 Msun"])
def test_unit_scale_rejects_bad_mass_units(text):
    with pytest.raises(ModelError) as exc_info:
        unit_scale(text, "mass", "output.mass_unit")
    assert_one_line_error(exc_info, "output.mass_unit")


def test_model_error_keeps_key_and_pickles():
    err = ModelError("components.disk.scale_height", "5 kpc", "must be smaller than scale_length (3 kpc)")
    assert str(err) == "components.disk.scale_height: got '5 kpc'; must be smaller than scale_length (3 kpc)"
    assert isinstance(err, ValueError) and err.key == "components.disk.scale_height"
    again = pickle.loads(pickle.dumps(err))
    assert str(again) == str(err) and again.key == err.key


# ---------------------------------------------------------------- built-in files


def test_default_model_loads_with_the_documented_values():
    spec = load_spec()
    assert spec.name == "icgen default spiral" and spec.seed == 20261201
    assert [c.name for c in spec.components] == ["halo", "disk", "bulge"]
    halo, disk, bulge = spec.components
    assert (halo.profile, halo.mass, halo.concentration, halo.particles) == ("nfw", 1e12, 10.0, 1_200_000)
    assert (disk.mass, disk.scale_length, disk.scale_height) == (4.5e10, 3.0, 0.3)
    assert (disk.vertical, disk.toomre_q, disk.particles) == ("sech2", 1.5, 200_000)
    assert disk.toomre_q_radius == pytest.approx(7.5)  # default 2.5 scale lengths
    assert (bulge.profile, bulge.mass, bulge.scale_radius, bulge.particles) == ("hernquist", 1e10, 0.6, 50_000)
    assert spec.output == OutputSpec(mass_unit="1e10 Msun")
    assert spec.component("disk") is disk


def test_starter_file_loads():
    spec = spec_from_toml_text(STARTER_TOML)
    assert [c.kind for c in spec.components] == ["halo", "disk", "bulge"]


def _uncomment_block(text, header):
    """Uncomment the commented-out table starting at ``# header`` up to the next blank line."""
    lines = text.splitlines()
    start = lines.index(f"# {header}")
    end = start
    while end < len(lines) and lines[end].startswith("#"):
        lines[end] = lines[end][2:]
        end += 1
    return "\n".join(lines) + "\n"


def test_starter_alternatives_load_when_uncommented():
    text = _uncomment_block(STARTER_TOML, "[components.thick_disk]")
    text = _uncomment_block(text, "[components.black_hole]")
    text = _uncomment_block(text, "[components.gas]")
    spec = spec_from_toml_text(text)
    assert spec.component("thick_disk").vertical == "exponential"
    assert spec.component("black_hole").particles == 1
    assert spec.component("gas").temperature == 1e4
    # The cored halo replaces the NFW one: drop the active [components.halo] table first.
    start = text.index("[components.halo]")
    text = text[:start] + text[text.index("# A cored halo"):]
    spec = spec_from_toml_text(_uncomment_block(text, "[components.halo]"))
    assert spec.component("halo").profile == "burkert"


def test_to_toml_round_trips():
    for spec in (load_spec(), spec_from_toml_text(STARTER_TOML)):
        assert spec_from_toml_text(spec.to_toml()) == spec


def test_round_trip_keeps_every_optional_field():
    data = default_dict()
    data["model"].update(name='odd "name" \\ here', cosmology="WMAP9", redshift=0.5, particle_mass="2e5 Msun",
                         quiet_start=True, mirror=True)
    data["output"].update(length_unit="pc", mass_unit="Msun")
    data["components"]["disk"].update(taper_radius="20 kpc", toomre_q_radius="6 kpc", vertical="exponential")
    data["components"]["halo"].update(outer_radius="300 kpc", truncation_width="20 kpc",
                                      anisotropy_radius="40 kpc", retrograde_flip_fraction=0.25,
                                      velocities="jeans")  # fmt: skip
    del data["components"]["bulge"]["particles"]
    data["components"]["core"] = {"kind": "halo", "profile": "pseudo_isothermal", "mass": "1e11 Msun",
                                  "core_radius": "4 kpc", "outer_radius": "100 kpc", "particles": 5}  # fmt: skip
    data["components"]["bh"] = {"kind": "point_mass", "mass": "4e6 Msun"}
    spec = spec_from_dict(data)
    # default 0.5 scale lengths (1.5 kpc), raised to the smallest resolved width, 0.1 x 20 kpc
    assert spec.component("disk").taper_width == pytest.approx(2.0)
    assert spec.component("bulge").particles is None
    assert spec_from_toml_text(spec.to_toml()) == spec


@settings(max_examples=60, deadline=None)
@given(mass=st.floats(1.0, 1e16), rd=st.floats(1e-3, 1e5), ratio=st.floats(0.001, 0.999),
       q=st.floats(1e-300, 100.0), rho=st.floats(1e5, 1e12), rs=st.floats(1e-6, 1e5))  # fmt: skip
def test_round_trip_is_exact_for_any_floats(mass, rd, ratio, q, rho, rs):
    # any floats inside the ranges of the keys (an NFW rho_s of 1e5..1e12 Msun/kpc3 gives a
    # concentration between 1 and 1000 for Planck18 at z = 0)
    disk = DiskSpec("disk", mass, rd, rd * ratio, toomre_q_min=q, particles=7)
    halo = SpheroidSpec("halo", "halo", "nfw", density_scale=rho, scale_radius=rs, particles=3)
    spec = ModelSpec("random", 0, (disk, halo), particle_mass=mass)
    assert spec_from_toml_text(spec.to_toml()) == spec


# ---------------------------------------------------------------- bad input


def _set(path, value):
    def mutate(data):
        *tables, key = path.split(".")
        target = data
        for name in tables:
            target = target.setdefault(name, {})
        if value is DELETE:
            del target[key]
        else:
            target[key] = value

    return mutate


DELETE = object()
BAD_INPUTS = [
    # (mutation, key named in the error, text the message must contain)
    (_set("components.disk.scale_length", "3"), "components.disk.scale_length", "unit"),
    (_set("components.disk.scale_length", 3.0), "components.disk.scale_length", "e.g. '3 kpc'"),
    (_set("components.disk.mass", "-4.5e10 Msun"), "components.disk.mass", "between 1 and 1e+16 Msun"),
    (_set("components.halo.mass", "0 Msun"), "components.halo.mass", "between 1 and 1e+16 Msun"),
    (_set("components.disk.scale_length", "0 kpc"), "components.disk.scale_length",
     "between 1e-06 and 1e+05 kpc"),
    (_set("components.disk.scale_lenght", "3 kpc"), "components.disk.scale_lenght", "did you mean 'scale_length'?"),
    (_set("components.halo.concentrashun", 10), "components.halo.concentrashun", "did you mean 'concentration'?"),
    (_set("model.sed", 3), "model.sed", "did you mean 'seed'?"),
    (_set("output.mass_units", "Msun"), "output.mass_units", "did you mean 'mass_unit'?"),
    (_set("componets", {}), "componets", "did you mean 'components'?"),
    (_set("components.disk.mass", "4.5e10 kpc"), "components.disk.mass", "must be a mass"),
    (_set("components.disk.toomre_q", "1.5"), "components.disk.toomre_q", "must be a number"),
    (_set("components.disk.particles", True), "components.disk.particles", "whole number"),
    (_set("components.disk.particles", 1e5), "components.disk.particles", "whole number"),
    (_set("components.disk.particles", 0), "components.disk.particles", "from 1 to 1e+10"),
    (_set("components.disk.scale_height", "5 kpc"), "components.disk.scale_height",
     "got '5 kpc'; must be smaller than scale_length (3 kpc)"),
    (_set("components.disk.vertical", "gaussian"), "components.disk.vertical", "sech2, exponential"),
    (_set("components.disk.profile", "sersic"), "components.disk.profile", "exponential"),
    (_set("components.disk.sigma_ratio", 1.2), "components.disk.sigma_ratio", "only one of"),
    (_set("components.disk.toomre_q", DELETE), "components.disk.toomre_q", "give one of"),
    (_set("components.disk.toomre_q_min", 0), "components.disk.toomre_q_min", "only one of"),
    (_set("components.disk.taper_radius", "2 kpc"), "components.disk.taper_radius", "larger than scale_length"),
    (_set("components.disk.taper_width", "2 kpc"), "components.disk.taper_width", "needs taper_radius"),
    (_set("components.disk.mass", DELETE), "components.disk.mass", "required"),
    (_set("components.halo.scale_radius", "20 kpc"), "components.halo.scale_radius", "not both"),
    (_set("components.halo.concentration", DELETE), "components.halo.concentration", "either"),
    (_set("components.halo.concentration", 1.0), "components.halo.concentration", "> 1"),
    (_set("components.bulge.core_radius", "1 kpc"), "components.bulge.core_radius", "profile 'hernquist'"),
    (_set("components.bulge.outer_radius", "0.5 kpc"), "components.bulge.outer_radius", "larger than scale_radius"),
    (_set("components.bulge.concentration", 5), "components.bulge.concentration", "profile 'hernquist'"),
    (_set("components.bulge.scale_radius", DELETE), "components.bulge.scale_radius", "required for profile"),
    (_set("components.halo.retrograde_flip_fraction", 1.5), "components.halo.retrograde_flip_fraction",
     "between 0 and 1"),
    # the key's earlier name points to the new one
    (_set("components.halo.spin", 0.5), "components.halo.spin", "renamed: use retrograde_flip_fraction"),
    (_set("components.halo.velocities", "jean"), "components.halo.velocities", "did you mean 'jeans'?"),
    (_set("components.halo.anisotropy_radius", "-1 kpc"), "components.halo.anisotropy_radius", "between"),
    (_set("components.halo.kind", "gas_disk"), "components.halo.concentration", "unknown key for a gas_disk"),
    (_set("components.halo.kind", DELETE), "components.halo.kind", "missing"),
    (_set("components.halo.profile", "NFW"), "components.halo.profile", "did you mean 'nfw'?"),
    (_set("components.halo.particles", DELETE), "components.halo.particles", "particle_mass"),
    (_set("components.bh", {"kind": "point_mass", "mass": "1e6 Msun", "particles": 2}),
     "components.bh.particles", "must be 1"),
    (_set("components.bad name", {"kind": "point_mass", "mass": "1e6 Msun"}), "components", "letter"),
    (_set("components.disk", 5), "components.disk", "must be a table"),
    (_set("model.seed", -1), "model.seed", ">= 0"),
    (_set("model.seed", "1"), "model.seed", "whole number"),
    (_set("model.redshift", -0.5), "model.redshift", "between 0 and 20"),
    (_set("model.cosmology", "Planck2018"), "model.cosmology", "did you mean 'Planck18'?"),
    (_set("model.name", ""), "model.name", "non-empty"),
    (_set("model.mirror", 1), "model.mirror", "true or false"),
    (_set("model.quiet_start", "yes"), "model.quiet_start", "true or false"),
    (_set("model.particle_mass", 1e5), "model.particle_mass", "unit"),
    (_set("output.mass_unit", "kpc"), "output.mass_unit", "mass unit"),
    (_set("output.length_unit", "parsec s"), "output.length_unit", "length unit"),
    (_set("output.velocity_unit", "kms"), "output.velocity_unit", "velocity unit"),
    (_set("output", "kpc"), "output", "must be a table"),
    # ranges and rules between keys (tests/test_model_limits.py runs the commands on more)
    (lambda d: d["components"]["disk"].update(taper_radius="3.6 kpc", taper_width="0.4 kpc"),
     "components.disk.toomre_q_radius", "the default 2.5 x scale_length = 7.5 kpc lies beyond the taper"),
    (_set("components.disk.toomre_q", 150), "components.disk.toomre_q", "must be > 0 and at most 100"),
    (lambda d: d["components"]["disk"].update(toomre_q=None, sigma_ratio=50.0),
     "components.disk.sigma_ratio", "between 0.1 and 10"),
    (_set("components.disk.particles", 10**11), "components.disk.particles", "from 1 to 1e+10"),
    (_set("components.halo.concentration", 2000), "components.halo.concentration", "at most 1000"),
    (_set("components.halo.outer_radius", "5 kpc"), "components.halo.outer_radius",
     "larger than the NFW scale radius r_s = r200/c = 21"),
    (_set("model.redshift", 30.0), "model.redshift", "between 0 and 20"),
    (_set("model.name", "x" * 201), "model.name", "at most 200 characters long (got 201)"),
    (_set("output.length_unit", "1e-50 kpc"), "output.length_unit", "between 1e-40 and 1e+40 times kpc"),
    (_set("components.gas", {"kind": "gas_disk", "mass": "1e9 Msun", "scale_length": "3 kpc",
                             "temperature": "0 K", "particles": 10}),
     "components.gas.temperature", "must be between 1 and 1e+09 K"),
    (_set("components.gas", {"kind": "gas_disk", "mass": "1e9 Msun", "scale_length": "3 kpc",
                             "temperature": "1e4 K", "adiabatic_index": 2.0, "particles": 10}),
     "components.gas.adiabatic_index", "must be > 1 and at most 1.66667"),
    (_set("components.gas", {"kind": "gas_disk", "mass": "1e9 Msun", "scale_length": "3 kpc",
                             "temperature": "1e4 K", "mean_molecular_weight": 0.1, "particles": 10}),
     "components.gas.mean_molecular_weight", "between 0.5 and 4"),
]  # fmt: skip


@pytest.mark.parametrize("mutate, key, text", BAD_INPUTS)
def test_bad_input_raises_one_line_model_error(mutate, key, text):
    data = default_dict()
    mutate(data)
    with pytest.raises(ModelError) as exc_info:
        spec_from_dict(data)
    assert_one_line_error(exc_info, key)
    assert text in str(exc_info.value)


def test_every_key_has_a_row_with_a_range():
    # one table drives the checks: every key a model file may hold has a row, and every
    # numeric row has a range whose message names it
    keys = set(model.MODEL_KEYS + model.OUTPUT_KEYS + disk.DISK_KEYS + gas_disk.GAS_KEYS
               + point_mass.POINT_MASS_KEYS + spheroid.SPHEROID_COMMON_KEYS)
    keys |= {k for ks in spheroid.PROFILE_KEYS.values() for k in ks}
    assert keys <= set(fields.VALUE_KINDS)
    for key, field in fields.VALUE_KINDS.items():
        if field.kind in ("quantity", "number", "count"):
            assert field.lo is not None and field.hi is not None and field.lo < field.hi, key
        if field.kind == "quantity":
            assert field.rule().endswith(field.unit) and field.astropy_unit is not None, key
    assert fields.VALUE_KINDS["scale_length"].rule() == "must be between 1e-06 and 1e+05 kpc"


def test_taper_width_default_and_limit():
    # default 0.5 scale lengths, raised to 0.1 x taper_radius (the narrowest taper the
    # potential resolves, measured in icgen/spec/disk.py); an explicit narrower one is refused
    disk = DiskSpec("d", 1e10, 3.0, 0.3, taper_radius=8.0, toomre_q=1.2, particles=1)
    assert disk.taper_width == 1.5
    disk = DiskSpec("d", 1e10, 3.0, 0.3, taper_radius=40.0, toomre_q=1.2, toomre_q_radius=7.0,
                    particles=1)
    assert disk.taper_width == 4.0
    with pytest.raises(ModelError, match="at least 0.1 x taper_radius = 4 kpc"):
        DiskSpec("d", 1e10, 3.0, 0.3, taper_radius=40.0, taper_width=3.9, toomre_q=1.2,
                 toomre_q_radius=7.0, particles=1)


def test_nfw_density_scale_gives_the_concentration():
    # rho_s from (c, rho_crit) by the NFW definition (3 rho_s m(c)/c^3 = 200 rho_crit,
    # m(c) = ln(1 + c) - c/(1 + c), computed here by hand) is mapped back to c
    rho_crit = critical_density("Planck18", 0.0)
    for c in (1.5, 10.0, 300.0):
        m = math.log(1 + c) - c / (1 + c)
        rho_s = 200 * rho_crit * c**3 / (3 * m)
        assert spheroid.nfw_concentration(rho_s, rho_crit, "h.") == pytest.approx(c, rel=1e-10)
    with pytest.raises(ModelError, match="concentration r200/r_s, which must be > 1"):
        spheroid.nfw_concentration(1e3, rho_crit, "components.halo.")


def test_particle_mass_may_not_imply_too_many_particles():
    data = default_dict()
    for table in data["components"].values():
        del table["particles"]
    data["model"]["particle_mass"] = "1 Msun"
    with pytest.raises(ModelError) as exc_info:
        spec_from_dict(data)
    assert_one_line_error(exc_info, "model.particle_mass")
    assert "at most 1e+10" in str(exc_info.value)


def test_nfw_needs_one_parameter_set():
    data = default_dict()
    del data["components"]["halo"]["mass"], data["components"]["halo"]["concentration"]
    with pytest.raises(ModelError) as exc_info:
        spec_from_dict(data)
    assert_one_line_error(exc_info, "components.halo.mass")
    data["components"]["halo"].update(density_scale="8e6 Msun/kpc3", scale_radius="20 kpc")
    assert spec_from_dict(data).component("halo").density_scale == 8e6


def test_empty_model_and_particle_mass():
    with pytest.raises(ModelError) as exc_info:
        spec_from_dict({"model": {"name": "x"}})
    assert_one_line_error(exc_info, "components")
    data = default_dict()
    for table in data["components"].values():
        del table["particles"]
    data["model"]["particle_mass"] = "1e5 Msun"
    spec = spec_from_dict(data)
    assert spec.particle_mass == 1e5 and all(c.particles is None for c in spec.components)


def test_defaults_for_absent_model_keys():
    data = default_dict()
    del data["model"], data["output"]
    spec = spec_from_dict(data)
    assert (spec.name, spec.seed, spec.cosmology, spec.redshift) == ("unnamed model", 1, "Planck18", 0.0)
    assert (spec.quiet_start, spec.mirror) == (False, False)
    assert spec.output == OutputSpec()


def test_direct_construction_is_validated():
    with pytest.raises(ModelError) as exc_info:
        DiskSpec("d", 1e10, 1.0, 2.0, toomre_q=1.2, particles=10)
    assert_one_line_error(exc_info, "components.d.scale_height")
    with pytest.raises(ModelError):
        SpheroidSpec("h", "bulge", "plummer", mass=1e10, scale_radius=1.0, core_radius=0.1)
    with pytest.raises(ModelError):
        PointMassSpec("p", -1.0)
    with pytest.raises(ModelError):
        ModelSpec("m", 1, (PointMassSpec("p", 1.0), PointMassSpec("p", 2.0)))


def test_unknown_component_lookup():
    with pytest.raises(ModelError) as exc_info:
        load_spec().component("disc")
    assert "did you mean 'disk'?" in str(exc_info.value)


def test_files(tmp_path):
    good = tmp_path / "model.toml"
    good.write_text(STARTER_TOML)
    assert load_spec(good) == spec_from_toml_text(STARTER_TOML)
    assert load_dict(str(good))["model"]["name"] == "my spiral"
    bad = tmp_path / "bad.toml"
    bad.write_text('[model]\nname = "x"\nseed = 1 2\n')
    with pytest.raises(ModelError) as exc_info:
        load_spec(bad)
    assert_one_line_error(exc_info, str(bad))
    assert "got 'seed = 1 2'; not valid TOML" in str(exc_info.value)
    for path in (tmp_path / "missing.toml", tmp_path):
        with pytest.raises(ModelError) as exc_info:
            load_spec(path)
        assert_one_line_error(exc_info, str(path))
    latin = tmp_path / "latin.toml"
    latin.write_bytes('[model]\nname = "Galaxie à disque"\n'.encode("latin-1"))
    with pytest.raises(ModelError, match="UTF-8"):
        load_spec(latin)


# ---------------------------------------------------------------- fuzzing

KNOWN_KEYS = sorted(fields.VALUE_KINDS) + ["model", "output", "components", "disk", "halo"]
random_keys = st.one_of(st.text(max_size=12), st.sampled_from(KNOWN_KEYS), st.integers(-3, 3))
random_values = st.recursive(
    st.one_of(
        st.text(max_size=20), st.integers(), st.floats(), st.booleans(), st.none(),
        st.sampled_from(["3 kpc", "0.3 kpc", "1e10 Msun", "-1 kpc", "0 kpc", "nan kpc", "1e400 kpc",
                         "200 km/s", "1e7 Msun/kpc3", "disk", "halo", "bulge", "point_mass", "gas_disk",
                         "nfw", "hernquist", "plummer", "burkert", "pseudo_isothermal", "sech2",
                         "exponential", "jeans", "WMAP9", "1e10 Msun", "pc"]),
    ),
    lambda children: st.one_of(st.lists(children, max_size=3), st.dictionaries(random_keys, children, max_size=3)),
    max_leaves=6,
)  # fmt: skip


@st.composite
def mutated_default_dicts(draw):
    """The default model dict after a few random deletions, replacements and additions."""
    data = default_dict()
    for _ in range(draw(st.integers(1, 5))):
        table = data
        while True:  # walk down to a random table
            subtables = [k for k, v in table.items() if isinstance(v, dict)]
            if not subtables or draw(st.booleans()):
                break
            table = table[draw(st.sampled_from(subtables))]
        operation = draw(st.sampled_from(["delete", "replace", "add"]))
        if operation == "add" or not table:
            table[draw(random_keys)] = draw(random_values)
        else:
            key = draw(st.sampled_from(list(table)))
            if operation == "delete":
                del table[key]
            else:
                table[key] = draw(random_values)
    return data


def _load_or_model_error(load, argument):
    """Load; a ModelError must be one line, a success must round-trip through to_toml."""
    try:
        spec = load(argument)
    except ModelError as exc:
        assert "\n" not in str(exc) and "\r" not in str(exc)
        return
    assert spec_from_toml_text(spec.to_toml()) == spec


FUZZ = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])


@FUZZ
@given(mutated_default_dicts())
def test_fuzz_mutated_dicts_raise_only_model_error(data):
    _load_or_model_error(spec_from_dict, copy.deepcopy(data))


@st.composite
def mutated_default_texts(draw):
    """The default model file with random lines deleted, duplicated or inserted."""
    lines = DEFAULT_MODEL_TOML.splitlines()
    for _ in range(draw(st.integers(1, 4))):
        i = draw(st.integers(0, len(lines)))
        operation = draw(st.sampled_from(["delete", "duplicate", "insert", "edit"]))
        if operation == "insert" or i == len(lines):
            key = draw(st.sampled_from(KNOWN_KEYS))
            value = draw(st.sampled_from(["1", "1.5", "true", '"3 kpc"', "[]", "{}", "-1", "nan"]))
            lines.insert(i, draw(st.sampled_from([f"{key} = {value}", f"[{key}]", draw(st.text(max_size=30))])))
        elif operation == "delete":
            del lines[i]
        elif operation == "duplicate":
            lines.insert(i, lines[i])
        else:
            cut = draw(st.integers(0, len(lines[i])))
            lines[i] = lines[i][:cut] + draw(st.text(max_size=8)) + lines[i][cut:]
    return "\n".join(lines) + "\n"


@FUZZ
@given(st.one_of(st.text(), mutated_default_texts()))
def test_fuzz_text_raises_only_model_error(text):
    _load_or_model_error(spec_from_toml_text, text)


@settings(max_examples=50, deadline=None)
@given(st.one_of(st.none(), st.integers(), st.lists(st.text()), st.binary(), random_values))
def test_fuzz_wrong_top_level_types(value):
    if not isinstance(value, dict):
        with pytest.raises(ModelError):
            spec_from_dict(value)
    if not isinstance(value, str):
        with pytest.raises(ModelError):
            spec_from_toml_text(value)
