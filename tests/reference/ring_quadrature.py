"""Brute-force potential and forces of an axisymmetric density by summing rings.

An independent oracle for the test-suite: it imports nothing from icgen. The
density is cut into coaxial rings; each ring's potential and forces are closed
forms in complete elliptic integrals, and the rings are summed with
Gauss-Legendre rules on panels graded geometrically towards the field point,
where the ring kernel is singular (log in the potential, 1/s in the forces).

Plain numpy/scipy rather than numba: the elliptic integrals come from
scipy.special, which numba cannot call, and an oracle should be obvious before
it is fast (about 0.1-0.3 s per field point, see the tests).

Units are whatever the caller uses; the default G is the internal
4.300917e-6 kpc (km/s)^2 / Msun (astropy.constants), so lengths in kpc, rho in
Msun/kpc^3, phi in (km/s)^2 and forces in (km/s)^2/kpc.
"""
import numpy as np
from scipy.special import ellipe, ellipkm1

G_INTERNAL = 4.300917e-6

# Panel widths grow by 1/_RATIO away from a grading centre. Ratio 0.25 keeps the
# nearest singularity one third of a panel width away from each panel, so an
# 8-16 point rule converges geometrically (about 3**(-2 n)); measured on
# Plummer and Miyamoto-Nagai models in tests/test_ring_reference.py.
_RATIO = 0.25
# Smallest panel at a centre, relative to the smaller side of its zone: the
# cells touching the field point are integrated poorly, but they hold a
# fraction of order _DEPTH of the force, far below any epsrel asked for.
_DEPTH = 1e-10
# Gauss-Legendre orders tried in turn; successive results are compared.
_ORDERS = (8, 12, 16, 24, 32)
# Differences below this fraction of the sum of |terms| are float64 roundoff
# of ~1e6 terms, which no refinement can remove (used where F vanishes).
_ROUNDOFF = 1e-12
# Source (R', z') nodes per vectorised batch: ~10 arrays of 1.6 MB each.
_BATCH = 200_000


class RingInputError(ValueError):
    """A bad argument to the ring-quadrature reference."""


class RingQuadratureError(RuntimeError):
    """The quadrature did not reach the requested accuracy."""


def ring_kernel(R, z, Rp, zp):
    """Potential and forces of a unit-mass ring for G = 1 (broadcasting arrays).

    Ring of radius ``Rp`` in the plane ``zp``, field point ``(R, z)``; with
    Q = (R+Rp)^2 + (z-zp)^2, D = (R-Rp)^2 + (z-zp)^2, m = 4 R Rp / Q = 1 - D/Q:

        phi = -2 K(m) / (pi sqrt(Q))

    (Cohl & Tohline 1999, ApJ 527, 86: azimuthal average of 1/|x-x'| =
    Q_{-1/2}(chi)/(pi sqrt(R Rp)) with Q_{-1/2}(chi) = k K(k); also Binney &
    Tremaine 2008, Galactic Dynamics, problem 2.3; both from memory, the tests
    check the formula on its own). Differentiating with
    dK/dm = [E - (1-m) K] / (2 m (1-m)) (DLMF 19.4.1) gives

        dphi/dR = [4 Rp (K-E)/(m) / Q - 2 E (Rp - R) / D] / (pi sqrt(Q))
        dphi/dz = 2 (z - zp) E / (pi D sqrt(Q))

    written so that nothing is divided by R (F_R = 0 on the axis comes out
    exactly) and 1 - m = D/Q is never formed by cancellation.

    Parameters
    ----------
    R, z : float or ndarray
        Field point, R >= 0.
    Rp, zp : float or ndarray
        Ring radius (> 0) and height, same length unit.

    Returns
    -------
    phi, F_R, F_z : ndarray
        Potential per unit G*mass [1/length] and force components
        F = -grad(phi) [1/length^2]. Infinite on the ring itself.
    """
    dz = z - zp
    q = (R + Rp) ** 2 + dz ** 2
    d = (R - Rp) ** 2 + dz ** 2
    # Rounding can push 4 R Rp / Q a hair above 1 next to the ring.
    m = np.minimum(4.0 * R * Rp / q, 1.0)
    k = ellipkm1(d / q)          # K(m) evaluated from 1-m = D/Q, accurate as m -> 1
    e = ellipe(m)
    sq = np.sqrt(q)
    phi = -2.0 * k / (np.pi * sq)
    dphi_dr = (4.0 * Rp * _k_minus_e_over_m(m, k, e) / q
               - 2.0 * e * (Rp - R) / d) / (np.pi * sq)
    dphi_dz = 2.0 * dz * e / (np.pi * d * sq)
    return phi, -dphi_dr, -dphi_dz


