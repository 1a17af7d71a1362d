"""The house rules, checked from the source: no import cycles, and each layer imports only from layers below it.

The layer order is the one docs/architecture.md draws; this test is its executable form.
"""

from __future__ import annotations

import ast
from pathlib import Path

import samplewright

PKG_DIR = Path(samplewright.__file__).resolve().parent

#: bottom to top; a module may import from its own layer's modules and from any layer below
LAYERS = [
    ("errors", "files", "_version", "apportion", "memory"),
    ("config",),
    ("population",),
    ("designs",),
    ("estimation",),
    ("simulation",),
    ("evaluation",),
    ("decision",),
    ("diagnostics",),
    ("proposal",),
    ("report",),
    ("results",),
    ("api",),
    ("cli", "__main__", ""),
]
RANK = {name: i for i, group in enumerate(LAYERS) for name in group}


def _modules() -> dict[str, Path]:
    out = {}
    for p in PKG_DIR.rglob("*.py"):
        parts = list(p.relative_to(PKG_DIR).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = p
    return out


def _imports(mods: dict[str, Path]) -> dict[str, set[str]]:
    """Every import of every module (module level and inside functions), as package-relative names."""
    edges = {}
    for name, path in mods.items():
        is_init = path.name == "__init__.py"
        base = name.split(".") if is_init and name else (name.split(".")[:-1] if name else [])
        targets = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            cands = []
            if isinstance(node, ast.Import):
                cands = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level:
                    b = base[: len(base) - (node.level - 1)] if node.level > 1 else base
                    prefix = ".".join(["samplewright", *b] + ([node.module] if node.module else []))
                else:
                    prefix = node.module or ""
                cands = [prefix] + [f"{prefix}.{a.name}" for a in node.names]
            for c in cands:
                if c != "samplewright" and not c.startswith("samplewright."):
                    continue
                rel = c[len("samplewright."):] if c != "samplewright" else ""
                while rel and rel not in mods:
                    rel = rel.rpartition(".")[0]
                if rel != name and (rel or c == "samplewright"):
                    targets.add(rel)
        edges[name] = targets
    return edges


def _layer(module: str) -> int:
    return RANK[module.split(".")[0]]


def test_every_module_belongs_to_a_layer():
    unknown = sorted(m for m in _modules() if m.split(".")[0] not in RANK)
    assert not unknown, f"modules outside every layer of docs/architecture.md: {unknown}"


def test_no_import_cycles():
    mods = _modules()
    edges = _imports(mods)
    # a package importing its own submodules (re-exports in __init__) is not a cycle
    graph = {m: {t for t in ts if not (mods[m].name == "__init__.py" and t.startswith(m + "." if m else ""))}
             for m, ts in edges.items()}
    index, low, stack, on, cycles, counter = {}, {}, [], set(), [], [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
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
                cycles.append(sorted(comp))

    for v in graph:
        if v not in index:
            visit(v)
    assert not cycles, f"import cycles: {cycles}"


def test_layers_import_only_downwards():
    mods = _modules()
    upward = sorted(f"{m} -> {t}" for m, ts in _imports(mods).items() for t in ts
                    if m.split(".")[0] in RANK and t.split(".")[0] in RANK and _layer(t) > _layer(m))
    assert not upward, "imports that reach up a layer (see docs/architecture.md):\n" + "\n".join(upward)
