"""Equilibrium drift test: orbits of the model's particles in its own frozen potential.

Particles of a snapshot (or a seeded random subsample, proportional per component) are
integrated with the kick-drift-kick leapfrog of :mod:`icgen.integrate` in the tabulated
total potential of the model stored in the file. A model in equilibrium keeps its
distribution function, so every measured profile stays the same up to particle noise;
a model out of equilibrium (wrong velocities, a Jeans-moment cuspy halo; Kazantzidis,
Magorrian & Moore 2004, ApJ 601, 37) relaxes within a few orbital times and its profiles
move. Point masses (the fixed centre of the potential) and gas disks (their pressure
support is no force of the potential) are not integrated; the report says so.

The run depends on the integrator only through :class:`icgen.integrate.Integrator`
(:func:`measure_run`); :func:`run_drift` gives it :class:`icgen.integrate.Orbits` with the
steps of :mod:`icgen.diagnostics.drift_steps`. The report (text, JSON, PNG) is
:mod:`icgen.diagnostics.drift_report`.

**Measurements** at ``outputs + 1`` regular times: the binned profiles of
:mod:`icgen.diagnostics.measured_profiles` (disks: surface density, median |z|, sigma_R,
sigma_z, mean v_phi; halos and bulges: enclosed masses, sigma_r), each with its standard
error; per particle, the relative energy error |E(t) - E(0)|/|E(0)| and the L_z error
|L_z(t) - L_z(0)|/|L(0)|.

**Noise.** The drift end - start compares the same particles at two times: its variance is
2 s^2 (1 - rho), rho the correlation of the two measurements, near 1 at short times (the
same particles still fill the bin) and 0 once orbits have phase-mixed. The noise used,
sqrt(se_start^2 + se_end^2), is the mixed (rho = 0) limit: the largest value for rho >= 0,
so it errs toward fewer false alarms; the scatter of each quantity over the recorded times
is reported beside it as an empirical check. A drift is flagged beyond ``SIGMA_LIMIT``
times that noise, and fails the test when it is flagged and also larger than
``threshold`` (relative).

**Trust and exit status.** The drifts mean something only if the orbits are right: a run
whose relative energy error has a 99th percentile above ``ENERGY_BAR`` (1e-4), or in
which any particle reaches a NaN or infinite state, is not trustworthy; the report and
the JSON (``integration``) say so in one line. Exit status (``DriftResult.exit_status``):
0 no drift fails; 1 a drift fails the test; 2 bad input (nothing written); 3 the
integration is not trustworthy (whatever the drifts). The time is at most
``MAX_TIME_GYR`` (100 Gyr).

Units: kpc, km/s, Msun; times in Gyr at the edge, kpc/(km/s) inside.
"""
import math
import time
from dataclasses import asdict, dataclass, field

import astropy.units as u
import numpy as np

from ..errors import MISSING, ModelError
from ..frame import galaxy_frame, subset_rows
from ..kinds import kind_of
from ..integrate import Orbits
from ..progress import progress_enabled, stage_bar
from ..snapshot import check_values, open_snapshot
from ..units import TIME_UNIT_GYR, parse_quantity
from .drift_steps import choose_steps
from .json_report import json_safe, write_json
from .measured_profiles import Group, bin_labels, measure_state

__all__ = ["OUTPUTS", "SIGMA_LIMIT", "THRESHOLD", "ENERGY_BAR", "MAX_TIME_GYR",
           "MIN_STEP_GYR", "UNTRUSTED_STATUS", "DriftResult",
           "run_arguments", "integration_verdict", "measure_run", "drift_rows", "run_drift",
           "drift_snapshot", "subsample"]

#: Output intervals (records = OUTPUTS + 1): 40 resolve a few-orbit relaxation in time.
OUTPUTS = 40
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
#: Longest run, Gyr: seven Hubble times. Orbits in a frozen potential over more say
#: nothing about a galaxy, and the steps (a fraction of the output interval, at most
#: 2^MAX_LEVEL per interval) grow with the time.
MAX_TIME_GYR = 100.0
#: Shortest global step, Gyr (1 kyr): finer than the finest default step of any test run
#: here (6 kyr for 1 Gyr in 40 outputs) and far from an int64 overflow of step counts.
MIN_STEP_GYR = 1e-6
#: Exit status of a run whose integration cannot be trusted (energy error above
#: ENERGY_BAR, or a non-finite state); 1 is "a drift failed the test", 2 bad input.
UNTRUSTED_STATUS = 3


# ------------------------------------------------------------------ arguments


def _is_number(x):
    return isinstance(x, (int, float, np.integer, np.floating)) and not isinstance(x, bool)


def _gyr(value, name, lowest, highest):
    """A time in Gyr from a number or a string with a unit ("2 Gyr"), in (0, highest]
    and >= ``lowest``; ModelError naming ``name`` otherwise."""
    given = value
    if isinstance(value, str):
        value = parse_quantity(value, name, u.Gyr)
    low = f"[{lowest:g}" if lowest > 0 else "(0"
    if not (_is_number(value) and 0 < value and lowest <= value <= highest):
        raise ModelError(name, given, f"must be a time in {low}, {highest:g}] Gyr: a number "
                                      f"in Gyr or a string with a unit, e.g. '2 Gyr'")
    return float(value)


