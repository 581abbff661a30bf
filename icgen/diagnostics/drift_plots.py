"""Figure of an equilibrium drift run: each measured quantity against time.

One row per integrated component (disks: surface density, median |z|, sigma_R, sigma_z,
mean v_phi; halos and bulges: enclosed masses, sigma_r), one line per bin showing the
relative change Q(t)/Q(0) - 1; thick lines are drifts flagged beyond the noise. The last
row shows the integrator's conservation of E and L_z.
"""
import numpy as np

from .plots import plt

LABELS = {"surface_density": r"$\Sigma$", "median_abs_z": r"median $|z|$",
          "sigma_R": r"$\sigma_R$", "sigma_z": r"$\sigma_z$", "mean_v_phi": r"$\bar v_\phi$",
          "enclosed_mass": r"$M(<r)$", "sigma_r": r"$\sigma_r$"}
COLUMNS = 5


def _panel(ax, times, rows, threshold):
    colors = plt.cm.viridis(np.linspace(0.0, 0.9, max(len(rows), 1)))
    for color, q in zip(colors, rows):
        v = np.array([np.nan if x is None else x for x in q["values"]], float)
        if not np.isfinite(v[0]) or v[0] == 0:
            continue
        lo, hi = q["bin_kpc"]
        label = f"{lo:.3g}-{hi:.3g} kpc" + (" *" if q["flagged"] else "")
        ax.plot(times, 100 * (v / v[0] - 1), color=color, lw=2.4 if q["flagged"] else 1.0,
                label=label)
    for sign in (-1, 1):
        ax.axhline(100 * sign * threshold, color="tab:red", lw=0.8, ls=":")
    ax.axhline(0, color="0.5", lw=0.6)
    ax.grid(alpha=0.25)
    ax.legend(fontsize=5.5, frameon=False, ncol=2)


def _conservation(ax_e, ax_l, res):
    t = res["times_gyr"]
    for key, style in (("median", "-"), ("p99", "--"), ("max", ":")):
        for ax, block in ((ax_e, res["energy"]), (ax_l, res["lz"])):
            y = np.array([s[key] or 0.0 for s in block["series"]], float)
            ax.plot(t[1:], np.maximum(y[1:], 1e-17), "k", ls=style, label=key)
    ax_e.axhline(res["energy"]["bar"], color="tab:red", lw=0.8, ls=":")
    ax_e.set_title(r"$|E(t) - E(0)| / |E(0)|$", fontsize=9)
    ax_l.set_title(r"$|L_z(t) - L_z(0)| / |L(0)|$", fontsize=9)
    for ax in (ax_e, ax_l):
        ax.set_yscale("log")
        ax.set_xlabel("t [Gyr]")
        ax.grid(alpha=0.25, which="both")
        ax.legend(fontsize=7, frameon=False)


def plot_drift(result, path):
    """Write the drift figure (PNG) of a DriftResult (or its ``to_dict()``) to ``path``."""
    res = result if isinstance(result, dict) else result.to_dict()
    groups = {}
    for q in res["quantities"]:
        groups.setdefault(q["component"], {}).setdefault(q["quantity"], []).append(q)
    n_rows = len(groups) + 1
    fig, axes = plt.subplots(n_rows, COLUMNS, figsize=(3.2 * COLUMNS, 2.5 * n_rows), dpi=110,
                             squeeze=False)
    threshold = res["settings"]["threshold"]
    for row, (name, quantities) in zip(axes, groups.items()):
        for ax in row[len(quantities):]:
            ax.set_axis_off()
        for ax, (q, rows) in zip(row, quantities.items()):
            _panel(ax, res["times_gyr"], rows, threshold)
            ax.set_title(f"{name}: {LABELS.get(q, q)}", fontsize=9)
            ax.set_ylabel("change [%]", fontsize=8)
    _conservation(axes[-1][0], axes[-1][1], res)
    for ax in axes[-1][2:]:
        ax.set_axis_off()
    fig.suptitle(f"Drift in the frozen potential: {res['model']}  (thick, *: beyond "
                 f"{res['settings']['sigma_limit']:g} sigma of the noise; dotted red: "
                 f"+-{100 * threshold:g} %)", fontsize=10)
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path
