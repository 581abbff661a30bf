"""Summary figure of a mock observation (matplotlib, Agg): velocity field with the rings,
recovered curves over the truth, and the model's decomposition."""
import math

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ..kinds import kind_of  # noqa: E402

__all__ = ["plot_mock", "ring_outline"]


def ring_outline(radius, position_angle, inclination, centre=(0.0, 0.0), n=181):
    """(east, north) of a circle of the disk plane seen on the sky (same unit as radius)."""
    theta = np.linspace(0.0, 2 * np.pi, n)
    along = radius * np.cos(theta)
    across = radius * np.sin(theta) * math.cos(math.radians(inclination))
    pa = math.radians(position_angle)
    east = along * math.sin(pa) - across * math.cos(pa) + centre[0]
    north = along * math.cos(pa) + across * math.sin(pa) + centre[1]
    return east, north


def _velocity_field(ax, obs):
    grid, g = obs.grid, obs.geometry
    half = 0.5 * grid.pixel
    east_max = grid.cx * grid.pixel + half
    east_min = -(grid.nx - 1 - grid.cx) * grid.pixel - half
    north_min = -grid.cy * grid.pixel - half
    north_max = (grid.ny - 1 - grid.cy) * grid.pixel + half
    v = obs.mom1 - g.systemic
    lim = np.nanpercentile(np.abs(v), 99) if np.isfinite(v).any() else 1.0
    im = ax.imshow(v, origin="lower", cmap="RdBu_r", vmin=-lim, vmax=lim,
                   extent=(east_max, east_min, north_min, north_max))
    plt.colorbar(im, ax=ax, label=r"$v_{\rm los} - v_{\rm sys}$ [km s$^{-1}$]", shrink=0.8)
    fitted = obs.rings.meta.get("geometry", {})
    pa = fitted.get("pa", g.position_angle)
    inc = fitted.get("inc", g.inclination)
    centre = (fitted.get("xc", 0.0), fitted.get("yc", 0.0))
    edges = np.append(obs.rings["radius_arcsec"].value - 0.5 * obs.instrument.beam,
                      obs.rings["radius_arcsec"].value[-1] + 0.5 * obs.instrument.beam)
    for r in edges[1::2]:
        ax.plot(*ring_outline(r, pa, inc, centre), color="k", lw=0.5, alpha=0.6)
    r_end = edges[-1]
    ax.plot([-r_end * math.sin(math.radians(pa)), r_end * math.sin(math.radians(pa))],
            [-r_end * math.cos(math.radians(pa)), r_end * math.cos(math.radians(pa))],
            color="k", lw=0.8, ls="--")
    beam = plt.Circle((east_max - obs.instrument.beam, north_min + obs.instrument.beam),
                      0.5 * obs.instrument.beam, color="k", fill=False)
    ax.add_patch(beam)
    ax.set_xlabel("east offset [arcsec]")
    ax.set_ylabel("north offset [arcsec]")
    ax.set_title(f"moment 1, i = {g.inclination:g}, PA = {g.position_angle:g} deg")


def _curves(ax, obs):
    r = obs.rings["radius"].value
    t = obs.truth
    ax.plot(t["radius"].value, t["v_circ_total"].value, color="k", lw=2, label="v_c total (model)")
    ax.plot(t["radius"].value, t["v_phi_mean"].value, color="tab:green", lw=1.5,
            label=f"mean v_phi of {obs.tracer} (particles)")
    ax.errorbar(r, obs.rings["v_rot"].value, yerr=obs.rings["v_rot_err"].value, fmt="o",
                ms=3.5, color="tab:blue", capsize=2, label=f"tilted rings ({obs.rings.meta['mode']})")
    ax.plot(obs.major_axis["radius"].value, obs.major_axis["v_rot_peak"].value, "s", ms=3,
            mfc="none", color="tab:orange", label="major axis (peak)")
    beam = obs.truth["beam"].value[0]
    ax.axvspan(0, 3 * beam, color="0.85", zorder=0, label="< 3 beams")
    ax.set_xlim(0, t["r_out"].value[-1])
    ax.set_ylim(0, None)
    ax.set_xlabel("R [kpc]")
    ax.set_ylabel(r"$v$ [km s$^{-1}$]")
    ax.set_title("recovered over truth")
    ax.legend(fontsize=7, loc="lower right", frameon=False)


def _decomposition(ax, obs):
    c = obs.model_curve
    R = c["radius"].value
    for name, kind in obs.kinds.items():
        color, ls = kind_of(kind).style
        ax.plot(R, c[f"v_circ_{name}"].value, color=color, ls=ls, lw=1.6, label=name)
    ax.plot(R, c["v_circ_total"].value, color="k", lw=2.2, label="total")
    ax.errorbar(obs.rings["radius"].value, obs.rings["v_rot"].value,
                yerr=obs.rings["v_rot_err"].value, fmt="o", ms=3, color="tab:blue", capsize=2,
                label="observed")
    ax.set_xlim(0, R.max())
    ax.set_ylim(0, None)
    ax.set_xlabel("R [kpc]")
    ax.set_title("model decomposition")
    ax.legend(fontsize=7, loc="lower right", frameon=False)


def plot_mock(obs, path):
    """Three panels (velocity field, curves, decomposition) written as PNG to ``path``."""
    fig, axes = plt.subplots(1, 3, figsize=(16, 5), dpi=100)
    _velocity_field(axes[0], obs)
    _curves(axes[1], obs)
    _decomposition(axes[2], obs)
    fig.tight_layout()
    fig.savefig(path, format="png")
    plt.close(fig)
    return path
