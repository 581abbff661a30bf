"""Parsed model file (dict) -> validated :class:`~icgen.spec.model.ModelSpec`.

The specs check every value themselves (a spec built from Python is validated just as one
read from a file); the loader adds what only a file can get wrong: unknown or renamed keys,
strings with units, missing required keys. Defaults not spelled out in the file:
``model.name`` is "unnamed model", ``model.seed`` is 1, ``model.cosmology`` is "Planck18"
at ``model.redshift`` 0, ``model.quiet_start`` and ``model.mirror`` are false.
"""

from icgen.errors import MISSING, ModelError
from icgen.units import parse_quantity

from .fields import VALUE_KINDS, check_component_count, check_component_name, choice
from .model import KINDS, MODEL_KEYS, OUTPUT_KEYS, SPEC_CLASSES, ModelSpec, OutputSpec
from .toml_text import RENAMED, dotted_key, load_dict, parse_toml, reject_unknown

DEFAULT_MODEL_NAME = "unnamed model"
DEFAULT_SEED = 1
_TOP_KEYS = ("model", "output", "components")
_REQUIRED_EXAMPLES = {"mass": "5e10 Msun", "scale_length": "3 kpc", "scale_height": "0.3 kpc"}


def _table(parent, key, example):
    value = parent.get(key, {})
    if not isinstance(value, dict):
        raise ModelError(key, value, f"must be a table, e.g. {example}")
    return value


def _convert(full_key, key, value):
    """File value -> spec value: dimensional strings to internal floats, rest as is."""
    field = VALUE_KINDS[key]
    if field.kind == "quantity":
        return parse_quantity(value, full_key, field.astropy_unit)
    return value


def _component_from_table(name, table):
    check_component_name(name)
    where = ("components", name)
    if not isinstance(table, dict):
        raise ModelError(dotted_key(*where), table, "must be a table with a kind, e.g. kind = 'disk'")
    kind = table.get("kind", MISSING)
    if kind is MISSING:
        raise ModelError(dotted_key(*where, "kind"), MISSING, f"missing; one of {', '.join(KINDS)}")
    choice(dotted_key(*where, "kind"), kind, KINDS)
    cls = SPEC_CLASSES[kind]
    allowed, required = cls.table_keys(dotted_key(*where) + ".", table)
    reject_unknown(table, allowed, where, f"for a {kind}")
    kwargs = {key: _convert(dotted_key(*where, key), key, value) for key, value in table.items()}
    for key in required:
        if key not in kwargs:
            example = _REQUIRED_EXAMPLES[key]
            rule = f"required for a {kind}; give a string with a unit, e.g. '{example}'"
            raise ModelError(dotted_key(*where, key), MISSING, rule)
    return cls(name=name, **kwargs)


def spec_from_dict(data):
    """Build a :class:`ModelSpec` from a dict shaped like the TOML model file.

    Raises ModelError (and nothing else) for any bad input.
    """
    if not isinstance(data, dict):
        rule = "must be a table holding [model], [output] and [components.<name>]"
        raise ModelError("<model>", data, rule)
    reject_unknown(data, _TOP_KEYS, (), "at the top level")
    model = _table(data, "model", "[model] with name = '...'")
    output = _table(data, "output", "[output] with length_unit = 'kpc'")
    components = _table(data, "components", "[components.disk] with kind = 'disk'")
    reject_unknown(model, MODEL_KEYS, ("model",), "in [model]")
    reject_unknown(output, OUTPUT_KEYS, ("output",), "in [output]")
    check_component_count(len(components))
    specs = tuple(_component_from_table(name, table) for name, table in components.items())
    settings = {key: _convert(dotted_key("model", key), key, value) for key, value in model.items()}
    settings.setdefault("name", DEFAULT_MODEL_NAME)
    settings.setdefault("seed", DEFAULT_SEED)
    return ModelSpec(components=specs, output=OutputSpec(**output), **settings)


def spec_from_toml_text(text, source="<string>"):
    """Parse TOML text and build a :class:`ModelSpec`; ``source`` names it in errors."""
    return spec_from_dict(parse_toml(text, source))


def load_spec(path=None):
    """Load a TOML model file (str or PathLike; ``None``: the default) as a :class:`ModelSpec`."""
    return spec_from_dict(load_dict(path))


def spec_from_stored_text(text, source):
    """The spec of a model icgen itself wrote (a snapshot's stored config): TOML text read
    with the key names of its time (RENAMED keys take their new names; in a model file an
    old key is an error that names the new one)."""
    data = parse_toml(text, source)
    for table in (data.get("components") or {}).values():
        for old, (new, _) in RENAMED.items():
            if isinstance(table, dict) and old in table and new not in table:
                table[new] = table.pop(old)
    return spec_from_dict(data)