def _k_minus_e_over_m(m, k, e):
    """(K(m) - E(m)) / m without the cancellation of K - E at small m.

    Below m = 1e-3 the power series of K and E (DLMF 19.5.1, 19.5.2) to m^3
    are used: the dropped m^4 term is 1.4e-13 relative there, while the
    direct difference loses eps/m = 2e-13; above, the direct difference.
    """
    small = m < 1e-3
    series = 0.5 * np.pi * (0.5 + m * (3.0 / 16 + m * (15.0 / 128 + m * 175.0 / 2048)))
    direct = (k - e) / np.where(small, 1.0, m)
    return np.where(small, series, direct)


def graded_edges(lo, hi, centres, ratio=_RATIO, depth=_DEPTH):
    """Panel edges on [lo, hi], graded geometrically towards each centre.

    Each centre owns the zone up to the midpoints with its neighbours (or to
    lo, hi). From the centre, panel widths start at ``depth`` times the
    smaller side of its zone, the same on both sides so that the odd singular
    part of a force kernel cancels between mirror panels, and grow by
    1/ratio. Geometric grading towards a singularity is common practice in
    hp quadrature.

    Parameters
    ----------
    lo, hi : float
        Interval, lo < hi.
    centres : sequence of float
        Grading centres; those outside [lo, hi] are ignored.

    Returns
    -------
    ndarray, shape (n + 1,)
        Increasing panel edges, lo first and hi last.
    """
    cs = sorted({float(c) for c in centres if lo <= c <= hi})
    mids = [0.5 * (a + b) for a, b in zip(cs[:-1], cs[1:])]
    edges = [lo, hi]
    for c, left, right in zip(cs, [lo] + mids, mids + [hi]):
        sides = [s for s in (c - left, right - c) if s > 0.0]
        if not sides:
            continue
        # Keep c +- h distinct from c in float64.
        h0 = max(depth * min(sides), 64.0 * np.finfo(float).eps * abs(c))
        edges.append(c)
        for sign, span in ((-1.0, c - left), (1.0, right - c)):
            h = h0
            while h < span:
                edges.append(c + sign * h)
                h /= ratio
            edges.append(c + sign * span)
    return np.unique(edges)


def gauss_legendre_panels(edges, order):
    """Gauss-Legendre nodes and weights on every panel of ``edges``.

    Returns
    -------
    nodes, weights : ndarray, shape ((len(edges) - 1) * order,)
    """
    x, w = np.polynomial.legendre.leggauss(order)
    a = edges[:-1, None]
    half = 0.5 * np.diff(edges)[:, None]
    return (a + half * (1.0 + x)).ravel(), (half * w).ravel()


