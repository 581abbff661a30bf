"""Equilibrium drift test: orbits of the model's particles in its own frozen potential.

Particles of a snapshot (or a seeded random subsample, proportional per component) are
integrated with the kick-drift-kick leapfrog of :mod:`icgen.integrate` in the tabulated
total potential of the model stored in the file. A model in equilibrium keeps its
distribution function, so every measured profile stays the same up to particle noise;
a model out of equilibrium (wrong velocities, a Jeans-moment cuspy halo; Kazantzidis,
Magorrian & Moore 2004, ApJ 601, 37) relaxes within a few orbital times and its profiles
move. Point masses (the fixed centre of the potential) and gas disks (their pressure
support is no force of the potential) are not integrated; the report says so.

**Steps.** Each particle has its own constant step, a power-of-two fraction of the output
interval, no longer than ``STEP_ACCURACY`` times its dynamical time at pericentre
sqrt(r_p / F(r_p)) (r_p from integrate.pericentre). A single global step from the shortest
orbital time in the sample would do the same for the most bound particle but cost ~80 times
more on a cuspy model (measured on 1e5 particles of the default model: 4.0e5 steps per Gyr
for all particles against a mean of 5.2e3 with per-particle steps); every particle's
leapfrog is still symplectic with a fixed step. ``step`` replaces this by one global step.

**Measurements** at ``outputs + 1`` regular times: per disk, in annuli of its scale length,
surface density, median |z|, sigma_R, sigma_z and mean v_phi; per halo or bulge, the mass
inside fixed fractions of its scale radius and sigma_r in shells; per particle, the
relative energy error |E(t) - E(0)|/|E(0)| and the L_z error |L_z(t) - L_z(0)|/|L(0)|.

**Noise.** Each value carries its standard error at one time (binomial for masses; the
order-statistic rank spread sqrt(n)/2 for medians; (mu4 - mu2^2)/n for variances, by the
delta method; s/sqrt(n) for means). The drift end - start compares the same particles at
two times: its variance is 2 s^2 (1 - rho), rho the correlation of the two measurements,
near 1 at short times (the same particles still fill the bin) and 0 once orbits have
phase-mixed. The noise used, sqrt(se_start^2 + se_end^2), is the mixed (rho = 0) limit:
the largest value for rho >= 0, so it errs toward fewer false alarms; the scatter of each
quantity over the recorded times is reported beside it as an empirical check. A drift is
flagged beyond ``SIGMA_LIMIT`` times that noise, and fails the test when it is flagged and
also larger than ``threshold`` (relative).

**Trust and exit status.** The drifts mean something only if the orbits are right: a run
whose relative energy error has a 99th percentile above ``ENERGY_BAR`` (1e-4), or in
which any particle reaches a NaN or infinite state, is not trustworthy; the report and
the JSON (``integration``) say so in one line. Exit status (``DriftResult.exit_status``):
0 no drift fails; 1 a drift fails the test; 2 bad input (nothing written); 3 the
integration is not trustworthy (whatever the drifts). ``--time`` is at most
``MAX_TIME_GYR`` (100 Gyr).

Units: kpc, km/s, Msun; times in Gyr at the edge, kpc/(km/s) inside.
"""
import json
import math
import os
import time
from dataclasses import asdict, dataclass, field

import astropy.units as u
import numpy as np

from ..errors import MISSING, ModelError
from ..frame import galaxy_frame, subset_rows
from ..integrate import Orbits, pericentre, substeps
from ..progress import progress_enabled, stage_bar
from ..snapshot import check_values, open_snapshot
from ..units import TIME_UNIT_GYR, parse_quantity
from . import measure

__all__ = ["OUTPUTS", "STEP_ACCURACY", "SIGMA_LIMIT", "THRESHOLD", "ENERGY_BAR",
           "MAX_TIME_GYR", "UNTRUSTED_STATUS", "DriftResult", "integration_verdict",
           "run_drift", "drift_snapshot", "choose_steps", "measure_state", "subsample",
           "parse_time", "parse_whole", "parse_number", "check_report_dir", "write_report",
           "format_report"]

