"""Benchmark: build the default model's potential and evaluate it at 1e6 points.

Run:  python tests/benchmarks/bench_potential.py
Reports seconds and ratios against a baseline measured in the same run (numpy evaluating
the Hernquist potential and force at the same points: the cost of one closed-form sphere).
The first-compile time is measured in a subprocess with an empty numba cache.
"""
import os
import subprocess
import sys
import tempfile
import time

import numpy as np


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def first_compile_seconds():
    code = ("import time; t=time.perf_counter(); import icgen; m=icgen.load_model(); "
            "import numpy as np; m.potential.evaluate(np.ones(10), np.ones(10)); "
            "print(time.perf_counter()-t)")
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                             text=True, check=True)
    return float(out.stdout.strip().splitlines()[-1])


def main():
    import icgen
    from icgen.model import MassModel
    from icgen.spec import load_spec
    spec = load_spec(None)
    MassModel(spec)                                  # warm numba caches
    t_build = best_of(lambda: MassModel(spec))
    model = MassModel(spec)
    rng = np.random.default_rng(0)
    n = 1_000_000
    R = rng.uniform(0, 40, n)
    z = rng.normal(0, 3, n)
    model.potential.evaluate(R[:10], z[:10])
    t_eval = best_of(lambda: model.potential.evaluate(R, z))

    def baseline():
        r = np.hypot(R, z)
        phi = -1.0 / (r + 0.6)
        d = 1.0 / (r + 0.6) ** 2
        return phi, -d * R / r, -d * z / r
    t_base = best_of(baseline)
    t_compile = first_compile_seconds()
    print(f"icgen {icgen.__version__}; numba threads: {__import__('numba').get_num_threads()}")
    print(f"first run incl. numba compile (empty cache): {t_compile:6.2f} s")
    print(f"build potential, default model:              {t_build:6.3f} s   (bar: 3 s)")
    print(f"evaluate Phi, F_R, F_z at 1e6 points:        {t_eval:6.3f} s   (bar: 0.5 s)")
    print(f"baseline numpy Hernquist at 1e6 points:      {t_base:6.3f} s")
    print(f"ratio evaluate / baseline:                   {t_eval / t_base:6.1f}")


if __name__ == "__main__":
    main()
