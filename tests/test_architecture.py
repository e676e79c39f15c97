"""The house's layout (docs/architecture.md): solver/ is grouped by stage, imports run one way
down the stages, no module imports itself back through others, and solver/ never imports Qt or
the app. Checked on the source with ``ast`` (every import, including those inside functions)."""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent

# stages in order: a module may import its own stage and earlier ones only
STAGES = ["errors", "resources", "caution", "model", "linalg", "mesh", "fem", "transient", "results", "io",
          "run", "answers", "__init__", "__main__"]
FORBIDDEN = ("PySide6", "pyvistaqt", "thermgui", "shiboken6")


def _module_name(path: Path) -> str:
    rel = path.relative_to(ROOT).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _imports(path: Path) -> set[str]:
    """Absolute names of the modules a file imports (relative imports resolved)."""
    tree = ast.parse(path.read_text(), filename=str(path))
    pkg = _module_name(path).split(".")
    if path.name != "__init__.py":
        pkg = pkg[:-1]
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(pkg[:len(pkg) - node.level + 1] + ([base] if base else []))
            out.add(base)
            out.update(f"{base}.{a.name}" for a in node.names)  # "from pkg import module"
    return out


def _graph(package: str) -> dict[str, set[str]]:
    files = sorted((ROOT / package).rglob("*.py"))
    names = {_module_name(f): f for f in files}
    graph = {}
    for name, f in names.items():
        graph[name] = {m for m in _imports(f) if m in names and m != name}
    return graph


def _stage(module: str) -> int:
    part = module.split(".")[1] if "." in module else "__init__"
    return STAGES.index(part)


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan)."""
    index, low, stack, on, out = {}, {}, [], set(), []

    def visit(v):
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in graph[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in graph:
        if v not in index:
            visit(v)
    return out


def test_every_solver_module_has_a_stage():
    for name in _graph("solver"):
        part = name.split(".")[1] if "." in name else "__init__"
        assert part in STAGES, f"{name}: not in a stage of docs/architecture.md"


def test_solver_imports_run_down_the_stages():
    graph = _graph("solver")
    upward = [(a, b) for a, deps in graph.items() for b in deps
              if a not in ("solver", "solver.__main__") and not b.endswith("__init__") and b != "solver"
              and _stage(b) > _stage(a)]
    assert not upward, f"imports against the stages: {upward}"


@pytest.mark.parametrize("package", ["solver", "thermgui"])
def test_no_import_circles(package):
    graph = _graph(package)
    # a package's __init__ importing its own modules is not a circle of the modules themselves
    for name in list(graph):
        graph[name] = {d for d in graph[name] if not (name.startswith(d + ".") and (ROOT / package).exists())}
    assert _cycles(graph) == []


def test_solver_never_imports_qt_or_the_app():
    for f in (ROOT / "solver").rglob("*.py"):
        bad = [m for m in _imports(f) if m.split(".")[0] in FORBIDDEN]
        assert not bad, f"{f.relative_to(ROOT)} imports {bad}"


def test_the_checks_see_a_circle_and_an_upward_import():
    """The checker itself: a made-up graph with a circle and an upward edge is caught."""
    assert _cycles({"a": {"b"}, "b": {"a"}, "c": set()}) == [["a", "b"]]
    assert _stage("solver.answers.zth") > _stage("solver.mesh.mesher")