#: Output intervals (records = OUTPUTS + 1): 40 resolve a few-orbit relaxation in time.
OUTPUTS = 40
#: Step / pericentre dynamical time. The measured relative energy error of a particle is
#: ~ C (dt / t_p)^2 with C < 0.44 for 99 % and < 4.3 for all particles of the default
#: model (0.3 Gyr, 1.7e4 particles), so 0.01 keeps the 99th percentile near 4e-5, below
#: the 1e-4 bar, and the worst particle near 4e-4. The worst are halo orbits whose |L|
#: changes in the flattened potential, so the spherical pericentre overestimates r_p;
#: estimating r_p from L_z alone (a safe bound) cut the largest error from 1.4e-3 to 2.1e-4
#: but tripled the steps (1e5 particles, 0.2 Gyr, measured): not worth it for 0.03 %.
STEP_ACCURACY = 0.01
#: Finest step = output interval / 2^MAX_LEVEL: bounds the cost of particles plunging
#: through a cusp (r_p -> 0) to 2^12 steps per interval (~0.1 % of default-model particles).
MAX_LEVEL = 12
#: Flag drifts beyond this many standard deviations of the noise (3: a Gaussian tail
#: probability of 0.27 % per quantity).
SIGMA_LIMIT = 3.0
#: A flagged drift fails the test when it is also larger than this relative change:
#: with large samples the noise is tiny and sub-percent drifts (the epicyclic
#: approximation in the disk velocities) are significant but harmless.
THRESHOLD = 0.02
#: The integrator's relative energy error (99th percentile over particles of the largest
#: error at the recorded times) should stay below this with the default steps.
ENERGY_BAR = 1e-4
#: Longest --time, Gyr: seven Hubble times. Orbits in a frozen potential over more say
#: nothing about a galaxy, and the steps (a fraction of the output interval, at most
#: 2^MAX_LEVEL per interval) grow with the time.
MAX_TIME_GYR = 100.0
#: Shortest --step, Gyr (1 kyr): finer than the finest default step of any test run
#: here (6 kyr for 1 Gyr in 40 outputs) and far from an int64 overflow of step counts.
MIN_STEP_GYR = 1e-6
#: Exit status of a run whose integration cannot be trusted (energy error above
#: ENERGY_BAR, or a non-finite state); 1 is "a drift failed the test", 2 bad input.
UNTRUSTED_STATUS = 3
#: Bin edges of disk measurements, in scale lengths (2.2 R_d lies in the 2-2.5 bin).
DISK_EDGES = (0.0, 0.5, 1.0, 1.5, 2.0, 2.5, 3.0, 4.0, 5.0)
#: Radii (in scale radii) of the enclosed-mass measurements of halos and bulges; the
#: innermost see the cusp flattening of Kazantzidis et al. (2004).
SPHEROID_RADII = (0.05, 0.1, 0.2, 0.5, 1.0, 2.0)
#: Shells (in scale radii) of the sigma_r measurements.
SPHEROID_SHELLS = (0.0, 0.5, 1.0, 2.0)
#: Fewest particles for a binned value; below it the bin is reported empty.
MIN_COUNT = 10
#: Midplane tables of Phi and F for the pericentre estimate: log-spaced nodes from
#: TABLE_INNER times the smallest component scale out past the farthest particle.
TABLE_NODES = 512
TABLE_INNER = 1e-3


# ------------------------------------------------------------------ input at the edge


def parse_time(value, key, lowest=0.0, highest=MAX_TIME_GYR):
    """A time: a string such as ``"2 Gyr"`` or ``"0.5 Myr"``, or a float in Gyr -> float
    Gyr in (0, highest], and >= ``lowest`` when that is > 0; None stays None."""
    if value is None:
        return None
    given = value
    if isinstance(value, str):
        value = parse_quantity(value, key, u.Gyr)
    elif isinstance(value, bool) or not isinstance(value, (int, float)):
        value = math.nan
    low = f"[{lowest:g}" if lowest > 0 else "(0"
    if not (math.isfinite(value) and value > 0 and lowest <= value <= highest):
        raise ModelError(key, given, f"must be a time in {low}, {highest:g}] Gyr, e.g. '2 Gyr'")
    return float(value)


def check_report_dir(path):
    """Raise ModelError unless ``path`` is an existing folder or can be made as one."""
    if os.path.exists(path) and not os.path.isdir(path):
        raise ModelError("--report", path, "exists and is not a folder")
    parent = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(parent):
        raise ModelError("--report", path, f"folder {parent!r} does not exist")


