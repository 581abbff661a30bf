"""``icgen check``: measure a snapshot's particles and compare every figure with the model.

Each measured quantity (in radial bins, or a single number) is set against the prediction
of the model stored in the snapshot, with a tolerance of ``n_sigma`` standard errors of
that bin (particle noise: see :mod:`icgen.diagnostics.measure`). A row passes when every
tested bin does. Predictions:

- midplane rotation curve: the analytic v_c^2 = R dPhi/dR of each component and the total;
- densities: the expected mass of each bin, integral of the profile over the bin;
  noise binomial, m sqrt(N p (1 - p)) for the bin's mass fraction p;
- disk velocity moments: the Jeans moments of icgen.sampling.disk_velocities evaluated at
  each particle and pooled over the bin (so a bin's spread of mean rotation enters
  sigma_phi as it does in the measurement);
- spheroid moments: sigma_r^2 from the spherical Jeans equation in the spherically
  averaged total potential with the Osipkov-Merritt beta = r^2/(r^2 + r_a^2) (Binney &
  Tremaine 2008, eq. 4.215; equal to the second moment of the Eddington or
  Osipkov-Merritt DF), from icgen.sampling.spheroid_velocities;
- gas disks: surface density, the vertical profile of the hydrostatic layer at each annulus,
  the pressure-supported rotation of icgen.sampling.gas and
  the internal energy c_s^2/(gamma - 1) of the isothermal gas;
- Toomre Q = sigma_R kappa / (3.36 G Sigma) (Toomre 1964, ApJ 139, 1217) with measured and
  predicted sigma_R and Sigma;
- centre, centre of mass, net momentum: zero within the noise of a mass-weighted mean;
  net angular momentum: that of the predicted mean rotation;
- virial ratio 2T/|W| = 1 for each component and the total, W = sum m x.F with the
  model's force (Clausius virial; Binney & Tremaine 2008, sec. 4.8, from memory): a steady state
  in a fixed potential satisfies it component by component.

Units inside: kpc, km/s, Msun.
"""
import time

import numpy as np
from scipy import integrate, optimize

from ..errors import MISSING, ModelError
from ..frame import POSITION_ERROR_FACTOR, galaxy_frame
from . import measure
from .check_result import CheckResult, row as _row, write_outputs
from .stability import toomre_q

__all__ = ["N_SIGMA", "check_snapshot", "check_particles", "read_particles", "write_outputs",
           "CheckResult", "default_softening", "ring_radii"]

#: Default tolerance, in standard errors of each bin. With ~500 bins in a check, Gaussian
#: noise exceeds 5 sigma somewhere with probability ~3e-4; 4.5 sigma would give 3e-3.
N_SIGMA = 5.0
#: Bins with fewer particles are shown but not tested: the normal approximation of a
#: dispersion's error needs some tens of particles (and these bins are few).
MIN_BIN_PARTICLES = 100
#: Counted bins (densities, vertical profile) are tested where at least this many
#: particles are expected: the binomial tail beyond 5 sigma is then ~1e-5, near the
#: Gaussian value.
MIN_EXPECTED_COUNT = 30
#: Radial bins per profile: log-spaced between the radii holding these fractions of the
#: component's mass (0.1 % inner edge for spheroids, to see a cusp).
RADIAL_BINS = 12
DISK_MASS_RANGE = (0.03, 0.97)
SPHEROID_MASS_RANGE = (1e-3, 0.97)
#: Expected particles in the innermost spheroid bin, at least.
INNER_BIN_PARTICLES = 300
#: Vertical profile: four annuli of 20 % of the disk mass each (inner and outer 10 %
#: left out) and |z| bins at these cumulative fractions of the vertical law.
VERTICAL_ANNULI = (0.1, 0.3, 0.5, 0.7, 0.9)
VERTICAL_FRACTIONS = (0.0, 0.2, 0.4, 0.6, 0.8, 0.9, 0.97, 1.0)
#: Rotation curve: rings between RING_RANGE disk scale lengths (the stored analytic curve
#: reaches 10 R_d), and at least RING_SOFTENINGS softening lengths out. Plummer softening
#: lowers v_c^2 of a cusp by more than (eps/R)^2: for the Hernquist bulge of the default
#: model (a = 0.6 kpc) at R = 20 eps the softened-shell integral gives -1.1 % for
#: eps = 0.03 kpc and -0.15 % for eps = 0.01 kpc (the noise of 1e5 bulge particles there
#: is ~0.6 %), so the default softening is a thirtieth of the smallest scale.
RINGS = 16
RING_RANGE = (0.2, 10.0)
RING_SOFTENINGS = 20.0
AZIMUTHS = 32
#: Default softening as a fraction of the thinnest disk scale height (or of the smallest
#: spheroid scale radius): the noise of the direct sum grows as softening^-1/2 (close
#: encounters), the bias as softening^2.
SOFTENING_FRACTION = 1.0 / 30.0
#: Direct-summation sources per component; beyond it a random subsample with masses
#: scaled up (noise included in the errors). 2.5e5 keeps 1e6 particles at ~1 s.
MAX_SOURCES = 250_000
#: Gas internal energy is set, not sampled: float32 storage rounds it to 6e-8 relative.
GAS_ENERGY_TOLERANCE = 1e-5
#: The stored analytic curve must agree with the model rebuilt from the stored config to
#: the accuracy bar of the potential solver, 1e-3 (its measured errors are below 6e-4:
#: DEVELOPERS.md, "How the potential is represented").
STORED_CURVE_TOLERANCE = 1e-3


