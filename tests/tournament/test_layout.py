"""The tournament layer a reader can hold: modules under 600 lines, functions under 100 lines, and the project's
numpydoc rules (tests/numpydoc_rules.py) on every public function, class and method of its modules in every layer
(the runner's kind and the benchmark section included)."""

import ast
import importlib
from pathlib import Path

import pytest

from tests.numpydoc_rules import problems, public_objects

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


@pytest.mark.parametrize("path", [p for p in MODULES if "cli" not in p.parts], ids=_name)
def test_numpydoc_sections(path):
    """The project's docstring rules (tests/numpydoc_rules.py) on every public callable of the module."""
    name = _name(path)[:-3].replace("/", ".")
    found = [p for q, o, k in public_objects([importlib.import_module(name)]) for p in problems(q, o, k)]
    assert found == []
