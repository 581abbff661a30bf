"""``icgen mock`` in-process: a small snapshot, the files it writes, and its refusals."""
import os

import numpy as np
import pytest

from conftest import model_from_components
from icgen.cli import main


@pytest.fixture(scope="module")
def snapshot(tmp_path_factory):
    from icgen.build import build_snapshot

    model = model_from_components({
        "halo": {"kind": "halo", "profile": "hernquist", "mass": "1e11 Msun",
                 "scale_radius": "8 kpc", "particles": 5000},
        "disk": {"kind": "disk", "mass": "5e9 Msun", "scale_length": "2 kpc",
                 "scale_height": "0.2 kpc", "toomre_q": 1.5, "particles": 60000}})
    path = tmp_path_factory.mktemp("snap") / "galaxy.h5"
    build_snapshot(model, path)              # its sampling warnings go to the result
    return str(path)


BASE = ["--tracer", "disk", "--inclination", "60 deg", "--position-angle", "35 deg",
        "--distance", "12 Mpc"]


def run(snapshot, out, *extra):
    args = ["mock", snapshot] + BASE + ["-o", str(out)]
    for i in range(0, len(extra), 2):        # later options replace earlier ones
        args += [extra[i], extra[i + 1]] if i + 1 < len(extra) else [extra[i]]
    return main(args)


def test_mock_writes_every_file(snapshot, tmp_path, capsys):
    out = tmp_path / "mock"
    assert run(snapshot, out, "--noise", "0.05", "--seed", "3", "--systemic", "900 km/s") == 0
    names = sorted(os.listdir(out))
    assert names == sorted(["cube.fits", "mom0.fits", "mom1.fits", "rotation_curve.ecsv",
                            "major_axis.ecsv", "truth.ecsv", "mock.png"])
    printed = capsys.readouterr().out
    assert "Rotation curve [km/s]: recovered and true" in printed
    from astropy.io import fits
    assert fits.getheader(out / "cube.fits")["CRVAL3"] == pytest.approx(900e3)
    # the same folder again: refused without --overwrite, accepted with it
    assert run(snapshot, out) == 2
    assert run(snapshot, out, "--overwrite") == 0


@pytest.mark.parametrize("extra, key", [
    (["--inclination", "0 deg"], "--inclination"),
    (["--inclination", "95 deg"], "--inclination"),
    (["--inclination", "60"], "--inclination"),              # no unit
    (["--beam", "3 arcsec"], "--beam"),                      # smaller than the 4" pixel
    (["--tracer", "halo"], "--tracer"),                      # not a disk
    (["--tracer", "gas"], "--tracer"),                       # no such component
    (["--distance", "-3 Mpc"], "--distance"),
    # 1 pc puts the disk ~1e6 deg from the centre by the small-angle relation: the
    # distance is at fault, not the pixels that could never cover it
    (["--distance", "1 pc"], "--distance"),
    (["--noise", "-0.1"], "--noise"),
    (["--fit-geometry", "loose"], "--fit-geometry"),
    (["--fit-params", "pa,tilt", "--fit-geometry", "global"], "--fit-params"),
    # the option's earlier name: a one-line error naming the new one
    (["--free", "pa,inc", "--fit-geometry", "global"], "renamed: use --fit-params"),
])
def test_refusals_exit_2_and_write_nothing(snapshot, tmp_path, capsys, extra, key):
    out = tmp_path / "mock"
    assert run(snapshot, out, *extra) == 2
    err = capsys.readouterr().err.strip()
    assert len(err.splitlines()) == 1 and key in err and err.startswith("icgen: error:")
    assert not out.exists()
    assert os.listdir(tmp_path) == []


def test_refusal_in_existing_folder_touches_nothing(snapshot, tmp_path, capsys):
    (tmp_path / "notes.txt").write_text("keep")
    assert run(snapshot, tmp_path, "--inclination", "0 deg") == 2
    assert os.listdir(tmp_path) == ["notes.txt"]


def test_api_reads_the_snapshot_in_internal_units(snapshot):
    # the file stores masses in 1e10 Msun (the model's [output] table): observe()
    # converts at the edge, so moment 0 summed over the map, divided by the beam area
    # in pixels, is the disk mass in Msun inside the field (>= 99 % of 5e9 Msun: the
    # default field holds 99.5 % of the projected mass plus margins)
    from icgen.mock import Geometry, Instrument, observe
    from icgen.mock.project import beam_area_pixels

    ins = Instrument(beam=12.0, pixel=4.0, channel=5.0)
    obs = observe(snapshot, Geometry(60.0, 35.0, 12.0, systemic=900.0), ins, tracer="disk")
    mass = obs.mom0.sum() / beam_area_pixels(ins.beam, ins.pixel)
    assert 0.99 * 5e9 < mass <= 5e9 * (1 + 1e-8)
    assert obs.truth.meta["model"] and np.isfinite(obs.rings["v_rot"].value).sum() >= 8