def ring_sums(rho, R, z, r_nodes, r_weights, z_nodes, z_weights):
    """Sum ring kernels over a tensor grid of (R', z') nodes, G = 1.

    dm = 2 pi R' rho(R', z') dR' dz'.

    Returns
    -------
    sums : ndarray, shape (3,)
        phi, F_R, F_z for G = 1.
    abs_sums : ndarray, shape (2,)
        Sum of |dm phi_ring| and of |dm| |F_ring|: the scale of roundoff.
    """
    sums = np.zeros(3)
    abs_sums = np.zeros(2)
    step = max(1, _BATCH // z_nodes.size)
    for i in range(0, r_nodes.size, step):
        rp, zp = np.broadcast_arrays(r_nodes[i:i + step, None], z_nodes[None, :])
        dm = (2.0 * np.pi * r_weights[i:i + step, None] * z_weights[None, :]) * rp * rho(rp, zp)
        phi, f_r, f_z = ring_kernel(R, z, rp, zp)
        sums += [np.sum(dm * phi), np.sum(dm * f_r), np.sum(dm * f_z)]
        abs_sums += [np.sum(np.abs(dm * phi)), np.sum(np.abs(dm) * np.hypot(f_r, f_z))]
    return sums, abs_sums


def _check_inputs(R, z, r_extent, z_extent, G, epsrel):
    """Raise RingInputError for an argument no quadrature can use."""
    for name, value in (("R", R), ("z", z), ("r_extent", r_extent),
                        ("z_extent", z_extent), ("G", G), ("epsrel", epsrel)):
        if not np.isfinite(value):
            raise RingInputError(f"{name} = {value!r}: must be a finite number")
    if R < 0.0:
        raise RingInputError(f"R = {R!r}: cylindrical radius must be >= 0")
    for name, value in (("r_extent", r_extent), ("z_extent", z_extent),
                        ("G", G), ("epsrel", epsrel)):
        if value <= 0.0:
            raise RingInputError(f"{name} = {value!r}: must be > 0")


def ring_grid(R, z, r_extent, z_extent, order, r_points=(), z_points=()):
    """Tensor quadrature grid over R' in [0, r_extent], z' in [-z_extent, z_extent].

    Panels are graded towards the field point (R' = R, z' = z), towards
    R' = 0 and z' = 0 (where a disk or spheroid has its scale, or a cusp such
    as exp(-|z|/z_d)), and towards any extra ``r_points``/``z_points`` (kinks
    or edges of the density, e.g. a taper radius).

    Returns
    -------
    r_nodes, r_weights, z_nodes, z_weights : ndarray
    """
    r_edges = graded_edges(0.0, r_extent, [0.0, R, *r_points])
    z_edges = graded_edges(-z_extent, z_extent, [0.0, z, *z_points])
    return (*gauss_legendre_panels(r_edges, order),
            *gauss_legendre_panels(z_edges, order))


def ring_potential_forces(rho, R, z, r_extent, z_extent, G=G_INTERNAL, epsrel=1e-7,
                          *, r_points=(), z_points=(), full_output=False):
    """Potential and forces of an axisymmetric density at one field point.

    Sums the ring potential of :func:`ring_kernel` over the mass elements
    dm = 2 pi R' rho(R', z') dR' dz' of R' in [0, r_extent] and
    z' in [-z_extent, z_extent] (no reflection symmetry assumed). The
    Gauss-Legendre order on the graded panels of :func:`ring_grid` is raised
    through 8, 12, 16, 24, 32 until two successive results differ by less
    than ``epsrel`` relative to |phi| and to |F| = hypot(F_R, F_z) (or by
    less than float64 roundoff where F vanishes by symmetry); the last, more
    accurate, result is returned, so the true error is usually far smaller.

    Parameters
    ----------
    rho : callable
        rho(Rp, zp) -> ndarray, vectorised over equal-shape arrays [mass/length^3].
    R, z : float
        Field point [length], R >= 0.
    r_extent, z_extent : float
        Support of rho used by the quadrature [length]; mass outside is dropped.
    G : float
        Gravitational constant; default kpc (km/s)^2 / Msun.
    epsrel : float
        Target relative accuracy of phi and of the force vector.
    r_points, z_points : sequence of float, optional
        Extra radii/heights where rho has a kink or a jump.
    full_output : bool
        Also return a dict with ``order``, ``error_phi``, ``error_force``
        (last difference, absolute) and ``nodes`` (tensor size of last order).

    Returns
    -------
    phi : float
        Potential [G mass / length, (km/s)^2 by default].
    F_R, F_z : float
        Force per unit mass, -grad(phi) [(km/s)^2 / kpc by default].
    info : dict
        Only with ``full_output``.

    Raises
    ------
    RingInputError
        Non-finite or out-of-range arguments.
    RingQuadratureError
        epsrel not reached at order 32 (add r_points/z_points at the density's
        kinks, or check the extents).
    """
    _check_inputs(R, z, r_extent, z_extent, G, epsrel)
    previous = None
    for order in _ORDERS:
        grid = ring_grid(R, z, r_extent, z_extent, order, r_points, z_points)
        sums, abs_sums = ring_sums(rho, float(R), float(z), *grid)
        if previous is not None:
            done, err_phi, err_force = _converged(sums, previous, abs_sums, epsrel)
            if done:
                phi, f_r, f_z = (float(G * s) for s in sums)
                if not full_output:
                    return phi, f_r, f_z
                info = {"order": order, "error_phi": G * err_phi, "error_force": G * err_force,
                        "nodes": grid[0].size * grid[2].size}
                return phi, f_r, f_z, info
        previous = sums
    raise RingQuadratureError(
        f"ring quadrature at (R, z) = ({R}, {z}) missed epsrel = {epsrel} at order "
        f"{_ORDERS[-1]} (last changes for G = 1: phi {err_phi:.2e}, force {err_force:.2e})")


def _converged(sums, previous, abs_sums, epsrel):
    """Whether two successive (phi, F_R, F_z) agree; also their differences."""
    err_phi = float(abs(sums[0] - previous[0]))
    err_force = float(np.hypot(*(sums[1:] - previous[1:])))
    ok_phi = err_phi <= max(epsrel * abs(sums[0]), _ROUNDOFF * abs_sums[0])
    ok_force = err_force <= max(epsrel * np.hypot(*sums[1:]), _ROUNDOFF * abs_sums[1])
    return ok_phi and ok_force, err_phi, err_force


def ring_vcirc(rho, R, r_extent, z_extent, G=G_INTERNAL, epsrel=1e-7, **kwargs):
    """Midplane circular speed sqrt(R dphi/dR) = sqrt(-R F_R) at z = 0.

    Parameters are those of :func:`ring_potential_forces` (``kwargs`` passes
    ``r_points``/``z_points``). Returns the speed [sqrt(G mass/length),
    km/s by default].

    Raises
    ------
    RingInputError
        If the net midplane radial force points outwards (no circular orbit).
    """
    _phi, f_r, _f_z = ring_potential_forces(rho, R, 0.0, r_extent, z_extent, G, epsrel,
                                            **kwargs)
    v2 = -R * f_r
    if v2 < 0.0:
        raise RingInputError(f"R = {R!r}: midplane force points outwards "
                             f"(F_R = {f_r:.3e}), no circular orbit")
    return float(np.sqrt(v2))
