"""Robustness at the edges of ``icgen build`` and the other commands: full disks and
file-size limits, outputs that must not be replaced, size and unit checks before any
work, signals and left-over temporary files, closed standard output, small refusals.

Every refusal must be one line on stderr naming the option, key or file and the rule,
exit status 2, and nothing written (the project's rule for bad input). The expected
failures of the operating system are those of POSIX (write(2) fails with EFBIG beyond
RLIMIT_FSIZE when SIGXFSZ is ignored, ENOSPC on a full disk).
"""
import dataclasses
import errno
import fcntl
import io
import json
import os
import signal
import subprocess
import sys
import time
from collections import namedtuple
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest

from icgen import paths, sampling, snapshot
from icgen.snapshot.diskfile import DiskFile
from icgen.cli import main

REPO = Path(__file__).resolve().parents[1]

# One Hernquist halo: a closed-form potential, so a build is quick (~0.4 s in-process
# once compiled); the output units are the defaults (kpc, km/s, 1e10 Msun).
HALO = """\
[model]
name = "tiny halo"
seed = 5
{output}
[components.halo]
kind = "halo"
profile = "hernquist"
mass = "1e12 Msun"
scale_radius = "30 kpc"
particles = {particles}
"""


def halo_model(folder, particles="30_000", output="", name="halo.toml"):
    path = Path(folder) / name
    path.write_text(HALO.format(particles=particles, output=output))
    return str(path)


def estimate(model, count=30_000, precision="double", compress=None):
    """The writer's size estimate (bytes) for a one-component model file."""
    from icgen.spec import load_spec

    plans = [namedtuple("P", "name kind count")("halo", "halo", count)]
    return snapshot.estimate_file_size(plans, precision, compress,
                                       len(load_spec(model).to_toml().encode()))


def one_line_error(capsys, *words):
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("icgen: error: "), err
    for w in words:
        assert w in err, err
    return err


def no_work(monkeypatch):
    """Fail the test if a model is built: refusals must come before any work."""
    monkeypatch.setattr("icgen.model.MassModel.__init__", lambda *a: pytest.fail("built"))


@pytest.fixture(scope="module")
def tiny_snapshot(tmp_path_factory):
    """A small snapshot with a disk (for check, stability, mock, drift)."""
    from icgen.build import build_snapshot
    from icgen.spec import spec_from_dict

    spec = spec_from_dict({"model": {"name": "tiny", "seed": 3}, "components": {
        "halo": {"kind": "halo", "profile": "hernquist", "mass": "5e11 Msun",
                 "scale_radius": "20 kpc", "particles": 4000},
        "disk": {"kind": "disk", "mass": "4e10 Msun", "scale_length": "3 kpc",
                 "scale_height": "0.3 kpc", "toomre_q": 1.3, "particles": 3000}}})
    path = tmp_path_factory.mktemp("tiny") / "tiny.h5"
    build_snapshot(spec, path, quiet=True)
    return path


# ------------------------------------------------------------ 1. full disk, size limits

# Runs the CLI under a file-size limit (RLIMIT_FSIZE, POSIX setrlimit(2)). With SIGXFSZ
# ignored, write(2) beyond the limit fails with EFBIG; argv[2] = "keep" leaves SIGXFSZ at
# its default, which kills the process unless the build ignores it itself.
LIMITED_CHILD = """\
import resource, signal, sys
limit = int(sys.argv[1])
if sys.argv[2] == "ignore":
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
from icgen.cli import main
sys.exit(main(sys.argv[3:]))
"""


@pytest.fixture(scope="module")
def size_stages(tmp_path_factory):
    """(model file, size of the temporary file when commit starts, final size), from an
    unlimited build of the same model: the offsets the limits below are chosen from."""
    folder = tmp_path_factory.mktemp("stages")
    model = halo_model(folder)
    seen = {}
    real = snapshot.SnapshotWriter.commit

    def spy(self, overwrite=False):
        seen["before_close"] = os.path.getsize(self.tmp_path)
        return real(self, overwrite)

    snapshot.SnapshotWriter.commit = spy
    try:
        assert main(["build", model, "-o", str(folder / "full.h5"), "--quiet"]) == 0
    finally:
        snapshot.SnapshotWriter.commit = real
    return model, seen["before_close"], os.path.getsize(folder / "full.h5")


