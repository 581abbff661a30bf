"""Stability and resolution numbers of a model, before any particle is made.

Published criteria (each formula is a small pure function below):

- Toomre (1964, ApJ 139, 1217): Q = sigma_R kappa / (3.36 G Sigma); Q < 1 is locally
  unstable to axisymmetric perturbations. sigma_R(R) is the model's own prescription
  (icgen.samplers.disk_velocities), taken in the midplane.
- Toomre (1981, in "The Structure and Evolution of Normal Galaxies", eds. Fall &
  Lynden-Bell, p. 111, page from memory): swing-amplification parameter
  X_m = kappa^2 R / (2 pi G Sigma m); for a flat rotation curve 1 < X_2 < 3 gives strong
  swing amplification of m = 2 (two-armed spirals, bars): common practice.
- Efstathiou, Lake & Negroponte (1982, MNRAS 199, 1069):
  eps_m = v_max / sqrt(G M_d / R_d) < 1.1 suggests a bar instability.
- Disk fraction v_disk / v_total at 2.2 R_d: a maximal disk has 0.85 +- 0.10
  (Sackett 1997, ApJ 483, 103): common practice.
- Power et al. (2003, MNRAS 338, 14), eq. 20: the ratio of the two-body relaxation time
  at r to the circular orbit time at r200,
  kappa_P(r) = t_relax(r) / t_circ(r200)
             = sqrt(200)/8 * N(<r)/ln N(<r) * (rhobar(r)/rho_crit)^(-1/2),
  and the convergence radius r_conv where kappa_P(r_conv) = 0.6 (their criterion for
  the circular velocity converged to 10 %). Implemented for each halo on its own (as in
  their dark-matter-only runs): N(<r) halo particles, rhobar(r) the halo's mean enclosed
  density, rho_crit of the model's cosmology. Their optimal softening, eq. 15:
  eps_opt = 4 r200 / sqrt(N200).
- Gas disks: Q_g = c_s kappa / (pi G Sigma_g) (Toomre 1964; Goldreich & Lynden-Bell 1965,
  MNRAS 130, 97, for a fluid), and the star + gas criterion of Wang & Silk (1994, ApJ 427,
  759, eq. 12): 1/Q_eff = 1/Q_stars + 1/Q_gas, summed over every stellar disk and gas disk.
- Ludlow et al. (2019, MNRAS 488, L123): halo particles much heavier than disk particles
  heat the disk by two-body scattering; a mass ratio above ~5 deserves a caution
  (common practice).

Units: kpc, km/s, Msun, (km/s)/kpc.
"""
import math
from dataclasses import asdict, dataclass, field

import numpy as np
from scipy import optimize

from ..kinds import kind_of
from ..samplers.disk_velocities import TOOMRE_CONSTANT
from ..sampling.realize import MASS_RATIO_LIMIT
from ..units import G, critical_density
from .json_report import write_json

# Local axisymmetric stability threshold (Toomre 1964).
Q_THRESHOLD = 1.0
# Strong swing amplification of m = 2 for 1 < X_2 < 3 (Toomre 1981; common practice).
SWING_RANGE = (1.0, 3.0)
# Efstathiou, Lake & Negroponte (1982): bar-unstable below 1.1.
BAR_THRESHOLD = 1.1
# Maximal disk: v_disk/v_total = 0.85 +- 0.10 at 2.2 R_d (Sackett 1997).
MAXIMAL_DISK = (0.85, 0.10)
# Power et al. (2003) convergence criterion on kappa_P = t_relax(r)/t_circ(r200).
POWER_KAPPA = 0.6
# Radii of the Q and X_2 curves, in disk scale lengths: inside 0.05 R_d Q is huge
# (kappa diverges), beyond 10 R_d there is almost no disk mass (5e-4 of it).
CURVE_RANGE = (0.05, 10.0)
CURVE_POINTS = 400
# Fewest halo particles inside r for which N/ln N is used (ln 1 = 0; Power et al.
# discuss radii holding thousands of particles anyway).
MIN_ENCLOSED = 10.0


# ------------------------------------------------------------------ published formulas


def toomre_q(sigma_r, kappa, surface_density):
    """Toomre (1964, ApJ 139, 1217) stellar Q = sigma_R kappa / (3.36 G Sigma).

    Parameters: sigma_r km/s, kappa (km/s)/kpc, surface_density Msun/kpc^2 (arrays
    broadcast). Returns the dimensionless Q.
    """
    return np.asarray(sigma_r) * kappa / (TOOMRE_CONSTANT * G * np.asarray(surface_density))


