"""Benchmark: ``icgen drift`` on 1e5 particles of the default model for 1 Gyr.

Run:  python tests/benchmarks/bench_drift.py [particles] [Gyr]
Target (project issue): at most 60 s on 2 cores with the default steps. Reports the wall
time, force evaluations, the energy error reached, and ratios against baselines measured
in the same run: (a) one force evaluation of all the particles times the mean number of
steps per particle (the cost of the same work done as full-array calls), and (b) one
global step, 0.5 Myr, for the same time (what a single step from a typical orbit costs),
with its energy error. Other processes on the machine slow the parallel kernels a lot:
the load average is printed with the figures.
"""
import os
import sys
import time
import warnings

import numpy as np


def main():
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 100_000
    gyr = float(sys.argv[2]) if len(sys.argv) > 2 else 1.0
    import numba
    import icgen
    from icgen import sampling, spec
    from icgen.diagnostics.drift import run_drift, subsample
    from icgen.model import load_model

    data = spec.load_dict(None)                        # the default model, scaled to n
    total = sum(c["particles"] for c in data["components"].values())
    for c in data["components"].values():
        c["particles"] = max(int(round(c["particles"] * n / total)), 1)
    model = load_model(data)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")                # halo/disk particle mass ratio
        parts = sampling.sample(model)
    parts, _ = subsample(parts, n, 1)
    run_drift(model, parts, 0.01)                       # compile and warm the caches
    t0 = time.perf_counter()
    res = run_drift(model, parts, gyr)
    wall = time.perf_counter() - t0
    st = res.steps
    pos = np.concatenate([p["position"] for p in parts.values()])
    R, z = np.hypot(pos[:, 0], pos[:, 1]), pos[:, 2].copy()
    model.potential.evaluate(R, z)
    t1 = time.perf_counter()
    for _ in range(5):
        model.potential.evaluate(R, z)
    t_eval = (time.perf_counter() - t1) / 5
    steps = st["mean_steps_per_particle_per_gyr"] * gyr
    t2 = time.perf_counter()
    glob = run_drift(model, parts, gyr, step=0.5e-3)
    wall_global = time.perf_counter() - t2
    print(f"icgen {icgen.__version__}; numba threads {numba.get_num_threads()}; "
          f"load average {os.getloadavg()[0]:.1f}")
    print(f"particles {len(pos)}, {gyr:g} Gyr, default per-particle steps: {wall:7.1f} s "
          f"(target 60 s)")
    print(f"  steps per particle: mean {steps:.0f}; steps taken {st['steps_taken']:.3e}; "
          f"force calls from Python {st['python_force_calls']}")
    print(f"  energy error: median {res.energy['median']:.2e}, p99 {res.energy['p99']:.2e}, "
          f"max {res.energy['max']:.2e}")
    print(f"baseline (a) one evaluation of all particles {t_eval * 1e3:.1f} ms x {steps:.0f} "
          f"steps = {t_eval * steps:.1f} s; ratio {wall / (t_eval * steps):.2f}")
    print(f"baseline (b) one global 0.5 Myr step: {wall_global:.1f} s, energy error p99 "
          f"{glob.energy['p99']:.2e}, max {glob.energy['max']:.2e}; ratio "
          f"{wall / wall_global:.2f}")


if __name__ == "__main__":
    main()
