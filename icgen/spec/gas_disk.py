"""Model-file spec of an isothermal gas disk (``kind = "gas_disk"``).

Masses Msun, lengths kpc, temperature K, sound speed km/s.
"""

import math
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u

from icgen.errors import MISSING, ModelError

from .disk import check_taper
from .fields import component_prefix, validate_fields

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

    @classmethod
    def table_keys(cls, prefix, table):
        """(allowed, required) keys of a gas disk's model-file table."""
        return GAS_KEYS, ("mass", "scale_length")

    def __post_init__(self):
        p = component_prefix(self, ("gas_disk",), ("exponential",))
        given = [k for k in ("temperature", "sound_speed") if getattr(self, k) is not None]
        if len(given) != 1:
            rule = "give exactly one of temperature (e.g. '8000 K') or sound_speed (e.g. '10 km/s')"
            raise ModelError(p + "temperature", MISSING if not given else self.temperature, rule)
        validate_fields(self, p)
        check_taper(self, p, self.scale_length)

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
