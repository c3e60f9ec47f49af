"""The package's layers, read from the code: every import goes down the layer list, none forms a cycle, none takes
a private (underscore) name from another subpackage, and imports sit at module top except the documented lazy
imports of heavy optional packages.

The layer list is the one of DEVELOPERS.md ("Layers"); a failure prints the offending line.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

#: the layers from the bottom up; a module may import from its own layer and the layers before it
LAYERS = ("sim.core", "sim.models", "sim.theory", "strategies", "sim.simulation", "sim.learning", "sim.tournament",
          "sim.antitrust", "sim.runner", "sim.evidence", "sim.bench", "sim.cli")
#: layers that may import only some of the layers before them: strategies are data over the markets, not over
#: the theory (their callers hand them the stage game's levels)
ONLY_FROM = {"strategies": ("sim.core", "sim.models", "strategies")}
#: packages that may be imported inside a function, for start-up speed (``supergame --help`` imports none of them)
LAZY_OK = ("numba", "matplotlib", "dask", "distributed", "pandas", "pyarrow", "selenium", "SALib", "quantecon")


def _modules() -> dict[str, Path]:
    out = {}
    for p in sorted([*ROOT.glob("sim/**/*.py"), *ROOT.glob("strategies/**/*.py")]):
        name = ".".join(p.relative_to(ROOT).with_suffix("").parts)
        out[name.removesuffix(".__init__")] = p
    return out


MODULES = _modules()


def layer_of(module: str) -> int | None:
    best = None
    for i, prefix in enumerate(LAYERS):
        if module == prefix or module.startswith(prefix + "."):
            best = i
    return best


def _imports(name: str, path: Path):
    """(line number, source line, imported module, imported name or None, at module top) for each import of the
    project's own modules."""
    tree = ast.parse(path.read_text())
    top = {id(n) for n in tree.body}
    # imports directly under "if TYPE_CHECKING:" at module top count as top-level
    for n in tree.body:
        if isinstance(n, ast.If):
            top |= {id(m) for m in n.body}
    lines = path.read_text().splitlines()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                yield node.lineno, lines[node.lineno - 1].strip(), a.name, None, id(node) in top
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".") if path.name == "__init__.py" else name.split(".")[:-1]
                base = base[: len(base) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            for a in node.names:
                sub = f"{mod}.{a.name}"
                if sub in MODULES:
                    yield node.lineno, lines[node.lineno - 1].strip(), sub, None, id(node) in top
                else:
                    yield node.lineno, lines[node.lineno - 1].strip(), mod, a.name, id(node) in top


def _own(mod: str) -> bool:
    return mod == "sim" or mod.startswith(("sim.", "strategies"))


def _subpackage(module: str) -> str:
    parts = module.split(".")
    return ".".join(parts[:2]) if parts[0] == "sim" else parts[0]


def _problems():
    upward, private, inner = [], [], []
    for name, path in MODULES.items():
        here = layer_of(name)
        rel = path.relative_to(ROOT)
        for lineno, line, mod, attr, at_top in _imports(name, path):
            where = f"{rel}:{lineno}: {line}"
            if not _own(mod):
                if not at_top and mod.split(".")[0] not in LAZY_OK:
                    inner.append(where)
                continue
            if not at_top:
                inner.append(where)
            there = layer_of(mod)
            if here is not None and there is not None and there > here:
                upward.append(f"{where}  ({LAYERS[here]} imports {LAYERS[there]})")
            elif here is not None and there is not None and LAYERS[here] in ONLY_FROM \
                    and LAYERS[there] not in ONLY_FROM[LAYERS[here]]:
                upward.append(f"{where}  ({LAYERS[here]} may import only {', '.join(ONLY_FROM[LAYERS[here]])})")
            names = [attr] if attr else []
            names += [p for p in mod.split(".")]
            if _subpackage(mod) != _subpackage(name) and any(n.startswith("_") and not n.startswith("__")
                                                               for n in names):
                private.append(where)
    return upward, private, inner


UPWARD, PRIVATE, INNER = _problems()


def test_every_module_has_a_layer():
    lost = [m for m in MODULES if layer_of(m) is None and m not in ("sim", "sim.__main__", "strategies")]
    assert not lost, "modules outside every layer: " + ", ".join(lost)


def test_no_upward_import():
    assert not UPWARD, "imports that go up the layer list:\n" + "\n".join(UPWARD)


def test_no_private_name_across_subpackages():
    assert not PRIVATE, "underscore names imported from another subpackage:\n" + "\n".join(PRIVATE)


def test_imports_at_module_top():
    assert not INNER, "imports inside functions (only the heavy optional packages may be):\n" + "\n".join(INNER)


def test_no_import_cycle():
    graph = {m: set() for m in MODULES}
    for name, path in MODULES.items():
        for _, _, mod, _, _ in _imports(name, path):
            while mod and mod not in MODULES:
                mod = mod.rpartition(".")[0]
            if mod and mod != name and mod in MODULES and not (mod == "sim" or name.startswith(mod + ".")):
                graph[name].add(mod)
    # Tarjan's strongly connected components
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

    import sys

    sys.setrecursionlimit(10_000)
    for v in graph:
        if v not in index:
            visit(v)
    assert not cycles, "import cycles:\n" + "\n".join(" <-> ".join(c) for c in cycles)


@pytest.mark.parametrize("prefix", LAYERS)
def test_layer_exists(prefix):
    assert any(m == prefix or m.startswith(prefix + ".") for m in MODULES), prefix