def subsample(parts, total, seed):
    """A random subsample of ``total`` particles of in-memory ``parts``, proportional per
    component (:func:`icgen.frame.subset_rows`). Returns (parts, weights)."""
    rows, weights = subset_rows({n: p["mass"].size for n, p in parts.items()}, total, seed)
    if total is None or all(w == 1.0 for w in weights.values()):
        return parts, weights
    return {n: {key: parts[n][key][idx] for key in ("position", "velocity", "mass")}
            for n, idx in rows.items()}, weights


# ------------------------------------------------------------------ measurements


def _median_abs(values, idx, nbins):
    """(median, standard error) of |values| per bin. The error is half the spread of the
    order statistics at ranks n/2 -+ sqrt(n)/2: the rank of the sample median is
    binomial(n, 1/2), standard deviation sqrt(n)/2 (David & Nagaraja 2003, Order
    Statistics; distribution-free; from memory)."""
    med, err = np.full(nbins, np.nan), np.full(nbins, np.nan)
    for b in range(nbins):
        a = np.sort(np.abs(values[idx == b]))
        n = a.size
        if n < MIN_COUNT:
            continue
        med[b] = np.median(a)
        half = 0.5 * math.sqrt(n)
        lo, hi = max(int(math.floor(0.5 * n - half)), 0), min(int(math.ceil(0.5 * n + half)), n - 1)
        err[b] = 0.5 * (a[hi] - a[lo])
    return med, err


def _disk(pos, vel, particle_mass, r_d):
    """Disk measurements in annuli of R_d: dict name -> (values, errors, unit)."""
    R, z, v_R, v_phi, v_z = measure.cylindrical(pos, vel)
    edges = r_d * np.asarray(DISK_EDGES)
    nb = edges.size - 1
    idx = measure.bin_index(R, edges)
    n = measure.counts(idx, nb)
    area = np.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
    few = n < MIN_COUNT
    # the particle number is fixed, so a bin count is binomial: variance n (1 - n/N)
    se_n = np.sqrt(n * (1.0 - n / max(R.size, 1)))
    out = {"surface_density": (n * particle_mass / area, se_n * particle_mass / area,
                               "Msun/kpc2"),
           "median_abs_z": (*_median_abs(z, idx, nb), "kpc"),
           "sigma_R": (*measure.binned_dispersion(v_R, idx, nb), "km/s"),
           "sigma_z": (*measure.binned_dispersion(v_z, idx, nb), "km/s"),
           "mean_v_phi": (*measure.binned_mean(v_phi, idx, nb), "km/s")}
    return {k: (np.where(few, np.nan, v), np.where(few, np.nan, e), unit)
            for k, (v, e, unit) in out.items()}


def _spheroid(pos, vel, particle_mass, scale):
    """Halo/bulge measurements: mass inside fractions of the scale radius, sigma_r in shells."""
    r, v_r, _, _ = measure.spherical(pos, vel)
    n_in = np.array([np.count_nonzero(r < f * scale) for f in SPHEROID_RADII], float)
    shells = scale * np.asarray(SPHEROID_SHELLS)
    idx = measure.bin_index(r, shells)
    sig, err = measure.binned_dispersion(v_r, idx, shells.size - 1)
    few = measure.counts(idx, shells.size - 1) < MIN_COUNT
    se_n = np.sqrt(n_in * (1.0 - n_in / max(r.size, 1)))      # binomial, as for disks
    return {"enclosed_mass": (np.where(n_in < MIN_COUNT, np.nan, n_in * particle_mass),
                              np.where(n_in < MIN_COUNT, np.nan, se_n * particle_mass),
                              "Msun"),
            "sigma_r": (np.where(few, np.nan, sig), np.where(few, np.nan, err), "km/s")}


def measure_state(layout, pos, vel):
    """All measurements of one state: dict (component, quantity) -> (values, errors, unit).

    ``layout`` lists (name, kind, slice into pos/vel, particle mass, scale) per component.
    """
    out = {}
    for name, kind, sl, pm, scale in layout:
        fn = _disk if kind == "disk" else _spheroid
        for q, val in fn(pos[sl], vel[sl], pm, scale).items():
            out[(name, q)] = val
    return out


