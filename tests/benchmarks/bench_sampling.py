"""Benchmark: sample the default galaxy (halo 60%, disk 30%, bulge 10%) at 1e6, 2e6, 4e6.

Run:  python tests/benchmarks/bench_sampling.py [--quick]
For each size: seconds for the sampler tables (potential already built) and for streaming
all particles in 262144-particle chunks (nothing kept), and the ratio against a baseline
measured in the same run: numpy drawing 6 normal deviates per particle (the least any
sampler of 6 phase-space coordinates has to do). Numba compilation is excluded by a
warm-up run. Target: 1e6 particles in at most 5 s on 2 cores.
"""
import sys
import time
import warnings

import numpy as np


def model_with(total, spec_dict):
    """MassModel of the default galaxy with ``total`` particles in the 6:3:1 split."""
    from icgen.spec import spec_from_dict
    from icgen.model import MassModel
    data = {k: (dict(v) if isinstance(v, dict) else v) for k, v in spec_dict.items()}
    comps = {name: dict(c) for name, c in data["components"].items()}
    share = {"halo": 0.6, "disk": 0.3, "bulge": 0.1}
    for name, c in comps.items():
        c["particles"] = int(share[name] * total)
    data["components"] = comps
    return MassModel(spec_from_dict(data))


def time_sampling(model):
    """(tables s, particles s, CPU s of both, particle count, report)."""
    from icgen import sampling
    from icgen.sampling import realize
    c0, t0 = time.process_time(), time.perf_counter()
    realize.samplers(model)
    t_tables = time.perf_counter() - t0
    report = sampling.SamplingReport()
    t0 = time.perf_counter()
    n = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", sampling.SamplingWarning)
        for chunk in sampling.iter_chunks(model, report=report):
            n += len(chunk)
    return t_tables, time.perf_counter() - t0, time.process_time() - c0, n, report


def baseline(n):
    rng = np.random.default_rng(1)
    t0 = time.perf_counter()
    rng.standard_normal((n, 6))
    return time.perf_counter() - t0


def main(argv):
    import numba
    from icgen.spec import load_dict
    spec_dict = load_dict(None)
    sizes = [100_000] if "--quick" in argv else [1_000_000, 2_000_000, 4_000_000]
    print(f"numba threads: {numba.get_num_threads()}")
    time_sampling(model_with(20_000, spec_dict))                 # compile / load cache
    # CPU seconds (both threads) are printed too: on a shared machine wall time alone
    # measures the neighbours
    print(f"{'N':>9} {'tables s':>9} {'particles s':>12} {'total s':>8} {'CPU s':>7} "
          f"{'s per 1e6':>10} {'numpy normals s':>16} {'ratio':>6}")
    per_million = []
    for n in sizes:
        model = model_with(n, spec_dict)                        # potential built here
        t_tab, t_part, cpu, count, report = time_sampling(model)
        base = baseline(count)
        total = t_tab + t_part
        per_million.append(total / count * 1e6)
        print(f"{count:>9} {t_tab:>9.2f} {t_part:>12.2f} {total:>8.2f} {cpu:>7.2f} "
              f"{per_million[-1]:>10.2f} {base:>16.3f} {total / base:>6.0f}")
        print("          " + "; ".join(f"{k} {v:.2f} s" for k, v in report.timing.items()))
    if len(sizes) > 1:
        print(f"time per particle, largest / smallest N: {per_million[-1] / per_million[0]:.2f} "
              f"(1.00 = linear)")
    print(f"target: 1e6 in <= 5 s -> {'met' if per_million[0] <= 5 else 'NOT met'}")


if __name__ == "__main__":
    main(sys.argv[1:])
