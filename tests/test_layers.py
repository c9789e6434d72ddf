"""The package's import graph: no loops, and no import running back up a layer.

Read from the source with :mod:`ast` (imports inside functions count too: a lazy import is still a
dependency). The layer map is the one drawn in DEVELOPERS.md ("What may import what"); a stage
may import its own layer and the layers below it. Common practice, no source: a layered
("acyclic dependencies") architecture.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "vocobench"

# lower number = lower layer; a module may import modules of its own layer or below
LAYERS: dict[str, int] = {
    "errors": 0, "params": 0, "bootstrap": 0, "textfmt": 0, "keys": 0, "arrays": 0, "fingerprint": 0, "targets": 0,
    "__init__": 0, "__main__": 9,
    "frontend": 1, "schedules": 1, "samplers": 1, "testset": 1, "outputs": 1, "timing": 1,
    "store": 1, "records": 1, "metrics": 1,
    "contracts": 2, "analytic": 2, "torch_model": 2, "torch_adapter": 2, "torch_analytic": 2,
    "config": 2,
    "check": 3,
    "runtables": 4, "stats": 4, "inference": 4,
    "report": 5,
    "sweep": 6,
    "search": 7,
    "gate": 7,
    "cli": 8, "docs": 8,
}


def _unit(module: str) -> str:
    """``vocobench.report.table`` → ``report``; ``vocobench.stats`` → ``stats``."""
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _module_name(path: Path) -> str:
    rel = path.relative_to(PKG.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path: Path) -> set[str]:
    """Absolute names of the ``vocobench`` modules that ``path`` imports (relative ones resolved)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    me = _module_name(path)
    package = me if path.name == "__init__.py" else me.rpartition(".")[0]
    out: set[str] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names if a.name.split(".")[0] == "vocobench")
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - (node.level - 1)]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.split(".")[0] != "vocobench":
                continue
            out.add(mod)
            for a in node.names:         # `from . import x` / `from .sweep import plan`
                out.add(f"{mod}.{a.name}")
    return {m for m in out if _exists(m)}


def _exists(module: str) -> bool:
    p = PKG.parent.joinpath(*module.split("."))
    return p.with_suffix(".py").is_file() or (p / "__init__.py").is_file()


def _graph() -> dict[str, set[str]]:
    return {_module_name(p): _imports(p) for p in sorted(PKG.rglob("*.py"))}


def test_every_top_level_unit_has_a_layer():
    units = {_unit(m) for m in _graph()}
    assert units <= set(LAYERS), f"add to LAYERS and DEVELOPERS.md: {sorted(units - set(LAYERS))}"


def test_no_import_runs_back_up_a_layer():
    bad = []
    for mod, deps in _graph().items():
        if _unit(mod) in ("__init__", "__main__"):
            continue
        for dep in deps:
            if _unit(dep) == "__init__":
                continue       # the package root only holds the version and lazy exports
            if LAYERS[_unit(dep)] > LAYERS[_unit(mod)]:
                bad.append(f"{mod} -> {dep}")
    assert not bad, "imports that run back up a layer:\n" + "\n".join(sorted(bad))


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}
    stack: list[str] = []
    cycles: list[list[str]] = []

    def visit(m: str) -> None:
        state[m] = 1
        stack.append(m)
        for d in sorted(graph.get(m, ())):
            if d == m or d not in graph:
                continue
            if state.get(d) == 1:
                cycles.append(stack[stack.index(d):] + [d])
            elif d not in state:
                visit(d)
        stack.pop()
        state[m] = 2

    for m in graph:
        if m not in state:
            visit(m)
    # a package importing its own submodules from __init__ is not a loop of behaviour
    real = [c for c in cycles if not any(x.count(".") < y.count(".") and y.startswith(x + ".")
                                         for x, y in zip(c, c[1:]))]
    assert not real, "import cycles:\n" + "\n".join(" -> ".join(c) for c in real)


FOUNDATION = {u for u, layer in LAYERS.items() if layer == 0}


@pytest.mark.parametrize("unit, allowed", [
    ("metrics", FOUNDATION | {"metrics"}),
    ("stats", FOUNDATION | {"runtables", "stats"}),
    ("runtables", FOUNDATION | {"runtables"}),
])
def test_leaf_stages_import_no_other_stage(unit, allowed):
    graph = _graph()
    bad = [f"{m} -> {d}" for m, deps in graph.items() if _unit(m) == unit
           for d in deps if _unit(d) not in allowed | {"__init__"}]
    assert not bad, "\n".join(bad)


def test_nothing_below_sweep_imports_it():
    graph = _graph()
    bad = [f"{m} -> {d}" for m, deps in graph.items()
           if LAYERS.get(_unit(m), 0) < LAYERS["sweep"] and _unit(m) not in ("__init__",)
           for d in deps if _unit(d) == "sweep"]
    assert not bad, "\n".join(bad)


def test_package_reads_no_repository_folder():
    """An installed wheel has no scenarios/, bench/ or tests/ next to the package: no path climbs
    out of the package from ``__file__`` (the demo looks in the current folder instead)."""
    bad = []
    for p in PKG.rglob("*.py"):
        text = p.read_text(encoding="utf-8")
        for needle in ("parents[1]", "parents[2]", "parents[3]", "parent.parent"):
            if needle in text:
                bad.append(f"{p.relative_to(PKG.parent)}: {needle}")
    assert not bad, "\n".join(bad)
