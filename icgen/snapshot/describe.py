"""``icgen info``: a short human summary of a snapshot."""
import os
import time

from ..textout import format_table
from .reader import open_snapshot

__all__ = ["describe"]


def describe(path, scan=True):
    """Short human summary of a snapshot. The header is always validated; with ``scan``
    every value is read once and checked too (:mod:`icgen.snapshot.validate`), which the
    summary says."""
    with open_snapshot(path) as snap:
        attrs, comps = snap.attrs, snap.components
        t0 = time.perf_counter()
        scanned = snap.scan() if scan else None
        t_scan = time.perf_counter() - t0
    mass_unit = attrs["mass_unit"]
    rows = []
    for name, c in comps.items():
        storage = c.dtype + (f", {c.compression}" if c.compression else "")
        rows.append([name, c.kind, f"{c.count:,}", f"{c.total_mass / c.count:.4g}",
                     f"{c.total_mass:.4g}", storage])
    total = sum(c.count for c in comps.values())
    rows.append(["total", "", f"{total:,}", "",
                 f"{sum(c.total_mass for c in comps.values()):.4g}", ""])
    headers = ["component", "kind", "particles", f"m/particle [{mass_unit}]",
               f"total mass [{mass_unit}]", "storage"]
    size = os.path.getsize(path)
    checked = (f"header and all {scanned:,} particles' values checked ({t_scan:.2f} s)"
               if scan else "header checked; values not scanned (--quick)")
    lines = [f"icgen snapshot {path} ({size / 1e6:.1f} MB), schema {attrs['schema']} "
             f"version {attrs['schema_version']}",
             f"model:    {snap.spec.name} (seed {attrs['seed']})",
             f"created:  {attrs['created']} by icgen {attrs['icgen_version']}",
             f"units:    length {attrs['length_unit']}, velocity {attrs['velocity_unit']}, "
             f"mass {mass_unit}",
             f"G:        {attrs['G']:.7g} {attrs['length_unit']} ({attrs['velocity_unit']})^2"
             f" / ({mass_unit})",
             f"valid:    {checked}", "",
             format_table(headers, rows)]
    return "\n".join(lines)