def bin_labels(kind, scale):
    """(lo, hi) in kpc of each bin of a component's measurements, per quantity."""
    if kind == "disk":
        e = scale * np.asarray(DISK_EDGES)
        return {q: list(zip(e[:-1], e[1:])) for q in
                ("surface_density", "median_abs_z", "sigma_R", "sigma_z", "mean_v_phi")}
    shells = scale * np.asarray(SPHEROID_SHELLS)
    return {"enclosed_mass": [(0.0, f * scale) for f in SPHEROID_RADII],
            "sigma_r": list(zip(shells[:-1], shells[1:]))}


# ------------------------------------------------------------------ steps


def _midplane_tables(model, r_lo, r_hi):
    """(ln r0, d ln r, Phi, F) on TABLE_NODES log-spaced midplane radii; F = -dPhi/dR."""
    r = np.geomspace(r_lo, r_hi, TABLE_NODES)
    phi, f_r, _ = model.potential.evaluate(r, np.zeros_like(r))
    return math.log(r[0]), math.log(r[1] / r[0]), np.ascontiguousarray(phi), \
        np.ascontiguousarray(-f_r)


def _scales(model):
    out = [c.z_d if c.kind == "disk" else c.scale for c in model.components.values()]
    return [s for s in out if s > 0] or [1.0]


def choose_steps(model, pos, vel, interval, step=None):
    """Steps per output interval for each particle, and a summary of the choice.

    Parameters
    ----------
    model : MassModel
    pos, vel : (N, 3) arrays, kpc and km/s
    interval : float
        Output interval, internal time units.
    step : float, optional
        One global step (internal units), rounded down to divide the interval; None: a
        step per particle from its pericentre time (module docstring).

    Returns
    -------
    m : (N,) int64
    info : dict
    """
    n = pos.shape[0]
    myr = TIME_UNIT_GYR * 1e3
    if step is not None:
        m = np.full(n, max(int(math.ceil(interval / step - 1e-9)), 1), np.int64)
        return m, {"mode": "global", "step_myr": interval / m[0] * myr if n else None,
                   "requested_step_myr": step * myr}
    r = np.sqrt(np.einsum("ij,ij->i", pos, pos))
    r_lo = TABLE_INNER * min(_scales(model))
    lnr0, dlnr, phi, force = _midplane_tables(model, r_lo, 2.0 * max(float(r.max(initial=0)), 1.0))
    lvec = np.cross(pos, vel)
    L2 = np.einsum("ij,ij->i", lvec, lvec)
    r_p = np.empty(n)
    pericentre(np.maximum(r, r_lo), np.einsum("ij,ij->i", vel, vel), L2, lnr0, dlnr, phi, r_p)
    # dynamical time at pericentre; F from the same table (linear in ln r)
    f_p = np.interp(np.log(r_p), lnr0 + dlnr * np.arange(force.size), force)
    tau = np.sqrt(r_p / np.where(f_p > 0, f_p, np.inf))
    m, capped = substeps(interval, tau, STEP_ACCURACY, MAX_LEVEL)
    dt = interval / m * myr
    levels, count = np.unique(m, return_counts=True)
    return m, {"mode": "per-particle", "accuracy": STEP_ACCURACY,
               "step_myr_min": float(dt.min()), "step_myr_median": float(np.median(dt)),
               "step_myr_max": float(dt.max()),
               "steps_per_interval": {str(int(a)): int(b) for a, b in zip(levels, count)},
               "capped": int(capped.sum()),
               "global_step_myr_equivalent": float(STEP_ACCURACY * tau.min() * myr)}


# ------------------------------------------------------------------ the run


@dataclass
class DriftResult:
    """Everything ``icgen drift`` measures (JSON-ready through :meth:`to_dict`).

    ``quantities`` holds one dict per (component, quantity, bin): series over ``times_gyr``
    with standard errors, start and end values, the relative drift, its noise, their
    ratio, the scatter over the recorded times and the flags.
    """
    model: str
    source: str
    settings: dict
    components: dict
    times_gyr: list
    quantities: list
    energy: dict
    lz: dict
    steps: dict
    timing: dict = field(default_factory=dict)
    integration: dict = field(default_factory=dict)

    @property
    def flagged(self):
        return [q for q in self.quantities if q["flagged"]]

    @property
    def failed(self):
        return [q for q in self.quantities if q["failed"]]

    @property
    def trusted(self):
        """False when the integration itself is not trustworthy (see :func:`integration_verdict`)."""
        return self.integration.get("trusted", True)

    @property
    def exit_status(self):
        """3 (UNTRUSTED_STATUS) when the integration is not trustworthy, whatever the
        drifts; else 1 when a flagged drift exceeds the threshold; else 0."""
        if not self.trusted:
            return UNTRUSTED_STATUS
        return 1 if self.failed else 0

    def to_dict(self):
        return _json_safe(asdict(self))

    def write_json(self, path):
        with open(path, "w", encoding="utf-8") as fh:
            json.dump(self.to_dict(), fh, indent=1, allow_nan=False)


