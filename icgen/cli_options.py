"""Option strings of the command line -> checked numbers, or a one-line ModelError naming
the option and its rule (exit status 2 in :mod:`icgen.cli`).

The library functions the commands call take numbers and check them again under their
own argument names; these parsers give a command-line user the option's name instead.
Like :mod:`icgen.cli` this module imports nothing heavy at module level: astropy (through
:mod:`icgen.units`) comes with the first option that has a unit.
"""
import math

from .errors import ModelError

__all__ = ["parse_whole", "parse_number", "parse_time", "parse_positive"]


def parse_whole(text, key, least, default=None):
    """A whole number >= ``least`` from an option string ("20_000" allowed); None ->
    ``default``."""
    if text is None:
        return default
    try:
        value = int(text.strip().replace("_", ""))
    except ValueError:
        value = None
    if value is None or value < least:
        raise ModelError(key, text, f"must be a whole number >= {least}")
    return value


def parse_number(text, key, default):
    """A finite number >= 0 from an option string; None -> ``default``."""
    if text is None:
        return default
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not (math.isfinite(value) and value >= 0):
        raise ModelError(key, text, "must be a number >= 0, e.g. 0.02")
    return value


def parse_time(text, key, lowest, highest):
    """A time with its unit ("2 Gyr", "0.5 Myr") -> Gyr in (0, ``highest``], and >=
    ``lowest`` when that is > 0; None stays None."""
    if text is None:
        return None
    import astropy.units as u
    from .units import parse_quantity

    value = parse_quantity(text, key, u.Gyr)           # finite
    low = f"[{lowest:g}" if lowest > 0 else "(0"
    if not (value > 0 and lowest <= value <= highest):
        raise ModelError(key, text, f"must be a time in {low}, {highest:g}] Gyr, e.g. '2 Gyr'")
    return value


def parse_positive(text, key, unit):
    """A positive quantity with its unit ("10 pc") -> a number in ``unit`` (astropy)."""
    from .units import parse_quantity

    value = parse_quantity(text, key, unit)
    if not value > 0:
        raise ModelError(key, text, "must be positive")
    return value