# ------------------------------------------------------------------ bins from the model


def _disk_cumulative(disk):
    """R -> M(<R)/M (vectorised) of an exponential disk, by quadrature (any taper)."""
    dm = lambda R: 2 * np.pi * R * disk.surface_density(R)
    one = lambda R: integrate.quad(dm, 0.0, R, limit=200, epsrel=1e-10)[0] / disk.total_mass
    return np.vectorize(one, otypes=[float])


def _spheroid_cumulative(comp):
    """r -> M(<r)/M(<extent): the sampler draws radii out to the component's extent."""
    top = float(comp.enclosed_mass(np.array([comp.extent]))[0])
    return lambda r: np.asarray(comp.enclosed_mass(np.atleast_1d(r)), float) / top


def _radii_at(cum, fractions, r_lo, r_hi):
    """Radii (kpc) where the cumulative mass fraction ``cum(r)`` reaches ``fractions``."""
    g = lambda lr, f: float(np.ravel(cum(np.exp(lr)))[0]) - f
    return np.array([np.exp(optimize.brentq(g, np.log(r_lo), np.log(r_hi), args=(f,),
                                            xtol=1e-10)) for f in fractions])


def _density_row(quantity, name, unit, centres, measured_mass, fraction, size, total, count,
                 n_sigma, source):
    """Mass per bin size against the expected mass; binomial error under the model."""
    m_bar = total / count
    error = m_bar * np.sqrt(count * fraction * (1 - fraction)) / size
    tested = count * fraction >= MIN_EXPECTED_COUNT
    return _row(quantity, name, unit, centres, measured_mass / size, total * fraction / size,
                error, tested, n_sigma, source)


# ------------------------------------------------------------------ rows


def _centre_rows(parts, frame, n_sigma):
    """Where the galaxy is in the file (its frame, icgen.frame: shown, not tested, since a
    displaced or moving galaxy is no error), and the centre of mass against the galaxy's
    centre, within the noise of a mass-weighted mean of the particles and of the centre's
    estimate (its standard error times frame.POSITION_ERROR_FACTOR). The frame's velocity
    is the particles' mean velocity itself, so it has no row of its own to test."""
    cat = lambda key: np.concatenate([p[key] for p in parts.values()])
    x_cm, ex = measure.weighted_mean(cat("position"), cat("mass"))
    ex = np.hypot(ex, POSITION_ERROR_FACTOR * frame.position_error)
    xyz = ["x", "y", "z"]
    shown = "the galaxy's centre in the file; every other row is measured about it"
    return [_row("galaxy centre", "all", "kpc", [0, 1, 2], frame.position, np.zeros(3),
                 frame.position_error, np.zeros(3, bool), n_sigma, shown, xyz),
            _row("galaxy velocity", "all", "km/s", [0, 1, 2], frame.velocity, np.zeros(3),
                 frame.velocity_error, np.zeros(3, bool), n_sigma, shown, xyz),
            _row("centre of mass", "all", "kpc", [0, 1, 2], x_cm, frame.position, ex, ex > 0,
                 n_sigma, "the galaxy's centre within the noise of the particles' mean and "
                          "the centre's", xyz)]


