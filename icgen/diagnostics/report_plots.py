"""The figure of ``icgen check``: a 3 x 3 panel PNG of measured points with their standard
errors against the model's predictions, drawn from a
:class:`~icgen.diagnostics.check_result.CheckResult` alone."""
import numpy as np

from ..kinds import kind_of

PANELS = (3, 3)


def _rows(result, quantity, disks=None):
    """Rows of one quantity, optionally only of disks (``disks`` True: flattened kinds,
    False: the others; icgen.kinds)."""
    return [r for r in result.rows if r.quantity == quantity
            and (disks is None or (r.component in result.kinds
                                   and kind_of(result.kinds[r.component]).flattened == disks))]


def _style(result, name):
    if name == "total":
        return "k", "-"
    return kind_of(result.kinds[name]).style if name in result.kinds else ("k", "-")


def _points(ax, row, color, label=None, scale=1.0, marker="o"):
    """Measured values with error bars (untested bins hollow) and the prediction as a line."""
    x, m, p, e = (np.asarray(a, float) for a in (row.x, row.measured, row.predicted, row.error))
    t = np.asarray(row.tested, bool)
    ax.plot(x, p * scale, color=color, lw=1.5, label=label)
    ax.errorbar(x[t], m[t] * scale, yerr=e[t] * scale, fmt=marker, ms=3.5, color=color,
                elinewidth=1, capsize=0)
    if (~t).any():
        ax.plot(x[~t], m[~t] * scale, marker, ms=3.5, mfc="none", color=color)


def _rotation_curve(ax, result):
    for row in _rows(result, "v_c midplane"):
        color, ls = _style(result, row.component)
        _points(ax, row, color, row.component)
    ax.set_xlabel("R [kpc]")
    ax.set_ylabel(r"$v_c$ [km s$^{-1}$]")
    ax.set_title("Midplane rotation curve (lines: model)")
    ax.set_ylim(0, None)
    ax.legend(frameon=False, fontsize=7)


def _residuals(ax, result):
    for row in _rows(result, "v_c midplane"):
        color, _ = _style(result, row.component)
        ax.plot(row.x, row.deviations(), "o-", ms=3, lw=0.8, color=color, label=row.component)
    _band(ax, result.n_sigma)
    ax.set_xscale("log")
    ax.set_xlabel("R [kpc]")
    ax.set_ylabel("(measured - model) / error")
    ax.set_title("Rotation-curve residuals")


def _band(ax, n):
    ax.axhspan(-n, n, color="tab:green", alpha=0.08)
    ax.axhline(0, color="0.5", lw=0.8)


def _profiles(ax, result, quantity, disks, ylabel, title):
    for row in _rows(result, quantity, disks):
        color, _ = _style(result, row.component)
        _points(ax, row, color, row.component)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("R [kpc]" if disks else "r [kpc]")
    ax.set_ylabel(ylabel)
    ax.set_title(title)
    ax.legend(frameon=False, fontsize=7)


def _vertical(ax, result):
    for row in _rows(result, "vertical profile"):
        groups = {}
        for i, label in enumerate(row.labels):
            groups.setdefault(label.split(",")[0], []).append(i)
        for k, (label, ids) in enumerate(groups.items()):
            m, p, e = (np.asarray(a, float)[ids] for a in (row.measured, row.predicted, row.error))
            x = np.asarray(row.x, float)[ids] * (1 + 0.03 * k)
            ax.errorbar(x, m / p, yerr=e / p, fmt="o-", ms=3, lw=0.8,
                        label=f"{row.component}: {label} kpc")
    ax.axhline(1, color="0.5", lw=0.8)
    ax.set_xscale("log")
    ax.set_xlabel("|z| [kpc]")
    ax.set_ylabel("measured / model fraction")
    ax.set_title("Disk vertical profile")
    ax.legend(frameon=False, fontsize=6)


def _kinematics(ax, result, keys, disks, title):
    markers = "osD^v"
    colors = ["tab:blue", "tab:red", "tab:green", "tab:purple", "tab:brown"]
    for j, key in enumerate(keys):
        for i, row in enumerate(_rows(result, key, disks)):
            label = key if i == 0 else None
            _points(ax, row, colors[j % 5], label, marker=markers[i % 5])
    ax.set_xscale("log")
    ax.set_xlabel("R [kpc]" if disks else "r [kpc]")
    ax.set_ylabel(r"km s$^{-1}$")
    ax.set_title(title)
    ax.legend(frameon=False, fontsize=7)


def _toomre(ax, result):
    for row in _rows(result, "Toomre Q"):
        _points(ax, row, "tab:blue", row.component)
    ax.axhline(1, color="tab:red", lw=0.8, ls="--")
    ax.set_xscale("log")
    ax.set_xlabel("R [kpc]")
    ax.set_ylabel("Toomre Q")
    ax.set_title("Toomre Q from the particles")
    ax.legend(frameon=False, fontsize=7)


def _summary(ax, result):
    names = [f"{r.quantity} ({r.component})" for r in result.rows]
    worst = [abs(r.worst()[1]) / r.limit * result.n_sigma if r.worst()[0] is not None else 0
             for r in result.rows]
    colors = ["tab:green" if r.passed else "tab:red" for r in result.rows]
    y = np.arange(len(names))
    ax.barh(y, worst, color=colors)
    ax.axvline(result.n_sigma, color="k", lw=0.8, ls="--")
    ax.set_yticks(y, names, fontsize=5)
    ax.invert_yaxis()
    ax.set_xlabel("worst |deviation| / error (scaled to the tolerance)")
    ax.set_title("All checks: " + ("PASS" if result.passed else f"{len(result.failed())} FAIL"))


def plot_report(result, path):
    """Write the 3 x 3 panel report of a CheckResult to ``path`` (PNG); returns path."""
    from .plots import plt
    fig, axes = plt.subplots(*PANELS, figsize=(16, 13.5), dpi=100)
    a = axes.ravel()
    _rotation_curve(a[0], result)
    _residuals(a[1], result)
    _profiles(a[2], result, "surface density", True,
              r"$\Sigma$ [M$_\odot$ kpc$^{-2}$]", "Disk surface density")
    _vertical(a[3], result)
    _profiles(a[4], result, "density", False, r"$\rho$ [M$_\odot$ kpc$^{-3}$]",
              "Spheroid densities")
    _kinematics(a[5], result, ("mean v_phi", "sigma_R", "sigma_phi", "sigma_z"), True,
                "Disk kinematics")
    _kinematics(a[6], result, ("sigma_r", "sigma_theta", "sigma_phi"), False,
                "Spheroid dispersions")
    _toomre(a[7], result)
    _summary(a[8], result)
    for ax in a:
        ax.grid(alpha=0.2, which="both")
    fig.suptitle(f"icgen check: {result.model}" + (f"  ({result.path})" if result.path else ""))
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path
