"""The ``icgen mock`` subcommand: its arguments and what it runs (called from icgen.cli)."""
import argparse
import os
import sys

from ..errors import ModelError

__all__ = ["add_arguments", "run"]

# Spelled out here (checked against tilted_ring by the tests) so that building the parser
# imports nothing heavy.
GEOMETRY_MODES = ("fixed", "global", "rings")
GEOMETRY_PARAMETERS = ("pa", "inc", "vsys", "xc", "yc")


def add_arguments(p):
    """Arguments of ``icgen mock`` on an argparse (sub)parser."""
    p.add_argument("snapshot", help="snapshot file (HDF5) holding the tracer and its model")
    p.add_argument("--tracer", required=True, help="component observed (kind disk or gas_disk)")
    p.add_argument("--inclination", required=True, help="e.g. '60 deg', in (0, 90] deg")
    p.add_argument("--position-angle", required=True,
                   help="receding major axis, east of north, e.g. '35 deg'")
    p.add_argument("--distance", required=True, help="e.g. '12 Mpc'")
    p.add_argument("--systemic", help="radio velocity of the centre, e.g. '900 km/s' "
                                      "(default: Hubble flow H0 D with Planck18 H0)")
    p.add_argument("--beam", default="12 arcsec", help="Gaussian beam FWHM (default 12 arcsec)")
    p.add_argument("--pixel", default="4 arcsec", help="pixel size (default 4 arcsec)")
    p.add_argument("--channel", default="5 km/s", help="channel width (default 5 km/s)")
    p.add_argument("--noise", default="0",
                   help="per-channel noise rms as a fraction of the noise-free cube's peak, "
                        "e.g. 0.1 for a peak S/N of 10 (default 0: no noise)")
    p.add_argument("--clip", default="3", help="mask threshold for the moments, in units of "
                                               "the smoothed cube's rms (default 3)")
    p.add_argument("--field", help="side of the square field, e.g. '10 arcmin' "
                                   "(default: the disk's extent plus 2 beams)")
    p.add_argument("--line-width", help="Gaussian sigma of every particle's line, e.g. "
                                        "'8 km/s' (default: 0 for stars, whose particles carry "
                                        "their own velocity spread; the sound speed for gas)")
    p.add_argument("--fit-geometry", default="fixed",
                   help=f"tilted-ring geometry: {' | '.join(GEOMETRY_MODES)} (default fixed)")
    p.add_argument("--fit-params", default="pa,inc",
                   help=f"geometry parameters the tilted-ring fit solves for (unless "
                        f"--fit-geometry fixed), from {','.join(GEOMETRY_PARAMETERS)} "
                        f"(default pa,inc)")
    # the option's earlier name, kept only to point to the new one
    p.add_argument("--free", default=None, help=argparse.SUPPRESS)
    p.add_argument("--expansion", action="store_true", help="also fit a radial velocity per ring")
    p.add_argument("--seed", type=int, default=0, help="seed of the noise (default 0)")
    p.add_argument("-o", "--output", required=True, help="folder for the mock files")
    p.add_argument("--overwrite", action="store_true", help="replace mock files in the folder")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")


def run(args):
    """Run ``icgen mock``; every check happens before anything is written."""
    from .observation import OUTPUT_FILES, observe
    from .project import geometry_from_text, instrument_from_text
    from .tilted_ring import check_geometry_options

    if args.free is not None:
        raise ModelError("--free", args.free, f"renamed: use --fit-params, e.g. "
                                              f"--fit-params {args.free}")
    geometry = geometry_from_text(args.inclination, args.position_angle, args.distance,
                                  args.systemic)
    instrument = instrument_from_text(args.beam, args.pixel, args.channel, args.noise,
                                      args.clip, args.field, args.line_width)
    free = tuple(k.strip() for k in args.fit_params.split(",") if k.strip())
    check_geometry_options(args.fit_geometry, free)
    obs = observe(args.snapshot, geometry, instrument, tracer=args.tracer, seed=args.seed,
                  fit_geometry=args.fit_geometry, free=free, expansion=args.expansion)
    os.makedirs(args.output, exist_ok=True)
    paths = obs.write(args.output, overwrite=args.overwrite)
    note = obs.rings.meta.get("note")
    if note:
        print(f"icgen: warning: {note}", file=sys.stderr)
    if not args.quiet:
        print(report(obs))
        print(f"wrote {len(paths)} files to {args.output}: {', '.join(OUTPUT_FILES.values())}")
    return 0


def report(obs):
    """Short text summary: geometry, grid, and the curve against the truth."""
    from ..textout import format_table

    g, ins, grid = obs.geometry, obs.instrument, obs.grid
    lines = [f"tracer {obs.tracer!r} at i = {g.inclination:g} deg, PA = {g.position_angle:g} deg, "
             f"D = {g.distance:g} Mpc, v_sys = {g.systemic:.1f} km/s",
             f"cube {grid.nx} x {grid.ny} pixels of {ins.pixel:g} arcsec x {grid.nv} channels "
             f"of {ins.channel:g} km/s; beam {ins.beam:g} arcsec = "
             f"{ins.beam * g.kpc_per_arcsec:.3f} kpc; noise rms {obs.rms:.3g} (cube units)"]
    if obs.frame is not None:
        vec = lambda v: "(" + ", ".join(f"{c:+.3g}" for c in v) + ")"
        f = obs.frame.as_dict()
        lines.append(f"observed about the galaxy's centre, found at {vec(f['position_kpc'])} "
                     f"kpc and {vec(f['velocity_kms'])} km/s in the file (icgen.frame)")
    fitted = obs.rings.meta.get("geometry")
    if fitted and obs.rings.meta["fitted"]:
        errs = obs.rings.meta["geometry_err"]
        lines.append("fitted: " + ", ".join(f"{k} = {fitted[k]:.2f} +- {errs[k]:.2f}"
                                            for k in obs.rings.meta["fitted"]))
    rows = []
    for r, t, s in zip(obs.rings, obs.truth, obs.major_axis):
        rows.append([f"{r['radius'].value:.2f}", f"{r['v_rot'].value:.1f}",
                     f"{r['v_rot_err'].value:.1f}", f"{s['v_rot_peak'].value:.1f}",
                     f"{t['v_phi_mean'].value:.1f}", f"{t['v_circ_total'].value:.1f}"])
    headers = ["R [kpc]", "v_rot", "+-", "major axis", "true v_phi", "v_circ"]
    lines += ["", format_table(headers, rows, title="Rotation curve [km/s]: recovered and true")]
    return "\n".join(lines)