def _json_safe(x):
    if isinstance(x, dict):
        return {str(k): _json_safe(v) for k, v in x.items()}
    if isinstance(x, (list, tuple, np.ndarray)):
        return [_json_safe(v) for v in x]
    if isinstance(x, (np.floating, float)):
        return float(x) if math.isfinite(x) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    return x


#: Components not integrated, and why (reported with the results).
NOT_INTEGRATED = {"point_mass": "the fixed centre of the potential",
                  "gas_disk": "pressure-supported gas: orbits without pressure forces would "
                              "fall inwards, which says nothing of the model"}


def _layout(model, parts, weights):
    """(layout, pos, vel, skipped): point masses and gas disks are left out
    (NOT_INTEGRATED says why)."""
    layout, pos, vel, start, skipped = [], [], [], 0, {}
    for name, p in parts.items():
        comp = model.components.get(name)
        if comp is None:
            raise ModelError("particles", name, "no component of that name in the model")
        if comp.kind in NOT_INTEGRATED:
            skipped[name] = NOT_INTEGRATED[comp.kind]
            continue
        if p["mass"].size == 0:
            continue
        n = p["mass"].size
        scale = comp.R_d if comp.kind == "disk" else comp.scale
        pm = float(np.mean(p["mass"])) * weights.get(name, 1.0)
        layout.append((name, comp.kind, slice(start, start + n), pm, scale))
        pos.append(np.asarray(p["position"], float))
        vel.append(np.asarray(p["velocity"], float))
        start += n
    if not layout:
        raise ModelError("particles", MISSING, "no particles to integrate (only point masses "
                                               "or gas?)")
    return layout, np.concatenate(pos), np.concatenate(vel), skipped


def _error_stats(rel):
    return {"median": float(np.median(rel)), "p99": float(np.quantile(rel, 0.99)),
            "max": float(rel.max())}


def _conservation(orbits, e0, lz0, l0):
    """Per-particle relative errors of E and L_z at the current time (sorted order)."""
    de = np.abs(orbits.energy() - e0) / np.abs(e0)
    dl = np.abs(orbits.lz() - lz0) / np.where(l0 > 0, l0, 1.0)
    return de, dl


