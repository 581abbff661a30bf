"""``icgen check``: measure a snapshot's particles and compare every figure with the model.

Each measured quantity (in radial bins, or a single number) is set against the prediction
of the model stored in the snapshot, with a tolerance of ``n_sigma`` standard errors of
that bin (particle noise: see :mod:`icgen.diagnostics.measure`). A row passes when every
tested bin does. Predictions:

- midplane rotation curve: the analytic v_c^2 = R dPhi/dR of each component and the total;
- densities: the expected mass of each bin, integral of the profile over the bin;
  noise binomial, m sqrt(N p (1 - p)) for the bin's mass fraction p;
- velocity moments: those of the method that sampled each component, recomputed
  independently of its sampler's tables (``model.kinematics(name)``, icgen.kinds): a
  wrong table in a sampler shows here. Disks: the Jeans moments (vertical Jeans integral
  by Gauss-Laguerre quadrature at each particle, kappa and the asymmetric drift by
  centred differences), pooled over each bin's particles (so a bin's spread of mean
  rotation enters sigma_phi as it does in the measurement); spheroids: sigma_r^2 from
  the spherical Jeans equation in the spherically averaged total potential with the
  Osipkov-Merritt beta = r^2/(r^2 + r_a^2) (Binney & Tremaine 2008, eq. 4.215; equal to
  the second moment of the Eddington or Osipkov-Merritt DF); gas disks: the
  pressure-supported rotation and the internal energy c_s^2/(gamma - 1);
- gas disks: surface density and the vertical profile of the hydrostatic layer at each
  annulus;
- Toomre Q = sigma_R kappa / (3.36 G Sigma) (Toomre 1964, ApJ 139, 1217) with measured and
  predicted sigma_R and Sigma;
- the galaxy's frame (icgen.frame), shown; the centre of mass at the frame's centre within
  the noise;
  net angular momentum: that of the predicted mean rotation;
- virial ratio 2T/|W| = 1 for each component and the total, W = sum m x.F with the
  model's force (Clausius virial; Binney & Tremaine 2008, sec. 4.8, from memory): a steady state
  in a fixed potential satisfies it component by component.

Units inside: kpc, km/s, Msun.
"""
import time

import numpy as np

from ..errors import MISSING, ModelError
from ..frame import galaxy_frame
from . import check_components as components
from . import check_sums as sums
from .check_result import CheckResult, write_outputs

__all__ = ["N_SIGMA", "check_snapshot", "check_particles", "read_particles", "write_outputs",
           "CheckResult"]

#: Default tolerance, in standard errors of each bin. With ~500 bins in a check, Gaussian
#: noise exceeds 5 sigma somewhere with probability ~3e-4; 4.5 sigma would give 3e-3.
N_SIGMA = 5.0


def _disk_moments(model, name, p):
    """The disk's moments at each particle (dict of (n,) arrays; model.kinematics)."""
    x = p["position"]
    return model.kinematics(name).moments(np.hypot(x[:, 0], x[:, 1]), x[:, 2])


# ------------------------------------------------------------------ entry points


def check_particles(model, parts, n_sigma=N_SIGMA, softening=None, azimuths=sums.AZIMUTHS,
                    max_sources=sums.MAX_SOURCES, seed=0, path=None):
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
    softening = sums.default_softening(model) if softening is None else float(softening)
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
    res.rows += sums.centre_rows(parts, frame, n_sigma)
    local = frame.to_galaxy(parts)
    res.rows += _timed(timing, "rotation curve", lambda: sums.rotation_curve_rows(
        model, local, sums.ring_radii(model, softening), opts, n_sigma))
    kind = {name: model.kind(name) for name in model.components}
    preds = _timed(timing, "disk moments", lambda: {
        n: _disk_moments(model, n, local[n]) for n in kind if kind[n].stellar_disk})
    res.rows += _timed(timing, "disks", lambda: [
        r for n in preds for r in components.disk_rows(model, n, local[n], preds[n], n_sigma)])
    res.rows += _timed(timing, "gas", lambda: [
        r for n in kind if kind[n].pressure
        for r in components.gas_rows(model, n, local[n], n_sigma)])
    res.rows += _timed(timing, "spheroids", lambda: [
        r for n in kind if kind[n].spheroid
        for r in components.spheroid_rows(model, n, local[n], n_sigma)])
    res.rows += _timed(timing, "angular momentum, virial", lambda: (
        sums.angular_momentum_rows(model, local, preds, n_sigma)
        + sums.virial_rows(model, local, n_sigma)))
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


def check_snapshot(path, **options):
    """Read an icgen snapshot and check it against its stored model (CheckResult).

    ``options`` are those of :func:`check_particles`.
    """
    t0 = time.perf_counter()
    model, parts, curve = read_particles(path)
    t_read = time.perf_counter() - t0
    res = check_particles(model, parts, path=path, **options)
    if curve:
        res.rows.insert(0, sums.stored_curve_row(model, curve))
    res.timing = {"read + model": t_read, **res.timing}
    return res
