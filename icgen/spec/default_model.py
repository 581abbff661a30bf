"""Built-in model files: the default model and a commented starter file.

Both describe an invented Milky-Way-sized spiral (numbers chosen for a demo, not fitted to
any galaxy): an NFW halo of M200 = 1e12 Msun with c = 10, a 4.5e10 Msun exponential disk
with R_d = 3 kpc and z_d = 0.3 kpc, and a 1e10 Msun Hernquist bulge with a = 0.6 kpc.
"""

__all__ = ["DEFAULT_MODEL_TOML", "STARTER_TOML"]

DEFAULT_MODEL_TOML = """\
[model]
name = "icgen default spiral"
seed = 20261201

[output]
length_unit = "kpc"
velocity_unit = "km/s"
mass_unit = "1e10 Msun"

[components.halo]
kind = "halo"
profile = "nfw"
mass = "1.0e12 Msun"
concentration = 10
# 1.2e6 particles of 1.0e6 Msun (the halo holds 1.21e12 Msun with its outer cut): at most 5x
# the disk particle mass, against numerical disk heating (Ludlow et al. 2019)
particles = 1_200_000

[components.disk]
kind = "disk"
profile = "exponential"
mass = "4.5e10 Msun"
scale_length = "3.0 kpc"
scale_height = "0.3 kpc"
vertical = "sech2"
toomre_q = 1.5
particles = 200_000

[components.bulge]
kind = "bulge"
profile = "hernquist"
mass = "1.0e10 Msun"
scale_radius = "0.6 kpc"
particles = 50_000
"""

STARTER_TOML = """\
# icgen model file: a disk galaxy built from named components.
#
# Every dimensional value is a string with a unit that astropy understands:
# "3.2 kpc", "800 pc", "5e10 Msun", "1e7 Msun/kpc3". A bare number for such a key is an
# error, never a guess. Dimensionless keys (concentration, toomre_q, toomre_q_min,
# sigma_ratio, retrograde_flip_fraction, redshift, seed, particles) are plain numbers.
# Unknown keys are errors. Every value has a physical range, named in the error if it is
# left: masses 1 to 1e16 Msun, lengths 1e-6 to 1e5 kpc, particles 1 to 1e10, ...

[model]
name = "my spiral"          # free text, stored in the snapshot
seed = 12345                # whole number >= 0; same seed, same particles (default 1)
cosmology = "Planck18"      # astropy realization for the critical density: Planck18,
                            # Planck15, Planck13, WMAP9, WMAP7, WMAP5, WMAP3, WMAP1
redshift = 0.0              # redshift at which the NFW M200 and r200 are defined
# particle_mass = "1e5 Msun"  # common particle mass, used by every component that gives
                              # no `particles` (then the count is mass / particle_mass)
# quiet_start = false       # true: draw from a scrambled Sobol sequence instead of random
                            # numbers: smoother profiles (a "quiet start", Sellwood 1983,
                            # J. Comput. Phys. 50, 337)
# mirror = false            # true: each particle is followed by its reflection (-x, -v), so
                            # the centre of mass is at rest at the centre by construction

[output]                    # units of the written snapshot (any astropy unit of the type)
length_unit = "kpc"
velocity_unit = "km/s"
mass_unit = "1e10 Msun"     # a scaled unit is fine

# ---------------------------------------------------------------- dark halo
[components.halo]           # the table name ("halo") names the component
kind = "halo"               # halo | bulge | disk | gas_disk | point_mass
profile = "nfw"             # nfw | hernquist | plummer | pseudo_isothermal | burkert
mass = "1.0e12 Msun"        # nfw: M200, the mass inside r200 (mean density 200 x critical)
concentration = 10          # nfw: c = r200 / r_s, must be > 1
# Or, instead of mass and concentration:
# density_scale = "8e6 Msun/kpc3"   # nfw rho_s
# scale_radius = "20 kpc"           # nfw r_s
# outer_radius = "250 kpc"          # where the exponential cut starts (nfw default: r200)
# truncation_width = "25 kpc"       # decay length of the cut (default 0.1 x outer radius;
                                    # at least ~0.05 x outer radius, see the error if not)
particles = 600_000         # whole number >= 1; underscores are fine
velocities = "eddington"    # eddington (isotropic distribution function, default) | jeans
# anisotropy_radius = "30 kpc"      # Osipkov-Merritt radius: radial orbits outside it
retrograde_flip_fraction = 0.0  # 0..1: fraction of retrograde orbits whose rotation is
                                # reversed (net rotation; the model stays in equilibrium)

# A cored halo instead of the NFW one:
# [components.halo]
# kind = "halo"
# profile = "burkert"       # or "pseudo_isothermal"
# mass = "3e11 Msun"        # mass inside outer_radius
# core_radius = "8 kpc"
# outer_radius = "150 kpc"  # required for cored profiles, larger than core_radius
# particles = 600_000

# ---------------------------------------------------------------- stellar disk
[components.disk]
kind = "disk"
profile = "exponential"     # surface density exp(-R / scale_length)
mass = "4.5e10 Msun"
scale_length = "3.0 kpc"
scale_height = "0.3 kpc"    # must be smaller than scale_length
vertical = "sech2"          # sech2 (isothermal sheet) | exponential
toomre_q = 1.5              # Toomre Q at toomre_q_radius; give exactly one of
# toomre_q_radius = "7.5 kpc"  # toomre_q, toomre_q_min or sigma_ratio (default 2.5 x
                               # scale_length; within 0.1 to 10 scale lengths)
# toomre_q_min = 1.2        # or: the minimum Q over the disk
# sigma_ratio = 1.5         # or: sigma_R / sigma_z everywhere
# taper_radius = "25 kpc"   # optional outer taper, beyond scale_length,
# taper_width = "2.5 kpc"   # over this width (default 0.5 x scale_length; at least
                            # 0.1 x taper_radius, the narrowest the potential resolves)
particles = 300_000

# A thick disk is just a second disk component:
# [components.thick_disk]
# kind = "disk"
# mass = "1e10 Msun"
# scale_length = "3.5 kpc"
# scale_height = "0.9 kpc"
# vertical = "exponential"
# sigma_ratio = 1.2
# particles = 100_000

# ---------------------------------------------------------------- bulge
[components.bulge]
kind = "bulge"
profile = "hernquist"       # total mass and scale radius a; or "plummer" (scale radius b)
mass = "1.0e10 Msun"
scale_radius = "0.6 kpc"
particles = 100_000

# An isothermal gas disk in vertical hydrostatic equilibrium in the total potential:
# [components.gas]
# kind = "gas_disk"
# mass = "8e9 Msun"
# scale_length = "5 kpc"
# temperature = "1e4 K"     # or sound_speed = "10 km/s"; the gas must settle into a thin
#                           # layer (scale height at scale_length below half of it)
# particles = 100_000

# A central black hole, one particle at the centre:
# [components.black_hole]
# kind = "point_mass"
# mass = "4e6 Msun"
"""
