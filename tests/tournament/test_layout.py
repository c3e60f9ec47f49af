"""The tournament layer a reader can hold: modules under 600 lines, functions under 100 lines, and numpydoc
Parameters and Returns sections on every public function, class and method, naming every parameter (the project's
conventions, DEVELOPERS.md; numpydoc's format, common practice, no source)."""

import ast
import re
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
MODULES = sorted([*(ROOT / "sim" / "tournament").glob("*.py"), *(ROOT / "sim" / "evidence").glob("tournament*.py"),
                  ROOT / "sim" / "runner" / "analyses" / "tournament.py", ROOT / "sim" / "cli" / "tournament.py",
                  ROOT / "sim" / "bench" / "tournament.py"])


def _name(p: Path) -> str:
    return p.relative_to(ROOT).as_posix()


@pytest.mark.parametrize("path", MODULES, ids=_name)
def test_sizes(path):
    lines = path.read_text().splitlines()
    assert len(lines) <= 600, f"{_name(path)} has {len(lines)} lines"
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.FunctionDef):
            n = node.end_lineno - node.lineno + 1
            assert n <= 100, f"{_name(path)}:{node.lineno} {node.name} has {n} lines"


def _section(doc: str, title: str) -> str | None:
    m = re.search(rf"^\s*{title}\n\s*-{{{len(title)}}}\n(.*?)(?=^\s*\w[\w ]*\n\s*-{{3,}}\n|\Z)", doc, re.S | re.M)
    return m.group(1) if m else None


def _public(tree):
    for node in tree.body:
        if isinstance(node, ast.FunctionDef) and not node.name.startswith("_"):
            yield node, None
        elif isinstance(node, ast.ClassDef) and not node.name.startswith("_"):
            yield node, None
            for sub in node.body:
                if isinstance(sub, ast.FunctionDef) and not sub.name.startswith("_"):
                    yield sub, node


def _params(fn: ast.FunctionDef) -> list[str]:
    a = fn.args
    names = [x.arg for x in [*a.posonlyargs, *a.args, *a.kwonlyargs]]
    return [n for n in names if n not in ("self", "cls")]


def _problems(path: Path) -> list[str]:
    out = []
    tree = ast.parse(path.read_text())
    for node, owner in _public(tree):
        where = f"{_name(path)}:{node.lineno} {owner.name + '.' if owner else ''}{node.name}"
        doc = ast.get_docstring(node) or ""
        if not doc:
            out.append(f"{where}: no docstring")
            continue
        if isinstance(node, ast.ClassDef):
            fields = [s.target.id for s in node.body if isinstance(s, ast.AnnAssign) and isinstance(s.target, ast.Name)
                      and not s.target.id.startswith("_")]
            section = _section(doc, "Parameters")
            if fields and section is None:
                out.append(f"{where}: no Parameters section")
            missing = [f for f in fields if section is not None and not re.search(rf"\b{f}\b", section)]
            if missing:
                out.append(f"{where}: Parameters lack {missing}")
            continue
        if any(isinstance(d, ast.Name) and d.id == "property" for d in node.decorator_list):
            continue  # a property: its docstring says what it holds
        section = _section(doc, "Parameters")
        names = _params(node)
        if names and section is None:
            out.append(f"{where}: no Parameters section")
        missing = [n for n in names if section is not None and not re.search(rf"\b{n}\b", section)]
        if missing:
            out.append(f"{where}: Parameters lack {missing}")
        if _section(doc, "Returns") is None and _section(doc, "Yields") is None:
            out.append(f"{where}: no Returns section")
    return out


@pytest.mark.parametrize("path", [p for p in MODULES if "cli" not in p.parts], ids=_name)
def test_numpydoc_sections(path):
    assert _problems(path) == []