def swing_parameter(kappa, radius, surface_density, m=2):
    """Toomre (1981) X_m = kappa^2 R / (2 pi G Sigma m); kappa (km/s)/kpc, R kpc,
    Sigma Msun/kpc^2. Dimensionless (ratio of the wavelength to the critical one)."""
    return np.asarray(kappa) ** 2 * radius / (2 * np.pi * G * np.asarray(surface_density) * m)


def bar_parameter(v_max, disk_mass, scale_length):
    """Efstathiou, Lake & Negroponte (1982, MNRAS 199, 1069):
    eps_m = v_max / sqrt(G M_d / R_d); km/s, Msun, kpc. Below 1.1: bar-unstable."""
    return v_max / math.sqrt(G * disk_mass / scale_length)


def power_kappa(n_enclosed, mean_density, rho_crit):
    """Power et al. (2003, MNRAS 338, 14), eq. 20:
    t_relax(r)/t_circ(r200) = sqrt(200)/8 * N/ln N * (rhobar/rho_crit)^(-1/2).

    n_enclosed: particles inside r; mean_density, rho_crit: Msun/kpc^3."""
    n = np.asarray(n_enclosed, float)
    return math.sqrt(200.0) / 8.0 * n / np.log(n) / np.sqrt(np.asarray(mean_density) / rho_crit)


def optimal_softening(r200, n200):
    """Power et al. (2003), eq. 15: eps_opt = 4 r200 / sqrt(N200) (kpc)."""
    return 4.0 * r200 / math.sqrt(n200)


def first_crossing(x, y, level):
    """Smallest x at which y (rising) reaches ``level``, linear in ln x between nodes;
    None if y never reaches it, x[0] if y starts above it."""
    above = np.flatnonzero(np.asarray(y) >= level)
    if above.size == 0:
        return None
    i = int(above[0])
    if i == 0:
        return float(x[0])
    t = (level - y[i - 1]) / (y[i] - y[i - 1])
    return float(np.exp(np.log(x[i - 1]) + t * (np.log(x[i]) - np.log(x[i - 1]))))


def gas_toomre_q(sound_speed, kappa, surface_density):
    """Q_g = c_s kappa / (pi G Sigma_g) of a gas disk (Toomre 1964; Goldreich & Lynden-Bell
    1965); km/s, (km/s)/kpc, Msun/kpc^2."""
    return np.asarray(sound_speed) * kappa / (np.pi * G * np.asarray(surface_density))


def combined_q(qs):
    """Wang & Silk (1994, ApJ 427, 759) approximation: 1/Q_eff = sum_i 1/Q_i."""
    return 1.0 / sum(1.0 / np.asarray(q) for q in qs)


# ------------------------------------------------------------------ model analysis


@dataclass
class Verdict:
    """One line of advice: the criterion, the number, the threshold, ok or caution."""
    criterion: str
    value: float | None
    threshold: str
    ok: bool
    text: str
    source: str


@dataclass
class DiskStability:
    """Q(R) and X_2(R) of one disk (R kpc)."""
    name: str
    scale_length: float
    radius: list
    q: list
    x2: list
    q_min: float
    r_q_min: float
    x2_at_22: float


@dataclass
class GasStability:
    """Gas Q(R) and the star + gas Q_eff(R) (R kpc) of one gas disk."""
    name: str
    radius: list
    q: list
    q_eff: list
    q_min: float
    r_q_min: float
    q_eff_min: float
    r_q_eff_min: float


@dataclass
class HaloResolution:
    """Power et al. (2003) numbers of one halo (kpc, Msun)."""
    name: str
    particles: int
    r200: float | None
    n200: float | None
    r_conv: float | None
    eps_opt: float | None


@dataclass
class StabilityReport:
    """All numbers of ``icgen stability`` (kpc, km/s, Msun)."""
    model: str
    disks: list = field(default_factory=list)
    gas: list = field(default_factory=list)
    bar_parameter: float | None = None
    v_max: float | None = None
    disk_mass: float | None = None
    scale_length: float | None = None
    disk_fraction_22: float | None = None
    halos: list = field(default_factory=list)
    mass_ratios: dict = field(default_factory=dict)
    verdicts: list = field(default_factory=list)

    def to_dict(self):
        return asdict(self)

    def write_json(self, path):
        write_json(self.to_dict(), path)


def disk_sigma_r(model, name, R):
    """Midplane sigma_R (km/s) of disk ``name`` at R (kpc): the moments of the method that
    samples it (``model.kinematics``)."""
    R = np.asarray(R, float)
    return np.sqrt(model.kinematics(name).moments(R, np.zeros_like(R))["sigma_R2"])


