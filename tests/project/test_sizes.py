"""Sizes a reader can hold: no module of ``sim/`` or ``strategies/`` over 700 lines and no function over 100
lines, except the period loops of the numba kernels (their bookkeeping already sits in inlined helpers; splitting
the loop itself would cost a call per period). The limits are the project's own rule (common practice, no
source)."""

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
MAX_MODULE, MAX_FUNCTION = 700, 100
#: (module, function) pairs allowed to be longer: kernels' period loops
KERNEL_LOOPS = {
    ("sim/simulation/kernel.py", "_play_chunks"),
    ("sim/learning/kernel.py", "_period_loop"),
}


def _modules():
    return sorted(p for d in ("sim", "strategies") for p in (ROOT / d).rglob("*.py"))


@pytest.mark.parametrize("path", _modules(), ids=lambda p: p.relative_to(ROOT).as_posix())
def test_modules_and_functions_stay_readable(path):
    rel = path.relative_to(ROOT).as_posix()
    text = path.read_text()
    lines = text.count("\n")
    assert lines <= MAX_MODULE, f"{rel}: {lines} lines (at most {MAX_MODULE}); split it by concern"
    long = []
    for node in ast.walk(ast.parse(text)):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            n = node.end_lineno - node.lineno + 1
            if n > MAX_FUNCTION and (rel, node.name) not in KERNEL_LOOPS:
                long.append(f"{rel}:{node.lineno} {node.name}: {n} lines")
    assert not long, "functions over the limit:\n" + "\n".join(long)
