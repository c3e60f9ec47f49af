"""Every public function, class and method exported by ``sim`` and ``strategies`` has a numpydoc docstring whose
Parameters section names each parameter of its signature (``name : type`` or ``a, b : type``; a class may list its
constructor's arguments under Attributes instead) and, unless it returns None, a Returns (or Yields) section."""

from __future__ import annotations

import inspect
import re

import pytest

import sim
import strategies

_HEADER = re.compile(r"^(\w[\w ]*)\n-{3,}$", re.M)


def _sections(doc: str) -> dict:
    heads = list(_HEADER.finditer(doc))
    out = {}
    for k, h in enumerate(heads):
        end = heads[k + 1].start() if k + 1 < len(heads) else len(doc)
        out[h.group(1)] = doc[h.end():end]
    return out


def _named(body: str) -> set:
    names = set()
    for line in body.splitlines():
        if line and not line.startswith(" "):
            head = line.split(" : ")[0].rstrip(" \\")
            names |= {n.strip().lstrip("*") for n in head.split(",")}
    return names


def problems_of(obj, where: str, skip_first: bool) -> list[str]:
    """What is missing from the docstring of a function, method or class."""
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
        listed = _named(sec.get("Parameters", "")) | (_named(sec.get("Attributes", "")) if inspect.isclass(obj)
                                                        else set())
        # a private field (a cache a dataclass carries) is not part of the public signature
        missing = [p.name for p in params if p.name not in listed and not p.name.startswith("_")]
        if missing:
            out.append(f"{where}: Parameters does not name {', '.join(missing)}")
    returns_none = sig.return_annotation in (None, "None")
    if not inspect.isclass(obj) and not returns_none and "Returns" not in sec and "Yields" not in sec:
        out.append(f"{where}: no Returns section")
    return out


def exported() -> list[tuple[str, object]]:
    out = [(f"sim.{n}", getattr(sim, n)) for n in sim.__all__]
    out += [(f"strategies.{n}", getattr(strategies, n)) for n in getattr(strategies, "__all__", ())]
    return [(w, o) for w, o in out if inspect.isfunction(o) or inspect.isclass(o)]


def problems_with_members(where: str, obj) -> list[str]:
    if inspect.isfunction(obj):
        return problems_of(obj, where, skip_first=False)
    out = problems_of(obj, where, skip_first=False)
    for mname, member in vars(obj).items():
        if mname.startswith("_"):
            continue
        if isinstance(member, property):
            if not inspect.getdoc(member):
                out.append(f"{where}.{mname}: no docstring")
        elif isinstance(member, classmethod | staticmethod) or inspect.isfunction(member):
            func = member.__func__ if isinstance(member, classmethod | staticmethod) else member
            out += problems_of(func, f"{where}.{mname}", skip_first=not isinstance(member, staticmethod))
    return out


@pytest.mark.parametrize("where, obj", exported(), ids=[w for w, _ in exported()])
def test_every_exported_callable_is_documented(where, obj):
    problems = problems_with_members(where, obj)
    assert not problems, "\n".join(problems)