def disk_stability(model, name):
    """DiskStability of disk ``name``: Q and X_2 on log radii from 0.05 to 10 R_d."""
    disk = model.components[name]
    r_hi = min(CURVE_RANGE[1] * disk.R_d, disk.extent)
    R = np.geomspace(CURVE_RANGE[0] * disk.R_d, r_hi, CURVE_POINTS)
    sigma = disk.surface_density(R)
    kappa = model.potential.kappa(R)
    q = toomre_q(disk_sigma_r(model, name, R), kappa, sigma)
    x2 = swing_parameter(kappa, R, sigma, m=2)
    i = int(np.argmin(q))
    r22 = np.array([2.2 * disk.R_d])
    x22 = float(swing_parameter(model.potential.kappa(r22), r22, disk.surface_density(r22))[0])
    return DiskStability(name, disk.R_d, R.tolist(), q.tolist(), x2.tolist(), float(q[i]),
                         float(R[i]), x22)


def gas_stability(model, name):
    """GasStability of gas disk ``name`` on log radii 0.05 - 10 R_d (with the stellar disks'
    own Q in the Wang & Silk sum)."""
    gas = model.components[name]
    R = np.geomspace(CURVE_RANGE[0] * gas.R_d, min(CURVE_RANGE[1] * gas.R_d, gas.extent),
                     CURVE_POINTS)
    kappa = model.potential.kappa(R)
    q_g = gas_toomre_q(gas.cs, kappa, gas.surface_density(R))
    stars = [toomre_q(disk_sigma_r(model, d.name, R), kappa, d.surface_density(R))
             for d in model.disks]
    q_eff = combined_q(stars + [q_g])
    i, j = int(np.argmin(q_g)), int(np.argmin(q_eff))
    return GasStability(name, R.tolist(), q_g.tolist(), q_eff.tolist(), float(q_g[i]),
                        float(R[i]), float(q_eff[j]), float(R[j]))


def _halo_r200(comp, rho_crit):
    """r200 (kpc) of a halo on its own: mean enclosed density 200 rho_crit."""
    if getattr(comp, "r200", None):
        return float(comp.r200)
    f = lambda lr: math.log(comp.enclosed_mass(np.array([math.exp(lr)]))[0]
                            / (4 / 3 * math.pi * math.exp(3 * lr) * 200 * rho_crit))
    lo, hi = math.log(comp.scale * 1e-3), math.log(comp.extent * 10)
    if f(lo) < 0 or f(hi) > 0:
        return None
    return math.exp(optimize.brentq(f, lo, hi))


def halo_resolution(model, name, particles):
    """HaloResolution of halo ``name`` sampled with ``particles`` equal-mass particles."""
    comp = model.components[name]
    rho_crit = critical_density(model.spec.cosmology, model.spec.redshift)
    r200 = _halo_r200(comp, rho_crit)
    r = np.geomspace(comp.scale * 1e-4, r200 or comp.extent, 600)
    m = comp.enclosed_mass(r)
    n = particles * m / comp.total_mass
    ok = n >= MIN_ENCLOSED
    kappa = np.where(ok, power_kappa(np.maximum(n, MIN_ENCLOSED),
                                     m / (4 / 3 * np.pi * r**3), rho_crit), 0.0)
    r_conv = first_crossing(r, kappa, POWER_KAPPA)
    n200 = eps = None
    if r200 is not None:
        n200 = float(particles * comp.enclosed_mass(np.array([r200]))[0] / comp.total_mass)
        eps = optimal_softening(r200, n200)
    return HaloResolution(name, int(particles), r200, n200, r_conv, eps)


def particle_mass_ratios(plans):
    """Particle mass of each halo and bulge over the lightest disk particle mass.

    plans: sequence of sampling.ComponentPlan. Returns {name: ratio}; empty without disks.
    """
    disks = [p for p in plans if kind_of(p).stellar_disk]
    if not disks:
        return {}
    light = min(p.particle_mass for p in disks)
    return {p.name: p.particle_mass / light for p in plans if kind_of(p).spheroid}