def _rotation_curve_rows(model, local, radii, opts, n_sigma):
    rng = np.random.default_rng(opts["seed"])
    rows, tot, var = [], 0.0, 0.0
    for name, p in local.items():
        v2, err = measure.midplane_v2(p["position"], p["mass"], radii, opts["softening"],
                                      opts["azimuths"], opts["max_sources"], rng)
        tot, var = tot + v2, var + err**2
        tested = (err > 0) & (p["mass"].size > 1)
        rows.append(_curve_row(name, radii, v2, err, model.circular_speed(radii, name),
                               tested, n_sigma))
    rows.append(_curve_row("total", radii, tot, np.sqrt(var), model.circular_speed(radii),
                           np.ones(radii.size, bool), n_sigma))
    return rows


def _curve_row(name, radii, v2, err, v_model, tested, n_sigma):
    """v_c row: v = sign(v^2) sqrt|v^2| shown, but the deviation is that of v^2 (the
    quantity the sum estimates, with a symmetric error): the error of v is err(v^2) times
    the secant slope |v - v_model| / |v^2 - v_model^2|, which is err / (v + v_model) for
    positive speeds and stays right when a noisy v^2 < 0."""
    v = np.sign(v2) * np.sqrt(np.abs(v2))
    v2_model = np.sign(v_model) * v_model**2
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.abs(v - v_model) / np.abs(v2 - v2_model)
        slope = np.where(np.isfinite(slope) & (slope > 0), slope, 0.5 / np.abs(v))
    ev = err * slope
    return _row("v_c midplane", name, "km/s", radii, v, v_model, ev, tested & np.isfinite(ev),
                n_sigma, "analytic v_c^2 = R dPhi/dR at z = 0 (direct-summation force)")


def _annuli(disk, name, R, mass, n_sigma):
    """Surface-density row of a (stellar or gas) disk and its bins:
    (row, bin index of each particle, bin centres, cumulative mass fraction R -> M(<R)/M)."""
    nb = RADIAL_BINS
    cum = _disk_cumulative(disk)
    edges = np.geomspace(*_radii_at(cum, DISK_MASS_RANGE, 1e-6 * disk.R_d, disk.extent), nb + 1)
    idx = measure.bin_index(R, edges)
    centres = np.sqrt(edges[:-1] * edges[1:])
    area = np.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
    row = _density_row("surface density", name, "Msun/kpc2", centres,
                       measure.binned_sum(idx, mass, nb), np.diff(cum(edges)), area,
                       disk.total_mass, mass.size, n_sigma,
                       "exponential Sigma(R) integrated over the annulus")
    return row, idx, centres, cum


def _disk_rows(model, name, p, pred, n_sigma):
    """Surface density, vertical profile, kinematics and Q of one stellar disk."""
    disk, nb = model.components[name], RADIAL_BINS
    R, z, v_R, v_phi, v_z = measure.cylindrical(p["position"], p["velocity"])
    density, idx, centres, cum = _annuli(disk, name, R, p["mass"], n_sigma)
    rows = [density, _vertical_row(disk, name, R, z, _radii_at(
        cum, VERTICAL_ANNULI, 1e-6 * disk.R_d, disk.extent), n_sigma)]
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    avg = lambda a: measure.binned_average(a, idx, nb)
    vbar = np.sqrt(np.maximum(pred["vphi2"], 0.0))
    mean, e_mean = measure.binned_mean(v_phi, idx, nb)
    jeans = "Jeans moments of the disk sampler, pooled over the bin's particles"
    rows.append(_row("mean v_phi", name, "km/s", centres, mean, avg(vbar), e_mean, tested,
                     n_sigma, jeans))
    spread = avg(vbar**2) - avg(vbar) ** 2
    predicted = {"sigma_R": avg(pred["sigma_R2"]), "sigma_phi": avg(pred["sigma_phi2"]) + spread,
                 "sigma_z": avg(pred["sigma_z2"])}
    sig_R = None
    for key, values in (("sigma_R", v_R), ("sigma_phi", v_phi), ("sigma_z", v_z)):
        s, e = measure.binned_dispersion(values, idx, nb)
        sig_R = (s, e) if key == "sigma_R" else sig_R
        rows.append(_row(key, name, "km/s", centres, s, np.sqrt(predicted[key]), e, tested,
                         n_sigma, jeans))
    rows.append(_q_row(model, name, centres, sig_R, np.sqrt(predicted["sigma_R"]),
                       density, tested, n_sigma))
    return rows


