"""Numerical tunables in one place (grid sizes, tolerances), with the reason for each."""

# Multipole expansion of the non-analytic densities (Dehnen & Binney 1998 residuals and
# numerically tabulated spheroids).  Radial grid in ln r: cubic Hermite interpolation
# error scales as h^4: 48 points per decade (h = 0.048) keeps it near 1e-6, and doubling
# it changed the Poisson check by < 1e-5 (measured).
RADIAL_POINTS_PER_DECADE = 48
# Inner grid edge as a fraction of the smallest length scale in the model, and outer edge
# as a multiple of the largest extent (where the density is negligible); beyond it the
# exterior form Phi_l ~ r^-(l+1) is exact.
RADIAL_INNER_FRACTION = 1e-4
RADIAL_OUTER_FACTOR = 2.0
# Highest (even) harmonic for disk residuals.  The residual of the thin-layer split is
# smooth in r but narrow in angle near the midplane. Against ring quadrature (z_d/R_d = 0.1,
# sech^2, R <= 10 R_d, z <= 3 z_d) the worst |dF_z/F_z| is 1.0e-3 for l_max = 48 and 5.8e-4
# for 64; |dF_R/F_R| < 1e-5 for both.
DISK_LMAX = 64
# Gauss-Legendre nodes on mu in [0, 1] for projecting densities on P_l(mu); the nodes
# cluster at the midplane (mu = 0), where the disk residual is narrow.
ANGULAR_NODES = 128

# Particles sampled, converted and written per chunk by default: 2**18 particles are ~15 MB
# of float64 position, velocity and mass, plus the sampler's work arrays (a few times
# that): a fixed budget well under 1 GB, and large enough that per-chunk overheads (numba
# calls, HDF5 calls) stay below 1 %.
CHUNK_PARTICLES = 2**18

# Midplane table for v_c, Omega, kappa: log-spaced radii.
MIDPLANE_POINTS = 800

# Outer exponential cut of infinite-mass spheroids (Kazantzidis, Magorrian & Moore 2004):
# default decay length as a fraction of the truncation radius (common practice: 0.1).
TRUNCATION_DECAY_FRACTION = 0.1

# Fast (R, z) interpolation grid of the total potential (potential/grid.py): nodes per unit
# of asinh(R/s), s = smallest vertical scale. 40 per unit (h = 0.025) keeps the cubic
# B-spline error of Phi and forces below ~1e-5 relative (tests/test_potential_grid.py).
GRID_NODES_PER_ASINH_UNIT = 40

# Gas disk (profiles/gas.py, potential/gas_solver.py): vertical-structure grid uniform in
# asinh(R / 0.05 R_d) and asinh(z / 0.05 z_ref); iteration stops when the midplane density
# changes by less than GAS_TOLERANCE (relative, where Sigma_g > 1e-6 of its centre value).
GAS_GRID_R = 160
GAS_GRID_Z = 160
GAS_LMAX = 96
GAS_TOLERANCE = 1e-4
GAS_MAX_ITERATIONS = 60
