"""The layout is the pipeline (STYLE rules 1, 2, 13, 14).

* the numeric core (``evaluate/``, ``decide/``) imports no I/O library;
* imports flow one way, with the data: a module imports only from its own package or from
  layers before it, and no import cycle exists (function-level imports included);
* no module imports a private name of another package, nor guards an import of the package's
  own modules with ``except ImportError``;
* no source file is over 800 lines.

The checks run on the source text (``ast``), so they see imports inside functions as well.
"""
from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[2] / "src" / "ratescape"
FORBIDDEN = {"duckdb", "polars", "pyarrow", "altair", "vl_convert", "click", "tqdm"}
PURE = sorted((PKG / "evaluate").glob("*.py")) + sorted((PKG / "decide").glob("*.py"))
MAX_LINES = 800

# Layers in the order data flows through them; a module may import its own package and any
# earlier layer, never a later one nor a sibling of its own layer.
LAYERS = [
    {"errors", "caution"},
    {"evaluate"},
    {"decide", "load"},
    {"settings"},
    {"grid"},
    {"store"},
    {"run"},
    {"query", "report"},
    {"api"},
    {"demo"},
    {"cli"},
    {"_startup"},
    {"__main__", "__init__"},
]


def _module_name(path: Path) -> str:
    rel = path.relative_to(PKG.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _all_modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PKG.rglob("*.py"))}


MODULES = _all_modules()


def _resolve(module: str, path: Path, node: ast.ImportFrom) -> list[str]:
    """Absolute ratescape module names an ImportFrom refers to (the module, or its submodules)."""
    if node.level:
        base = module.split(".")
        if path.name != "__init__.py":
            base = base[:-1]
        base = base[: len(base) - (node.level - 1)]
        target = ".".join(base + ([node.module] if node.module else []))
    else:
        target = node.module or ""
    if not target.startswith("ratescape"):
        return []
    out = []
    for alias in node.names:
        sub = f"{target}.{alias.name}"
        out.append(sub if sub in MODULES else target)
    return out


def _imports_of(module: str, path: Path) -> list[tuple[str, ast.AST]]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(a.name, node) for a in node.names if a.name.startswith("ratescape")]
        elif isinstance(node, ast.ImportFrom):
            found += [(t, node) for t in _resolve(module, path, node)]
    return found


def _graph() -> dict[str, set[str]]:
    graph = {}
    for module, path in MODULES.items():
        targets = set()
        for target, _ in _imports_of(module, path):
            while target not in MODULES and "." in target:
                target = target.rsplit(".", 1)[0]
            if target != module:
                targets.add(target)
        graph[module] = targets
    return graph


def _component(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _layer(module: str) -> int:
    comp = _component(module)
    for n, names in enumerate(LAYERS):
        if comp in names:
            return n
    raise AssertionError(f"{module}: package {comp!r} has no layer in tests/unit/test_architecture.py; add it")


def find_cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan's algorithm)."""
    index, low, stack, on_stack, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in graph.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                out.append(sorted(comp))

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return out


def test_cycle_finder_finds_a_planted_cycle():
    """The checker itself can fail: a planted a -> b -> c -> a cycle is found."""
    assert find_cycles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert find_cycles({"a": {"b"}, "b": set()}) == []


def test_no_import_cycle():
    cycles = find_cycles(_graph())
    assert not cycles, f"import cycles: {cycles}"


def test_imports_flow_with_the_data():
    wrong = []
    for module, targets in _graph().items():
        for target in targets:
            if target == "ratescape" and module != "ratescape":
                # the package's lazy front door: only the version string may be taken from it
                continue
            same = _component(module) == _component(target)
            if not same and _layer(target) >= _layer(module):
                wrong.append(f"{module} -> {target}")
    assert not wrong, "imports against the flow (or between siblings of one layer): " + "; ".join(sorted(wrong))


def test_only_the_version_is_taken_from_the_package_root():
    bad = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and _resolve(module, path, node) == ["ratescape"] * len(node.names):
                names = {a.name for a in node.names}
                if names - {"__version__"}:
                    bad.append(f"{module}: {sorted(names)}")
    assert not bad, bad


def test_no_private_name_crosses_a_package():
    bad = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not isinstance(node, ast.ImportFrom):
                continue
            targets = _resolve(module, path, node)
            for alias, target in zip(node.names, targets):
                if alias.name.startswith("_") and not alias.name.startswith("__") \
                        and _component(target) != _component(module):
                    bad.append(f"{module} imports {target}.{alias.name}")
    assert not bad, bad


def test_no_guarded_import_of_the_package_itself():
    bad = []
    for module, path in MODULES.items():
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if not isinstance(node, ast.Try):
                continue
            catches = {getattr(h.type, "id", None) for h in node.handlers}
            if not catches & {"ImportError", "ModuleNotFoundError"}:
                continue
            for inner in node.body:
                if isinstance(inner, ast.ImportFrom) and (inner.level or (inner.module or "").startswith("ratescape")):
                    bad.append(f"{module}: line {inner.lineno}")
    assert not bad, f"imports of ratescape's own modules guarded by except ImportError: {bad}"


@pytest.mark.parametrize("path", PURE, ids=lambda p: f"{p.parent.name}/{p.name}")
def test_numeric_core_imports_no_io_library(path):
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names |= {a.name.split(".")[0] for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            names.add(node.module.split(".")[0])
    bad = names & FORBIDDEN
    assert not bad, f"{path.name} imports {sorted(bad)}; the numeric core must stay pure (numpy/scipy only)"


@pytest.mark.parametrize("path", sorted(PKG.rglob("*.py")), ids=lambda p: str(p.relative_to(PKG)))
def test_no_source_file_holds_two_concerns_by_size(path):
    lines = len(path.read_text(encoding="utf-8").splitlines())
    assert lines <= MAX_LINES, f"{path.relative_to(PKG)} has {lines} lines; split it by concern"


def test_pipeline_stages_exist():
    for stage in ("load", "settings.py", "grid.py", "evaluate", "decide", "store", "run", "report", "query.py",
                  "cli.py", "api.py"):
        assert (PKG / stage).exists(), stage
