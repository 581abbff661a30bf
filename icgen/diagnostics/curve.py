"""Analytic midplane rotation curve of a model, decomposed by component, and derived numbers.

v_c^2(R) = R dPhi/dR at z = 0; for spheres this is G M(<r)/r. Components add in quadrature:
v_total^2 = sum_i v_i^2 (common practice in rotation-curve decomposition).
"""
from dataclasses import dataclass, field

import numpy as np
from astropy import units as u
from astropy.table import QTable
from scipy import optimize

from ..kinds import kind_of

def reference_scale_length(model):
    """Scale length (kpc) of the most massive disk, or None without disks."""
    return model.reference_scale_length()


def default_radii(model, n=120):
    """The model's curve radii (kpc, :meth:`icgen.model.MassModel.curve_radii`)."""
    return model.curve_radii(n)


def rotation_curve(model, radii=None):
    """QTable with ``radius`` (kpc), ``v_circ_total`` and ``v_circ_<name>`` (km/s), from
    :meth:`icgen.model.MassModel.rotation_curve`."""
    R, speeds = model.rotation_curve(radii)
    t = QTable()
    t["radius"] = R * u.kpc
    for name, v in speeds.items():
        t[f"v_circ_{name}"] = v * u.km / u.s
    t.meta["model"] = model.name
    t.meta["note"] = "analytic midplane circular speed, v^2 = R dPhi/dR at z = 0"
    return t


@dataclass
class CurveSummary:
    """Derived numbers of a rotation curve (kpc, km/s, Msun)."""
    v_max: float
    r_max: float
    scale_length: float | None = None
    v_22: float | None = None
    disk_fraction_22: float | None = None
    radii: list = field(default_factory=list)
    enclosed: dict = field(default_factory=dict)      # name -> [M(<r) for r in radii]
    dark_to_baryonic: list = field(default_factory=list)


def summarize(model, radii=None, r_search=None):
    """v_max and where, v_c and disk fraction v_disk/v_total at 2.2 R_d (sum of disks in
    quadrature), enclosed masses and dark-to-baryonic ratio within ``radii`` (kpc)."""
    if r_search is None:
        # the whole galaxy: out to the largest truncation radius (NFW r200) or extent/10
        outer = [getattr(c, "r_t", c.extent / 10) for c in model.components.values()]
        r_search = max([default_radii(model)[-1]] + outer)
    grid = np.geomspace(r_search * 1e-3, r_search, 400)
    v = model.circular_speed(grid)
    i = int(np.argmax(v))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
    res = optimize.minimize_scalar(lambda r: -model.circular_speed(np.array([r]))[0],
                                   bounds=(lo, hi), method="bounded")
    s = CurveSummary(v_max=float(-res.fun), r_max=float(res.x))
    r_d = reference_scale_length(model)
    if r_d is not None:
        s.scale_length = r_d
        r22 = np.array([2.2 * r_d])
        s.v_22 = float(model.circular_speed(r22)[0])
        v_disk2 = sum(model.circular_speed(r22, d.name)[0] ** 2 for d in model.disks)
        s.disk_fraction_22 = float(np.sqrt(max(v_disk2, 0.0)) / s.v_22)
    if radii is None:
        radii = [2.2 * r_d, 5 * r_d, 10 * r_d] if r_d else list(default_radii(model)[[29, 59, 119]])
    s.radii = [float(r) for r in radii]
    r = np.asarray(s.radii)
    dark = np.zeros_like(r)
    bary = np.zeros_like(r)
    for name, comp in model.components.items():
        m = model.enclosed_mass(r, name)
        s.enclosed[name] = [float(x) for x in m]
        if not kind_of(comp).dark:
            bary += m
        else:
            dark += m
    with np.errstate(divide="ignore"):
        s.dark_to_baryonic = [float(x) for x in np.where(bary > 0, dark / bary, np.inf)]
    return s
