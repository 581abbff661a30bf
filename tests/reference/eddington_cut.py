"""Sign of the isotropic distribution function of a spheroid with an exponential cut.

An independent oracle for the test-suite (numpy and scipy only, nothing from icgen): the
halo of Kazantzidis, Magorrian & Moore (2004, ApJ 601, 37, eq. 2),

    rho(r) = rho0 s(r/r_s)                                   for r <= r_t,
    rho(r) = rho(r_t) (r/r_t)^eps exp(-(r - r_t)/r_d),  eps = gamma(r_t) + r_t/r_d,

alone in its own potential, and its Eddington DF (Binney & Tremaine 2008, eq. 4.46)

    f(E) = 1/(sqrt(8) pi^2) [ int_0^E d2rho/dPsi2 dPsi / sqrt(E - Psi) + (drho/dPsi)_0 / sqrt(E) ],

with the substitution Psi = E - t^2, which removes the end-point singularity:
int_0^E g dPsi / sqrt(E - Psi) = int_0^sqrt(E) 2 g(E - t^2) dt. Everything is tabulated on a
grid that resolves the cut (a node every r_d / 60 across it).

Inner laws s(x) with their log slopes (closed forms): NFW 1/(x (1+x)^2) (Navarro, Frenk &
White 1997, ApJ 490, 493), Burkert 1/((1+x)(1+x^2)) (Burkert 1995, ApJ 447, L25),
pseudo-isothermal 1/(1+x^2).
"""
import numpy as np
from scipy.integrate import cumulative_simpson

G = 4.300917e-6   # kpc (km/s)^2 / Msun; the sign of f does not depend on it


def _law(profile, x):
    """(s, dln s/dln x, d2ln s/dln x2) of an inner law at x = r / r_s."""
    y = x * x
    if profile == "nfw":
        return 1 / (x * (1 + x) ** 2), -1 - 2 * x / (1 + x), -2 * x / (1 + x) ** 2
    if profile == "burkert":
        return (1 / ((1 + x) * (1 + y)), -x / (1 + x) - 2 * y / (1 + y),
                -x / (1 + x) ** 2 - 4 * y / (1 + y) ** 2)
    if profile == "pseudo_isothermal":
        return 1 / (1 + y), -2 * y / (1 + y), -4 * y / (1 + y) ** 2
    raise ValueError(profile)


def cut_halo(profile, ratio, fraction, r_s=10.0, rho0=1e7):
    """Radii r (kpc) and rho, dln rho/dln r, d2ln rho/dln r2 of the cut halo on a grid
    resolving the cut; outer radius r_t = ratio r_s, decay length r_d = fraction r_t."""
    r_t, r_d = ratio * r_s, fraction * ratio * r_s
    inner = np.geomspace(1e-4 * r_s, r_t * max(1 - 5 * fraction, 0.05), 3000)
    cut = np.linspace(inner[-1], r_t + 80 * r_d, 6000)[1:]
    r = np.concatenate([inner, cut])
    s_t, g_t, _ = _law(profile, ratio)
    eps = g_t + r_t / r_d
    s, s1, s2 = _law(profile, np.minimum(r, r_t) / r_s)
    out = r > r_t
    log_rho = np.where(out, np.log(rho0 * s_t) + eps * np.log(r / r_t) - (r - r_t) / r_d,
                       np.log(rho0 * s))
    return r, np.exp(log_rho), np.where(out, eps - r / r_d, s1), np.where(out, -r / r_d, s2)


def min_df_ratio(profile, ratio, fraction):
    """Smallest f(E) / (the same sum with |d2rho/dPsi2|) over energies E = Psi(r) of
    radii 0.3 r_t <= r <= r_t + 40 r_d: negative where the isotropic DF is negative."""
    r, rho, s1, s2 = cut_halo(profile, ratio, fraction)
    lnr = np.log(r)
    dm = 4 * np.pi * r**3 * rho                       # dM / dln r
    gamma0 = s1[0]
    mass = dm[0] / (3 + gamma0) + cumulative_simpson(dm, x=lnr, initial=0.0)
    outward = cumulative_simpson(4 * np.pi * r**2 * rho, x=lnr, initial=0.0)
    psi = G * mass / r + G * (outward[-1] - outward)  # G M(<r)/r + G int_r^inf 4 pi r' rho dr'
    psi_x = -G * mass / r                             # dPsi/dln r
    psi_xx = G * mass / r - 4 * np.pi * G * r**2 * rho
    rho_x, rho_xx = rho * s1, rho * (s2 + s1**2)
    g = (rho_xx * psi_x - rho_x * psi_xx) / psi_x**3  # d2rho/dPsi2 by the chain rule
    order = np.argsort(psi)                           # psi falls outward
    psi_sorted, g_sorted = psi[order], g[order]
    r_t = ratio * 10.0
    pick = (r >= 0.3 * r_t) & (r <= r_t * (1 + 40 * fraction))
    worst = np.inf
    at_cut = np.argmin(np.abs(r - r_t))               # where the DF turns negative first
    for e in np.append(psi[pick][::10], psi[at_cut]):
        t = np.linspace(0.0, np.sqrt(e - psi_sorted[0]), 4001)
        gi = np.interp(e - t * t, psi_sorted, g_sorted)
        f = np.trapezoid(2 * gi, t)
        scale = np.trapezoid(2 * np.abs(gi), t)
        worst = min(worst, f / scale)
    return worst
