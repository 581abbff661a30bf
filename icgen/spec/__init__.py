"""Model-file layer: TOML text -> validated, frozen dataclasses in internal units.

Units inside: length kpc, mass Msun, density Msun/kpc^3 (see :mod:`icgen.units`). Modules:
``fields`` (the table of keys and the checks it drives), one module per spec (``disk``,
``spheroid``, ``gas_disk``, ``point_mass``, ``model``), ``toml_text`` (parsing, writing,
size limits) and ``load`` (dict -> ModelSpec). This file only re-exports.
"""

from .default_model import DEFAULT_MODEL_TOML, STARTER_TOML
from .disk import DiskSpec
from .fields import VALUE_KINDS, Field, validate_fields
from .gas_disk import GasDiskSpec, isothermal_sound_speed
from .load import load_spec, spec_from_dict, spec_from_stored_text, spec_from_toml_text
from .model import KINDS, SPEC_CLASSES, ModelSpec, OutputSpec, model_warnings
from .point_mass import PointMassSpec
from .spheroid import SpheroidSpec, default_outer_radius
from .toml_text import MAX_MODEL_BYTES, load_dict, parse_toml

__all__ = ["OutputSpec", "DiskSpec", "SpheroidSpec", "PointMassSpec", "GasDiskSpec",
           "ModelSpec", "SPEC_CLASSES", "KINDS", "Field", "VALUE_KINDS", "validate_fields",
           "load_spec", "load_dict", "parse_toml", "spec_from_toml_text", "spec_from_dict",
           "spec_from_stored_text",
           "model_warnings", "default_outer_radius", "isothermal_sound_speed",
           "MAX_MODEL_BYTES", "DEFAULT_MODEL_TOML", "STARTER_TOML"]  # fmt: skip