def analyse(model, plans=None):
    """StabilityReport of ``model`` (a MassModel) with the particle numbers of
    ``plans`` (default: sampling.plan(model), the model file's counts)."""
    from .. import sampling
    from . import curve

    plans = sampling.plan(model) if plans is None else plans
    rep = StabilityReport(model.name)
    rep.disks = [disk_stability(model, d.name) for d in model.disks]
    rep.gas = [gas_stability(model, g.name) for g in model.gas_disks]
    summary = curve.summarize(model)
    if model.disks:
        rep.v_max = summary.v_max
        rep.disk_mass = float(sum(d.total_mass for d in model.disks))
        rep.scale_length = summary.scale_length
        rep.bar_parameter = bar_parameter(rep.v_max, rep.disk_mass, rep.scale_length)
        rep.disk_fraction_22 = summary.disk_fraction_22
    count = {p.name: p.count for p in plans}
    rep.halos = [halo_resolution(model, n, count[n])
                 for n, c in model.components.items() if kind_of(c).dark]
    rep.mass_ratios = particle_mass_ratios(plans)
    rep.verdicts = verdicts(rep, model)
    return rep


def verdicts(rep, model):
    """Verdict lines of a StabilityReport, one per criterion."""
    out = []
    for d in rep.disks:
        out.append(Verdict(
            f"Toomre Q ({d.name})", d.q_min, f"min Q >= {Q_THRESHOLD:g}", d.q_min >= Q_THRESHOLD,
            f"min Q = {d.q_min:.2f} at R = {d.r_q_min:.2f} kpc "
            f"({d.r_q_min / d.scale_length:.2f} R_d): "
            + ("locally stable" if d.q_min >= Q_THRESHOLD else "locally unstable (axisymmetric)"),
            "Toomre 1964, ApJ 139, 1217"))
        strong = SWING_RANGE[0] < d.x2_at_22 < SWING_RANGE[1]
        out.append(Verdict(
            f"swing X_2 ({d.name})", d.x2_at_22,
            f"strong m=2 amplification if {SWING_RANGE[0]:g} < X_2 < {SWING_RANGE[1]:g}",
            not strong,
            f"X_2(2.2 R_d) = {d.x2_at_22:.3f}: "
            + ("strong swing amplification of two-armed spirals and bars expected" if strong
               else "weak swing amplification of m = 2" if d.x2_at_22 >= SWING_RANGE[1]
               else "m = 2 amplified, X_2 < 1: disk dominated, prone to bars"),
            "Toomre 1981 (swing amplifier); range: common practice"))
    for g in rep.gas:
        out.append(Verdict(
            f"gas Q ({g.name})", g.q_min, f"min Q_g >= {Q_THRESHOLD:g}", g.q_min >= Q_THRESHOLD,
            f"min Q_g = {g.q_min:.2f} at R = {g.r_q_min:.2f} kpc: "
            + ("locally stable" if g.q_min >= Q_THRESHOLD else "gas locally unstable"),
            "Toomre 1964; Goldreich & Lynden-Bell 1965, MNRAS 130, 97"))
        out.append(Verdict(
            f"stars + gas Q ({g.name})", g.q_eff_min, f"min Q_eff >= {Q_THRESHOLD:g}",
            g.q_eff_min >= Q_THRESHOLD,
            f"min Q_eff = {g.q_eff_min:.2f} at R = {g.r_q_eff_min:.2f} kpc: "
            + ("stable" if g.q_eff_min >= Q_THRESHOLD else "the two-component disk is unstable"),
            "Wang & Silk 1994, ApJ 427, 759"))
    if rep.bar_parameter is not None:
        eps = rep.bar_parameter
        out.append(Verdict(
            "bar criterion", eps, f"bar-unstable if < {BAR_THRESHOLD:g}", eps >= BAR_THRESHOLD,
            f"v_max/sqrt(G M_d/R_d) = {eps:.3f} (v_max = {rep.v_max:.1f} km/s, "
            f"M_d = {rep.disk_mass:.3g} Msun, R_d = {rep.scale_length:.3g} kpc): "
            + ("stable against bars" if eps >= BAR_THRESHOLD else "bar instability likely"),
            "Efstathiou, Lake & Negroponte 1982, MNRAS 199, 1069"))
        f, (mid, half) = rep.disk_fraction_22, MAXIMAL_DISK
        kind = ("maximal" if abs(f - mid) <= half else
                "sub-maximal" if f < mid - half else "beyond maximal")
        out.append(Verdict(
            "disk fraction", f, f"maximal disk: {mid:g} +- {half:g}", f < mid - half,
            f"v_disk/v_total at 2.2 R_d = {f:.3f}: {kind}"
            + ("; a self-gravitating disk, prone to bars and spirals" if f >= mid - half else ""),
            "Sackett 1997, ApJ 483, 103 (common practice)"))
    out += _resolution_verdicts(rep, model)
    return out


