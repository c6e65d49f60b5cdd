"""The package's layout keeps its promises: layers, no import cycles, small modules, a real façade.

Data flows sources -> words -> estimators -> results -> report/CLI; an import may only point down
(or sideways inside one family).  Imports inside functions count; imports under ``if TYPE_CHECKING:``
never run and do not.  These are rules of this code base (DEVELOPERS.md, "Layout"), not outside facts.
"""

from __future__ import annotations

import ast
import inspect
from pathlib import Path

import fractalseq

PKG = Path(fractalseq.__file__).parent

#: Rank of each top-level unit; a module may import units of its own rank or lower only.
LAYERS: dict[str, int] = {
    "errors": 0, "results": 0, "alphabet": 0, "_numba_cache": 0, "guards": 0, "stream": 1, "runner": 1,
    "io": 2, "sources": 2,
    "words": 3, "encoding": 3, "datasets": 3,
    "resampling": 4,
    "entropy": 5,
    "dimensions": 6, "predict": 6,
    "compare": 7,
    "report": 8,
    "jobs": 9,
    "demo": 10, "cli": 10, "__main__": 10,
}
MAX_LINES = 700


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(PKG.rglob("*.py")):
        rel = path.relative_to(PKG).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(["fractalseq", *parts])] = path
    return out


def _type_checking_nodes(tree: ast.AST) -> set[int]:
    skip: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            skip.update(id(n) for n in ast.walk(node))
    return skip


def _imports(path: Path, modules: dict[str, Path]) -> set[str]:
    """fractalseq modules imported by the file at ``path`` (anywhere in it)."""
    tree = ast.parse(path.read_text())
    skip = _type_checking_nodes(tree)
    found: set[str] = set()
    for node in ast.walk(tree):
        if id(node) in skip:
            continue
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            subs = [f"{node.module}.{a.name}" for a in node.names]
            # "from pkg import submodule" loads the submodule; pkg's own code counts only for other names
            names = subs if all(s in modules for s in subs) else [node.module, *subs]
        else:
            continue
        for name in names:
            if name in modules:
                found.add(name)
    return found


def _unit(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "fractalseq"


def _graph() -> dict[str, set[str]]:
    modules = _modules()
    return {m: _imports(p, modules) - {m} for m, p in modules.items()}


def test_every_unit_has_a_layer():
    units = {_unit(m) for m in _modules()} - {"fractalseq"}
    assert units <= set(LAYERS), f"place {sorted(units - set(LAYERS))} in LAYERS and in DEVELOPERS.md"


def test_imports_point_down_only():
    bad = []
    for mod, targets in _graph().items():
        src = _unit(mod)
        for t in targets:
            dst = _unit(t)
            if "fractalseq" in (src, dst) or src == dst:
                continue
            if LAYERS[dst] > LAYERS[src]:
                bad.append(f"{mod} -> {t}")
    assert not bad, "imports pointing up a layer:\n" + "\n".join(sorted(bad))


def test_no_import_cycles():
    graph = _graph()
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(node: str, path: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                cycles.append(path[path.index(nxt):] + [nxt] if nxt in path else [node, nxt])
            elif nxt not in state:
                visit(nxt, path + [nxt])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert not cycles, "import cycles:\n" + "\n".join(" -> ".join(c) for c in cycles)


def test_matplotlib_only_in_the_report_layer():
    bad = []
    for mod, path in _modules().items():
        if _unit(mod) == "report":
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and node.module:
                names = [node.module]
            if any(n.split(".")[0] == "matplotlib" for n in names):
                bad.append(mod)
    assert not bad, f"matplotlib imported outside fractalseq.report: {sorted(set(bad))}"


def test_no_global_backend_switch_or_pyplot():
    for path in (PKG / "report").rglob("*.py"):
        text = path.read_text()
        assert "matplotlib.use(" not in text, path
        assert "pyplot" not in text, path


def test_modules_stay_small():
    big = {m: n for m, p in _modules().items() if (n := len(p.read_text().splitlines())) > MAX_LINES}
    assert not big, f"modules over {MAX_LINES} lines: {big}"


def test_few_flat_modules():
    flat = [p.name for p in PKG.glob("*.py") if p.name not in ("__init__.py", "__main__.py")]
    assert len(flat) <= 12, flat


def test_every_family_lists_its_public_names():
    for init in PKG.glob("*/__init__.py"):
        mod = __import__(f"fractalseq.{init.parent.name}", fromlist=["__all__"])
        assert getattr(mod, "__all__", None), f"{init.parent.name} has no __all__"
        for name in mod.__all__:
            assert hasattr(mod, name), f"{init.parent.name}.__all__ names {name}, which it lacks"


def test_the_facade_offers_estimators_from_several_families():
    callables = {n: getattr(fractalseq, n) for n in fractalseq.__all__ if callable(getattr(fractalseq, n))}
    families = {obj.__module__.split(".")[1] for obj in callables.values() if obj.__module__.count(".") >= 1}
    assert len(callables) >= 8 and len(families) >= 4, (sorted(callables), sorted(families))
    assert inspect.isfunction(fractalseq.dimension_spectrum)
