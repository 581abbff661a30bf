"""Matplotlib figures (Agg backend, written to PNG)."""
import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402

from ..kinds import kind_of  # noqa: E402



def plot_rotation_curve(table, kinds, path, summary=None, title=None):
    """Rotation-curve decomposition: total (thick black) and each component's v_c.

    Parameters
    ----------
    table : QTable from diagnostics.curve.rotation_curve
    kinds : dict component name -> kind (for colours and legend)
    path : output PNG path
    summary : CurveSummary, optional (marks 2.2 R_d and v_max)
    """
    fig, ax = plt.subplots(figsize=(7, 4.6), dpi=120)
    R = table["radius"].value
    seen = {}
    for name, kind in kinds.items():
        color, ls = kind_of(kind).style
        n = seen.setdefault(kind, 0)
        seen[kind] += 1
        ax.plot(R, table[f"v_circ_{name}"].value, color=color, ls=ls, lw=1.8,
                alpha=1.0 - 0.25 * n, label=name if name == kind else f"{name} ({kind})")
    ax.plot(R, table["v_circ_total"].value, color="k", lw=2.6, label="total")
    if summary is not None and summary.scale_length:
        r22 = 2.2 * summary.scale_length
        ax.axvline(r22, color="0.6", lw=0.8)
        ax.text(r22, 0.03, r" $2.2\,R_d$", transform=ax.get_xaxis_transform(), color="0.4")
    ax.set_xlim(0, R.max())
    ax.set_ylim(0, None)
    ax.set_xlabel("R [kpc]")
    ax.set_ylabel(r"$v_{\rm c}$ [km s$^{-1}$]")
    ax.set_title(title or f"Rotation-curve decomposition: {table.meta.get('model', '')}")
    ax.legend(loc="lower right", frameon=False, fontsize=9)
    ax.grid(alpha=0.25)
    fig.tight_layout()
    fig.savefig(path)
    plt.close(fig)
    return path
