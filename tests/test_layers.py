"""The house's layering, read from DEVELOPERS.md ("Layers"): every module of icgen/
imports only modules of its own layer or below (imports inside functions included), the
import graph has no cycle, and no module reads another package's private (_name) members.
Walks the source with ast; nothing is imported."""
import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = ROOT / "icgen"


def layers():
    """module or package name -> layer number, from DEVELOPERS.md's numbered list."""
    text = (ROOT / "DEVELOPERS.md").read_text()
    section = text.split("### Layers", 1)[1].split("\n#", 1)[0]
    out = {}
    for number, names in re.findall(r"^(\d+)\. (.+)$", section, flags=re.M):
        for name in re.findall(r"`([\w.]+)`", names):
            out[name] = int(number)
    return out


def module_name(path):
    parts = path.relative_to(ROOT).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def layer_of(name, table):
    """Layer of a module: its own entry, else its longest listed package (the root
    package ``icgen`` stands for its own face only)."""
    parts = name.split(".")
    for k in range(len(parts), 1, -1):
        if ".".join(parts[:k]) in table:
            return table[".".join(parts[:k])]
    return table.get(name)


def imports(path):
    """(line, imported module, [names]) of every import statement in a file."""
    tree = ast.parse(path.read_text())
    here = module_name(path)
    package = here if path.name == "__init__.py" else here.rsplit(".", 1)[0]
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(node.lineno, a.name, []) for a in node.names if a.name.startswith("icgen")]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.startswith("icgen"):
                names = [a.name for a in node.names]
                # "from pkg import module" imports the module
                subs = [f"{target}.{n}" for n in names
                        if (PACKAGE.parent / f"{target}.{n}".replace(".", "/")).with_suffix(".py").exists()
                        or (PACKAGE.parent / f"{target}.{n}".replace(".", "/") / "__init__.py").exists()]
                # the package itself only when a name is not one of its modules
                if len(subs) < len(names):
                    out.append((node.lineno, target, [n for n in names
                                                      if f"{target}.{n}" not in subs]))
                out += [(node.lineno, s, []) for s in subs]
    return out


FILES = sorted(PACKAGE.rglob("*.py"))


def test_every_module_has_a_layer():
    table = layers()
    missing = [module_name(f) for f in FILES if layer_of(module_name(f), table) is None]
    assert not missing, f"not in DEVELOPERS.md's layers: {missing}"


@pytest.mark.parametrize("path", FILES, ids=lambda p: module_name(p))
def test_imports_go_down(path):
    table = layers()
    here = module_name(path)
    mine = layer_of(here, table)
    up = [(line, target, layer_of(target, table)) for line, target, _ in imports(path)
          if layer_of(target, table) is not None and layer_of(target, table) > mine]
    assert not up, f"{here} (layer {mine}) imports upwards: {up}"


def top_package(name):
    parts = name.split(".")
    return ".".join(parts[:2])


@pytest.mark.parametrize("path", FILES, ids=lambda p: module_name(p))
def test_no_private_names_across_packages(path):
    here = module_name(path)
    bad = [(line, target, n) for line, target, names in imports(path) for n in names
           if n.startswith("_") and not n.startswith("__")
           and top_package(target) != top_package(here)]
    assert not bad, f"{here} takes private names of other packages: {bad}"


@pytest.mark.parametrize("path", FILES, ids=lambda p: module_name(p))
def test_no_private_attributes_of_other_packages(path):
    # "module._name" where module is another package's module bound by an import
    here = module_name(path)
    tree = ast.parse(path.read_text())
    aliases = {}
    for line, target, names in imports(path):
        for node in ast.walk(tree):
            if isinstance(node, (ast.Import, ast.ImportFrom)) and node.lineno == line:
                for a in node.names:
                    full = a.name if isinstance(node, ast.Import) else f"{target}.{a.name}"
                    if (PACKAGE.parent / full.replace(".", "/")).with_suffix(".py").exists():
                        aliases[a.asname or a.name.split(".")[-1]] = full
    bad = [(n.lineno, f"{n.value.id}.{n.attr}") for n in ast.walk(tree)
           if isinstance(n, ast.Attribute) and isinstance(n.value, ast.Name)
           and n.value.id in aliases and n.attr.startswith("_") and not n.attr.startswith("__")
           and top_package(aliases[n.value.id]) != top_package(here)]
    assert not bad, f"{here} reads private members of other packages: {bad}"


def test_no_import_cycle():
    graph = {}
    for path in FILES:
        graph.setdefault(module_name(path), set()).update(
            t for _, t, _ in imports(path) if t != module_name(path))
    state = {}

    def visit(node, stack):
        state[node] = "open"
        for nxt in graph.get(node, ()):
            if nxt not in graph:
                continue
            if state.get(nxt) == "open":
                raise AssertionError("import cycle: " + " -> ".join(stack + [node, nxt]))
            if nxt not in state:
                visit(nxt, stack + [node])
        state[node] = "done"

    for node in graph:
        if node not in state:
            visit(node, [])