def run_drift(model, parts, duration, step=None, outputs=OUTPUTS, threshold=THRESHOLD,
              weights=None, quiet=True, source="particles", frame=None):
    """Integrate particles in the model's frozen potential and measure the drift.

    Parameters
    ----------
    model : MassModel
    parts : dict
        name -> {"position" (n, 3) kpc, "velocity" (n, 3) km/s, "mass" (n,) Msun}, e.g.
        from :func:`icgen.sampling.sample`.
    duration : float
        Integration time, Gyr.
    step : float, optional
        One global step in Gyr; None: a step per particle (module docstring).
    outputs : int
        Number of output intervals.
    threshold : float
        Relative drift above which a flagged drift fails the test.
    weights : dict name -> float, optional
        Mass factor of a subsampled component (count / chosen).
    quiet : bool
        No progress bar.
    frame : icgen.frame.Frame, optional
        The galaxy's frame: the particles are moved into it, where the frozen potential is
        centred. Default: found from ``parts`` (icgen.frame.galaxy_frame).

    Returns
    -------
    DriftResult
    """
    t_start = time.perf_counter()
    for name, p in parts.items():
        for key in ("position", "velocity", "mass"):
            check_values(np.asarray(p[key], float), key, f"particles[{name!r}][{key!r}]")
    if frame is None:
        frame = galaxy_frame({n: p for n, p in parts.items() if p["mass"].size},
                             model.spec.seed)
    layout, pos, vel, skipped = _layout(model, frame.to_galaxy(parts), weights or {})
    interval = duration / outputs / TIME_UNIT_GYR
    m, step_info = choose_steps(model, pos, vel, interval,
                                None if step is None else step / TIME_UNIT_GYR)
    orbits = Orbits(pos, vel, model.potential.evaluate, m, model.potential.force_field())
    t_setup = time.perf_counter() - t_start
    t0 = time.perf_counter()
    records, energy, lz, nonfinite = _integrate(orbits, layout, pos, vel, interval, outputs,
                                                quiet)
    t_orbits = time.perf_counter() - t0
    times = [k * duration / outputs for k in range(outputs + 1)]
    step_info.update(python_force_calls=orbits.force_calls, steps_taken=orbits.steps_taken,
                     mean_steps_per_particle_per_gyr=float(m.mean() * outputs / duration))
    # a component whose centre is off the potential's centre (e.g. moved by removing the
    # centre of mass of a noisy realisation) oscillates about it: reported with the drift;
    # the median position, as the far particles of a halo make its mean noisy
    comps = {name: {"kind": kind, "integrated": sl.stop - sl.start, "particle_mass": pm,
                    "scale_kpc": scale,
                    "centre_offset_kpc": np.median(pos[sl], axis=0).tolist()}
             for name, kind, sl, pm, scale in layout}
    return DriftResult(
        model=model.name, source=str(source),
        settings={"duration_gyr": duration, "outputs": outputs, "step_gyr": step,
                  "threshold": threshold, "sigma_limit": SIGMA_LIMIT,
                  "particles": int(len(orbits)), "not_integrated": skipped,
                  "frame": frame.as_dict()},
        components=comps, times_gyr=times,
        quantities=_drift_rows(layout, records, threshold), energy=energy, lz=lz,
        steps=step_info,
        timing={"setup_s": t_setup, "orbits_s": t_orbits,
                "total_s": time.perf_counter() - t_start},
        integration=integration_verdict(energy["p99"], nonfinite, len(orbits)))


def integration_verdict(energy_p99, nonfinite, particles):
    """Whether the orbits can be trusted: every state finite and the 99th percentile of
    the relative energy error at most ENERGY_BAR. Returns {"trusted", "reason",
    "energy_p99", "energy_bar", "nonfinite_particles"}; ``reason`` is one line or None."""
    reason = None
    if nonfinite:
        reason = (f"{nonfinite} of {particles} particles reached a non-finite position or "
                  f"velocity (overflow); shorten --time or the step")
    elif not energy_p99 <= ENERGY_BAR:       # NaN fails too
        reason = (f"the energy error (99th percentile {energy_p99:.2g}) is above the "
                  f"{ENERGY_BAR:g} bar, so drifts may be the integrator's; use a smaller "
                  f"--step, or more --outputs for a long --time")
    return {"trusted": reason is None, "reason": reason, "energy_p99": energy_p99,
            "energy_bar": ENERGY_BAR, "nonfinite_particles": int(nonfinite)}


def _integrate(orbits, layout, pos, vel, interval, outputs, quiet):
    """Advance ``orbits`` by ``outputs`` intervals; measurements at every output, the
    conservation of E and L_z (per particle: the largest error over the outputs) and the
    most particles in a non-finite state at any output."""
    e0, lz0 = orbits.energy(), orbits.lz()
    l0 = np.linalg.norm(np.cross(pos, vel), axis=1)[orbits.order]
    records = [measure_state(layout, pos, vel)]
    e_max, l_max = np.zeros(len(orbits)), np.zeros(len(orbits))
    e_series, l_series = [_error_stats(e_max)], [_error_stats(l_max)]
    nonfinite = 0
    with stage_bar("drift", outputs, progress_enabled(quiet), unit="output") as bar:
        for _ in range(outputs):
            orbits.advance(interval)
            nonfinite = max(nonfinite, orbits.nonfinite())
            de, dl = _conservation(orbits, e0, lz0, l0)
            np.maximum(e_max, de, out=e_max)
            np.maximum(l_max, dl, out=l_max)
            e_series.append(_error_stats(de))
            l_series.append(_error_stats(dl))
            records.append(measure_state(layout, orbits.position, orbits.velocity))
            bar.update(1)
    return (records, {**_error_stats(e_max), "bar": ENERGY_BAR, "series": e_series},
            {**_error_stats(l_max), "series": l_series}, nonfinite)


