"""``icgen check``, the rows of the whole galaxy: its frame and centre of mass, the midplane
rotation curve by direct summation, angular momenta, virial ratios and the stored
analytic curve. Units: kpc, km/s, Msun."""
import numpy as np

from ..frame import POSITION_ERROR_FACTOR
from . import measure
from .check_result import row as _row

__all__ = ["centre_rows", "rotation_curve_rows", "angular_momentum_rows", "virial_rows",
           "stored_curve_row", "default_softening", "ring_radii", "RINGS", "AZIMUTHS",
           "MAX_SOURCES"]

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
#: The stored analytic curve must agree with the model rebuilt from the stored config to
#: the accuracy bar of the potential solver, 1e-3 (its measured errors are below 6e-4:
#: DEVELOPERS.md, "How the potential is represented").
STORED_CURVE_TOLERANCE = 1e-3


def centre_rows(parts, frame, n_sigma):
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


def rotation_curve_rows(model, local, radii, opts, n_sigma):
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


def _expected_velocity(model, name, p, pred):
    """Per-particle expected velocity (n, 3) of the component's kinematics
    (``model.kinematics(name).mean_velocity``); for a stellar disk whose moments ``pred``
    are at hand, its mean rotation sqrt(max(vphi2, 0)) e_phi from them."""
    if pred is None:
        return model.kinematics(name).mean_velocity(p["position"], p["velocity"])
    e_phi = measure.phi_unit_vectors(p["position"])
    return np.sqrt(np.maximum(pred["vphi2"], 0.0))[:, None] * e_phi


def angular_momentum_rows(model, local, preds, n_sigma):
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
        testable = p["mass"].size > 1 and not model.kind(name).pressure
        rows.append(_l_row(name, part, testable, n_sigma))
    rows.append(_l_row("total", sums, True, n_sigma))
    return rows


def _l_row(name, part, testable, n_sigma):
    total, expected, var, mass = part
    return _row("angular momentum / M", name, "kpc km/s", [0, 1, 2], total / mass,
                expected / mass, np.sqrt(var) / mass, (var > 0) & testable, n_sigma,
                "sum of m x cross <v> with the model's mean rotation", ["x", "y", "z"])


def virial_rows(model, local, n_sigma):
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


def stored_curve_row(model, curve):
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


def default_softening(model):
    """Plummer softening (kpc) of the direct sum: SOFTENING_FRACTION of the thinnest disk
    scale height, or of the smallest spheroid scale radius (see SOFTENING_FRACTION)."""
    scales = [d.z_d for d in model.disks + model.gas_disks]
    scales += [c.scale for n, c in model.components.items() if model.kind(n).spheroid]
    return SOFTENING_FRACTION * min(scales) if scales else 0.01


def ring_radii(model, softening, n=RINGS):
    """Ring radii (kpc) of the measured rotation curve."""
    from .curve import default_radii, reference_scale_length
    r_d = reference_scale_length(model)
    lo, hi = ((RING_RANGE[0] * r_d, RING_RANGE[1] * r_d) if r_d
              else (default_radii(model)[-1] / 50, default_radii(model)[-1]))
    return np.geomspace(max(lo, RING_SOFTENINGS * softening), hi, n)
