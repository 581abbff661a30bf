"""Command-line interface: parses arguments, calls the library, prints. ``main(argv) -> int``.

Exit status:

- 0 success;
- 1 a check or drift test failed, or the sampler made a non-finite value;
- 2 bad input: one line naming the option or key and the rule, nothing written;
- 3 ``icgen drift``: the integration is not trustworthy (energy error above its bar, or an
  orbit overflowed), whatever the drifts show;
- 74 an output could not be written (full disk, file-size limit, other I/O errors; EX_IOERR
  of BSD sysexits.h, so that scripts can tell it from bad input and failed checks): one
  line saying what, where and, for snapshots, the space needed; nothing written;
- 128 + N for signal N (130 SIGINT/Ctrl-C, 129 SIGHUP, 143 SIGTERM), as shells report.

A closed standard output (``icgen curve | head -1``) changes neither the files written nor
the exit status. The module imports nothing heavy, so that Ctrl-C right after start-up is
already a one-line message.
"""
import argparse
import io
import os
import sys
from contextlib import contextmanager

from . import paths
from .version import __version__
from .cli_options import parse_number, parse_positive, parse_time, parse_whole
from .errors import ModelError

#: Exit status for an output that could not be written (EX_IOERR, BSD sysexits.h).
EXIT_IO_ERROR = 74
#: Exit status after SIGINT (Ctrl-C): 128 + 2, as shells report it.
EXIT_SIGINT = 130


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
                   help="particles held in memory at a time (default 2**18 = 262144); the file "
                        "does not depend on it")
    p.add_argument("--quiet", action="store_true", help="no progress bars and no summary")
    p.add_argument("--remove-stale", action="store_true",
                   help="remove temporary files in the output folder left by builds that "
                        "were killed (they are listed on every build)")

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
    """Run the CLI; returns the exit status (see the module docstring)."""
    with _pipe_safe_stdout():
        try:
            return _main(argv)
        except KeyboardInterrupt:       # Ctrl-C anywhere, even in the first imports
            _say("icgen: interrupted by SIGINT")
            return EXIT_SIGINT


def _main(argv):
    try:
        args = build_parser().parse_args(argv)
        return COMMANDS[args.command](args)
    except ModelError as exc:
        _say(f"icgen: error: {exc}")
        return 2
    except paths.OutputWriteError as exc:
        _say(f"icgen: error: {exc}")
        return EXIT_IO_ERROR
    except OSError as exc:              # an output or input the system refused
        where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        _say(f"icgen: error: {where}{paths.describe_os_error(exc)}")
        return EXIT_IO_ERROR


def run():
    """Console-script entry point.

    After Ctrl-C the process ends with os._exit(130) once its output is flushed: the
    normal interpreter shutdown would turn a handled KeyboardInterrupt back into a kill
    by SIGINT when the interrupt passed through code that an extension module ran with
    PyRun_String during an import (CPython keeps a global flag; seen in testing).
    """
    try:
        status = main()
    except KeyboardInterrupt:           # between main's parts
        _say("icgen: interrupted by SIGINT")
        status = EXIT_SIGINT
    if status == EXIT_SIGINT:
        for stream in (sys.stdout, sys.stderr):
            try:
                stream.flush()
            except (OSError, ValueError, AttributeError):
                pass
        os._exit(status)
    sys.exit(status)


def _say(line):
    """One line on standard error (which may itself be closed: then nothing)."""
    try:
        print(line, file=sys.stderr)
    except (OSError, ValueError):
        pass


