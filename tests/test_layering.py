"""Imports run one way: cli -> pipeline -> io, inventory, projection, schedule, reporting ->
growth, config, errors (house style). A module may not import from a layer above it."""

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "yieldscape"
LAYER = {
    "errors": 0,
    "_version": 0,
    "versions": 0,
    "geometry": 0,
    "policies": 0,
    "config": 1,
    "growth": 1,
    "io": 2,
    "inventory": 2,
    "projection": 2,
    "zonal": 2,
    "adjacency": 2,
    "limits": 2,
    "schedule": 3,
    "landbase": 3,
    "reporting": 4,
    "pipeline": 5,
    "publish": 5,
    "__init__": 6,
    "cli": 7,
}


def _layer_of(module: str) -> int:
    parts = module.split(".")
    return LAYER[parts[1] if len(parts) > 1 else "__init__"]


def test_no_module_imports_upward():
    problems = []
    for path in PKG.rglob("*.py"):
        rel = path.relative_to(PKG.parent).with_suffix("")
        mod = ".".join(rel.parts).removesuffix(".__init__")
        mine = _layer_of(mod) if mod != "yieldscape" else LAYER["__init__"]
        for node in ast.walk(ast.parse(path.read_text())):
            names = []
            if isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            elif isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            for name in names:
                if name == "yieldscape" or name.startswith("yieldscape."):
                    theirs = _layer_of(name) if name != "yieldscape" else LAYER["__init__"]
                    if theirs > mine:
                        problems.append(f"{mod} imports {name}")
    assert not problems, problems
