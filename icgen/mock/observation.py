"""Mock observation of one disk component: cube, moment maps, rotation curves, truth.

::

    from icgen.mock import Geometry, Instrument, observe
    obs = observe("galaxy.h5", tracer="disk",
                  geometry=Geometry(inclination=60, position_angle=35, distance=12,
                                    systemic=900),
                  instrument=Instrument(beam=12, pixel=4, channel=5, noise=0.05), seed=1)
    obs.rings            # tilted-ring curve (QTable)
    obs.scores()         # recovered minus true, per ring
    obs.write("mock/")   # FITS cube and maps, ECSV tables, PNG
"""
import dataclasses
import os
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np

from ..errors import ModelError
from ..kinds import KINDS, kind_of
from . import cube as cubes
from .project import Geometry, Instrument, project_particles
from .tilted_ring import fit_tilted_rings, major_axis_curve
from .truth import truth_table

__all__ = ["MockObservation", "observe", "tracer_particles", "OUTPUT_FILES"]
OUTPUT_FILES = {"cube": "cube.fits", "mom0": "mom0.fits", "mom1": "mom1.fits",
                "rings": "rotation_curve.ecsv", "major_axis": "major_axis.ecsv",
                "truth": "truth.ecsv", "plot": "mock.png"}


@dataclass
class MockObservation:
    """Everything a mock observation made, in memory.

    Attributes
    ----------
    cube_data : ndarray (ny, nx, nv)
        Msun / beam / (km/s); :attr:`cube` is the (nv, ny, nx) view written to FITS.
    mom0 : ndarray (ny, nx)
        Msun / beam.
    mom1 : ndarray (ny, nx)
        km/s, NaN where not measured.
    rms : float
        Noise rms per channel (cube units), as measured from the cube.
    rings, major_axis, truth : QTable
        Tilted-ring curve, major-axis curve, truth on the same rings.
    model_curve : QTable
        The model's circular speed by component on a fine radius grid.
    """

    tracer: str
    geometry: Geometry
    instrument: Instrument
    seed: int
    grid: cubes.SkyGrid
    cube_data: np.ndarray
    rms: float
    mom0: np.ndarray
    mom1: np.ndarray
    rings: object
    major_axis: object
    truth: object
    model_curve: object
    kinds: dict = field(default_factory=dict)
    frame: object = None

    @property
    def cube(self):
        return np.transpose(self.cube_data, (2, 0, 1))

    def wcs(self, spectral=True):
        return self.grid.wcs(spectral)

    def scores(self):
        """Per ring: recovered v_rot (tilted rings, major axis) minus the tracer's true
        mean v_phi and minus the total circular speed (km/s)."""
        from astropy.table import QTable

        t = QTable()
        t["radius"] = self.rings["radius"]
        t["in_beams"] = (self.rings["radius_arcsec"] / (self.instrument.beam * u.arcsec)).value
        for what, col in (("rings", self.rings["v_rot"]),
                          ("major_axis", self.major_axis["v_rot_peak"])):
            t[f"{what}_minus_vphi"] = col - self.truth["v_phi_mean"]
            t[f"{what}_minus_vcirc"] = col - self.truth["v_circ_ring"]
        t["v_rot_err"] = self.rings["v_rot_err"]
        return t

    def _meta(self):
        return {"tracer": self.tracer, "seed": self.seed,
                "geometry": _plain(dataclasses.asdict(self.geometry)),
                "instrument": _plain(dataclasses.asdict(self.instrument)),
                "rms": float(self.rms)}

    def write(self, folder, overwrite=False):
        """Write the FITS cube and maps, the ECSV tables and the PNG into ``folder``.

        Each file goes to a temporary name first and all are renamed at the end, so an
        error leaves no partial set. Returns the list of paths written.
        """
        paths = output_paths(folder, overwrite)
        tmp = {k: os.path.join(folder, f".{os.path.basename(p)}.partial-{os.getpid()}")
               for k, p in paths.items()}
        try:
            self._write_files(tmp)
            for key, path in paths.items():
                os.replace(tmp[key], path)
        finally:
            for p in tmp.values():
                if os.path.exists(p):
                    os.remove(p)
        return list(paths.values())

    def _write_files(self, tmp):
        from .plots import plot_mock

        g, ins = self.geometry, self.instrument
        cubes.cube_hdu(self.cube_data, self.grid, g, ins, self.rms).writeto(tmp["cube"])
        cubes.map_hdu(self.mom0, self.grid, g, ins, self.rms, "solMass beam-1").writeto(tmp["mom0"])
        cubes.map_hdu(self.mom1, self.grid, g, ins, self.rms, "km s-1").writeto(tmp["mom1"])
        for key in ("rings", "major_axis", "truth"):
            table = getattr(self, key).copy()
            table.meta.update(self._meta())
            table.write(tmp[key], format="ascii.ecsv")
        plot_mock(self, tmp["plot"])


