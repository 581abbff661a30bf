"""Command-line interface: parses arguments, calls the library, prints. ``main(argv) -> int``.

Exit status: 0 success, 1 a check failed, 2 bad input (nothing written), 3 drift untrustworthy.
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

    p = sub.add_parser("build", help="sample the model and write an HDF5 snapshot")
    _add_model_arg(p)
    p.add_argument("-o", "--output", required=True, help="snapshot file to write, e.g. galaxy.h5")
    p.add_argument("--seed", type=int, help="replace the model's seed (stored in the file)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output file")
    p.add_argument("--precision", choices=("double", "single"), default="double",
                   help="float type of positions, velocities and masses. Default double: "
                        "nothing is lost but float64 unit conversion, and files compare "
                        "bit for bit; single halves the file but rounds to ~6e-8 relative "
                        "(0.006 pc at 100 kpc), twice (sampling, then centring)")
    p.add_argument("--compress", choices=("gzip", "lzf"),
                   help="chunked datasets with shuffle and this filter (default: plain "
                        "contiguous datasets, the fastest to read)")
    p.add_argument("--chunk-size", type=int, default=None,
                   help="particles held in memory at a time (default 262144); the file "
                        "does not depend on it")
    p.add_argument("--quiet", action="store_true", help="no progress bars and no summary")

    p = sub.add_parser("info", help="short summary of a snapshot file")
    p.add_argument("path", help="snapshot file (HDF5, icgen schema)")
    p.add_argument("--quick", action="store_true", help="check the header only, not every value")
    p = sub.add_parser("stability", help="Toomre Q, swing amplification, bar criterion, resolution")
    p.add_argument("model", nargs="?", default=None,
                   help="model file (TOML) or snapshot (HDF5, its stored model); omitted: "
                        "the built-in default model")
    p.add_argument("--json", help="write every number to this JSON file")
    p.add_argument("--plot", help="write Q(R) and X_2(R) to this PNG file")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("check", help="measure a snapshot's particles against its model")
    p.add_argument("path", help="snapshot file (HDF5, icgen schema)")
    p.add_argument("--report", help="folder for check.json and check.png (created if needed)")
    p.add_argument("--json", help="write every figure to this JSON file")
    p.add_argument("--sigma", type=float, default=None,
                   help="tolerance in standard errors of each bin (default 5)")
    p.add_argument("--softening", help="Plummer softening of the direct-summation rotation "
                                       "curve, with unit, e.g. '10 pc' (default z_d / 30)")
    p.add_argument("--sources", type=int, default=None,
                   help="direct-summation sources per component before a random subsample "
                        "is used (default 250000)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("drift", help="integrate the particles in the model's frozen potential "
                                     "and measure how the model drifts")
    p.add_argument("path", help="snapshot file (HDF5, icgen schema)")
    p.add_argument("--time", required=True, help="integration time with unit, e.g. '2 Gyr'")
    p.add_argument("--sample", help="integrate a random subsample of this many particles, "
                                    "proportional per component (default: all)")
    p.add_argument("--step", help="one global leapfrog step with unit, e.g. '0.5 Myr' "
                                  "(default: a step per particle, 1/100 of its pericentre "
                                  "dynamical time)")
    p.add_argument("--outputs", help="number of output intervals (default 40)")
    p.add_argument("--threshold", help="relative drift above which a drift beyond 3 sigma "
                                       "fails the test, exit status 1 (default 0.02)")
    p.add_argument("--report", help="folder for drift.json and drift.png (created if needed)")
    p.add_argument("--seed", help="seed of the subsample (default: the snapshot's seed)")
    p.add_argument("--all", action="store_true", help="print every quantity, not only the "
                                                      "flagged ones")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")

    p = sub.add_parser("mock", help="mock observation of a disk: FITS cube, moment maps, "
                                    "rotation curves and the truth")
    from .mock.command import add_arguments as add_mock_arguments
    add_mock_arguments(p)
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
    summary = curve.summarize(model, radii, r_search=r_out if args.rmax else None)
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


def cmd_build(args):
    from . import config
    from .build import BuildInterrupted, build_snapshot, check_output_path
    from .snapshot import NonFiniteError

    check_output_path(args.output, args.overwrite)   # before the model is even read
    spec = config.load_spec(args.model)
    options = {} if args.chunk_size is None else {"chunk_size": args.chunk_size}
    try:
        result = build_snapshot(spec, args.output, seed=args.seed, overwrite=args.overwrite,
                                precision=args.precision, compress=args.compress,
                                quiet=args.quiet, **options)
    except BuildInterrupted as exc:
        print(f"icgen: {exc}; nothing written", file=sys.stderr)
        return exc.exit_status
    except NonFiniteError as exc:
        print(f"icgen: error: {exc}", file=sys.stderr)
        return 1
    for message in result.warnings:
        print(f"icgen: warning: {message}", file=sys.stderr)
    if not args.quiet:
        print(result.report())
    return 0


def cmd_info(args):
    from .snapshot import describe

    print(describe(args.path, scan=not args.quick))
    return 0


def cmd_stability(args):
    from .diagnostics import stability

    for key in ("json", "plot"):
        if getattr(args, key):
            _check_output_path(getattr(args, key), f"--{key}")
    report = stability.analyse(stability.load_source(args.model))
    if not args.quiet:
        print(stability.format_report(report))
    if args.json:
        report.write_json(args.json)
    if args.plot:
        stability.plot_stability(report, args.plot)
    if not args.quiet:
        for path in (args.json, args.plot):
            if path:
                print(f"wrote {path}")
    return 0


def cmd_check(args):
    from .diagnostics import check
    from .units import parse_quantity
    import astropy.units as u

    options = {}
    if args.sigma is not None:
        if not args.sigma > 0:
            raise ModelError("--sigma", args.sigma, "must be a positive number of standard errors")
        options["n_sigma"] = args.sigma
    if args.softening:
        options["softening"] = parse_quantity(args.softening, "--softening", u.kpc)
        if options["softening"] <= 0:
            raise ModelError("--softening", args.softening, "must be positive")
    if args.sources is not None:
        if args.sources < 100:
            raise ModelError("--sources", args.sources, "must be at least 100")
        options["max_sources"] = args.sources
    if args.json:
        _check_output_path(args.json, "--json")
    if args.report and os.path.exists(args.report) and not os.path.isdir(args.report):
        raise ModelError("--report", args.report, "exists and is not a folder")
    result = check.check_snapshot(args.path, **options)
    if not args.quiet:
        print(result.format_table())
    written = check.write_outputs(result, args.json, args.report)
    if not args.quiet:
        for path in written:
            print(f"wrote {path}")
    return 0 if result.passed else 1


def cmd_mock(args):
    from .mock.command import run as run_mock

    return run_mock(args)


def cmd_drift(args):
    from .diagnostics import drift

    options = {"sample": drift.parse_whole(args.sample, "--sample", 1),
               "seed": drift.parse_whole(args.seed, "--seed", 0),
               "outputs": drift.parse_whole(args.outputs, "--outputs", 1, drift.OUTPUTS),
               "threshold": drift.parse_number(args.threshold, "--threshold", drift.THRESHOLD)}
    if args.report:
        drift.check_report_dir(args.report)
    result = drift.drift_snapshot(args.path, args.time, step=args.step, quiet=args.quiet,
                                  **options)
    if not args.quiet:
        print(drift.format_report(result, all_rows=args.all))
    if args.report:
        for path in drift.write_report(result, args.report):
            if not args.quiet:
                print(f"wrote {path}")
    return result.exit_status


COMMANDS = {"curve": cmd_curve, "new": cmd_new, "build": cmd_build, "info": cmd_info,
            "stability": cmd_stability, "check": cmd_check, "mock": cmd_mock,
            "drift": cmd_drift}

if __name__ == "__main__":
    run()
