"""Mutated model files through ``icgen build``, end to end.

Each case starts from one of the shipped models (configs/*.toml), applies a few seeded
mutations (dropped keys, duplicated tables, values swapped between keys, numbers scaled by
powers of ten, other units, wrong types, garbage strings, huge and tiny counts, old key
names) and runs ``icgen build`` in-process. The rules of the project (common practice for
a command-line tool): no traceback, exit status 0 (a complete file) or 2 (one line
"icgen: error: ..."), and after exit 2 nothing written: neither the output file nor a
temporary ``.*partial*`` file. Particle counts that pass validation are cut to a few
hundred so that the successful builds stay fast.
"""
import concurrent.futures
import contextlib
import io
import json
import math
import multiprocessing
import os
import random
import time
import tomllib
import warnings
from pathlib import Path

import pytest

from icgen import cli

CONFIGS = sorted((Path(__file__).resolve().parent.parent / "configs").glob("*.toml"))
# Largest particle count kept in a mutated model that passes validation.
MAX_PARTICLES = 200
# Largest count the model-file rule allows; counts above it must be refused, so they stay.
COUNT_LIMIT = 10_000_000_000

# Units by dimension (a mutation picks one of the same dimension, or any of them).
UNIT_GROUPS = [["kpc", "pc", "Mpc", "m", "au", "lyr", "Kpc"],
               ["Msun", "kg", "1e10 Msun", "solMass", "g"],
               ["Msun/kpc3", "Msun/pc3", "g/cm3"], ["K", "deg_C"], ["km/s", "m/s", "kpc/Gyr"],
               ["s", "Gyr", "deg", "", "dex(kpc)", "mag", "kpc2", "1/kpc", "eV"]]
UNITS = [unit for group in UNIT_GROUPS for unit in group]
COUNTS = [0, -1, 1, 2, 3, 2**31, 10**9, COUNT_LIMIT, COUNT_LIMIT + 1, 2**63 - 1, 10**12]
GARBAGE_CHARS = "abcxyz019 .,;:-+_=/\\'\"\t\n#[]{}()e\u00e9\u00df\u4e2d\u0394\U0001f600\x00\x1b\x7f"
KEYS = ["mass", "scale_length", "scale_height", "taper_radius", "taper_width",
        "toomre_q", "toomre_q_radius", "toomre_q_min", "sigma_ratio", "particles",
        "concentration", "density_scale", "scale_radius", "core_radius", "outer_radius",
        "truncation_width", "anisotropy_radius", "velocities", "retrograde_flip_fraction",
        "spin", "temperature", "sound_speed", "mean_molecular_weight", "adiabatic_index",
        "vertical", "profile", "kind", "name", "seed", "redshift", "cosmology",
        "quiet_start", "mirror", "length_unit", "mass_unit", "velocity_unit", "unknown_key"]


# ---------------------------------------------------------------- TOML writing


def _string(text):
    """TOML basic string: quotes, backslashes and control characters escaped."""
    out = []
    for ch in text:
        if ch in '"\\':
            out.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F:
            out.append(f"\\u{ord(ch):04X}")
        else:
            out.append(ch)
    return '"' + "".join(out) + '"'