def _gas_rows(model, name, p, n_sigma):
    """Surface density, vertical profile, mean rotation and internal energy of one
    isothermal gas disk."""
    from ..sampling.gas import gas_rotation
    gas, nb = model.components[name], RADIAL_BINS
    R, z, _, v_phi, _ = measure.cylindrical(p["position"], p["velocity"])
    density, idx, centres, cum = _annuli(gas, name, R, p["mass"], n_sigma)
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    mean, e_mean = measure.binned_mean(v_phi, idx, nb)
    v_pred = measure.binned_average(gas_rotation(gas, model.potential, R, z)[0], idx, nb)
    vertical = _vertical_row(gas, name, R, z, _radii_at(cum, VERTICAL_ANNULI, 1e-6 * gas.R_d,
                                                        gas.extent), n_sigma)
    rows = [density, vertical, _row("mean v_phi", name, "km/s", centres, mean, v_pred, e_mean, tested,
                          n_sigma, "v_phi^2 = R dPhi/dR + (R/rho) dP/dR of the sampler, pooled")]
    if "internal_energy" in p:
        u_pred = np.full(nb, gas.cs**2 / (gas.gamma - 1))
        u = measure.binned_average(p["internal_energy"], idx, nb)
        rows.append(_row("internal energy", name, "(km/s)^2", centres, u, u_pred,
                         GAS_ENERGY_TOLERANCE * u_pred, tested, 1.0,
                         f"c_s^2/(gamma - 1); relative tolerance {GAS_ENERGY_TOLERANCE:g}"))
    return rows


def _q_row(model, name, centres, sig_R, sig_R_pred, density, tested, n_sigma):
    """Toomre Q from the measured sigma_R and Sigma against the predicted ones."""
    kappa = model.potential.kappa(centres)
    s, e_s = sig_R
    sig_m, sig_p, e_sig = (np.asarray(a) for a in (density.measured, density.predicted,
                                                     density.error))
    q = toomre_q(s, kappa, sig_m)
    q_pred = toomre_q(sig_R_pred, kappa, sig_p)
    err = q * np.sqrt((e_s / s) ** 2 + (e_sig / sig_m) ** 2)
    return _row("Toomre Q", name, "", centres, q, q_pred, err, tested, n_sigma,
                "Q = sigma_R kappa / (3.36 G Sigma), Toomre 1964; model kappa")


def _gas_column_cdf(gas, R, z_edges):
    """Fraction of the hydrostatic gas column at R (kpc) below each |z| edge."""
    zz = np.concatenate([[0.0], np.geomspace(1e-4 * gas.z_d, gas.extent, 4000)])
    cum = integrate.cumulative_trapezoid(gas.density(np.full_like(zz, R), zz), zz, initial=0)
    return np.interp(z_edges, zz, cum / cum[-1], right=1.0)