def _plain(d):
    return {k: (list(v) if isinstance(v, tuple) else v) for k, v in d.items()}


def output_paths(folder, overwrite=False):
    """Paths of the files :meth:`MockObservation.write` makes; ModelError if the folder is
    missing or a file exists and ``overwrite`` is False (nothing is touched)."""
    if not os.path.isdir(folder):
        raise ModelError("--output", folder, "folder does not exist")
    paths = {k: os.path.join(folder, name) for k, name in OUTPUT_FILES.items()}
    if not overwrite:
        taken = [p for p in paths.values() if os.path.exists(p)]
        if taken:
            raise ModelError("--output", folder, f"already holds {os.path.basename(taken[0])}; "
                             f"pass --overwrite to replace the mock files")
    return paths


def tracer_particles(source, tracer, model=None):
    """The tracer's particles in internal units and in the galaxy's frame, its kind, the
    model and the frame.

    Parameters
    ----------
    source : str, PathLike, Snapshot or dict
        Snapshot path or object (file units are converted to kpc, km/s, Msun), or a
        dict name -> {"position", "velocity", "mass"} in internal units (as
        :func:`icgen.sampling.sample` returns).
    tracer : str
    model : MassModel, optional
        Required for a dict; for a snapshot the model stored in it is used by default.

    The galaxy's frame (icgen.frame: its density centre and that centre's velocity) is
    found from every component given, as ``check`` and ``drift`` find it; the tracer is
    observed, and its truth measured, about it.

    Returns
    -------
    (particles dict, kind, model, frame)
    """
    from ..frame import galaxy_frame
    from ..snapshot import Snapshot, check_values, read_snapshot

    if isinstance(source, (str, os.PathLike)):
        source = read_snapshot(source)          # validated as it is read
    if isinstance(source, Snapshot):
        _check_tracer(tracer, {n: c["kind"] for n, c in source.components.items()})
        if model is None:      # built only once the tracer is known to be good
            from ..spec import spec_from_toml_text
            from ..model import MassModel
            model = MassModel(spec_from_toml_text(source.config, source=f"{source.path}:config"))
        comps, frame = source.internal(), source.frame
    elif isinstance(source, dict):
        if model is None:
            raise ModelError("model", None, "a MassModel is needed with particles given as a dict")
        kinds = {n: model.components[n].kind if n in model.components else c.get("kind")
                 for n, c in source.items()}
        _check_tracer(tracer, kinds)
        comps = {n: {k: np.asarray(c[k], float) for k in ("position", "velocity", "mass")}
                 for n, c in source.items()}
        for name, c in comps.items():     # particles given in memory are checked here too
            for k, values in c.items():
                check_values(values, k, f"particles[{name!r}][{k!r}]")
        frame = galaxy_frame(comps, model.spec.seed)
    else:
        raise ModelError("source", type(source).__name__,
                         "must be a snapshot path, a Snapshot or a dict of particles")
    kind = model.components[tracer].kind if tracer in model.components else source[tracer]["kind"]
    parts = frame.to_galaxy({tracer: {k: comps[tracer][k]
                                      for k in ("position", "velocity", "mass")}})[tracer]
    return parts, kind, model, frame


def _check_tracer(tracer, kinds):
    """ModelError unless ``tracer`` names a disk component among ``kinds`` (name -> kind)."""
    if tracer not in kinds:
        raise ModelError("--tracer", tracer, f"no such component; there are "
                         f"{', '.join(f'{n} ({k})' for n, k in kinds.items())}")
    if not kind_of(kinds[tracer]).flattened:
        disks = [k.name for k in KINDS.values() if k.flattened]
        raise ModelError("--tracer", tracer, f"is a {kinds[tracer]}; the tracer must be a "
                         f"disk component (kind {' or '.join(disks)})")


