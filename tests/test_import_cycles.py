"""No import cycles inside services/ or webapp/: each package's modules import one way (walked from the source)."""

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _imports(path: Path, name: str, known: set[str]) -> set[str]:
    """Return the project modules a module imports, at any depth in its body (function-level imports too)."""
    tree = ast.parse(path.read_text())
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1] + ([base] if base else []))
            targets = [base] + [f"{base}.{a.name}" for a in node.names]
        else:
            continue
        for t in targets:
            while t and t not in known:
                t = t.rpartition(".")[0]
            if t and t != name:
                found.add(t)
    return found


def _graph() -> dict[str, set[str]]:
    files = [p for top in ("services", "webapp") for p in (ROOT / top).rglob("*.py") if "migrations" not in p.parts]
    names = {_module_name(p): p for p in files}
    known = set(names)
    # A package's __init__ importing its own submodules is how packages are built, not a cycle.
    return {n: {t for t in _imports(p, n, known) if not t.startswith(n + ".")} for n, p in names.items()}


def _cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """Return the strongly connected groups of more than one module (Tarjan 1972)."""
    index, low, stack, on, out = {}, {}, [], set(), []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on.add(v)
        for w in graph.get(v, ()):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            group = []
            while True:
                w = stack.pop()
                on.discard(w)
                group.append(w)
                if w == v:
                    break
            if len(group) > 1:
                out.append(sorted(group))

    import sys
    sys.setrecursionlimit(10000)
    for v in graph:
        if v not in index:
            visit(v)
    return out


def test_no_import_cycles():
    assert _cycles(_graph()) == []
