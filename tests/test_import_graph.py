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


#: layer -> packages of closure_nn it may import besides itself (DEVELOPING.md, "Layers"): the
#: physics nothing, the closures only the physics; nothing below the drawing and workflow layers
#: imports report/, pipeline/ or commands/ (figure writers are passed in by the callers)
LOWER_LAYERS = {
    "physics": set(),
    "closures": {"physics"},
}
NEVER_FROM_BELOW = {"report", "pipeline", "commands", "cli"}
#: top-level helpers every layer may use (the caution text, atomic run-folder writes)
UTILITIES = {"caution", "run_folder"}
BELOW = ("physics", "closures", "data", "training", "line", "audit")


def _layer(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def test_lower_layers_import_nothing_above_them():
    assert "closure_nn.report.line_plots" not in import_graph()["closure_nn.line.run"]
    wrong = []
    for m, targets in import_graph().items():
        layer = _layer(m)
        for t in targets:
            other = _layer(t)
            if other in ("", layer):
                continue
            if layer in LOWER_LAYERS and other not in LOWER_LAYERS[layer] and other not in UTILITIES:
                wrong.append(f"{m} -> {t}")
            elif layer in BELOW and other in NEVER_FROM_BELOW:
                wrong.append(f"{m} -> {t}")
    assert not wrong, "imports against the layers: " + ", ".join(sorted(wrong))
