"""The project's docstring rules, checked in one place (numpydoc's format, "Sections":
https://numpydoc.readthedocs.io/en/latest/format.html; the project's conventions, DEVELOPERS.md).

Every public function, class and method of a module has a docstring; its Parameters section names exactly the
parameters of its signature (``name : type``, or ``a, b : type`` for several; ``*args`` and ``**kwargs`` with or
without their stars); a function or method whose body returns a value (or yields) has a Returns (or Yields)
section; a class documents its constructor's parameters, or for a record of fields (a dataclass, a named tuple)
every public field under Parameters or Attributes. Properties read like attributes: a docstring, no sections.
The test modules of the layers call :func:`problems` on the objects :func:`public_objects` finds.
"""

from __future__ import annotations

import ast
import importlib
import inspect
import pkgutil
import re
import textwrap
from collections.abc import Iterable, Iterator
from types import ModuleType

_HEADER = re.compile(r"^(\w[\w ]*)\n-{3,}$", re.M)


def sections(doc: str) -> dict[str, str]:
    """Section title -> its body, for a docstring already cleaned by :func:`inspect.cleandoc`."""
    heads = list(_HEADER.finditer(doc))
    out = {}
    for k, h in enumerate(heads):
        end = heads[k + 1].start() if k + 1 < len(heads) else len(doc)
        out[h.group(1)] = doc[h.end():end]
    return out


def entry_names(body: str) -> list[str]:
    """The names a section lists: its entries at the left margin, ``a, b : type`` giving a and b."""
    names = []
    for line in body.splitlines():
        if line and not line[0].isspace():
            head = re.split(r"\s:(?:\s|$)", line)[0].rstrip(" \\")
            names += [n.strip().lstrip("*") for n in head.split(",") if n.strip()]
    return names


def returns_value(fn) -> bool:
    """Whether the function's own body (not a nested scope) returns a value other than None, or yields."""
    try:
        tree = ast.parse(textwrap.dedent(inspect.getsource(fn)))
    except (OSError, TypeError, SyntaxError):
        return False
    todo = list(ast.iter_child_nodes(tree.body[0]))
    while todo:
        node = todo.pop()
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda | ast.ClassDef):
            continue  # nested scopes return for themselves
        if isinstance(node, ast.Yield | ast.YieldFrom):
            return True
        if isinstance(node, ast.Return) and node.value is not None and not (
                isinstance(node.value, ast.Constant) and node.value.value is None):
            return True
        todo.extend(ast.iter_child_nodes(node))
    return False


def plain(obj):
    """The Python function behind a numba dispatcher, a classmethod or a staticmethod."""
    obj = getattr(obj, "py_func", obj)
    return getattr(obj, "__func__", obj)


def modules(packages: Iterable[ModuleType]) -> Iterator[ModuleType]:
    """Every package (or module) of ``packages`` and every public module inside a package (one level: the layers
    are flat; a module whose name starts with an underscore is private to its layer, its names are not public)."""
    for pkg in packages:
        yield pkg
        for info in pkgutil.iter_modules(getattr(pkg, "__path__", ()), pkg.__name__ + "."):
            if not info.name.rsplit(".", 1)[-1].startswith("_"):
                yield importlib.import_module(info.name)


def public_objects(mods: Iterable[ModuleType]) -> list[tuple[str, object, str]]:
    """(qualified name, object, kind) of every public function, class, method and property defined in the
    modules (:func:`modules` lists those of packages), kind one of ``function``, ``class``, ``method``,
    ``property``; sorted by name."""
    seen, out = set(), []
    for mod in mods:
        for name, obj in vars(mod).items():
            fn = plain(obj)
            if name.startswith("_") or getattr(fn, "__module__", None) != mod.__name__ or id(fn) in seen:
                continue
            seen.add(id(fn))
            if inspect.isclass(fn):
                out.append((f"{mod.__name__}.{name}", fn, "class"))
                for mname, member in vars(fn).items():
                    if mname.startswith("_"):
                        continue
                    if isinstance(member, property):
                        out.append((f"{mod.__name__}.{name}.{mname}", member, "property"))
                    elif inspect.isfunction(plain(member)):
                        out.append((f"{mod.__name__}.{name}.{mname}", plain(member), "method"))
            elif inspect.isfunction(fn):
                out.append((f"{mod.__name__}.{name}", fn, "function"))
    return sorted(out, key=lambda x: x[0])


def _signature_names(obj, kind: str) -> list[str] | None:
    try:
        params = list(inspect.signature(obj).parameters.values())
    except (TypeError, ValueError):  # a builtin
        return None
    if kind == "method" and params and params[0].name in ("self", "cls"):
        params = params[1:]
    # a private field (a cache a dataclass carries) is not part of the public signature
    return [p.name for p in params if not p.name.startswith("_")]


def problems(qualname: str, obj, kind: str) -> list[str]:
    """What the docstring of ``obj`` lacks under the rules above (empty when nothing).

    Parameters
    ----------
    qualname : str
        Its name in the messages.
    obj : object
        The function, class, method or property.
    kind : {"function", "class", "method", "property"}

    Returns
    -------
    list of str
    """
    doc = inspect.getdoc(obj)
    if not doc:
        return [f"{qualname}: no docstring"]
    if kind == "property":
        return []
    sec = sections(inspect.cleandoc(doc))
    want = _signature_names(obj, kind)
    if want is None:
        return []
    out = []
    if kind == "class":
        fields = getattr(obj, "__dataclass_fields__", None) or getattr(obj, "_fields", None)
        if fields is not None:
            want = [f for f in fields if not f.startswith("_")]
        got = entry_names(sec.get("Parameters", "")) + entry_names(sec.get("Attributes", ""))
        missing = [n for n in want if n not in got]
        if missing:
            out.append(f"{qualname}: Parameters/Attributes do not name {', '.join(missing)}")
        return out
    got = entry_names(sec.get("Parameters", ""))
    if sorted(got) != sorted(want):
        out.append(f"{qualname}: Parameters lists {got}, the signature has {want}")
    if returns_value(obj) and "Returns" not in sec and "Yields" not in sec:
        out.append(f"{qualname}: returns a value but has no Returns section")
    return out
