"""Benchmark: ``build`` of the default model end to end, at 1e6 and 3e6 particles.

Run:  python tests/benchmarks/bench_build.py [--sizes 1e6,3e6] [--folder DIR]

Each build runs in its own process (so its peak resident memory is its own) and reports
seconds per stage. The writing figures are compared with a baseline measured in the same
run: h5py writing the same number of bytes of random float64 data into the same
contiguous datasets, in the same chunks, then fsync. Ratios, not absolute numbers, are
what carry over between machines.
"""
import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time

import numpy as np

CHUNK = 262144
# float64 position (3), velocity (3), mass; uint64 id: bytes per particle in the file
BYTES_PER_PARTICLE = 8 * 3 + 8 * 3 + 8 + 8


def scaled_spec(n_total):
    """The built-in default model with its particle counts scaled to ``n_total``."""
    import dataclasses
    from icgen.spec import load_spec
    spec = load_spec(None)
    total = sum(c.particles for c in spec.components)
    comps = tuple(dataclasses.replace(c, particles=max(1, round(c.particles * n_total / total)))
                  for c in spec.components)
    return dataclasses.replace(spec, components=comps)


def child(n_total, folder):
    """One build in this process; prints a JSON line with timings and peak memory."""
    import warnings
    from icgen.build import build_snapshot
    warnings.simplefilter("ignore")
    t0 = time.perf_counter()
    spec = scaled_spec(n_total)
    path = os.path.join(folder, f"bench_{n_total}.h5")
    result = build_snapshot(spec, path, overwrite=True)
    wall = time.perf_counter() - t0
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024   # Linux: KiB
    n = sum(c.count for c in result.components)
    print(json.dumps({"n": n, "wall": wall, "timing": result.timing, "size": result.size_bytes,
                      "peak_mb": peak_mb}))
    os.remove(path)


def baseline(n_total, folder):
    """Seconds for h5py to write n_total particles' worth of random data, chunk by chunk."""
    import h5py
    rng = np.random.default_rng(0)
    block = {"position": rng.random((CHUNK, 3)), "velocity": rng.random((CHUNK, 3)),
             "mass": rng.random(CHUNK), "id": np.arange(CHUNK, dtype="<u8")}
    path = os.path.join(folder, "baseline.h5")
    t0 = time.perf_counter()
    with h5py.File(path, "w") as f:
        ds = {k: f.create_dataset(k, shape=(n_total,) + v.shape[1:], dtype=v.dtype)
              for k, v in block.items()}
        for lo in range(0, n_total, CHUNK):
            hi = min(lo + CHUNK, n_total)
            for k, d in ds.items():
                d[lo:hi] = block[k][: hi - lo]
    with open(path, "rb") as fh:
        os.fsync(fh.fileno())
    seconds = time.perf_counter() - t0
    os.remove(path)
    return seconds


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", default="1e6,3e6")
    parser.add_argument("--folder", default=None, help="where to write (default: a temp dir)")
    parser.add_argument("--child", type=float, help=argparse.SUPPRESS)
    args = parser.parse_args()
    folder = args.folder or tempfile.mkdtemp(prefix="icgen_bench_")
    if args.child:
        child(int(args.child), folder)
        return
    import icgen
    print(f"icgen {icgen.__version__}; {os.cpu_count()} cores; writing in {folder}")
    for size in (int(float(s)) for s in args.sizes.split(",")):
        out = subprocess.run([sys.executable, __file__, "--child", str(size), "--folder", folder],
                             capture_output=True, text=True, check=True)
        r = json.loads(out.stdout.strip().splitlines()[-1])
        t = r["timing"]
        t_base = min(baseline(r["n"], folder) for _ in range(3))
        mb = r["n"] * BYTES_PER_PARTICLE / 1e6
        t_write = t["writing"] + t["commit"]
        print(f"\nN = {r['n']:,} particles, file {r['size'] / 1e6:.1f} MB")
        for key, value in t.items():
            print(f"  {key:<16} {value:7.2f} s")
        print(f"  {'process wall':<16} {r['wall']:7.2f} s (incl. imports and numba cache load)")
        print(f"  peak resident memory            {r['peak_mb']:8.0f} MB")
        print(f"  end-to-end rate                 {r['n'] / sum(t.values()) / 1e6:8.2f} M particles/s")
        print(f"  baseline h5py write + fsync     {t_base:8.2f} s = {mb / t_base:6.0f} MB/s")
        print(f"  icgen write + fsync             {t_write:8.2f} s = {mb / t_write:6.0f} MB/s"
              f"  (ratio to baseline {t_write / t_base:.2f})")
        print(f"  icgen centring pass (read+write) {t['centring']:7.2f} s"
              f"  (ratio to baseline write {t['centring'] / t_base:.2f})")
    if args.folder is None:
        os.rmdir(folder)


if __name__ == "__main__":
    main()
