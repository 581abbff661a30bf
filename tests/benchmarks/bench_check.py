"""Benchmark: `icgen check` on a 1e6-particle snapshot of the default model.

Run:  python tests/benchmarks/bench_check.py [--snapshot FILE.h5]

Without --snapshot the default model, its particle numbers scaled to 1e6 in all, is built
into a temporary folder first (not timed). Reports
- the wall time of `icgen check FILE` in a fresh process, which is what a user waits for
  (imports, numba cache loading, model rebuild, measurements); target: at most 15 s on
  2 cores;
- the time of ``check_snapshot`` in this (warm) process and its stages;
- the part of it that is only start-up (imports, numba caches, model rebuild);
- a baseline measured in the same run: read every dataset with h5py and make one numpy
  pass over the particles (radii, speeds, a radial histogram), the least any check of
  the particles must do; and the ratio check / baseline.
Not a test: nothing is asserted.
"""
import argparse
import os
import subprocess
import sys
import tempfile
import time

import numpy as np


N_PARTICLES = 1_000_000


def default_spec(total):
    """The built-in default model with its particle numbers scaled to ``total`` in all."""
    from icgen.spec import load_dict, spec_from_dict
    data = load_dict(None)
    comps = data["components"].values()
    scale = total / sum(c["particles"] for c in comps)
    for c in comps:
        c["particles"] = max(1, round(c["particles"] * scale))
    return spec_from_dict(data)


def baseline(path):
    """Read all particles and touch each once with numpy; returns seconds."""
    import h5py
    t = time.perf_counter()
    with h5py.File(path, "r") as f:
        for g in f["particles"].values():
            pos, vel, m = g["position"][()], g["velocity"][()], g["mass"][()]
            r = np.sqrt(np.einsum("ij,ij->i", pos, pos))
            v2 = np.einsum("ij,ij->i", vel, vel)
            np.histogram(np.log10(r + 1e-6), bins=100, weights=m * v2)
    return time.perf_counter() - t


def cli_seconds(path):
    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "icgen.cli", "check", path, "--quiet"],
                         capture_output=True, text=True)
    if out.returncode not in (0, 1):
        raise RuntimeError(out.stderr)
    return time.perf_counter() - t, out.returncode


def startup_seconds(path):
    """Fresh process that only imports the check and rebuilds the stored model: the fixed
    cost every snapshot command pays (imports, numba cache loading, potential solve)."""
    code = ("import sys, icgen.diagnostics.check, icgen.snapshot as s; "
            "s.load_model_from_snapshot(sys.argv[1])")
    t = time.perf_counter()
    subprocess.run([sys.executable, "-c", code, path], check=True)
    return time.perf_counter() - t


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--snapshot", help="existing snapshot to check (default: build one)")
    args = parser.parse_args()
    import numba
    import icgen
    from icgen.diagnostics.check import check_snapshot
    with tempfile.TemporaryDirectory() as tmp:
        path = args.snapshot
        if path is None:
            from icgen.build import build_snapshot
            path = os.path.join(tmp, "default.h5")
            t = time.perf_counter()
            build_snapshot(default_spec(N_PARTICLES), path, quiet=True)
            print(f"built {path} in {time.perf_counter() - t:.1f} s (not part of the benchmark)")
        check_snapshot(path)                                   # warm numba caches
        t_base = min(baseline(path) for _ in range(3))
        t_warm, result = np.inf, None
        for _ in range(2):
            t = time.perf_counter()
            result = check_snapshot(path)
            t_warm = min(t_warm, time.perf_counter() - t)
        t_cli, status = min(cli_seconds(path) for _ in range(2))
        t_start = min(startup_seconds(path) for _ in range(2))
    n = sum(result.particles.values())
    print(f"icgen {icgen.__version__}; numba threads: {numba.get_num_threads()}; "
          f"{n:,} particles; check {'passed' if status == 0 else 'FAILED'}")
    print(f"icgen check, fresh process (wall):     {t_cli:6.2f} s   (target: <= 15 s)")
    print(f"  of which imports + model rebuild:     {t_start:6.2f} s")
    print(f"check_snapshot, warm process:           {t_warm:6.2f} s")
    for stage, sec in result.timing.items():
        print(f"    {stage:<32s}   {sec:6.2f} s")
    print(f"baseline: read + one numpy pass:        {t_base:6.2f} s")
    print(f"ratio check (fresh) / baseline:         {t_cli / t_base:6.1f}")
    print(f"ratio check (warm) / baseline:          {t_warm / t_base:6.1f}")


if __name__ == "__main__":
    main()