def _inline(value):
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        return ("inf" if value > 0 else "-inf") if math.isinf(value) else repr(value)
    if isinstance(value, str):
        return _string(value)
    if isinstance(value, list):
        return "[" + ", ".join(_inline(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{_string(str(k))} = {_inline(v)}" for k, v in value.items()) + "}"
    raise TypeError(type(value))


def dump_toml(data):
    """TOML text of a nested dict: scalars first, then one [table] per sub-dict."""
    lines = []

    def table(path, t):
        if path:
            lines.append("[" + ".".join(_string(p) for p in path) + "]")
        for k, v in t.items():
            if not isinstance(v, dict):
                lines.append(f"{_string(k)} = {_inline(v)}")
        for k, v in t.items():
            if isinstance(v, dict):
                table(path + [k], v)

    table([], data)
    return "\n".join(lines) + "\n"


# ---------------------------------------------------------------- mutations


def _leaves(data, path=()):
    """Paths to every non-table value."""
    out = []
    for k, v in data.items():
        if isinstance(v, dict):
            out += _leaves(v, path + (k,))
        else:
            out.append(path + (k,))
    return out


def _tables(data, path=()):
    out = [path]
    for k, v in data.items():
        if isinstance(v, dict):
            out += _tables(v, path + (k,))
    return out


def _get(data, path):
    for k in path:
        data = data[k]
    return data


def _garbage(rng):
    n = rng.choice([0, 1, 5, 30, 10_000])
    return "".join(rng.choice(GARBAGE_CHARS) for _ in range(n))


def _random_value(rng):
    return rng.choice([
        lambda: rng.randint(-10, 10**6), lambda: rng.uniform(-1e3, 1e3), lambda: True,
        lambda: float("nan"), lambda: float("inf"), lambda: [1, "a"], lambda: {"x": 1},
        lambda: _garbage(rng), lambda: f"{10 ** rng.uniform(-8, 8):.3g} {rng.choice(UNITS)}",
        lambda: rng.choice(["nfw", "burkert", "hernquist", "plummer", "pseudo_isothermal",
                            "disk", "halo", "bulge", "gas_disk", "point_mass", "sech2",
                            "exponential", "jeans", "eddington", "WMAP9"]),
    ])()


def _split_quantity(value):
    """(number, unit text) of '3.2 kpc', or None."""
    if not isinstance(value, str):
        return None
    head, _, unit = value.strip().partition(" ")
    try:
        return float(head), unit
    except ValueError:
        return None


# Mutations and their weights: gentle ones (a number scaled by 10 or 1000, a unit of the
# same dimension) reach the physics; the others the parser and the validation.
OPERATIONS = {"scale": 3, "scale_far": 2, "unit": 2, "unit_any": 1, "swap": 2, "drop": 2,
              "duplicate": 1, "type": 1, "garbage": 1, "count": 1, "add": 1}


def _scaled(value, power):
    """``value`` (a number or '3.2 kpc') times 10**power, or None if it is neither."""
    parsed = _split_quantity(value)
    if parsed:
        mantissa, exponent = f"{parsed[0]:.6e}".split("e")
        return f"{mantissa}e{int(exponent) + power} {parsed[1]}"
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        scaled = float(value) * 10.0**power
        return type(value)(scaled) if math.isfinite(scaled) else scaled
    return None


def _other_unit(value, rng, same_dimension):
    parsed = _split_quantity(value)
    if not parsed:
        return None
    group = next((g for g in UNIT_GROUPS if parsed[1] in g), UNITS)
    return f"{parsed[0]:g} {rng.choice(group if same_dimension else UNITS)}"


def mutate(data, rng):
    """Apply one random mutation to the model dict ``data`` (in place)."""
    leaves = _leaves(data)
    op = rng.choices(list(OPERATIONS), weights=list(OPERATIONS.values()))[0]
    if op in ("scale", "scale_far", "unit", "unit_any", "type", "garbage") and leaves:
        path = rng.choice(leaves)
        table, key, value = _get(data, path[:-1]), path[-1], _get(data, path)
        if op == "scale":
            new = _scaled(value, rng.choice([-3, -1, 1, 3]))
        elif op == "scale_far":
            new = _scaled(value, rng.choice([-320, -40, -12, -6, 6, 12, 40, 300]))
        elif op in ("unit", "unit_any"):
            new = _other_unit(value, rng, op == "unit")
        else:
            new = _random_value(rng) if op == "type" else _garbage(rng)
        table[key] = value if new is None else new
    elif op == "drop" and leaves:
        path = rng.choice(leaves + _tables(data)[1:])
        del _get(data, path[:-1])[path[-1]]
    elif op == "duplicate" and isinstance(data.get("components"), dict) and data["components"]:
        name = rng.choice(list(data["components"]))
        data["components"][name + rng.choice(["_2", "-b"])] = json.loads(
            json.dumps(data["components"][name]))
    elif op == "swap" and len(leaves) > 1:
        a, b = rng.sample(leaves, 2)
        ta, tb = _get(data, a[:-1]), _get(data, b[:-1])
        ta[a[-1]], tb[b[-1]] = tb[b[-1]], ta[a[-1]]
    elif op == "count":
        comps = [c for c in data.get("components", {}).values() if isinstance(c, dict)]
        target = rng.choice(comps) if comps and rng.random() < 0.8 else data.setdefault("model", {})
        if isinstance(target, dict):
            target[rng.choice(["particles", "particles", "seed"])] = rng.choice(COUNTS)
    elif op == "add":
        tables = [t for t in _tables(data) if isinstance(_get(data, t), dict)]
        _get(data, rng.choice(tables))[rng.choice(KEYS)] = _random_value(rng)


def mutate_text(text, rng):
    """Line-level mutations the dict cannot express: a table header repeated, a line lost."""
    lines = text.splitlines()
    op = rng.choice(["none"] * 7 + ["repeat_table", "drop_line", "garbage_line"])
    headers = [i for i, line in enumerate(lines) if line.startswith("[")]
    if op == "repeat_table" and headers:
        start = rng.choice(headers)
        end = next((i for i in headers if i > start), len(lines))
        lines += lines[start:end]
    elif op == "drop_line" and lines:
        del lines[rng.randrange(len(lines))]
    elif op == "garbage_line":
        lines.insert(rng.randrange(len(lines) + 1), _garbage(rng).replace("\n", " "))
    return "\n".join(lines) + "\n"


def _small_counts(data):
    """Cut counts that pass the particles rule to MAX_PARTICLES (refused ones stay)."""
    comps = data.get("components")
    for comp in (comps.values() if isinstance(comps, dict) else []):
        n = comp.get("particles") if isinstance(comp, dict) else None
        if isinstance(n, int) and not isinstance(n, bool) and MAX_PARTICLES < n <= COUNT_LIMIT:
            comp["particles"] = MAX_PARTICLES


def mutated_model(seed):
    """(source config name, TOML text) of mutated model number ``seed``."""
    rng = random.Random(seed)
    source = rng.choice(CONFIGS)
    data = tomllib.loads(source.read_text())
    for _ in range(rng.choice([1, 1, 2, 3])):
        mutate(data, rng)
    _small_counts(data)
    return source.name, mutate_text(dump_toml(data), rng)


# ---------------------------------------------------------------- running


def run_build(text, folder):
    """(exit status, stderr) of ``icgen build`` on ``text``; exceptions propagate."""
    model = folder / "model.toml"
    model.write_text(text, encoding="utf-8")
    err = io.StringIO()
    with warnings.catch_warnings(record=True), contextlib.redirect_stderr(err), \
            contextlib.redirect_stdout(io.StringIO()):
        warnings.simplefilter("always")
        status = cli.main(["build", str(model), "-o", str(folder / "out.h5"), "--quiet"])
    return status, err.getvalue()


def check_case(seed, root):
    """None if mutated model ``seed`` behaves; else a description of what went wrong."""
    source, text = mutated_model(seed)
    folder = root / f"case{seed}"
    folder.mkdir()
    try:
        status, err = run_build(text, folder)
    except BaseException as exc:      # a traceback: the bug this test is after
        return f"seed {seed} ({source}): {type(exc).__name__}: {exc}\n{text[:3000]}"
    left = sorted(os.listdir(folder))
    problem = None
    if status == 0:
        if left != ["model.toml", "out.h5"]:
            problem = f"exit 0 but the folder holds {left}"
    elif status == 2:
        lines = err.strip().splitlines()
        if len(lines) != 1 or not lines[0].startswith("icgen: error: "):
            problem = f"exit 2 without a one-line error: {err!r}"
        elif left != ["model.toml"]:
            problem = f"exit 2 but the folder holds {left}"
    else:
        problem = f"exit {status}: {err.strip()}"
    for name in left:
        os.remove(folder / name)
    folder.rmdir()
    return None if problem is None else f"seed {seed} ({source}): {problem}\n{text[:3000]}"


def fuzz(seeds, root, workers=1):
    """Run the cases (in ``workers`` processes); (failures, seconds)."""
    t0 = time.perf_counter()
    if workers == 1:
        results = [check_case(s, root) for s in seeds]
    else:
        # spawn, not fork: numba's thread pools do not survive a fork
        context = multiprocessing.get_context("spawn")
        with concurrent.futures.ProcessPoolExecutor(workers, mp_context=context) as pool:
            results = list(pool.map(check_case, seeds, [root] * len(seeds), chunksize=10))
    return [r for r in results if r], time.perf_counter() - t0


def test_mutations_cover_every_config_and_change_the_model():
    # the generator itself: seeded, varied, and reaching each shipped model
    texts = [mutated_model(s) for s in range(200)]
    assert {name for name, _ in texts} == {p.name for p in CONFIGS}
    assert mutated_model(7) == mutated_model(7)
    originals = {p.name: tomllib.loads(p.read_text()) for p in CONFIGS}
    changed = 0
    for name, text in texts:
        try:
            changed += tomllib.loads(text) != originals[name]
        except tomllib.TOMLDecodeError:
            changed += 1
    assert changed > 180


def test_dump_toml_round_trips_awkward_values():
    data = {"model": {"name": 'a "b" \\ \n\t\x00\x7f \U0001f600', "x": float("inf"), "l": [1, "a"]},
            "components": {"odd name": {"k": {"i": 1}, "v": -0.0}}}
    back = tomllib.loads(dump_toml(data))
    assert back == data


def test_fuzz_mutated_models_small(tmp_path):
    # ~50 files in the default tier (a few seconds each at most)
    failures, seconds = fuzz(range(50), tmp_path)
    assert not failures, "\n\n".join(failures[:5])


@pytest.mark.slow
def test_fuzz_mutated_models_1000(tmp_path):
    # two processes (the machine's cores): 1000 files in 303 s, measured on 2 cores shared
    # with other work
    failures, seconds = fuzz(range(1000, 2000), tmp_path, workers=2)
    print(f"1000 mutated models in {seconds:.0f} s")
    assert not failures, f"{len(failures)} failures:\n\n" + "\n\n".join(failures[:5])
