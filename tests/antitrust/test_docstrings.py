"""Every public function, class and method of sim.antitrust has a numpydoc docstring whose Parameters section names
each parameter of its signature (numpydoc format: ``name : type``, or ``a, b : type``) and, unless it returns None,
a Returns section."""

import importlib
import inspect
import pkgutil
import re

import pytest

import sim.antitrust

_HEADER = re.compile(r"^(\w[\w ]*)\n-{3,}$", re.M)


def _sections(doc: str) -> dict:
    doc = inspect.cleandoc(doc or "")
    heads = list(_HEADER.finditer(doc))
    out = {}
    for k, h in enumerate(heads):
        end = heads[k + 1].start() if k + 1 < len(heads) else len(doc)
        out[h.group(1)] = doc[h.end():end]
    return out


def _documented_names(body: str) -> set:
    names = set()
    for line in body.splitlines():
        if line and not line.startswith(" "):
            head = line.split(" : ")[0].rstrip(" \\")
            names |= {n.strip().lstrip("*") for n in head.split(",")}
    return names


def _problems(obj, where: str, skip_first: bool) -> list:
    doc = inspect.getdoc(obj)
    if not doc:
        return [f"{where}: no docstring"]
    sec = _sections(doc)
    try:
        sig = inspect.signature(obj)
    except (TypeError, ValueError):  # pragma: no cover - builtins
        return []
    params = [p for p in sig.parameters.values() if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)]
    if skip_first:
        params = params[1:]
    out = []
    if params:
        if "Parameters" not in sec:
            out.append(f"{where}: no Parameters section")
        else:
            missing = [p.name for p in params if p.name not in _documented_names(sec["Parameters"])]
            if missing:
                out.append(f"{where}: Parameters does not name {', '.join(missing)}")
    returns_none = sig.return_annotation in (None, "None")
    if not inspect.isclass(obj) and not returns_none and "Returns" not in sec and "Yields" not in sec:
        out.append(f"{where}: no Returns section")
    return out


def _modules():
    for info in pkgutil.iter_modules(sim.antitrust.__path__):
        yield importlib.import_module(f"sim.antitrust.{info.name}")


def _public(module):
    for name, obj in vars(module).items():
        if not name.startswith("_") and getattr(obj, "__module__", None) == module.__name__ and (
                inspect.isfunction(obj) or inspect.isclass(obj)):
            yield name, obj


@pytest.mark.parametrize("module", list(_modules()), ids=lambda m: m.__name__)
def test_every_public_callable_is_documented(module):
    problems = []
    for name, obj in _public(module):
        where = f"{module.__name__}.{name}"
        if inspect.isfunction(obj):
            problems += _problems(obj, where, skip_first=False)
            continue
        problems += _problems(obj, where, skip_first=False)
        for mname, member in vars(obj).items():
            if mname.startswith("_"):
                continue
            if isinstance(member, property):
                if not inspect.getdoc(member):
                    problems.append(f"{where}.{mname}: no docstring")
            elif isinstance(member, classmethod | staticmethod) or inspect.isfunction(member):
                func = member.__func__ if isinstance(member, classmethod | staticmethod) else member
                problems += _problems(func, f"{where}.{mname}", skip_first=not isinstance(member, staticmethod))
    assert not problems, "\n".join(problems)