def _whole(value, name, least):
    """``value`` as an int if it is a whole number >= ``least``; ModelError otherwise."""
    if not (isinstance(value, (int, np.integer)) and not isinstance(value, bool)
            and value >= least):
        raise ModelError(name, value, f"must be a whole number >= {least}")
    return int(value)


def run_arguments(duration, step=None, outputs=OUTPUTS, threshold=THRESHOLD):
    """Checked (duration Gyr, step Gyr or None, outputs, threshold) of a drift run.

    ``duration`` and ``step`` are numbers in Gyr or strings with a time unit ("2 Gyr");
    duration in (0, MAX_TIME_GYR], step in [MIN_STEP_GYR, duration]; ``outputs`` a whole
    number >= 1, ``threshold`` a finite number >= 0. A bad one raises a one-line
    ModelError naming the argument.
    """
    duration = _gyr(duration, "duration", 0.0, MAX_TIME_GYR)
    step = None if step is None else _gyr(step, "step", MIN_STEP_GYR, duration)
    if not (_is_number(threshold) and math.isfinite(threshold) and threshold >= 0):
        raise ModelError("threshold", threshold, "must be a finite number >= 0, e.g. 0.02")
    return duration, step, _whole(outputs, "outputs", 1), float(threshold)


# ------------------------------------------------------------------ the result