def _gas_vertical_law(gas, R_in, lo, hi):
    """(|z| edges, expected fractions) of the gas in annulus [lo, hi): edges at the
    VERTICAL_FRACTIONS of the column at sqrt(lo hi); expected fractions averaged over the
    particles' radii, since the layer flares across the annulus."""
    zz = np.concatenate([[0.0], np.geomspace(1e-4 * gas.z_d, gas.extent, 4000)])
    mid = _gas_column_cdf(gas, np.sqrt(lo * hi), zz)
    edges = np.interp(VERTICAL_FRACTIONS, mid, zz)
    edges[-1] = np.inf
    nodes = np.linspace(lo, hi, 12)
    table = np.array([np.diff(_gas_column_cdf(gas, r, edges)) for r in nodes])
    if R_in.size == 0:
        return edges, np.diff(VERTICAL_FRACTIONS)
    frac = np.array([np.interp(R_in, nodes, table[:, k]).mean() for k in range(table.shape[1])])
    return edges, frac


def _vertical_row(disk, name, R, z, annuli, n_sigma):
    """|z| distribution in the annuli (edges ``annuli``, kpc) against the vertical law
    (shape only: the expected counts are the annulus count times the law's fraction);
    for a gas disk the law is the hydrostatic column at the annulus."""
    from ..profiles.disk import SECH2
    f = np.asarray(VERTICAL_FRACTIONS)
    if disk.kind != "gas_disk":
        with np.errstate(divide="ignore"):
            z_edges = (disk.z_d * np.arctanh(f) if disk.vertical == SECH2
                       else -disk.z_d * np.log1p(-f))
    az = np.abs(z)
    x, meas, pred, err, tested, labels = [], [], [], [], [], []
    for lo, hi in zip(annuli[:-1], annuli[1:]):
        inside = (R >= lo) & (R < hi)
        sel = az[inside]
        n_a = sel.size
        df = np.diff(f)
        if disk.kind == "gas_disk":
            z_edges, df = _gas_vertical_law(disk, R[inside], lo, hi)
        got = np.histogram(sel, bins=z_edges)[0] / max(n_a, 1)
        x += list(0.5 * (z_edges[:-1] + np.minimum(z_edges[1:], 2 * z_edges[-2])))
        meas += list(got)
        pred += list(df)
        err += list(np.sqrt(df * (1 - df) / max(n_a, 1)))
        tested += list(n_a * df >= MIN_EXPECTED_COUNT)
        labels += [f"R {lo:.1f}-{hi:.1f}, |z| {a:.2f}-{b:.2f}" for a, b in
                   zip(z_edges[:-1], z_edges[1:])]
    return _row("vertical profile", name, "fraction", x, meas, pred, err, tested, n_sigma,
                "fraction of the annulus in each |z| bin of the vertical law", labels)


def _spheroid_rows(model, name, p, sigma_r2, n_sigma):
    """Density, sigma_r, sigma_theta, sigma_phi and beta of one halo or bulge.

    Dispersions are root mean squares about zero: a spheroid has no mean streaming in
    r or theta, and retrograde_flip_fraction (reversing v_phi of some orbits) keeps <v_phi^2>.
    """
    comp, spec, nb = model.components[name], model.spec.component(name), RADIAL_BINS
    r, v_r, v_th, v_ph = measure.spherical(p["position"], p["velocity"])
    count = p["mass"].size
    cum = _spheroid_cumulative(comp)
    f_lo = min(max(SPHEROID_MASS_RANGE[0], INNER_BIN_PARTICLES / count),
               0.5 * SPHEROID_MASS_RANGE[1])
    edges = np.geomspace(*_radii_at(cum, (f_lo, SPHEROID_MASS_RANGE[1]), 1e-8 * comp.scale,
                                    comp.extent), nb + 1)
    idx = measure.bin_index(r, edges)
    centres = np.sqrt(edges[:-1] * edges[1:])
    frac = np.diff(cum(edges))
    volume = 4 / 3 * np.pi * (edges[1:] ** 3 - edges[:-1] ** 3)
    mass = measure.binned_sum(idx, p["mass"], nb)
    rows = [_density_row("density", name, "Msun/kpc3", centres, mass, frac, volume,
                         comp.total_mass, count, n_sigma,
                         "profile mass in the shell, over the shell volume")]
    r_a = spec.anisotropy_radius or np.inf
    s2_r = sigma_r2(r)
    s2_t = s2_r * (1 - r**2 / (r**2 + r_a**2))     # Osipkov-Merritt beta
    avg = lambda a: measure.binned_average(a, idx, nb)
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    jeans = "spherical Jeans sigma_r^2 in the averaged total potential, pooled over the bin"
    for key, v, pred in (("sigma_r", v_r, s2_r), ("sigma_theta", v_th, s2_t),
                         ("sigma_phi", v_ph, s2_t)):
        s, e = measure.binned_dispersion(v, idx, nb, about_zero=True)
        rows.append(_row(key, name, "km/s", centres, s, np.sqrt(avg(pred)), e, tested,
                         n_sigma, jeans))
    ratio, err = measure.binned_ratio(0.5 * (v_th**2 + v_ph**2), v_r**2, idx, nb)
    rows.append(_row("beta", name, "", centres, 1 - ratio, 1 - avg(s2_t) / avg(s2_r), err,
                     tested, n_sigma, "anisotropy 1 - sigma_t^2/(2 sigma_r^2); " + jeans))
    return rows


