"""The model file as TOML text: parsing with one-line errors, size limits, renamed and
unknown keys, and the writer behind ``ModelSpec.to_toml`` (internal units, repr-exact
floats). Turning the parsed tables into specs is :mod:`icgen.spec.load`.
"""

import dataclasses
import os
import re
import tomllib
from pathlib import Path

from icgen.errors import MISSING, ModelError, did_you_mean

from .default_model import DEFAULT_MODEL_TOML
from .fields import MAX_COMPONENTS, VALUE_KINDS

#: Largest model file (bytes) or text (characters). The commented starter file is ~5 kB
#: and a model of MAX_COMPONENTS fully commented components stays under ~100 kB; the
#: limit keeps a runaway file (4e6 keys took 66 s and 730 MB to parse) from being read.
MAX_MODEL_BYTES = 1_000_000

# Keys renamed since they were first used: the old name gives an error naming the new one.
RENAMED = {
    "spin": ("retrograde_flip_fraction",
             "'spin' reads as the spin parameter lambda; this key is the fraction of "
             "retrograde orbits whose rotation is reversed"),
}

_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+\Z")
_TOML_LINE = re.compile(r"at line (\d+)")

# ---------------------------------------------------------------- writing

# TOML basic-string escapes; control characters too, so a string stays on one line.
_TOML_ESCAPES = {ord('"'): '\\"', ord("\\"): "\\\\", 0x7F: "\\u007F"}
_TOML_ESCAPES.update({code: f"\\u{code:04X}" for code in range(0x20)})


def toml_string(text):
    """``text`` as a TOML basic string."""
    return '"' + text.translate(_TOML_ESCAPES) + '"'


def toml_value(key, value):
    """The value of model-file key ``key`` as TOML; quantities as '<repr> <unit>'."""
    field = VALUE_KINDS[key]
    if field.kind == "text":
        return toml_string(value)
    if field.kind == "count":
        return str(int(value))
    if field.kind == "flag":
        return "true" if value else "false"
    if field.kind == "number":
        return repr(float(value))
    return toml_string(f"{float(value)!r} {field.unit}")


def model_toml(spec):
    """A ModelSpec ``spec``, fully resolved, as TOML text (see ``ModelSpec.to_toml``)."""
    lines = ["[model]", f"name = {toml_string(spec.name)}", f"seed = {spec.seed}",
             f"cosmology = {toml_string(spec.cosmology)}", f"redshift = {spec.redshift!r}"]  # fmt: skip
    if spec.particle_mass is not None:
        lines.append(f"particle_mass = {toml_value('particle_mass', spec.particle_mass)}")
    lines += [f"{k} = true" for k in ("quiet_start", "mirror") if getattr(spec, k)]
    lines += ["", "[output]"]
    lines += [f"{f.name} = {toml_string(getattr(spec.output, f.name))}"
              for f in dataclasses.fields(spec.output)]
    for component in spec.components:
        lines += ["", f"[components.{component.name}]", f"kind = {toml_string(component.kind)}"]
        for field in dataclasses.fields(component):
            value = getattr(component, field.name)
            if field.name not in ("name", "kind") and value is not None:
                lines.append(f"{field.name} = {toml_value(field.name, value)}")
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------- reading


def dotted_key(*parts):
    """Dotted key for messages; parts that are not bare TOML keys are quoted."""
    shown = []
    for part in parts:
        if isinstance(part, str):
            shown.append(part if _BARE_KEY.match(part) else toml_string(part))
        else:
            shown.append(f"<{type(part).__name__}>")
    return ".".join(shown)


def reject_unknown(table, allowed, prefix, where):
    """ModelError for the first key of ``table`` not in ``allowed`` (nothing else is read);
    ``prefix`` is the tuple of table names, ``where`` says where for the message."""
    for key, value in table.items():
        if key in allowed:
            continue
        full = dotted_key(*prefix, key)
        if key in RENAMED and RENAMED[key][0] in allowed:
            new, why = RENAMED[key]
            raise ModelError(full, value, f"renamed: use {new} ({why})")
        hint = did_you_mean(key, allowed) or f"allowed: {', '.join(allowed)}"
        raise ModelError(full, value, f"unknown key {where}; {hint}")


def _too_large(source, size, what):
    rule = (f"{what} is {size / 1e6:.3g} MB; a model file may hold at most "
            f"{MAX_MODEL_BYTES / 1e6:g} MB (a model of {MAX_COMPONENTS} commented components "
            f"needs ~0.1 MB)")
    return ModelError(source, MISSING, rule)


def parse_toml(text, source):
    """TOML text -> dict; every failure becomes a ModelError naming ``source``."""
    if not isinstance(text, str):
        raise ModelError(source, text, "must be TOML text (a str)")
    if len(text) > MAX_MODEL_BYTES:
        raise _too_large(source, len(text), "the text")
    try:
        return tomllib.loads(text)
    except ValueError as exc:  # TOMLDecodeError, or an integer literal too long to convert
        found = _TOML_LINE.search(str(exc))
        lines = text.splitlines()
        line = lines[int(found.group(1)) - 1] if found and int(found.group(1)) <= len(lines) else MISSING
        raise ModelError(source, line, f"not valid TOML: {exc}") from None
    except RecursionError:
        raise ModelError(source, MISSING, "not valid TOML: arrays or tables nested too deeply") from None


def load_dict(path=None):
    """Read a TOML model file (str or PathLike, UTF-8; ``None``: the built-in default)
    into a plain, not yet validated dict for :func:`icgen.spec.spec_from_dict`."""
    if path is None:
        return parse_toml(DEFAULT_MODEL_TOML, "<default model>")
    try:
        # Bytes, not text mode: text mode would turn a lone CR into a newline. At most
        # one byte more than the limit is read (a device or pipe may never end).
        with open(Path(path), "rb") as fh:
            size = os.fstat(fh.fileno()).st_size
            if size > MAX_MODEL_BYTES:
                raise _too_large(str(path), size, "the file")
            data = fh.read(MAX_MODEL_BYTES + 1)
        if len(data) > MAX_MODEL_BYTES:
            raise _too_large(str(path), len(data), "the file")
        text = data.decode("utf-8")
    except TypeError:
        raise ModelError("<file>", path, "must be the path of a TOML model file") from None
    except FileNotFoundError:
        raise ModelError(str(path), MISSING, "no such file") from None
    except OSError as exc:
        raise ModelError(str(path), MISSING, f"cannot read: {exc.strerror or exc}") from None
    except UnicodeDecodeError as exc:
        raise ModelError(str(path), MISSING, f"not UTF-8 text ({exc.reason} at byte {exc.start})") from None
    return parse_toml(text, str(path))