def _drift_rows(layout, records, threshold):
    """One row per (component, quantity, bin): series, drift, noise, flags."""
    rows = []
    for name, kind, _, _, scale in layout:
        for q, bins in bin_labels(kind, scale).items():
            vals = np.array([rec[(name, q)][0] for rec in records])     # (T, bins)
            errs = np.array([rec[(name, q)][1] for rec in records])
            unit = records[0][(name, q)][2]
            for b, (lo, hi) in enumerate(bins):
                rows.append(_row(name, kind, q, unit, lo, hi, vals[:, b], errs[:, b],
                                 threshold))
    return rows


def _row(name, kind, q, unit, lo, hi, v, e, threshold):
    start, end = v[0], v[-1]
    ok = np.isfinite(start) and np.isfinite(end) and start != 0
    drift = (end - start) / abs(start) if ok else np.nan
    noise = math.hypot(e[0], e[-1]) / abs(start) if ok else np.nan
    sig = drift / noise if ok and noise > 0 else np.nan
    flagged = bool(ok and abs(sig) > SIGMA_LIMIT)
    return {"component": name, "kind": kind, "quantity": q, "unit": unit,
            "bin_kpc": [float(lo), float(hi)], "values": v.tolist(), "errors": e.tolist(),
            "start": start, "end": end, "drift": drift, "noise": noise, "significance": sig,
            "scatter": float(np.nanstd(v) / abs(start)) if ok else np.nan,
            "flagged": flagged, "failed": bool(flagged and abs(drift) > threshold)}


# ------------------------------------------------------------------ snapshot, report


def parse_whole(value, key, least, default=None):
    """A whole number >= ``least`` from an option string or an int; None -> default."""
    if value is None:
        return default
    if isinstance(value, str):
        try:
            value = int(value.strip().replace("_", ""))
        except ValueError:
            raise ModelError(key, value, f"must be a whole number >= {least}") from None
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
        raise ModelError(key, value, f"must be a whole number >= {least}")
    return int(value)


def parse_number(value, key, default):
    """A finite number >= 0 from an option string or a float; None -> default."""
    if value is None:
        return default
    try:
        x = float(value) if isinstance(value, (str, int, float)) and not isinstance(value, bool) \
            else math.nan
    except ValueError:
        x = math.nan
    if not (math.isfinite(x) and x >= 0):
        raise ModelError(key, value, "must be a number >= 0, e.g. 0.02")
    return x


def drift_snapshot(path, duration, sample=None, step=None, seed=None, outputs=OUTPUTS,
                   threshold=THRESHOLD, quiet=True):
    """Run the drift test on an icgen snapshot (the model is rebuilt from its config).

    ``duration`` and ``step`` are strings with a time unit ("2 Gyr", "0.5 Myr") or
    floats in Gyr; ``sample`` the number of particles to integrate (None: all), drawn
    with ``seed`` (None: the snapshot's seed). Every option is checked before the file is
    read; a bad one raises ModelError naming it. The file is validated on opening and its
    values as they are read (icgen.snapshot).
    """
    duration = parse_time(duration, "--time")
    if duration is None:
        raise ModelError("--time", MISSING, "required, e.g. '2 Gyr'")
    step_text, step = step, parse_time(step, "--step", lowest=MIN_STEP_GYR)
    if step is not None and step > duration:
        raise ModelError("--step", step_text, f"is longer than --time ({duration:g} Gyr)")
    sample = parse_whole(sample, "--sample", 1)
    seed = parse_whole(seed, "--seed", 0)
    outputs = parse_whole(outputs, "--outputs", 1, OUTPUTS)
    threshold = parse_number(threshold, "--threshold", THRESHOLD)
    from ..model import MassModel
    t0 = time.perf_counter()
    with open_snapshot(path) as snap:
        seed = int(snap.attrs["seed"]) if seed is None else seed
        counts = {n: c.count for n, c in snap.components.items()}
        frame = snap.frame()
        skip = [n for n, k in snap.components.items() if k.kind in NOT_INTEGRATED]
        rows, weights = subset_rows({n: k for n, k in counts.items() if n not in skip},
                                    sample, seed)
        keys = ("position", "velocity", "mass")
        chosen = {n: {k: p[k] for k in keys} for n, p in snap.read_rows_internal(rows).items()}
        spec = snap.spec
    model = MassModel(spec)
    chosen.update({n: {"position": np.zeros((0, 3)), "velocity": np.zeros((0, 3)),
                       "mass": np.zeros(0)} for n in skip})       # listed, not integrated
    parts_total = sum(counts.values())
    t_read = time.perf_counter() - t0
    res = run_drift(model, chosen, duration, step, outputs, float(threshold), weights,
                    quiet, source=path, frame=frame)
    res.settings.update(sample=sample, seed=seed,
                        file_particles=int(parts_total))
    res.timing = {"read + model_s": t_read, **res.timing}
    return res