def _spheroid_sigma_r2(model):
    """name -> callable r -> sigma_r^2 (km/s)^2 of every halo and bulge (Jeans, in the
    spherically averaged total potential, as icgen.sampling tabulates it)."""
    from ..sampling.spheroid_velocities import (TABLE_INNER_FRACTION, TABLE_OUTER_FACTOR,
                                                jeans_sigma_r2, radial_table)
    spheroids = {n: c for n, c in model.components.items() if c.kind in ("halo", "bulge")}
    if not spheroids:
        return {}
    table = radial_table(model.potential,
                         TABLE_INNER_FRACTION * min(c.scale for c in spheroids.values()),
                         TABLE_OUTER_FACTOR * max(c.extent for c in spheroids.values()))
    out = {}
    for name, comp in spheroids.items():
        r_a = model.spec.component(name).anisotropy_radius or np.inf
        s2 = jeans_sigma_r2(table, comp.density_r, r_a)
        out[name] = (lambda s2: lambda r: np.interp(np.log(r), table.x, s2))(s2)
    return out


def _expected_velocity(model, name, p, pred):
    """Per-particle expected velocity (n, 3): the mean rotation times e_phi for a stellar
    disk (Jeans) or a gas disk (pressure-supported); f |v_phi| e_phi for a spheroid (flipping
    retrograde orbits with probability f = retrograde_flip_fraction makes
    E[v_phi | |v_phi|] = f |v_phi|); zero for a point mass."""
    e_phi = measure.phi_unit_vectors(p["position"])
    kind = model.components[name].kind
    if kind == "disk":
        return np.sqrt(np.maximum(pred["vphi2"], 0.0))[:, None] * e_phi
    if kind == "gas_disk":
        from ..sampling.gas import gas_rotation
        x = p["position"]
        v = gas_rotation(model.components[name], model.potential, np.hypot(x[:, 0], x[:, 1]),
                         x[:, 2])[0]
        return v[:, None] * e_phi
    if kind in ("halo", "bulge"):
        v_phi = np.einsum("ij,ij->i", p["velocity"], e_phi)
        flip = model.spec.component(name).retrograde_flip_fraction
        return (flip * np.abs(v_phi))[:, None] * e_phi
    return np.zeros_like(p["velocity"])


def _angular_momentum_rows(model, local, preds, n_sigma):
    """Angular momentum per unit mass (kpc km/s) of each component and in total, against
    that of the predicted mean velocities (per component: the far halo's noise would hide
    the disk's)."""
    rows, sums = [], np.zeros((4, 3))
    for name, p in local.items():
        expected = _expected_velocity(model, name, p, preds.get(name))
        part = np.array([*measure.angular_momentum_sums(p["position"], p["velocity"],
                                                        p["mass"], expected),
                         np.full(3, p["mass"].sum())])
        sums += part
        # cold gas has no velocity noise (its velocities follow from the positions): the
        # centre's own uncertainty would dominate, so its rotation is tested per bin instead
        testable = p["mass"].size > 1 and model.components[name].kind != "gas_disk"
        rows.append(_l_row(name, part, testable, n_sigma))
    rows.append(_l_row("total", sums, True, n_sigma))
    return rows


