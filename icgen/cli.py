"""Command-line interface: parses arguments, calls the library, prints. ``main(argv) -> int``.

Exit status: 0 success, 1 a check failed, 2 bad input (nothing written).
"""
import argparse
import os
import sys

import numpy as np

from . import __version__
from .errors import ModelError


def _add_model_arg(p):
    p.add_argument("model", nargs="?", default=None,
                   help="model file (TOML); omitted: the built-in default model")


def build_parser():
    parser = argparse.ArgumentParser(
        prog="icgen", description="Equilibrium N-body initial conditions for disk galaxies.")
    parser.add_argument("--version", action="version", version=f"icgen {__version__}")
    sub = parser.add_subparsers(dest="command", required=True)

    p = sub.add_parser("curve", help="analytic rotation curve by component")
    _add_model_arg(p)
    p.add_argument("--rmax", help="outer radius with unit, e.g. '40 kpc' (default 10 R_d)")
    p.add_argument("--points", type=int, default=40, help="rows in the printed table")
    p.add_argument("--radii", help="comma-separated radii for enclosed masses, e.g. '5 kpc, 20 kpc'")
    p.add_argument("--table", help="write the curve as an astropy ECSV table")
    p.add_argument("--plot", help="write a rotation-curve decomposition PNG")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("new", help="write a commented starter model file")
    p.add_argument("path", help="output TOML path")
    p.add_argument("--overwrite", action="store_true", help="replace an existing file")
    return parser


def main(argv=None):
    """Run the CLI; returns the exit status."""
    args = build_parser().parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except ModelError as exc:
        print(f"icgen: error: {exc}", file=sys.stderr)
        return 2


def run():
    """Console-script entry point."""
    sys.exit(main())


def _check_output_path(path, key, overwrite=True):
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        raise ModelError(key, path, f"folder {folder!r} does not exist")
    if not overwrite and os.path.exists(path):
        raise ModelError(key, path, "file exists; pass --overwrite to replace it")


def cmd_curve(args):
    from .diagnostics import curve
    from .model import GalaxyModel
    from .units import parse_quantity
    from . import config
    import astropy.units as u

    for key in ("table", "plot"):
        if getattr(args, key):
            _check_output_path(getattr(args, key), f"--{key}")
    if args.points < 2:
        raise ModelError("--points", args.points, "must be at least 2")
    model = GalaxyModel(config.load_spec(args.model))
    radii = None
    if args.radii:
        radii = [parse_quantity(s.strip(), "--radii", u.kpc) for s in args.radii.split(",")]
        if any(r <= 0 for r in radii):
            raise ModelError("--radii", args.radii, "radii must be positive")
    r_out = curve.default_radii(model)[-1]
    if args.rmax:
        r_out = parse_quantity(args.rmax, "--rmax", u.kpc)
        if r_out <= 0:
            raise ModelError("--rmax", args.rmax, "must be positive")
    summary = curve.summarize(model, radii, r_search=r_out)
    if not args.quiet:
        shown = curve.rotation_curve(model, np.linspace(r_out / args.points, r_out, args.points))
        print(_curve_report(model, shown, summary))
    if args.table or args.plot:
        full = curve.rotation_curve(model, np.linspace(0.0, r_out, 301))
        if args.table:
            full.write(args.table, format="ascii.ecsv", overwrite=True)
        if args.plot:
            from .diagnostics.plots import plot_rotation_curve
            kinds = {n: c.kind for n, c in model.components.items()}
            plot_rotation_curve(full, kinds, args.plot, summary)
        if not args.quiet:
            for path in (args.table, args.plot):
                if path:
                    print(f"wrote {path}")
    return 0


def _curve_report(model, table, s):
    from .textout import format_table
    names = list(model.components)
    headers = ["R [kpc]", "total"] + names
    rows = [[f"{row['radius'].value:.2f}"] + [f"{row['v_circ_' + n].value:.1f}"
                                               for n in ["total"] + names] for row in table]
    out = [format_table(headers, rows, title=f"Midplane circular speed [km/s]: {model.name}")]
    out.append("")
    out.append(f"v_max = {s.v_max:.1f} km/s at R = {s.r_max:.2f} kpc")
    if s.scale_length:
        out.append(f"v_c(2.2 R_d = {2.2 * s.scale_length:.2f} kpc) = {s.v_22:.1f} km/s; "
                   f"disk fraction v_disk/v_total there = {s.disk_fraction_22:.3f}")
    headers = ["r [kpc]"] + [f"M_{n} [Msun]" for n in names] + ["dark/baryonic"]
    rows = []
    for i, r in enumerate(s.radii):
        rows.append([f"{r:.2f}"] + [f"{s.enclosed[n][i]:.3e}" for n in names]
                    + [f"{s.dark_to_baryonic[i]:.3f}"])
    out.append("")
    out.append(format_table(headers, rows, title="Mass inside spheres of radius r"))
    return "\n".join(out)


def cmd_new(args):
    from .default_model import STARTER_TOML
    _check_output_path(args.path, "path", overwrite=args.overwrite)
    with open(args.path, "w", encoding="utf-8") as fh:
        fh.write(STARTER_TOML)
    print(f"wrote {args.path}: edit it, then try 'icgen curve {args.path}'")
    return 0


COMMANDS = {"curve": cmd_curve, "new": cmd_new}

if __name__ == "__main__":
    run()