def _vec(v):
    return "(" + ", ".join(f"{c:+.3g}" for c in v) + ")"


def _fmt(x, spec):
    return "-" if x is None or not np.isfinite(x) else format(x, spec)


def format_report(res, all_rows=False):
    """Terminal text: settings, conservation, and the drift table (flagged rows, or all)."""
    from ..textout import format_table
    s, st, e = res.settings, res.steps, res.energy
    lines = [f"Drift of {res.model} ({res.source}): {s['particles']} particles, "
             f"{s['duration_gyr']:g} Gyr, {s['outputs']} outputs"]
    if st["mode"] == "global":
        lines.append(f"steps: one global step of {st['step_myr']:.4g} Myr")
    else:
        lines.append(f"steps: per particle, {st['accuracy']:g} x pericentre time: "
                     f"{st['step_myr_min']:.3g} .. {st['step_myr_max']:.3g} Myr (median "
                     f"{st['step_myr_median']:.3g}); {st['capped']} particles at the finest "
                     f"allowed step")
    lines.append(f"energy error |dE/E| (max over time): median {e['median']:.2e}, 99th "
                 f"percentile {e['p99']:.2e}, max {e['max']:.2e} (bar {e['bar']:g})")
    lines.append(f"L_z error |dL_z|/|L| (max over time): median {res.lz['median']:.2e}, "
                 f"max {res.lz['max']:.2e}")
    for name, why in s.get("not_integrated", {}).items():
        lines.append(f"not integrated: {name} ({why})")
    lines.append("measured and integrated about the galaxy's centre, found at "
                 + _vec(s["frame"]["position_kpc"]) + " kpc and " + _vec(s["frame"]["velocity_kms"])
                 + " km/s in the file (icgen.frame)")
    lines.append("median position at the start (potential centre at 0): " + "; ".join(
        f"{n} ({', '.join(f'{x:+.3g}' for x in c['centre_offset_kpc'])}) kpc"
        for n, c in res.components.items()))
    rows = []
    for q in res.quantities:
        if not (all_rows or q["flagged"]):
            continue
        flag = "FAIL" if q["failed"] else ("flag" if q["flagged"] else "")
        lo, hi = q["bin_kpc"]
        rows.append([q["component"], q["quantity"], f"{lo:.3g}-{hi:.3g}",
                     _fmt(q["start"], ".4g"), _fmt(q["end"], ".4g"),
                     _fmt(100 * q["drift"], "+.2f"), _fmt(100 * q["noise"], ".2f"),
                     _fmt(q["significance"], "+.1f"), flag])
    lines.append("")
    n_f, n_x = len(res.flagged), len(res.failed)
    lines.append(f"{len(res.quantities)} quantities; {n_f} drift beyond {s['sigma_limit']:g} "
                 f"sigma of the noise, {n_x} of them by more than {100 * s['threshold']:g} %")
    if rows:
        lines.append(format_table(["component", "quantity", "bin [kpc]", "start", "end",
                                   "drift %", "noise %", "sigma", ""], rows))
    lines.append("drift = (end - start)/|start|; noise = sqrt(se_start^2 + se_end^2)/|start| "
                 "(same particles, phase-mixed limit)")
    if not res.trusted:
        lines.append(f"INTEGRATION NOT TRUSTWORTHY (exit status {UNTRUSTED_STATUS}): "
                     f"{res.integration['reason']}")
    return "\n".join(lines)


def write_report(res, folder):
    """Write drift.json and drift.png into ``folder`` (made if needed); returns the paths."""
    from .drift_plots import plot_drift
    os.makedirs(folder, exist_ok=True)
    json_path = os.path.join(folder, "drift.json")
    png_path = os.path.join(folder, "drift.png")
    res.write_json(json_path)
    plot_drift(res, png_path)
    return json_path, png_path
