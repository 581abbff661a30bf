"""The report of a drift run: terminal text, and the folder of drift.json and drift.png.

Works from a :class:`~icgen.diagnostics.drift.DriftResult` alone (the figure is
:mod:`icgen.diagnostics.drift_plots`).
"""
import os

import numpy as np

from ..textout import format_table

__all__ = ["format_report", "write_report"]


def _vec(v):
    return "(" + ", ".join(f"{c:+.3g}" for c in v) + ")"


def _fmt(x, spec):
    return "-" if x is None or not np.isfinite(x) else format(x, spec)


def _header(res):
    """Lines of settings, steps, conservation, components left out and the frame."""
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
    return lines


def format_report(res, all_rows=False):
    """Terminal text: settings, conservation, and the drift table (flagged rows, or all)."""
    s = res.settings
    lines = _header(res)
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
        lines.append(f"INTEGRATION NOT TRUSTWORTHY (exit status {res.exit_status}): "
                     f"{res.integration['reason']}")
    return "\n".join(lines)


def write_report(res, folder):
    """Write drift.json and drift.png into ``folder`` (made if needed); returns the paths."""
    from .drift_plots import plot_drift          # matplotlib, only when a figure is asked
    os.makedirs(folder, exist_ok=True)
    json_path = os.path.join(folder, "drift.json")
    png_path = os.path.join(folder, "drift.png")
    res.write_json(json_path)
    plot_drift(res, png_path)
    return json_path, png_path