class _PipeSafeStdout:
    """Stand-in for sys.stdout while a command runs.

    The first BrokenPipeError (the reader has gone, as in ``icgen check ... | head -1``)
    is swallowed, the stream's file descriptor is pointed at os.devnull (what the Python
    docs advise for SIGPIPE, so that the flush at exit cannot fail again), and later
    output is dropped: the files a command writes and its exit status do not change.
    """

    def __init__(self, stream):
        self._stream = stream
        self.broken = False

    def write(self, text):
        if not self.broken:
            try:
                return self._stream.write(text)
            except BrokenPipeError:
                self._reader_gone()
        return len(text)

    def flush(self):
        if not self.broken:
            try:
                self._stream.flush()
            except BrokenPipeError:
                self._reader_gone()

    def _reader_gone(self):
        self.broken = True
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            try:
                os.dup2(devnull, self._stream.fileno())
            finally:
                os.close(devnull)
        except (OSError, ValueError, AttributeError, io.UnsupportedOperation):
            pass                        # not a real file (a test's capture)

    def __getattr__(self, name):
        return getattr(self._stream, name)


@contextmanager
def _pipe_safe_stdout():
    original = sys.stdout
    if original is None or isinstance(original, _PipeSafeStdout):
        yield
        return
    guard = _PipeSafeStdout(original)
    sys.stdout = guard
    try:
        yield
    finally:
        guard.flush()                   # what is still buffered, before main returns
        if sys.stdout is guard:
            sys.stdout = original


def _targets(args, keys, inputs):
    """Checked absolute paths of the file options ``keys`` that were given."""
    return {key: paths.check_target(getattr(args, key), f"--{key}", inputs=inputs)
            for key in keys if getattr(args, key)}


def cmd_curve(args):
    import numpy as np
    from .diagnostics import curve
    from .model import MassModel
    from .spec import load_spec
    import astropy.units as u

    targets = _targets(args, ("table", "plot"), [args.model])
    if args.points < 2:
        raise ModelError("--points", args.points, "must be at least 2")
    model = MassModel(load_spec(args.model))
    radii = None
    if args.radii:
        radii = [parse_positive(s.strip(), "--radii", u.kpc) for s in args.radii.split(",")]
    r_out = curve.default_radii(model)[-1]
    if args.rmax:
        r_out = parse_positive(args.rmax, "--rmax", u.kpc)
    summary = curve.summarize(model, radii, r_search=r_out if args.rmax else None)
    if not args.quiet:
        shown = curve.rotation_curve(model, np.linspace(r_out / args.points, r_out, args.points))
        print(_curve_report(model, shown, summary))
    if args.table or args.plot:
        full = curve.rotation_curve(model, np.linspace(0.0, r_out, 301))
        if args.table:
            with paths.replacing(targets["table"]) as tmp:
                full.write(tmp, format="ascii.ecsv", overwrite=True)
        if args.plot:
            from .diagnostics.plots import plot_rotation_curve
            kinds = {n: c.kind for n, c in model.components.items()}
            with paths.replacing(targets["plot"]) as tmp:
                plot_rotation_curve(full, kinds, tmp, summary)
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
    from .spec.default_model import STARTER_TOML
    target = paths.check_target(args.path, "path", overwrite=args.overwrite)
    with paths.replacing(target) as tmp:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(STARTER_TOML)
    print(f"wrote {args.path}: edit it, then try 'icgen curve {args.path}'")
    return 0


def cmd_build(args):
    from .spec import load_spec
    from .build import BuildInterrupted, build_snapshot, check_output_path
    from .snapshot import NonFiniteError

    # before the model is even read
    target = check_output_path(args.output, args.overwrite, inputs=[args.model])
    _stale_temporary_files(os.path.dirname(target), args.remove_stale)
    spec = load_spec(args.model)
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


def _stale_temporary_files(folder, remove):
    """One line on stderr per temporary file in ``folder`` left by a killed process;
    removed when ``remove`` (``--remove-stale``)."""
    stale = paths.stale_partials(folder)
    if remove:
        for f in paths.remove_stale(stale):
            _say(f"icgen: removed {f.describe()}")
    else:
        for f in stale:
            _say(f"icgen: note: {f.describe()}; --remove-stale removes it")


def cmd_info(args):
    from .snapshot import describe

    print(describe(args.path, scan=not args.quick))
    return 0


def is_snapshot_path(path):
    """True for a file to read as a snapshot: named .h5/.hdf5, or HDF5 by content."""
    if str(path).lower().endswith((".h5", ".hdf5")):
        return True
    import h5py
    try:
        return os.path.isfile(path) and h5py.is_hdf5(path)
    except OSError:
        return False


