"""Every public function, class and method of the learning layer has a numpydoc docstring whose Parameters section
lists exactly its signature's parameters, and a Returns (or Yields) section when it returns a value.

The sections are those of the numpydoc standard (numpydoc docstring guide, "Sections"); a class documents its
constructor's parameters under Parameters or, for a record of fields, Attributes. Properties read like attributes
and need no sections.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
import textwrap

import pytest

import sim.learning


def _sections(doc: str) -> dict[str, list[str]]:
    """Section title -> its lines (numpydoc: a title underlined by dashes)."""
    lines = textwrap.dedent("\n".join(doc.splitlines()[1:])).splitlines() if doc else []
    lines = [doc.splitlines()[0].strip(), *lines] if doc else []
    out: dict[str, list[str]] = {}
    current = None
    for k, line in enumerate(lines):
        nxt = lines[k + 1] if k + 1 < len(lines) else ""
        if line.strip() and set(nxt.strip()) == {"-"} and len(nxt.strip()) >= 3:
            current = line.strip()
            out[current] = []
            continue
        if current is not None and not (set(line.strip()) == {"-"}):
            out[current].append(line)
    return out


def _names(lines: list[str]) -> list[str]:
    """Parameter names of a section: the entries at its left margin (``a, b : type`` gives a and b)."""
    names = []
    for line in lines:
        if not line.strip() or line.startswith((" ", "\t")):
            continue
        head = line.split(" : ")[0].strip()
        names += [n.strip().lstrip("*") for n in head.split(",")]
    return names


def _returns_value(fn) -> bool:
    """Whether the function's own body has a ``return`` with a value (or a ``yield``)."""
    try:
        tree = ast.parse(textwrap.dedent(inspect.getsource(fn)))
    except (OSError, TypeError):
        return False
    body = tree.body[0]

    def walk(node):
        for child in ast.iter_child_nodes(node):
            if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda | ast.ClassDef):
                continue
            if isinstance(child, ast.Yield | ast.YieldFrom):
                return True
            if isinstance(child, ast.Return) and child.value is not None and not (
                    isinstance(child.value, ast.Constant) and child.value.value is None):
                return True
            if walk(child):
                return True
        return False

    return walk(body)


def _public():
    """(qualified name, object, kind) of every public function, class and method defined in sim.learning."""
    for info in pkgutil.iter_modules(sim.learning.__path__):
        mod = importlib.import_module(f"sim.learning.{info.name}")
        for name, obj in vars(mod).items():
            if name.startswith("_"):
                continue
            fn = getattr(obj, "py_func", obj)  # a numba dispatcher: its Python function
            if getattr(fn, "__module__", None) != mod.__name__:
                continue
            if inspect.isclass(obj):
                yield f"{mod.__name__}.{name}", obj, "class"
                for attr, member in vars(obj).items():
                    if attr.startswith("_") or isinstance(member, property):
                        continue
                    member = member.__func__ if isinstance(member, classmethod | staticmethod) else member
                    if inspect.isfunction(member):
                        yield f"{mod.__name__}.{name}.{attr}", member, "method"
            elif inspect.isfunction(fn):
                yield f"{mod.__name__}.{name}", fn, "function"


PUBLIC = sorted(_public(), key=lambda x: x[0])


def test_the_layer_has_public_callables_to_check():
    names = {q for q, _o, _k in PUBLIC}
    assert "sim.learning.session.learn" in names and "sim.learning.kernel.run_session" in names
    assert "sim.learning.lineup.Lineup.play" in names and "sim.learning.analysis.LearnResult" in names


@pytest.mark.parametrize(("qualname", "obj", "kind"), PUBLIC, ids=[q for q, _o, _k in PUBLIC])
def test_numpydoc_sections_match_the_signature(qualname, obj, kind):
    doc = inspect.getdoc(obj) if kind != "class" else obj.__doc__
    assert doc, f"{qualname}: no docstring"
    sec = _sections(inspect.cleandoc(doc))
    if kind == "class":
        if "Parameters" not in sec and "Attributes" not in sec:
            pytest.fail(f"{qualname}: neither Parameters nor Attributes")
        fields = getattr(obj, "__dataclass_fields__", None) or getattr(obj, "_fields", None)
        if fields is not None:
            want = [f for f in fields if not f.startswith("_")]
            assert _names(sec.get("Attributes", sec.get("Parameters", []))) == want, qualname
        return
    params = [p for p in inspect.signature(obj).parameters if p not in ("self", "cls")]
    got = _names(sec.get("Parameters", []))
    assert got == params, f"{qualname}: Parameters lists {got}, the signature has {params}"
    if _returns_value(obj):
        assert "Returns" in sec or "Yields" in sec, f"{qualname}: returns a value but has no Returns section"
