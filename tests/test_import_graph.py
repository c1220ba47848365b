"""House rule (DEVELOPING.md, layers): closure_nn has no import circles, counting every import
(module-level and function-level). No outside source applies: this checks the code's own layout.
The graph is read from the source with :mod:`ast`, so nothing is imported to build it."""
from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parent.parent / "closure_nn"


def _modules() -> dict[str, Path]:
    out = {}
    for p in PACKAGE.rglob("*.py"):
        parts = list(p.relative_to(PACKAGE.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = p
    return out


def _targets(mods: dict[str, Path], here: str, node: ast.AST) -> list[str]:
    """Modules of closure_nn that one import statement in module ``here`` names."""
    pkg = here.split(".") if mods[here].name == "__init__.py" else here.split(".")[:-1]
    if isinstance(node, ast.ImportFrom):
        base = pkg[:len(pkg) - node.level + 1] if node.level else []
        name = ".".join(base + ([node.module] if node.module else []))
        return [f"{name}.{a.name}" if f"{name}.{a.name}" in mods else name for a in node.names]
    return [a.name for a in node.names]


def import_graph() -> dict[str, set[str]]:
    mods = _modules()
    edges: dict[str, set[str]] = {m: set() for m in mods}
    for m, p in mods.items():
        for node in ast.walk(ast.parse(p.read_text())):
            if isinstance(node, (ast.Import, ast.ImportFrom)) and getattr(node, "module", None) != "__future__":
                edges[m] |= {t for t in _targets(mods, m, node) if t in mods and t != m}
    return edges


def circles(edges: dict[str, set[str]]) -> list[list[str]]:
    """Strongly connected components with more than one module (Tarjan 1972, iterative)."""
    index, low, stack, on, out, counter = {}, {}, [], set(), [], 0
    for root in edges:
        if root in index:
            continue
        work = [(root, iter(sorted(edges[root])))]
        index[root] = low[root] = counter
        counter += 1
        stack.append(root)
        on.add(root)
        while work:
            v, it = work[-1]
            w = next(it, None)
            if w is not None:
                if w not in index:
                    index[w] = low[w] = counter
                    counter += 1
                    stack.append(w)
                    on.add(w)
                    work.append((w, iter(sorted(edges[w]))))
                elif w in on:
                    low[v] = min(low[v], index[w])
                continue
            work.pop()
            if work:
                low[work[-1][0]] = min(low[work[-1][0]], low[v])
            if low[v] == index[v]:
                comp = []
                while True:
                    x = stack.pop()
                    on.discard(x)
                    comp.append(x)
                    if x == v:
                        break
                if len(comp) > 1:
                    out.append(sorted(comp))
    return out


def test_the_checker_finds_a_circle():
    assert circles({"a": {"b"}, "b": {"c"}, "c": {"a"}, "d": {"a"}}) == [["a", "b", "c"]]
    assert circles({"a": {"b"}, "b": set()}) == []


def test_closure_nn_has_no_import_circles():
    found = circles(import_graph())
    assert not found, f"import circles: {found}"