def _model_or_snapshot(source):
    """MassModel of a model file (TOML), the default model (None) or a snapshot."""
    from .spec import load_spec
    from .model import MassModel
    from .snapshot import load_model_from_snapshot

    if source is not None and is_snapshot_path(source):
        return load_model_from_snapshot(source)
    return MassModel(load_spec(source))


def cmd_stability(args):
    from .diagnostics import stability

    targets = _targets(args, ("json", "plot"), [args.model])
    report = stability.analyse(_model_or_snapshot(args.model))
    if not args.quiet:
        print(stability.format_report(report))
    if args.json:
        with paths.replacing(targets["json"]) as tmp:
            report.write_json(tmp)
    if args.plot:
        with paths.replacing(targets["plot"]) as tmp:
            stability.plot_stability(report, tmp)
    if not args.quiet:
        for path in (args.json, args.plot):
            if path:
                print(f"wrote {path}")
    return 0


def cmd_check(args):
    from .diagnostics import check
    import astropy.units as u

    import math

    options = {}
    if args.sigma is not None:
        if not (math.isfinite(args.sigma) and args.sigma > 0):
            raise ModelError("--sigma", args.sigma, "must be a finite positive number of "
                                                    "standard errors, e.g. 5")
        options["n_sigma"] = args.sigma
    if args.softening:
        options["softening"] = parse_positive(args.softening, "--softening", u.kpc)
    if args.sources is not None:
        if args.sources < 100:
            raise ModelError("--sources", args.sources, "must be at least 100")
        options["max_sources"] = args.sources
    targets = _targets(args, ("json",), [args.path])
    if args.report:
        paths.check_folder_target(args.report, "--report", ("check.json", "check.png"),
                                  inputs=[args.path])
    result = check.check_snapshot(args.path, **options)
    if not args.quiet:
        print(result.format_table())
    written = []
    if args.json:
        with paths.replacing(targets["json"]) as tmp:
            check.write_outputs(result, tmp, None)
        written.append(args.json)
    if args.report:
        written += check.write_outputs(result, None, args.report)
    if not args.quiet:
        for path in written:
            print(f"wrote {path}")
    return 0 if result.passed else 1


def cmd_mock(args):
    from .mock.command import run as run_mock
    from .mock.observation import OUTPUT_FILES

    paths.check_folder_target(args.output, "--output", OUTPUT_FILES.values(),
                              overwrite=args.overwrite, inputs=[args.snapshot])
    return run_mock(args)


def cmd_drift(args):
    from .diagnostics import drift
    from .diagnostics.drift_report import format_report, write_report

    duration = parse_time(args.time, "--time", 0.0, drift.MAX_TIME_GYR)
    step = parse_time(args.step, "--step", drift.MIN_STEP_GYR, drift.MAX_TIME_GYR)
    if step is not None and step > duration:
        raise ModelError("--step", args.step, f"is longer than --time ({duration:g} Gyr)")
    options = {"sample": parse_whole(args.sample, "--sample", 1),
               "seed": parse_whole(args.seed, "--seed", 0),
               "outputs": parse_whole(args.outputs, "--outputs", 1, drift.OUTPUTS),
               "threshold": parse_number(args.threshold, "--threshold", drift.THRESHOLD)}
    if args.report:
        paths.check_folder_target(args.report, "--report", ("drift.json", "drift.png"),
                                  inputs=[args.path])
    result = drift.drift_snapshot(args.path, duration, step=step, quiet=args.quiet, **options)
    if not args.quiet:
        print(format_report(result, all_rows=args.all))
    if args.report:
        for path in write_report(result, args.report):
            if not args.quiet:
                print(f"wrote {path}")
    return result.exit_status


COMMANDS = {"curve": cmd_curve, "new": cmd_new, "build": cmd_build, "info": cmd_info,
            "stability": cmd_stability, "check": cmd_check, "mock": cmd_mock,
            "drift": cmd_drift}

if __name__ == "__main__":
    run()
