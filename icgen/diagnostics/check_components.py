"""``icgen check``, the rows of each component's profile: densities, vertical profiles,
velocity moments and Toomre Q of stellar disks, gas disks and spheroids, against the
model's profiles and the moments ``model.kinematics(name)`` recomputes independently of
the samplers (icgen.kinds). Units: kpc, km/s, Msun."""
import numpy as np
from scipy import integrate, optimize

from ..profiles.disk import SECH2
from . import measure
from .check_result import row as _row
from .stability import toomre_q

__all__ = ["RADIAL_BINS", "disk_rows", "gas_rows", "spheroid_rows"]

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
#: Gas internal energy is set, not sampled: float32 storage rounds it to 6e-8 relative.
GAS_ENERGY_TOLERANCE = 1e-5

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


def disk_rows(model, name, p, pred, n_sigma):
    """Surface density, vertical profile, kinematics and Q of one stellar disk; ``pred``
    are its moments at the particles (``model.kinematics(name).moments``)."""
    disk, nb = model.components[name], RADIAL_BINS
    R, z, v_R, v_phi, v_z = measure.cylindrical(p["position"], p["velocity"])
    density, idx, centres, cum = _annuli(disk, name, R, p["mass"], n_sigma)
    rows = [density, _vertical_row(disk, name, R, z, _radii_at(
        cum, VERTICAL_ANNULI, 1e-6 * disk.R_d, disk.extent), False, n_sigma)]
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    avg = lambda a: measure.binned_average(a, idx, nb)
    vbar = np.sqrt(np.maximum(pred["vphi2"], 0.0))
    mean, e_mean = measure.binned_mean(v_phi, idx, nb)
    jeans = ("moments of the disk's velocity method, recomputed apart from its sampler "
             "(model.kinematics), pooled over the bin's particles")
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


def gas_rows(model, name, p, n_sigma):
    """Surface density, vertical profile, mean rotation and internal energy of one
    isothermal gas disk."""
    gas, nb, kin = model.components[name], RADIAL_BINS, model.kinematics(name)
    R, z, _, v_phi, _ = measure.cylindrical(p["position"], p["velocity"])
    density, idx, centres, cum = _annuli(gas, name, R, p["mass"], n_sigma)
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    mean, e_mean = measure.binned_mean(v_phi, idx, nb)
    v_pred = measure.binned_average(kin.mean_vphi(R, z), idx, nb)
    vertical = _vertical_row(gas, name, R, z, _radii_at(cum, VERTICAL_ANNULI, 1e-6 * gas.R_d,
                                                        gas.extent), True, n_sigma)
    rows = [density, vertical, _row("mean v_phi", name, "km/s", centres, mean, v_pred, e_mean,
                                    tested, n_sigma, "v_phi^2 = R dPhi/dR + (R/rho) dP/dR "
                                    "(model.kinematics), pooled")]
    if "internal_energy" in p:
        u_pred = np.full(nb, kin.internal_energy)
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


def _vertical_row(disk, name, R, z, annuli, gas, n_sigma):
    """|z| distribution in the annuli (edges ``annuli``, kpc) against the vertical law
    (shape only: the expected counts are the annulus count times the law's fraction);
    for a gas disk (``gas``) the law is the hydrostatic column at the annulus."""
    f = np.asarray(VERTICAL_FRACTIONS)
    if not gas:
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
        if gas:
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


def spheroid_rows(model, name, p, n_sigma):
    """Density, sigma_r, sigma_theta, sigma_phi and beta of one halo or bulge.

    Dispersions are root mean squares about zero: a spheroid has no mean streaming in
    r or theta, and retrograde_flip_fraction (reversing v_phi of some orbits) keeps <v_phi^2>.
    """
    comp, nb = model.components[name], RADIAL_BINS
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
    s2_r, s2_t = model.kinematics(name).sigma2(r)        # Osipkov-Merritt beta
    avg = lambda a: measure.binned_average(a, idx, nb)
    tested = measure.counts(idx, nb) >= MIN_BIN_PARTICLES
    jeans = ("spherical Jeans sigma_r^2 in the averaged total potential (model.kinematics), "
             "pooled over the bin")
    for key, v, pred in (("sigma_r", v_r, s2_r), ("sigma_theta", v_th, s2_t),
                         ("sigma_phi", v_ph, s2_t)):
        s, e = measure.binned_dispersion(v, idx, nb, about_zero=True)
        rows.append(_row(key, name, "km/s", centres, s, np.sqrt(avg(pred)), e, tested,
                         n_sigma, jeans))
    ratio, err = measure.binned_ratio(0.5 * (v_th**2 + v_ph**2), v_r**2, idx, nb)
    rows.append(_row("beta", name, "", centres, 1 - ratio, 1 - avg(s2_t) / avg(s2_r), err,
                     tested, n_sigma, "anisotropy 1 - sigma_t^2/(2 sigma_r^2); " + jeans))
    return rows