def _l_row(name, part, testable, n_sigma):
    total, expected, var, mass = part
    return _row("angular momentum / M", name, "kpc km/s", [0, 1, 2], total / mass,
                expected / mass, np.sqrt(var) / mass, (var > 0) & testable, n_sigma,
                "sum of m x cross <v> with the model's mean rotation", ["x", "y", "z"])


def _virial_rows(model, local, n_sigma):
    """2T/|W| per component and in total, W = sum m x.F with the model's force; for gas
    2T + 3 int P dV (scalar virial theorem with a pressure term; Binney & Tremaine 2008,
    sec. 4.8, from memory)."""
    rows, terms = [], []
    note = "steady state: 2T + W = 0 (Clausius virial, model force)"
    for name, p in local.items():
        x = p["position"]
        _, f_R, f_z = model.potential.evaluate(np.hypot(x[:, 0], x[:, 1]), x[:, 2])
        a, b = measure.virial_terms(x, p["velocity"], p["mass"], f_R, f_z)
        if "internal_energy" in p:      # gas: 2T + 3 int P dV + W = 0, P/rho = (gamma-1) u
            a = a + 3 * (model.components[name].gamma - 1) * p["mass"] * p["internal_energy"]
        terms.append((a, b))
        ratio, err = measure.ratio_of_sums(*terms[-1])
        rows.append(_row("virial 2T/|W|", name, "", [0], ratio, 1.0, err,
                         p["mass"].size > 1 and err > 0, n_sigma, note, ["-"]))
    ratio, err = measure.ratio_of_sums(*(np.concatenate(t) for t in zip(*terms)))
    rows.append(_row("virial 2T/|W|", "total", "", [0], ratio, 1.0, err, True, n_sigma,
                     note, ["-"]))
    return rows


def _disk_predictions(model, name, p):
    """Jeans moments of the disk sampler at each particle (dict of (n,) arrays)."""
    from ..sampling.disk_velocities import DiskVelocities
    vel = DiskVelocities(model.components[name], model.spec.component(name), model.potential)
    x = p["position"]
    return vel.moments(np.hypot(x[:, 0], x[:, 1]), x[:, 2])


def default_softening(model):
    """Plummer softening (kpc) of the direct sum: SOFTENING_FRACTION of the thinnest disk
    scale height, or of the smallest spheroid scale radius (see SOFTENING_FRACTION)."""
    scales = [d.z_d for d in model.disks + model.gas_disks]
    scales += [c.scale for c in model.components.values() if c.kind in ("halo", "bulge")]
    return SOFTENING_FRACTION * min(scales) if scales else 0.01


def ring_radii(model, softening, n=RINGS):
    """Ring radii (kpc) of the measured rotation curve."""
    from .curve import default_radii, reference_scale_length
    r_d = reference_scale_length(model)
    lo, hi = ((RING_RANGE[0] * r_d, RING_RANGE[1] * r_d) if r_d
              else (default_radii(model)[-1] / 50, default_radii(model)[-1]))
    return np.geomspace(max(lo, RING_SOFTENINGS * softening), hi, n)


# ------------------------------------------------------------------ entry points