def _resolution_verdicts(rep, model):
    out = []
    r_d = rep.scale_length
    z_d = min((d.z_d for d in model.disks), default=None)
    for h in rep.halos:
        if h.r_conv is None:
            text, ok = "kappa_P never reaches 0.6 inside r200: the halo is not converged", False
        else:
            ok = r_d is None or h.r_conv < r_d
            text = (f"r_conv = {h.r_conv:.3g} kpc with {h.particles:,} particles"
                    + (f" ({h.r_conv / r_d:.2f} R_d)" if r_d else "") + ": "
                    + ("converged where the disk is" if ok else
                       "the halo is not converged inside the disk's scale length"))
        out.append(Verdict(f"halo convergence ({h.name})", h.r_conv,
                           "t_relax/t_circ(r200) = 0.6; r_conv < R_d (rule of thumb)", ok, text,
                           "Power et al. 2003, MNRAS 338, 14, eq. 20"))
        if h.eps_opt is not None:
            thin = z_d is not None and h.eps_opt > z_d
            out.append(Verdict(
                f"softening ({h.name})", h.eps_opt, "eps_opt = 4 r200/sqrt(N200)", not thin,
                f"eps_opt = {h.eps_opt:.3g} kpc (r200 = {h.r200:.4g} kpc, N200 = {h.n200:,.0f})"
                + (f"; larger than the disk scale height {z_d:.3g} kpc: soften the disk "
                   f"particles less (common practice)" if thin else ""),
                "Power et al. 2003, MNRAS 338, 14, eq. 15"))
    for name, ratio in rep.mass_ratios.items():
        if not kind_of(model.components[name]).dark:
            continue
        ok = ratio <= MASS_RATIO_LIMIT
        out.append(Verdict(
            f"particle masses ({name})", ratio,
            f"halo/disk particle mass <= {MASS_RATIO_LIMIT:g}", ok,
            f"halo/disk particle mass = {ratio:.2f}: "
            + ("fine" if ok else "halo particles will heat the disk numerically"),
            "Ludlow et al. 2019, MNRAS 488, L123 (limit: common practice)"))
    return out


def format_report(rep):
    """Terminal text: one verdict line per criterion, with the number and the threshold."""
    lines = [f"Stability and resolution: {rep.model}"]
    for v in rep.verdicts:
        flag = "ok     " if v.ok else "caution"
        lines.append(f"  [{flag}] {v.criterion}: {v.text}  [{v.threshold}; {v.source}]")
    return "\n".join(lines)


def plot_stability(rep, path):
    """Two panels: Q(R) and X_2(R) of every disk, with the thresholds; PNG at ``path``."""
    from .plots import plt

    fig, (ax_q, ax_x) = plt.subplots(1, 2, figsize=(10, 4.2), dpi=120)
    for d in rep.disks:
        R = np.asarray(d.radius)
        ax_q.plot(R, d.q, lw=2, label=d.name)
        ax_x.plot(R, d.x2, lw=2, label=d.name)
    for g in rep.gas:
        ax_q.plot(g.radius, g.q, lw=2, ls="--", label=f"{g.name} (gas)")
        ax_q.plot(g.radius, g.q_eff, lw=2, color="k", label="stars + gas (Wang & Silk 1994)")
    ax_q.axhline(Q_THRESHOLD, color="tab:red", lw=1, ls="--", label="Q = 1 (Toomre 1964)")
    ax_x.axhspan(*SWING_RANGE, color="tab:orange", alpha=0.15, label="1 < X$_2$ < 3")
    for ax, label in ((ax_q, "Toomre Q"), (ax_x, r"$X_2 = \kappa^2 R / (4 \pi G \Sigma)$")):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("R [kpc]")
        ax.set_ylabel(label)
        ax.grid(alpha=0.25, which="both")
        ax.legend(frameon=False, fontsize=8)
    fig.suptitle(f"Disk stability: {rep.model}")
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path


#: File name endings read as snapshots by :func:`load_source` even when not HDF5.
SNAPSHOT_SUFFIXES = (".h5", ".hdf5", ".hdf")


def load_source(source):
    """MassModel from a model file (TOML), the default model (None) or an icgen snapshot
    (HDF5: the model stored in its ``config``)."""
    import os

    import h5py

    from ..spec import load_spec
    from ..model import MassModel
    # an HDF5 file, or a file named as one (so that a damaged snapshot gets the
    # snapshot reader's error, not the TOML parser's)
    if source is not None and os.path.isfile(source) and (
            h5py.is_hdf5(source) or str(source).lower().endswith(SNAPSHOT_SUFFIXES)):
        from ..snapshot import load_model_from_snapshot
        return load_model_from_snapshot(source)
    return MassModel(load_spec(source))
