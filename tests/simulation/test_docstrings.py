"""numpydoc docstrings of the simulation layer and the strategies: every public function, class and method
has a Parameters section naming exactly its signature's parameters, and a Returns (or Yields) section when it
returns something (numpydoc's conventions: https://numpydoc.readthedocs.io/en/latest/format.html)."""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
import re
import textwrap

import pytest

import sim.simulation
import strategies

PACKAGES = (sim.simulation, strategies)


def _modules():
    for pkg in PACKAGES:
        yield pkg
        for info in pkgutil.iter_modules(pkg.__path__, pkg.__name__ + "."):
            yield importlib.import_module(info.name)


def _plain(obj):
    """The Python function behind a numba dispatcher, a classmethod or a staticmethod."""
    obj = getattr(obj, "py_func", obj)
    return getattr(obj, "__func__", obj)


def _public():
    """(qualified name, object, kind) of every public function, class and method defined in the packages, and
    of every callable their modules export (``__all__``) from elsewhere (the estimates of ``sim.core.stats``)."""
    seen = set()
    for mod in _modules():
        exported = set(getattr(mod, "__all__", ()))
        for name, obj in vars(mod).items():
            fn = _plain(obj)
            own = getattr(fn, "__module__", None) == mod.__name__
            if name.startswith("_") or not (own or name in exported) or id(fn) in seen:
                continue
            if inspect.isclass(fn):
                seen.add(id(fn))
                yield f"{fn.__module__}.{name}", fn, "class"
                for mname, m in vars(fn).items():
                    if mname.startswith("_") or isinstance(m, property):
                        continue
                    if inspect.isfunction(_plain(m)):
                        yield f"{fn.__module__}.{name}.{mname}", _plain(m), "method"
            elif inspect.isfunction(fn):
                seen.add(id(fn))
                yield f"{fn.__module__}.{name}", fn, "function"


PUBLIC = sorted(_public(), key=lambda x: x[0])


def _section(doc: str, title: str) -> list[str] | None:
    """The names a numpydoc section lists, one per entry, or None without the section. Entries naming
    several parameters at once (``a, b : float``) are read as one name, so that each parameter gets its own
    description."""
    lines = doc.splitlines()
    for k in range(len(lines) - 1):
        if lines[k].strip() == title and re.fullmatch(r"-{3,}", lines[k + 1].strip()):
            names = []
            for line in lines[k + 2:]:
                if re.fullmatch(r"-{3,}", line.strip()):
                    names.pop()  # the title of the next section
                    break
                if line and not line[0].isspace():
                    names.append(line.split(" : ")[0].strip())
            return names
    return None


def _returns_something(fn) -> bool:
    tree = ast.parse(textwrap.dedent(inspect.getsource(fn)))
    body = tree.body[0]
    todo = list(body.body)
    while todo:
        node = todo.pop()
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda | ast.ClassDef):
            continue  # nested scopes return for themselves
        if isinstance(node, ast.Return) and node.value is not None:
            if not (isinstance(node.value, ast.Constant) and node.value.value is None):
                return True
        if isinstance(node, ast.Yield | ast.YieldFrom):
            return True
        todo.extend(ast.iter_child_nodes(node))
    return False


def test_the_walk_finds_the_packages_callables():
    names = {n for n, _, _ in PUBLIC}
    assert {"sim.simulation.engine.simulate", "sim.simulation.kernel.simulate_chunks", "strategies.base.Automaton",
            "strategies.base.Automaton.table", "sim.simulation.results.SimulationResult.from_dict",
            "sim.core.stats.Estimate.from_dict", "sim.core.stats.kaplan_meier"} <= names


@pytest.mark.parametrize("name, obj, kind", PUBLIC, ids=[p[0] for p in PUBLIC])
def test_numpydoc_sections_match_the_signature(name, obj, kind):
    # its own docstring: an override documents itself (numpydoc's validator does not look at base classes)
    assert obj.__doc__, f"{name}: no docstring"
    doc = inspect.cleandoc(obj.__doc__)
    stars = {inspect.Parameter.VAR_POSITIONAL: "*", inspect.Parameter.VAR_KEYWORD: "**"}
    params = [stars.get(p.kind, "") + p.name for p in inspect.signature(obj).parameters.values()]
    if kind == "method" and params[:1] in (["self"], ["cls"]):
        params = params[1:]
    documented = _section(doc, "Parameters")
    if params or documented is not None:
        assert documented == params, f"{name}: Parameters section {documented} but signature {params}"
    if kind != "class" and _returns_something(obj):
        assert _section(doc, "Returns") or _section(doc, "Yields"), f"{name}: no Returns section"
