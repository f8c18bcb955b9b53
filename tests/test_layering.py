"""Imports run one way: cli -> pipeline -> publish -> results -> reporting -> schedule, landbase
-> io, inventory, projection -> growth, config -> errors, policies (house style). A module may
not import from a layer above it, and no two modules import each other, directly or round a
loop, not even for type annotations only."""

import ast
from pathlib import Path

PKG = Path(__file__).resolve().parents[1] / "yieldscape"
LAYER = {
    "errors": 0,
    "_version": 0,
    "versions": 0,
    "geometry": 0,
    "policies": 0,
    "runlog": 0,
    "sharedwork": 0,
    "parallel": 0,
    "config": 1,
    "expressions": 1,
    "growth": 1,
    "io": 2,
    "inventory": 2,
    "projection": 2,
    "zonal": 2,
    "adjacency": 2,
    "limits": 2,
    "regimes": 2,
    "schedule": 3,
    "landbase": 3,
    "reporting": 4,
    "results": 5,
    "publish": 6,
    "pipeline": 7,
    "commands": 7,
    "__init__": 8,
    "cli": 9,
}


def _layer_of(module: str) -> int:
    parts = module.split(".")
    return LAYER[parts[1] if len(parts) > 1 else "__init__"]


def _modules() -> dict[str, Path]:
    out = {}
    for path in PKG.rglob("*.py"):
        rel = path.relative_to(PKG.parent).with_suffix("")
        out[".".join(rel.parts).removesuffix(".__init__")] = path
    return out


def _imports(path: Path, known: dict[str, Path]) -> set[str]:
    """Every yieldscape module ``path`` imports, wherever the import stands (a function body,
    an ``if TYPE_CHECKING:`` block): ``from a.b import c`` counts a.b.c when that is a module,
    else a.b."""
    names = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.module:
            for alias in node.names:
                sub = f"{node.module}.{alias.name}"
                names.add(sub if sub in known else node.module)
        elif isinstance(node, ast.Import):
            names.update(a.name for a in node.names)
    return {n for n in names if n == "yieldscape" or n.startswith("yieldscape.")}


def test_no_module_imports_upward():
    problems = []
    known = _modules()
    for mod, path in known.items():
        mine = _layer_of(mod)
        for name in _imports(path, known):
            if _layer_of(name) > mine:
                problems.append(f"{mod} imports {name}")
    assert not problems, problems


def test_no_import_cycles():
    # A module imports its package's __init__ on the way; only edges between modules count
    # here (a package importing its own submodules is the package's job, not a cycle).
    known = _modules()
    graph = {m: {n for n in _imports(p, known) if n in known and n != m} for m, p in known.items()}
    for mod in graph:  # a submodule's import of its own package is not an edge back
        graph[mod] = {n for n in graph[mod] if not mod.startswith(n + ".")}
    state: dict[str, int] = {}
    cycles = []

    def visit(m: str, trail: list[str]) -> None:
        state[m] = 1
        for n in sorted(graph[m]):
            if state.get(n) == 1:
                cycles.append(trail[trail.index(n) :] + [n] if n in trail else [m, n])
            elif n not in state:
                visit(n, [*trail, n])
        state[m] = 2

    for m in sorted(graph):
        if m not in state:
            visit(m, [m])
    assert not cycles, cycles


def test_functions_a_reader_can_hold_in_mind():
    # House style: under about 60 lines is the norm, 100 the limit (docstrings included).
    long = []
    for mod, path in _modules().items():
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                n = node.end_lineno - node.lineno + 1
                if n > 100:
                    long.append(f"{mod}.{node.name}: {n} lines")
    assert not long, long


def test_the_pipeline_only_orchestrates():
    lines = (PKG / "pipeline.py").read_text().count("\n")
    assert lines <= 400, f"pipeline.py has {lines} lines"


def test_every_flow_policy_has_its_search_and_every_choice_its_entry():
    # One registry per kind of choice; the modules that act on a choice key their tables by it.
    from yieldscape.policies import FLOW_POLICIES
    from yieldscape.schedule.flow import SEARCHES
    from yieldscape.schedule.lp import BOUND_ROWS, FLOW_ROWS

    assert set(SEARCHES) == set(FLOW_POLICIES)
    assert {p.name for p in FLOW_POLICIES.values() if p.in_lp} <= set(FLOW_ROWS)
    # the bound beside a rule-based run states each such policy's search limits as rows
    assert {p.name for p in FLOW_POLICIES.values() if p.in_lp} == set(BOUND_ROWS)