def check_particles(model, parts, n_sigma=N_SIGMA, softening=None, azimuths=AZIMUTHS,
                    max_sources=MAX_SOURCES, seed=0, path=None):
    """Compare particles with their model; returns a CheckResult.

    Parameters
    ----------
    model : MassModel
    parts : dict
        name -> {"position" (N, 3) kpc, "velocity" (N, 3) km/s, "mass" (N,) Msun, and for
        gas "internal_energy" (N,) (km/s)^2}, one entry per model component (e.g.
        ``icgen.sampling.sample(model)``).
    n_sigma : float
        Tolerance in standard errors of each bin.
    softening : float, optional
        Plummer softening of the direct sum, kpc (default: :func:`default_softening`).
    azimuths, max_sources, seed :
        Test points per ring; sources per component before subsampling; seed of the
        subsample.
    """
    if set(parts) != set(model.components):
        raise ModelError(str(path or "particles"), MISSING,
                         f"particle groups {sorted(parts)} do not match the model's "
                         f"components {sorted(model.components)}")
    softening = default_softening(model) if softening is None else float(softening)
    opts = {"softening": softening, "azimuths": int(azimuths),
            "max_sources": None if max_sources is None else int(max_sources), "seed": seed}
    keys = ("position", "velocity", "mass", "internal_energy")
    parts = {n: {k: np.asarray(parts[n][k], np.float64) for k in keys if k in parts[n]}
             for n in model.components}
    timing = {}
    frame = _timed(timing, "frame", lambda: galaxy_frame(parts, model.spec.seed))
    res = CheckResult(model.name, None if path is None else str(path), float(n_sigma),
                      {n: int(p["mass"].size) for n, p in parts.items()},
                      {n: c.kind for n, c in model.components.items()},
                      frame.as_dict(), opts, timing=timing)
    res.rows += _centre_rows(parts, frame, n_sigma)
    local = frame.to_galaxy(parts)
    res.rows += _timed(timing, "rotation curve", lambda: _rotation_curve_rows(
        model, local, ring_radii(model, softening), opts, n_sigma))
    preds = _timed(timing, "disk moments", lambda: {
        d.name: _disk_predictions(model, d.name, local[d.name]) for d in model.disks})
    res.rows += _timed(timing, "disks", lambda: [
        r for d in model.disks for r in _disk_rows(model, d.name, local[d.name], preds[d.name],
                                                   n_sigma)])
    res.rows += _timed(timing, "gas", lambda: [
        r for g in model.gas_disks for r in _gas_rows(model, g.name, local[g.name], n_sigma)])
    res.rows += _timed(timing, "spheroids", lambda: [
        r for name, sigma_r2 in _spheroid_sigma_r2(model).items()
        for r in _spheroid_rows(model, name, local[name], sigma_r2, n_sigma)])
    res.rows += _timed(timing, "angular momentum, virial", lambda: (
        _angular_momentum_rows(model, local, preds, n_sigma) + _virial_rows(model, local, n_sigma)))
    return res


def _timed(timing, label, fn):
    """fn(), with its wall time (s) stored in timing[label]."""
    t0 = time.perf_counter()
    out = fn()
    timing[label] = time.perf_counter() - t0
    return out


def read_particles(path):
    """(MassModel, parts, stored analytic curve) of a snapshot, in internal units, as
    stored (check_particles finds the galaxy's frame); the file is validated as it is read
    (icgen.snapshot)."""
    from ..model import MassModel
    from ..snapshot import open_snapshot
    with open_snapshot(path) as snap:
        parts = {name: snap.read_internal(name) for name in snap.components}
        curve = snap.read_curve_internal()
        spec = snap.spec
    return MassModel(spec), parts, curve


def _stored_curve_row(model, curve):
    """The snapshot's analytic curve against the model rebuilt from its config."""
    R = curve["radius"]
    keep = R > 0
    meas, pred, labels, x = [], [], [], []
    for name in ["total"] + list(model.components):
        key = f"v_circ_{name}"
        if key not in curve:
            continue
        v = model.circular_speed(R[keep], None if name == "total" else name)
        meas += list(curve[key][keep])
        pred += list(v)
        x += list(R[keep])
        labels += [f"{name} R={r:.3g}" for r in R[keep]]
    pred = np.asarray(pred)
    err = STORED_CURVE_TOLERANCE * np.maximum(np.abs(pred), 1.0)
    return _row("stored analytic curve", "all", "km/s", x, meas, pred, err,
                np.ones(pred.size, bool), 1.0,
                f"model rebuilt from the stored config; relative tolerance "
                f"{STORED_CURVE_TOLERANCE:g} (potential accuracy bar)", labels)


def check_snapshot(path, **options):
    """Read an icgen snapshot and check it against its stored model (CheckResult).

    ``options`` are those of :func:`check_particles`.
    """
    t0 = time.perf_counter()
    model, parts, curve = read_particles(path)
    t_read = time.perf_counter() - t0
    res = check_particles(model, parts, path=path, **options)
    if curve:
        res.rows.insert(0, _stored_curve_row(model, curve))
    res.timing = {"read + model": t_read, **res.timing}
    return res