def line_widths(particles, kind, model, tracer, instrument):
    """Gaussian sigma (km/s) of each particle's line.

    ``instrument.line_width`` when set; otherwise what the particle's own velocity does not
    carry: the isothermal sound speed for a gas disk (gas particles move with the mean
    flow; the thermal motions are in their internal energy) and 0 for stars, whose
    particles already sample the velocity distribution (a width of sigma_z on top would
    widen it by sqrt(2) face-on).
    """
    n = particles["mass"].size
    if instrument.line_width is not None:
        return np.full(n, instrument.line_width)
    if kind_of(kind).pressure:
        return np.full(n, float(model.components[tracer].cs))
    return np.zeros(n)


def observe(source, geometry, instrument=None, tracer="disk", model=None, seed=0,
            fit_geometry="fixed", free=("pa", "inc"), expansion=False, initial=None):
    """Mock-observe one disk component of a particle realisation.

    Parameters
    ----------
    source : snapshot path, Snapshot, or dict of particles (see :func:`tracer_particles`)
    geometry : Geometry
    instrument : Instrument, optional
        Default ``Instrument()`` (12 arcsec beam, 4 arcsec pixels, 5 km/s channels, no noise).
    tracer : str
        Component observed; its kind must be a disk's ("disk" or "gas_disk").
    model : MassModel, optional
        The truth; default the model stored in the snapshot.
    seed : int
        Seed of the noise (numpy.random.default_rng).
    fit_geometry, free, expansion, initial
        Passed to :func:`icgen.mock.tilted_ring.fit_tilted_rings`.

    Returns
    -------
    MockObservation
    """
    from ..diagnostics.curve import rotation_curve

    instrument = Instrument() if instrument is None else instrument
    if not isinstance(geometry, Geometry) or not isinstance(instrument, Instrument):
        raise ModelError("geometry", type(geometry).__name__, "must be a Geometry and an Instrument")
    particles, kind, model, frame = tracer_particles(source, tracer, model)
    moments = model.kinematics(tracer) if kind_of(kind).stellar_disk else None
    sigma = line_widths(particles, kind, model, tracer, instrument)
    east, north, v_los = project_particles(particles["position"], particles["velocity"], geometry)
    scale = geometry.kpc_per_arcsec
    east, north = east / scale, north / scale
    v_lo = float(np.min(v_los - cubes.LINE_CUT * sigma)) if v_los.size else geometry.systemic
    v_hi = float(np.max(v_los + cubes.LINE_CUT * sigma)) if v_los.size else geometry.systemic
    grid = cubes.make_grid(east, north, v_lo, v_hi, geometry, instrument)
    rng = np.random.default_rng(seed)
    data, _ = cubes.make_cube(grid, east, north, v_los, sigma, particles["mass"], instrument, rng)
    mom0, mom1, mask, rms = cubes.moment_maps(data, grid, instrument)
    rings = fit_tilted_rings(mom1, grid, geometry, instrument, mode=fit_geometry, free=free,
                             expansion=expansion, initial=initial)
    fitted = rings.meta.get("geometry", {})
    slit = major_axis_curve(np.where(mask, data, 0.0), grid, geometry,
                            rings["radius_arcsec"].value, position_angle=fitted.get("pa"),
                            inclination=fitted.get("inc"), systemic=fitted.get("vsys"))
    edges_kpc = np.append(rings["r_in"].value, rings["r_out"].value[-1])
    truth = truth_table(model, tracer, particles, edges_kpc, instrument.beam * scale, moments)
    r_out = max(edges_kpc[-1], 1e-3)
    curve = rotation_curve(model, np.linspace(r_out / 200, r_out, 200))
    truth.meta["frame"] = frame.as_dict()
    return MockObservation(tracer, geometry, instrument, int(seed), grid, data, rms, mom0, mom1,
                           rings, slit, truth, curve,
                           {n: c.kind for n, c in model.components.items()}, frame)