@pytest.mark.parametrize("stage, sigxfsz, compress", [
    ("early", "ignore", None),          # the first particles do not fit
    ("mid-data", "ignore", None),
    ("mid-data", "keep", "gzip"),       # gzip once crashed HDF5 (exit 139); the build
                                        # itself must ignore SIGXFSZ
    ("final close", "ignore", None),    # only the metadata written by the close fails
])
def test_file_size_limit_is_one_line_exit_74_and_no_file(tmp_path, size_stages, stage,
                                                         sigxfsz, compress):
    model, before_close, final = size_stages
    if stage == "final close" and not before_close < final:
        pytest.skip("this HDF5 writes nothing beyond the data at close")
    limit = {"early": 1024, "mid-data": before_close // 2,
             "final close": (before_close + final) // 2}[stage]
    target = tmp_path / "galaxy.h5"
    argv = ["build", model, "-o", str(target), "--quiet"]
    argv += ["--compress", compress] if compress else []
    proc = subprocess.run([sys.executable, "-c", LIMITED_CHILD, str(limit), sigxfsz, *argv],
                          capture_output=True, text=True, cwd=REPO, timeout=300)
    # 74: EX_IOERR of BSD sysexits.h, the status icgen gives for an unwritable output
    assert proc.returncode == 74, proc.stderr
    assert proc.stderr.count("\n") == 1, proc.stderr
    assert proc.stderr.startswith(f"icgen: error: cannot write {target}: file too large "
                                  f"(EFBIG)")
    assert "needs about" in proc.stderr and "nothing written" in proc.stderr
    assert os.listdir(tmp_path) == []


class _FullDisk(io.FileIO):
    """A file on a disk that is full after ``room`` bytes (ENOSPC, as write(2) reports)."""
    room = 300_000

    def write(self, data):
        left = self.room - self.tell()
        if left <= 0:
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return super().write(memoryview(data).cast("B")[:left])


def test_full_disk_is_one_line_and_keeps_the_old_file(tmp_path, monkeypatch, capsys):
    model = halo_model(tmp_path)
    target = tmp_path / "galaxy.h5"
    target.write_bytes(b"old snapshot")
    real = DiskFile.__init__

    def on_full_disk(self, path):
        real(self, path)
        fd = os.dup(self._f.fileno())
        self._f.close()
        self._f = _FullDisk(fd, "r+b")

    monkeypatch.setattr(DiskFile, "__init__", on_full_disk)
    assert main(["build", model, "-o", str(target), "--quiet", "--overwrite"]) == 74
    one_line_error(capsys, "no space left on device (ENOSPC)", "300.0 kB written",
                   f"needs about {paths.format_bytes(estimate(model))}", "nothing written")
    assert sorted(os.listdir(tmp_path)) == ["galaxy.h5", "halo.toml"]
    assert target.read_bytes() == b"old snapshot"


# ------------------------------------------------------------ 2. what must not be replaced


def test_build_refuses_to_overwrite_its_model_file(tmp_path, monkeypatch, capsys):
    model = Path(halo_model(tmp_path))
    text = model.read_text()
    no_work(monkeypatch)
    assert main(["build", str(model), "-o", str(model), "--overwrite"]) == 2
    one_line_error(capsys, "--output", "is the input file")
    # another spelling of the same file: a hard link
    os.link(model, tmp_path / "alias.h5")
    assert main(["build", str(model), "-o", str(tmp_path / "alias.h5"), "--overwrite"]) == 2
    one_line_error(capsys, "--output", "is the input file")
    assert model.read_text() == text
    assert sorted(os.listdir(tmp_path)) == ["alias.h5", "halo.toml"]


@pytest.mark.parametrize("argv, key", [
    (["build", "-o", "{t}", "--overwrite"], "--output"),
    (["new", "{t}", "--overwrite"], "path"),
    (["curve", "--table", "{t}"], "--table"),
    (["curve", "--plot", "{t}"], "--plot"),
    (["stability", "--json", "{t}"], "--json"),
    (["stability", "--plot", "{t}"], "--plot"),
    (["check", "snap.h5", "--json", "{t}"], "--json"),
    (["check", "snap.h5", "--report", "{d}"], "--report"),
    (["drift", "snap.h5", "--time", "1 Gyr", "--report", "{d}"], "--report"),
    (["mock", "snap.h5", "--tracer", "disk", "--inclination", "60 deg", "--position-angle",
      "30 deg", "--distance", "10 Mpc", "-o", "{d}", "--overwrite"], "--output"),
])
def test_no_command_replaces_a_fifo(tmp_path, monkeypatch, capsys, argv, key):
    # A FIFO (or a device) is not a regular file: replacing it by one, or writing into
    # it, is never what was meant. Folder outputs are checked file by file.
    monkeypatch.chdir(tmp_path)
    no_work(monkeypatch)
    fifo = tmp_path / "target"
    os.mkfifo(fifo)
    folder = tmp_path / "out"
    folder.mkdir()
    names = {"check": "check.json", "drift": "drift.png", "mock": "cube.fits"}
    if "{d}" in argv:
        os.mkfifo(folder / names[argv[0]])
    argv = [a.format(t=fifo, d=folder) for a in argv]
    assert main(argv) == 2
    one_line_error(capsys, key, "FIFO (named pipe), not a regular file")
    assert sorted(os.listdir(tmp_path)) == ["out", "target"]


def test_a_device_is_not_replaced_by_a_snapshot(tmp_path, monkeypatch, capsys):
    if not os.path.exists(os.devnull):
        pytest.skip("no null device")
    no_work(monkeypatch)
    assert main(["build", halo_model(tmp_path), "-o", os.devnull, "--overwrite"]) == 2
    one_line_error(capsys, "--output", "character device, not a regular file")
    assert not Path(os.devnull).is_file()


@pytest.mark.parametrize("command", ["check", "stability", "mock", "drift"])
def test_reading_commands_refuse_to_overwrite_their_snapshot(tiny_snapshot, tmp_path,
                                                            monkeypatch, capsys, command):
    before = tiny_snapshot.read_bytes()
    folder = tiny_snapshot.parent
    argv = {"check": ["check", str(tiny_snapshot), "--json", str(tiny_snapshot)],
            "stability": ["stability", str(tiny_snapshot), "--plot", str(tiny_snapshot)],
            "mock": ["mock", str(tiny_snapshot), "--tracer", "disk", "--inclination", "60 deg",
                     "--position-angle", "30 deg", "--distance", "10 Mpc", "-o", str(folder),
                     "--overwrite"],
            "drift": ["drift", str(tiny_snapshot), "--time", "1 Gyr", "--report",
                      str(folder)]}[command]
    link = {"mock": "mock.png", "drift": "drift.json"}.get(command)
    if link:      # the snapshot under the name of one of the command's output files
        os.link(tiny_snapshot, folder / link)
    try:
        assert main(argv) == 2
        one_line_error(capsys, "is the input file")
    finally:
        if link:
            os.remove(folder / link)
    assert tiny_snapshot.read_bytes() == before


# ------------------------------------------------------------ 3. size before sampling


def test_a_trillion_particles_is_refused_before_sampling(tmp_path, monkeypatch, capsys):
    monkeypatch.setattr("icgen.sampling.realize.samplers", lambda *a: pytest.fail("sampled"))
    # beyond the range of a component's particle count: the model file is refused
    model = halo_model(tmp_path, particles="1_000_000_000_000")
    assert main(["build", model, "-o", str(tmp_path / "g.h5")]) == 2
    one_line_error(capsys, "components.halo.particles", "1e+10")
    # within the range, 1e10 particles are refused by the size check before any sampling:
    # 1e10 x (3 + 3 + 1) float64 + 1e10 uint64 ids = 640 GB at the least
    model = halo_model(tmp_path, particles="10_000_000_000")
    monkeypatch.setattr("icgen.build.shutil.disk_usage",
                        lambda p: namedtuple("Usage", "total used free")(10**12, 0, 10**11))
    assert main(["build", model, "-o", str(tmp_path / "g.h5")]) == 2
    err = one_line_error(capsys, "--output", "10,000,000,000 particles", "free")
    need = float(err.split("needs about ")[1].split()[0])
    assert err.split("needs about ")[1].split()[1] == "GB" and need >= 640.0
    assert os.listdir(tmp_path) == ["halo.toml"]


def test_free_space_is_checked_with_the_figures(tmp_path, monkeypatch, capsys):
    model = halo_model(tmp_path)
    Usage = namedtuple("Usage", "total used free")
    monkeypatch.setattr("icgen.build.shutil.disk_usage", lambda p: Usage(10**9, 10**9, 10**6))
    monkeypatch.setattr("icgen.sampling.realize.samplers", lambda *a: pytest.fail("sampled"))
    assert main(["build", model, "-o", str(tmp_path / "g.h5"), "--compress", "gzip"]) == 2
    need = paths.format_bytes(estimate(model, compress="gzip"))
    one_line_error(capsys, "--output", f"needs about {need}", "30,000 particles",
                   "compression assumed to gain nothing", "1.0 MB free")
    assert os.listdir(tmp_path) == ["halo.toml"]


@pytest.mark.parametrize("precision, compress", [("double", None), ("single", None),
                                                 ("double", "gzip"), ("single", "lzf")])
def test_size_estimate_bounds_the_file_and_is_in_the_summary(tmp_path, capsys, precision,
                                                             compress):
    model = halo_model(tmp_path)
    out = tmp_path / "g.h5"
    argv = ["build", model, "-o", str(out), "--precision", precision]
    assert main(argv + (["--compress", compress] if compress else [])) == 0
    text = capsys.readouterr().out
    need = estimate(model, precision=precision, compress=compress)
    size = out.stat().st_size
    assert size <= need
    if compress is None:      # uncompressed, the estimate is the data plus ~0.1 MB
        assert need < 1.1 * size
    assert f"estimated before sampling {need / 1e6:.1f} MB" in text


# ------------------------------------------------------------ 4. signals and left-overs


def dead_pid():
    """The pid of a process that has exited (and been reaped)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_stale_partials_are_those_of_gone_processes_without_a_lock(tmp_path):
    gone = dead_pid()
    stale = tmp_path / f".a.h5.partial-{gone}"
    stale.write_bytes(b"x" * 1234)
    alive = tmp_path / f".b.h5.partial-{os.getppid()}"       # a live process
    alive.write_bytes(b"x")
    locked = tmp_path / f".c.h5.partial-{gone}"               # a writer elsewhere holds it
    locked.write_bytes(b"x")
    (tmp_path / "partial-123.h5").write_bytes(b"x")          # not a temporary name
    with open(locked, "r+b") as fh:
        fcntl.flock(fh.fileno(), fcntl.LOCK_EX)
        found = paths.stale_partials(tmp_path)
    assert found == [paths.StaleFile(str(stale), gone, 1234)]
    assert found[0].describe() == (f"stale temporary file {stale} (1.2 kB) of process {gone}, "
                                   f"which is gone")


def test_build_reports_a_killed_builds_file_and_removes_it_on_request(tmp_path, capsys):
    # SIGKILL cannot be handled: the killed build leaves its temporary file. A later
    # build into the same folder lists it (one line, with its size) and removes it with
    # --remove-stale.
    big = halo_model(tmp_path, particles="2_000_000", name="big.toml")
    proc = subprocess.Popen([sys.executable, "-m", "icgen.cli", "build", big, "-o",
                             str(tmp_path / "big.h5"), "--quiet"], cwd=REPO,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 120
        while not [f for f in os.listdir(tmp_path) if ".partial-" in f
                   and (tmp_path / f).stat().st_size > 1_000_000]:
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline, "no temporary file appeared"
            time.sleep(0.02)
        proc.kill()
        proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
    (left,) = [f for f in os.listdir(tmp_path) if ".partial-" in f]
    size = (tmp_path / left).stat().st_size
    small = halo_model(tmp_path, particles="2000")
    assert main(["build", small, "-o", str(tmp_path / "small.h5"), "--quiet"]) == 0
    err = capsys.readouterr().err
    assert err == (f"icgen: note: stale temporary file {tmp_path / left} "
                   f"({paths.format_bytes(size)}) of process {proc.pid}, which is gone; "
                   f"--remove-stale removes it\n")
    assert (tmp_path / left).exists()
    assert main(["build", small, "-o", str(tmp_path / "small.h5"), "--quiet", "--overwrite",
                 "--remove-stale"]) == 0
    assert capsys.readouterr().err.startswith(f"icgen: removed stale temporary file "
                                              f"{tmp_path / left}")
    assert sorted(os.listdir(tmp_path)) == ["big.toml", "halo.toml", "small.h5"]


@pytest.mark.parametrize("argv, where", [
    (["curve"], "icgen.spec.load_spec"),
    (["stability"], "icgen.spec.load_spec"),
    (["build", "-o", "x.h5"], "icgen.spec.load_spec"),
    (["new", "x.toml"], "icgen.paths.check_target"),
    (["info", "x.h5"], "icgen.snapshot.describe"),
])
def test_ctrl_c_anywhere_in_a_command_is_one_line_and_130(tmp_path, monkeypatch, capsys,
                                                          argv, where):
    monkeypatch.chdir(tmp_path)

    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(where, interrupted)
    assert main(argv) == 130        # 128 + SIGINT (2), as shells report
    assert capsys.readouterr().err == "icgen: interrupted by SIGINT\n"
    assert os.listdir(tmp_path) == []


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="needs /proc to see imports")
def test_ctrl_c_while_a_command_starts_is_one_line_and_130():
    # The signal lands while the command imports numpy, its first heavy import (seen
    # as numpy's compiled module mapped into the process), within ~0.1 s of the start.
    proc = subprocess.Popen([sys.executable, "-m", "icgen.cli", "curve"], cwd=REPO,
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                maps = Path(f"/proc/{proc.pid}/maps").read_text()
            except OSError:
                maps = ""
            if "numpy" in maps:
                break
            assert proc.poll() is None and time.monotonic() < deadline
            time.sleep(0.001)
        proc.send_signal(signal.SIGINT)
        err = proc.communicate(timeout=60)[1]
    finally:
        if proc.poll() is None:
            proc.kill()
    assert proc.returncode == 130, err
    assert err == "icgen: interrupted by SIGINT\n"


# ------------------------------------------------------------ 5. closed standard output


class _ClosedPipe(io.StringIO):
    """Standard output whose reader has gone (as after ``| head -1`` or ``| true``)."""

    def write(self, text):
        raise BrokenPipeError(errno.EPIPE, "Broken pipe")

    def flush(self):
        raise BrokenPipeError(errno.EPIPE, "Broken pipe")


def test_closed_stdout_changes_neither_files_nor_status(tiny_snapshot, tmp_path, monkeypatch,
                                                        capsys):
    def check(name):
        return main(["check", str(tiny_snapshot), "--sources", "2000", "--json",
                     str(tmp_path / f"{name}.json"), "--report", str(tmp_path / name)])

    status = check("open")
    capsys.readouterr()
    monkeypatch.setattr(sys, "stdout", _ClosedPipe())
    assert check("closed") == status        # ``icgen check ... | true``
    assert main(["stability", str(tiny_snapshot), "--json", str(tmp_path / "s.json")]) == 0
    monkeypatch.undo()
    assert capsys.readouterr().err == ""
    opened, closed = (json.loads((tmp_path / f"{n}.json").read_text()) for n in ("open", "closed"))
    opened.pop("timing"), closed.pop("timing")        # seconds differ from run to run
    assert opened == closed
    assert sorted(os.listdir(tmp_path / "closed")) == ["check.json", "check.png"]
    assert json.loads((tmp_path / "s.json").read_text())["disks"]


def test_closed_pipe_of_a_real_process_is_harmless(tmp_path):
    # stdout is a pipe whose read end is already closed: every write gets EPIPE
    read_end, write_end = os.pipe()
    os.close(read_end)
    table = tmp_path / "curve.ecsv"
    try:
        proc = subprocess.run([sys.executable, "-m", "icgen.cli", "curve", "--table",
                               str(table)], stdout=write_end, stderr=subprocess.PIPE,
                              text=True, cwd=REPO, timeout=300)
    finally:
        os.close(write_end)
    assert proc.returncode == 0 and proc.stderr == ""
    assert table.read_text().startswith("# %ECSV")


# ------------------------------------------------------------ 6. units that overflow


@pytest.mark.parametrize("output, precision, key", [
    # G = 4.3e-6 kpc (km/s)^2/Msun (astropy.constants) is 4.3e304 in 1e-300 kpc per
    # 1e10 Msun, but astropy's conversion through SI overflows: the file got G = inf; the
    # model file's range of unit scales (1e-40 to 1e40) now refuses it first
    ('[output]\nlength_unit = "1e-300 kpc"', "double", "output.length_unit"),
    # 1e7 kpc in 1e-32 kpc is 1e39, beyond the float32 maximum 3.4e38 (IEEE 754)
    ('[output]\nlength_unit = "1e-32 kpc"', "single", "output.length_unit"),
    # a speed of 1e-3 km/s in units of 1e306 km/s is 1e-309, below the smallest normal
    # float64, 2.2e-308 (IEEE 754)
    ('[output]\nvelocity_unit = "1e306 km/s"', "double", "output.velocity_unit"),
    # (1e-200 km/s)^2 has a scale of 0: astropy cannot even form the unit of G (refused by
    # the model file's range of unit scales)
    ('[output]\nvelocity_unit = "1e-200 km/s"', "double", "output.velocity_unit"),
])
def test_units_that_overflow_are_refused_before_any_work(tmp_path, monkeypatch, capsys,
                                                         output, precision, key):
    model = halo_model(tmp_path, output=output)
    no_work(monkeypatch)
    assert main(["build", model, "-o", str(tmp_path / "g.h5"), "--precision", precision]) == 2
    one_line_error(capsys, key)
    assert os.listdir(tmp_path) == ["halo.toml"]


def test_every_float_attribute_is_checked_before_the_rename(tmp_path):
    from icgen.spec import spec_from_toml_text

    spec = spec_from_toml_text(HALO.format(particles=10, output=""))
    plans = [namedtuple("P", "name kind count")("halo", "halo", 10)]
    with pytest.raises(snapshot.NonFiniteError, match="attribute 'G' of / is inf"):
        with snapshot.SnapshotWriter(tmp_path / "g.h5", spec, plans) as w:
            w.units = dataclasses.replace(w.units, G=float("inf"))   # as astropy gave it
            w.append(sampling.ParticleChunk("halo", 0, np.ones((10, 3)), np.ones((10, 3)),
                                            np.ones(10)))
            w.finish(np.array([1.0]), {"total": [1.0], "halo": [1.0]})
            w.commit()
    assert os.listdir(tmp_path) == []


# ------------------------------------------------------------ 7. smaller refusals


def test_stability_json_into_a_folder_is_refused(tmp_path, monkeypatch, capsys):
    no_work(monkeypatch)
    assert main(["stability", "--json", str(tmp_path)]) == 2
    one_line_error(capsys, "--json", "is a folder")


def test_new_on_a_device_or_folder_is_refused(tmp_path, capsys):
    if os.path.exists("/dev/full"):
        assert main(["new", "/dev/full", "--overwrite"]) == 2
        one_line_error(capsys, "path", "character device, not a regular file")
    assert main(["new", str(tmp_path)]) == 2
    one_line_error(capsys, "path", "is a folder")
    assert os.listdir(tmp_path) == []


def test_new_that_cannot_write_is_one_line_exit_74(tmp_path, monkeypatch, capsys):
    def full(*a, **k):
        raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC), str(tmp_path / "m.toml"))

    monkeypatch.setattr("builtins.open", full)
    assert main(["new", str(tmp_path / "m.toml")]) == 74
    one_line_error(capsys, "m.toml", "no space left on device (ENOSPC)")
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("content", [b"", b"not a snapshot"])
def test_stability_reads_an_h5_file_as_a_snapshot(tmp_path, capsys, content):
    path = tmp_path / "empty.h5"
    path.write_bytes(content)
    assert main(["stability", str(path)]) == 2
    one_line_error(capsys, "empty.h5", "not an HDF5 file, so not an icgen snapshot")


def test_stability_routes_hdf5_content_to_the_snapshot_reader(tiny_snapshot, tmp_path,
                                                              capsys):
    renamed = tmp_path / "galaxy.model"          # HDF5 inside, whatever the name says
    renamed.write_bytes(tiny_snapshot.read_bytes())
    assert main(["stability", str(renamed), "--json", str(tmp_path / "s.json"),
                 "--quiet"]) == 0


def test_long_output_names_get_a_temporary_name_that_fits(tmp_path, capsys):
    limit = paths.name_max(tmp_path)
    name = "g" * (limit - 5) + ".h5"              # 250 characters on most file systems
    model = halo_model(tmp_path, particles="2000")
    assert main(["build", model, "-o", str(tmp_path / name), "--quiet"]) == 0
    assert sorted(os.listdir(tmp_path)) == sorted([name, "halo.toml"])
    tmp = os.path.basename(paths.partial_path(tmp_path / name))
    other = os.path.basename(paths.partial_path(tmp_path / ("g" * (limit - 5) + ".h6")))
    assert len(os.fsencode(tmp)) <= limit and tmp != other
    assert tmp.startswith(".ggg") and tmp.endswith(f".partial-{os.getpid()}")
    png = os.path.basename(paths.partial_path(tmp_path / ("p" * limit), keep_suffix=True))
    assert len(png) <= limit
    assert paths.partial_path(tmp_path / "a.png", keep_suffix=True).endswith(
        f"/.a.png.partial-{os.getpid()}.png")
    # a name longer than the limit itself cannot be written: one line, exit 2
    assert main(["build", model, "-o", str(tmp_path / ("g" * (limit + 1)))]) == 2
    one_line_error(capsys, "--output", f"the file system allows {limit}")


@pytest.mark.parametrize("sigma", ["inf", "nan", "0", "-2"])
def test_check_sigma_must_be_finite_and_positive(tmp_path, capsys, sigma):
    assert main(["check", str(tmp_path / "none.h5"), "--sigma", sigma]) == 2
    one_line_error(capsys, "--sigma", "finite positive")


def test_particles_faster_than_light_are_reported(tmp_path, monkeypatch, capsys):
    model = halo_model(tmp_path, particles="2000")
    real = sampling.iter_chunks
    c = const.c.to_value(u.km / u.s)       # 299792.458 km/s (exact, SI definition)

    def fast(*args, **kwargs):
        for chunk in real(*args, **kwargs):
            chunk.velocity[17] = [1.5 * c, 0.0, 0.0]
            yield chunk

    monkeypatch.setattr(sampling, "iter_chunks", fast)
    assert main(["build", model, "-o", str(tmp_path / "g.h5")]) == 0
    out, err = capsys.readouterr()
    line = "component 'halo': 1 particles faster than light (fastest 4.497e+05 km/s"
    assert f"icgen: warning: {line}" in err and f"warning: {line}" in out
