"""The import layers of DEVELOPERS.md: each module imports only modules of lower layers.

Read from the source with :mod:`ast` (every ``import`` statement, at module level or
inside a function), so a lazy import cannot slip past.  Modules of one package (the
lattice, the refinement) may import each other.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src" / "fallway"

#: Lowest first.  A module may import from its own layer's package and from lower layers.
LAYERS = [
    ["errors", "caution"],
    ["params"],
    ["_segment", "_surface"],
    ["_traverse"],
    ["geometry"],
    ["loads"],
    ["physics", "clearance"],
    ["terrain"],
    ["results"],
    ["vector"],
    ["keepout", "points"],
    ["scale", "section"],
    ["cable"],
    ["lattice"],
    ["refine"],
    ["evaluate"],
    ["relax"],
    ["routing"],
    ["export"],
    ["stations"],
    ["cad"],
    ["cable_export"],
    ["plot", "handover"],
    ["longsection"],
    ["report"],
    ["scenario"],
    ["app"],
    ["batch"],
    ["cli"],
]
RANK = {name: i for i, layer in enumerate(LAYERS) for name in layer}


def _top(module: str) -> str:
    """``fallway.lattice.kernel`` -> ``lattice``."""
    return module.split(".")[1] if module.count(".") >= 1 else module


def _imports(path: Path):
    """Every fallway module a source file imports (absolute names)."""
    rel = path.relative_to(SRC.parent).with_suffix("")
    pkg = list(rel.parts[:-1]) if rel.name != "__init__" else list(rel.parts[:-1])
    tree = ast.parse(path.read_text(encoding="utf-8"))
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg[: len(pkg) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
                if node.module is None:  # from . import x
                    for a in node.names:
                        yield node.lineno, f"{mod}.{a.name}"
                    continue
            else:
                mod = node.module or ""
            if mod.startswith("fallway"):
                yield node.lineno, mod
        elif isinstance(node, ast.Import):
            for a in node.names:
                if a.name.startswith("fallway"):
                    yield node.lineno, a.name


def _modules():
    for p in sorted(SRC.rglob("*.py")):
        rel = p.relative_to(SRC)
        if rel.parts[0] == "__init__.py":
            continue
        yield p, rel.parts[0].removesuffix(".py")


def test_every_module_has_a_layer():
    missing = sorted({name for _, name in _modules()} - set(RANK))
    assert not missing, f"add these modules to LAYERS (and DEVELOPERS.md): {missing}"


@pytest.mark.parametrize("path,name", [(p, n) for p, n in _modules()], ids=lambda v: str(v)[-40:])
def test_imports_only_lower_layers(path, name):
    bad = []
    for line, mod in _imports(path):
        if mod == "fallway":
            bad.append(f"line {line}: imports the package root")
            continue
        target = _top(mod)
        if target == name:
            continue  # its own package
        if target not in RANK:
            bad.append(f"line {line}: {mod} has no layer")
        elif RANK[target] >= RANK[name]:
            bad.append(f"line {line}: {mod} (layer {RANK[target]}) from layer {RANK[name]}")
    assert not bad, f"{path.relative_to(SRC)}: " + "; ".join(bad)