@dataclass
class DriftResult:
    """Everything a drift run measures (JSON-ready through :meth:`to_dict`).

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
        return json_safe(asdict(self))

    def write_json(self, path):
        write_json(self.to_dict(), path)


# ------------------------------------------------------------------ the run


def subsample(parts, total, seed):
    """A random subsample of ``total`` particles of in-memory ``parts``, proportional per
    component (:func:`icgen.frame.subset_rows`). Returns (parts, weights)."""
    rows, weights = subset_rows({n: p["mass"].size for n, p in parts.items()}, total, seed)
    if total is None or all(w == 1.0 for w in weights.values()):
        return parts, weights
    return {n: {key: parts[n][key][idx] for key in ("position", "velocity", "mass")}
            for n, idx in rows.items()}, weights


def _layout(model, parts, weights):
    """(groups, pos, vel, skipped): the integrated components as measured-profile
    :class:`Group`s of the concatenated (N, 3) arrays; point masses and gas disks are
    left out (their Kind's ``not_integrated`` says why; icgen.kinds)."""
    groups, pos, vel, start, skipped = [], [], [], 0, {}
    for name, p in parts.items():
        comp = model.components.get(name)
        if comp is None:
            raise ModelError("particles", name, "no component of that name in the model")
        if kind_of(comp).not_integrated:
            skipped[name] = kind_of(comp).not_integrated
            continue
        if p["mass"].size == 0:
            continue
        n = p["mass"].size
        scale = comp.R_d if kind_of(comp).flattened else comp.scale
        pm = float(np.mean(p["mass"])) * weights.get(name, 1.0)
        groups.append(Group(name, comp.kind, slice(start, start + n), pm, scale))
        pos.append(np.asarray(p["position"], float))
        vel.append(np.asarray(p["velocity"], float))
        start += n
    if not groups:
        raise ModelError("particles", MISSING, "no particles to integrate (only point masses "
                                               "or gas?)")
    return groups, np.concatenate(pos), np.concatenate(vel), skipped


def run_drift(model, parts, duration, step=None, outputs=OUTPUTS, threshold=THRESHOLD,
              weights=None, quiet=True, source="particles", frame=None):
    """Integrate particles in the model's frozen potential and measure the drift.

    Parameters
    ----------
    model : MassModel
    parts : dict
        name -> {"position" (n, 3) kpc, "velocity" (n, 3) km/s, "mass" (n,) Msun}, e.g.
        from :func:`icgen.sampling.sample`.
    duration : float or str
        Integration time, Gyr (or a string with a unit, "2 Gyr").
    step : float or str, optional
        One global step in Gyr (or with a unit); None: a step per particle
        (:mod:`icgen.diagnostics.drift_steps`).
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
    duration, step, outputs, threshold = run_arguments(duration, step, outputs, threshold)
    for name, p in parts.items():
        for key in ("position", "velocity", "mass"):
            check_values(np.asarray(p[key], float), key, f"particles[{name!r}][{key!r}]")
    if frame is None:
        frame = galaxy_frame({n: p for n, p in parts.items() if p["mass"].size},
                             model.spec.seed)
    groups, pos, vel, skipped = _layout(model, frame.to_galaxy(parts), weights or {})
    interval = duration / outputs / TIME_UNIT_GYR
    m, step_info = choose_steps(model, pos, vel, interval,
                                None if step is None else step / TIME_UNIT_GYR)
    orbits = Orbits(pos, vel, model.potential.evaluate, m, model.potential.force_field())
    t_setup = time.perf_counter() - t_start
    t0 = time.perf_counter()
    records, energy, lz, nonfinite = measure_run(orbits, groups, interval, outputs, quiet)
    t_orbits = time.perf_counter() - t0
    times = [k * duration / outputs for k in range(outputs + 1)]
    step_info.update(python_force_calls=orbits.force_calls, steps_taken=orbits.steps_taken,
                     mean_steps_per_particle_per_gyr=float(m.mean() * outputs / duration))
    # a component whose centre is off the potential's centre (e.g. moved by removing the
    # centre of mass of a noisy realisation) oscillates about it: reported with the drift;
    # the median position, as the far particles of a halo make its mean noisy
    comps = {g.name: {"kind": g.kind, "integrated": g.rows.stop - g.rows.start,
                      "particle_mass": g.particle_mass, "scale_kpc": g.scale,
                      "centre_offset_kpc": np.median(pos[g.rows], axis=0).tolist()}
             for g in groups}
    return DriftResult(
        model=model.name, source=str(source),
        settings={"duration_gyr": duration, "outputs": outputs, "step_gyr": step,
                  "threshold": threshold, "sigma_limit": SIGMA_LIMIT,
                  "particles": int(len(orbits)), "not_integrated": skipped,
                  "frame": frame.as_dict()},
        components=comps, times_gyr=times,
        quantities=drift_rows(groups, records, threshold), energy=energy, lz=lz,
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


def _error_stats(rel):
    return {"median": float(np.median(rel)), "p99": float(np.quantile(rel, 0.99)),
            "max": float(rel.max())}


def _lz(pos, vel):
    """Specific angular momentum about the z axis, x v_y - y v_x (kpc km/s), (N,)."""
    return pos[:, 0] * vel[:, 1] - pos[:, 1] * vel[:, 0]


def measure_run(integrator, groups, interval, outputs, quiet=True):
    """Advance an :class:`icgen.integrate.Integrator` by ``outputs`` intervals of
    ``interval`` (internal time units) and measure every state.

    ``groups`` are the measured-profile groups (:class:`Group`) of the integrator's
    particles. Returns (records, energy, lz, nonfinite): the measurements of each state
    (:func:`measure_state`, start included); the conservation of E and L_z (per particle
    the largest relative error over the outputs: median, p99, max, and those statistics
    at each output in ``series``); the most particles in a non-finite state at any output.
    """
    pos, vel = integrator.positions(), integrator.velocities()
    e0, lz0 = integrator.energies(), _lz(pos, vel)
    l0 = np.linalg.norm(np.cross(pos, vel), axis=1)
    records = [measure_state(groups, pos, vel)]
    e_max, l_max = np.zeros(len(integrator)), np.zeros(len(integrator))
    e_series, l_series = [_error_stats(e_max)], [_error_stats(l_max)]
    nonfinite = 0
    with stage_bar("drift", outputs, progress_enabled(quiet), unit="output") as bar:
        for _ in range(outputs):
            integrator.advance(interval)
            nonfinite = max(nonfinite, integrator.nonfinite())
            pos, vel = integrator.positions(), integrator.velocities()
            de = np.abs(integrator.energies() - e0) / np.abs(e0)
            dl = np.abs(_lz(pos, vel) - lz0) / np.where(l0 > 0, l0, 1.0)
            np.maximum(e_max, de, out=e_max)
            np.maximum(l_max, dl, out=l_max)
            e_series.append(_error_stats(de))
            l_series.append(_error_stats(dl))
            records.append(measure_state(groups, pos, vel))
            bar.update(1)
    return (records, {**_error_stats(e_max), "bar": ENERGY_BAR, "series": e_series},
            {**_error_stats(l_max), "series": l_series}, nonfinite)


def drift_rows(groups, records, threshold):
    """One row per (component, quantity, bin) of ``records`` (from :func:`measure_run`):
    series, drift, noise, flags (module docstring)."""
    rows = []
    for name, kind, _, _, scale in groups:
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


# ------------------------------------------------------------------ a snapshot


def drift_snapshot(path, duration, sample=None, step=None, seed=None, outputs=OUTPUTS,
                   threshold=THRESHOLD, quiet=True):
    """Run the drift test on an icgen snapshot (the model is rebuilt from its config).

    ``duration`` and ``step`` are strings with a time unit ("2 Gyr", "0.5 Myr") or
    floats in Gyr; ``sample`` the number of particles to integrate (None: all), drawn
    with ``seed`` (None: the snapshot's seed). Every option is checked before the file is
    read; a bad one raises ModelError naming it. The file is validated on opening and its
    values as they are read (icgen.snapshot).
    """
    duration, step, outputs, threshold = run_arguments(duration, step, outputs, threshold)
    sample = None if sample is None else _whole(sample, "sample", 1)
    seed = None if seed is None else _whole(seed, "seed", 0)
    from ..model import MassModel
    t0 = time.perf_counter()
    with open_snapshot(path) as snap:
        seed = int(snap.attrs["seed"]) if seed is None else seed
        counts = {n: c.count for n, c in snap.components.items()}
        frame = snap.frame()
        skip = [n for n, k in snap.components.items() if kind_of(k).not_integrated]
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
