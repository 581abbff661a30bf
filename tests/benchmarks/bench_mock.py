"""Benchmark: a 256 x 256 pixel x 128 channel cube from 1e6 tracer particles.

Run:  python tests/benchmarks/bench_mock.py
Stages: binning with a Gaussian line per particle (numba kernel), the beam (scipy.ndimage
Gaussian per channel), beam-smoothed noise, and the moment maps. Target: cube (binning +
beam + noise) within 20 s on 2 cores. Baseline measured in the same run: np.histogramdd
of the same particles into the same pixels and channels (no line profiles, no beam).
"""
import math
import time

import numba
import numpy as np

from icgen.mock import cube as C
from icgen.mock.project import Geometry, Instrument, project_particles

N_PARTICLES = 1_000_000
N_PIXELS = 256
N_CHANNELS = 128


def best_of(fn, repeat=3):
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), out


def particles(rng, n):
    """Invented demo disk: exponential radii (R_d = 3 kpc), a flat 150 km/s curve with a
    1 kpc core, 10 km/s line widths."""
    R = rng.gamma(2.0, 3.0, n)
    phi = rng.uniform(0, 2 * np.pi, n)
    v = 150.0 * R / np.hypot(R, 1.0)
    pos = np.column_stack([R * np.cos(phi), R * np.sin(phi), rng.normal(0, 0.3, n)])
    vel = np.column_stack([-v * np.sin(phi), v * np.cos(phi), rng.normal(0, 10, n)])
    return pos, vel


def main():
    rng = np.random.default_rng(0)
    pos, vel = particles(rng, N_PARTICLES)
    geo = Geometry(60.0, 35.0, 10.0, systemic=700.0)
    ins = Instrument(beam=12.0, pixel=4.0, channel=2.5, noise=0.05)
    east, north, v_los = project_particles(pos, vel, geo)
    east, north = east / geo.kpc_per_arcsec, north / geo.kpc_per_arcsec
    sigma = np.full(N_PARTICLES, 10.0)
    mass = np.full(N_PARTICLES, 1e4)
    k_sys = N_CHANNELS // 2
    grid = C.SkyGrid(N_PIXELS, N_PIXELS, N_CHANNELS, ins.pixel,
                     geo.systemic - k_sys * ins.channel, ins.channel, k_sys, geo.centre)
    C.bin_particles(grid, east[:100], north[:100], v_los[:100], sigma[:100], mass[:100])

    t_bin, binned = best_of(lambda: C.bin_particles(grid, east, north, v_los, sigma, mass))
    t_beam, smooth = best_of(lambda: C.beam_smooth(binned, ins.beam_sigma_pixels))
    t_noise, _ = best_of(lambda: C.beam_noise(smooth.shape, ins.beam_sigma_pixels, 1.0,
                                              np.random.default_rng(1)))
    t_cube, (data, rms) = best_of(lambda: C.make_cube(grid, east, north, v_los, sigma, mass,
                                                      ins, np.random.default_rng(1)), 1)
    t_mom, _ = best_of(lambda: C.moment_maps(data, grid, ins), 1)

    x_edges = (np.arange(N_PIXELS + 1) - 0.5 - grid.cx) * ins.pixel
    y_edges = (np.arange(N_PIXELS + 1) - 0.5 - grid.cy) * ins.pixel
    v_edges = grid.v_start - 0.5 * ins.channel + ins.channel * np.arange(N_CHANNELS + 1)
    sample = np.column_stack([north, -east, v_los])
    t_hist, _ = best_of(lambda: np.histogramdd(sample, bins=(y_edges, x_edges, v_edges),
                                               weights=mass))
    inside = binned.sum() / mass.sum()
    lines = [f"cube {N_PIXELS} x {N_PIXELS} x {N_CHANNELS} from {N_PARTICLES:.0e} particles, "
             f"{numba.get_num_threads()} numba threads ({inside:.3f} of the mass in the grid)",
             f"  binning, Gaussian line per particle (sigma = {sigma[0]:g} km/s = "
             f"{sigma[0] / ins.channel:g} channels): {t_bin:.2f} s",
             f"  beam ({ins.beam:g}\" FWHM, {ins.beam_sigma_pixels:.2f} px sigma):      {t_beam:.2f} s",
             f"  beam-smoothed noise:                       {t_noise:.2f} s",
             f"  whole cube (make_cube):                    {t_cube:.2f} s   (target <= 20 s)",
             f"  moment maps (smooth-and-clip mask):        {t_mom:.2f} s",
             f"  baseline np.histogramdd (no lines, no beam): {t_hist:.2f} s",
             f"  ratios: binning / histogramdd = {t_bin / t_hist:.2f}, "
             f"cube / histogramdd = {t_cube / t_hist:.2f}"]
    print("\n".join(lines))
    return 0 if t_cube <= 20.0 and math.isfinite(rms) else 1


if __name__ == "__main__":
    raise SystemExit(main())
