"""Model-file spec of an isothermal gas disk (``kind = "gas_disk"``).

Kept apart from config.py (which holds the stellar and spheroid specs) to keep modules small;
config.py registers it as a component kind.
"""
import math
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u

from icgen.errors import MISSING, ModelError

#: Mean molecular weight of neutral gas of primordial composition, mu = 1/(X + Y/4) with
#: hydrogen mass fraction X = 0.76, Y = 0.24 (common practice; X from big-bang
#: nucleosynthesis, value from memory).
NEUTRAL_PRIMORDIAL_MU = 1.0 / (0.76 + 0.24 / 4)
GAS_KEYS = ("kind", "profile", "mass", "scale_length", "taper_radius", "taper_width",
            "temperature", "sound_speed", "mean_molecular_weight", "adiabatic_index",
            "particles")


def isothermal_sound_speed(temperature, mu):
    """c_s = sqrt(k T / (mu m_p)) in km/s for T in K (isothermal sound speed; the proton
    mass as the atomic mass unit of the mean molecular weight, common practice)."""
    c2 = const.k_B * temperature * u.K / (mu * const.m_p)
    return float(math.sqrt(c2.to_value((u.km / u.s) ** 2)))


@dataclass(frozen=True)
class GasDiskSpec:
    """Isothermal gas disk with an exponential surface density; Msun, kpc, K, km/s.

    Exactly one of ``temperature`` (with ``mean_molecular_weight``) or ``sound_speed``
    sets the isothermal sound speed; ``adiabatic_index`` (gamma) sets the internal energy
    u = c_s^2 / (gamma - 1) written for a hydrodynamics code.
    """

    name: str
    mass: float
    scale_length: float
    kind: str = "gas_disk"
    profile: str = "exponential"
    taper_radius: float | None = None
    taper_width: float | None = None
    temperature: float | None = None
    sound_speed: float | None = None
    mean_molecular_weight: float = NEUTRAL_PRIMORDIAL_MU
    adiabatic_index: float = 5.0 / 3.0
    particles: int | None = None

    def __post_init__(self):
        from icgen import config as c
        c._check_component_name(self.name)
        p = f"components.{self.name}."
        c._choice(p + "kind", self.kind, ("gas_disk",))
        c._choice(p + "profile", self.profile, ("exponential",))
        c._set(self, "mass", c._value(p, "mass", self.mass))
        rd = c._value(p, "scale_length", self.scale_length)
        c._set(self, "scale_length", rd)
        c.DiskSpec._check_taper(self, p, rd)
        given = [k for k in ("temperature", "sound_speed") if getattr(self, k) is not None]
        if len(given) != 1:
            rule = "give exactly one of temperature (e.g. '8000 K') or sound_speed (e.g. '10 km/s')"
            raise ModelError(p + "temperature", MISSING if not given else self.temperature, rule)
        c._set(self, given[0], c._value(p, given[0], getattr(self, given[0])))
        c._set(self, "mean_molecular_weight",
               c._value(p, "mean_molecular_weight", self.mean_molecular_weight))
        c._set(self, "adiabatic_index", c._value(p, "adiabatic_index", self.adiabatic_index))
        if self.particles is not None:
            c._set(self, "particles", c._value(p, "particles", self.particles))

    @property
    def sound_speed_key(self):
        """The model-file key that set the sound speed: "temperature" or "sound_speed"."""
        return "temperature" if self.sound_speed is None else "sound_speed"

    @property
    def cs(self):
        """Isothermal sound speed (km/s)."""
        if self.sound_speed is not None:
            return self.sound_speed
        return isothermal_sound_speed(self.temperature, self.mean_molecular_weight)
